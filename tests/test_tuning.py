"""Robust tuning: structure, the soft minimum, monotone improvement and the verdict of the tuned gain.

The method is outer approximation for semi-infinite optimisation (Polak, Optimization: Algorithms
and Consistent Approximations, Springer 1997, sec. 3.6); what is tested here are its facts:
the optimiser never returns a gain worse on its scenarios than its best start (Nelder-Mead keeps
its best vertex), and the tuned gain's verdict is the ordinary assessment's.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from robust.case import load_case, resolve_gain
from robust.cli import main
from robust.synthesis.tuning import _score, _Scorer, symmetric, symmetric_part, tune
from robust.uncertainty import corners

SMALL = Path(__file__).resolve().parent / "data" / "small_cart.toml"


def test_symmetric_structure_round_trip():
    """Mirror symmetry (common practice for a left-right symmetric vehicle): the right row is the left
    row with the yaw-rate column negated, so speed and pitch commands never make the vehicle turn."""
    th = np.array([-3.0, -2.0, -80.0, -12.0])
    K = symmetric(th)
    np.testing.assert_array_equal(K[1], K[0] * np.array([1, -1, 1, 1]))
    np.testing.assert_array_equal(symmetric_part(K), th)
    asym = K + np.array([[0.2, 0.1, 1.0, -0.4], [-0.2, 0.3, -1.0, 0.4]])
    np.testing.assert_allclose(symmetric_part(asym), th + np.array([0.0, -0.1, 0.0, 0.0]), rtol=0, atol=1e-12)


@pytest.mark.parametrize("values", [[0.3, -0.2, 1.0], [0.0], [5.0, 5.0, 5.0, 5.0], [-3.0, 2.0]])
def test_soft_minimum_bounds(values):
    """Log-sum-exp soft minimum: min - T log m <= softmin <= min (a mathematical fact)."""
    m = {str(i): v for i, v in enumerate(values)}
    s = _score(m, temperature=0.02)
    assert min(values) - 0.02 * np.log(len(values)) - 1e-12 <= s <= min(values) + 1e-12


@pytest.fixture(scope="module")
def small():
    case = load_case(SMALL)
    return case, [resolve_gain(case, g) for g in case.gains]


def test_tuning_never_ends_worse_than_its_start_and_is_checked_over_the_box(small):
    case, starts = small
    scorer = _Scorer(case, corners(case.box))
    start_score = max(_score(scorer.margins(symmetric(symmetric_part(g.K)))) for g in starts)
    r = tune(case, starts, outer_iterations=1, evaluations=40)
    assert r.score >= start_score - 1e-12
    np.testing.assert_array_equal(r.gain.K[1], r.gain.K[0] * np.array([1, -1, 1, 1]))
    assert r.history[0]["status"] in ("PASS", "FAIL", "INCOMPLETE")
    assert r.gain.provenance["structure"].startswith("mirror-symmetric")


def test_tune_command_writes_a_gain_with_its_verdict(tmp_path, capsys):
    from robust.gains import read_gain_file

    out = tmp_path / "t.toml"
    code = main(["tune", str(SMALL), "--out", str(out), "--evaluations", "40", "--rounds", "1", "--quiet", "--json"])
    data = json.loads(capsys.readouterr().out)
    verdicts = {v["gain"]: v for v in data["verdicts"]}
    assert code == (0 if verdicts["tuned"]["status"] == "PASS" else 1)
    g = read_gain_file(out)
    assert g.provenance["verdict"]["status"] == verdicts["tuned"]["status"]
    assert "not a safety case" in g.provenance["caution"]
    assert main(["tune", str(SMALL), "--name", "placed", "--out", str(tmp_path / "x.toml"), "--quiet"]) == 2
