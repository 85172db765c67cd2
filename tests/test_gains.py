"""Gain sets, gain files and the nominal designs."""

from __future__ import annotations

import control
import numpy as np
import pytest
from scipy import signal

from robust.case import CaseError, parse_case, resolve_gain
from robust.gains import GainSet, read_gain_file, write_gain_file
from robust.linear import reduced_model
from robust.synthesis.nominal import bryson_weights, lqr, place
from robust.vehicle import plant_batch


def test_gain_file_round_trip(tmp_path):
    g = GainSet("g1", np.arange(8.0).reshape(2, 4) * 1.1, "test", {"note": 'a "quoted" text', "n": 3})
    path = tmp_path / "sub" / "g.toml"
    write_gain_file(path, g)
    back = read_gain_file(path)
    assert back.name == "g1" and np.array_equal(back.K, g.K)
    assert back.provenance["note"] == 'a "quoted" text'
    assert [p.name for p in path.parent.iterdir()] == ["g.toml"]  # no temporary left behind


_H = "states=['speed','yaw_rate','pitch','pitch_rate']\ninputs=['torque_left','torque_right']\norigin='test'\n"


@pytest.mark.parametrize(
    ("text", "msg"),
    [
        ("[gain]\nname='x'\n", "missing key 'gain.origin'"),
        (f"[gain]\nname='x'\n{_H}", "missing key 'gain.matrix'"),
        ("[gain]\nname='x'\nmatrix=[[1,2,3,4],[4,5,6,7]]\n", "missing key 'gain.origin'"),
        (f"[gain]\nname='x'\n{_H}matrix=[[1,2,3],[4,5,6]]\n", "expected 2 rows of 4 finite numbers"),
        (
            "[gain]\nname='x'\norigin='t'\ninputs=['torque_left','torque_right']\n"
            "matrix=[[1,2,3,4],[4,5,6,7]]\nstates=['a','b','c','d']\n",
            "'gain.states' must be",
        ),
        (
            f"[gain]\nname='x'\n{_H}matrix=[[1,2,3,4],[4,5,6,7]]\nprovenance='ab'\n",
            "'gain.provenance' expected a table",
        ),
        (
            "[gain]\nname='x'\norigin='t'\ninputs=['torque_left','torque_right']\nstates=3\n"
            "matrix=[[1,2,3,4],[4,5,6,7]]\n",
            "'gain.states' must be",
        ),
        (f"[gain]\nname='../x'\n{_H}matrix=[[1,2,3,4],[4,5,6,7]]\n", "'gain.name': expected 1 to 60 letters"),
        (f"[gain]\nname=5\n{_H}matrix=[[1,2,3,4],[4,5,6,7]]\n", "'gain.name' expected text"),
        ("[gain]\nname='x'\nmatrix=[[1,2,3,4],[4,5,6,7]]\ncolour=1\n", "unknown key 'gain.colour'"),
        ("[gain\n", "not valid TOML"),
    ],
)
def test_bad_gain_file(tmp_path, text, msg):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(ValueError, match=msg):
        read_gain_file(p)


def test_pole_placement_matches_python_control_and_scipy(transporter):
    """References: python-control place() and scipy.signal.place_poles; the
    closed-loop eigenvalues must equal the requested poles (rtol 1e-8)."""
    nom = reduced_model(plant_batch(transporter.vehicle))
    A, B = nom.A[0], nom.B[0]
    for poles in ([-1.0, -2.5, -6.0, -9.0], [-2.0, -3.0 + 2j, -3.0 - 2j, -8.0]):
        K = place(A, B, np.array(poles))
        got = np.sort_complex(np.linalg.eigvals(A - B @ K))
        np.testing.assert_allclose(got, np.sort_complex(np.array(poles, dtype=complex)), rtol=1e-8)
        Kc = control.place(A, B, poles)
        np.testing.assert_allclose(K, Kc, rtol=1e-8, atol=1e-8 * np.abs(K).max())
        Ks = signal.place_poles(A, B, poles).gain_matrix
        np.testing.assert_allclose(np.sort_complex(np.linalg.eigvals(A - B @ Ks)), got, rtol=1e-8)


def test_lqr_matches_python_control(cart):
    """Reference: python-control lqr() (gain and Riccati solution)."""
    nom = reduced_model(plant_batch(cart.vehicle))
    w = bryson_weights(np.array([0.8, 1.0, 0.05, 0.4]), np.array([10.0, 10.0]))
    ours = lqr(nom.A[0], nom.B[0], w["Q"], w["R"])
    K, S, _E = control.lqr(nom.A[0], nom.B[0], w["Q"], w["R"])
    np.testing.assert_allclose(ours["K"], K, rtol=1e-8, atol=1e-10 * np.abs(K).max())
    np.testing.assert_allclose(ours["P"], S, rtol=1e-8, atol=1e-10 * np.abs(S).max())
    np.testing.assert_allclose(np.diag(w["Q"]), 1 / np.array([0.8, 1.0, 0.05, 0.4]) ** 2, rtol=1e-15)


def test_case_gain_specs(transporter):
    base = transporter.source and open(transporter.source).read()
    g = resolve_gain(transporter, transporter.gains[0])
    assert g.K.shape == (2, 4) and "pole placement" in g.origin
    bad = base.replace("poles = [-1.0, -2.5, -6.0, -9.0]", "poles = [-1.0, -2.5, -6.0]")
    with pytest.raises(CaseError, match="expected 4 closed-loop poles"):
        parse_case(bad)
    bad = base.replace("poles = [-1.0, -2.5, -6.0, -9.0]", "poles = [-1.0, 2.5, -6.0, -9.0]")
    with pytest.raises(CaseError, match="negative real part"):
        parse_case(bad)
    bad = base.replace('method = "lqr"', 'method = "magic"')
    with pytest.raises(CaseError, match=r"'gains\.lqr\.method': expected one of"):
        parse_case(bad)
    bad = base.replace("max_torque_n_m = 40.0", "max_torque_n_m = -4.0")
    with pytest.raises(CaseError, match=r"'gains\.lqr\.max_torque_n_m': expected > 0"):
        parse_case(bad)
    bad = base.replace("min_damping_ratio = 0.35", "min_damping_ratio = 1.5")
    with pytest.raises(CaseError, match=r"'requirements\.min_damping_ratio': expected between -1 and 1"):
        parse_case(bad)
    bad = base.replace("samples = 3000", "samples = 2.5")
    with pytest.raises(CaseError, match=r"'study\.samples': expected a whole number"):
        parse_case(bad)
