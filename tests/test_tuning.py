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
    # the tuning's own final check, reused beside a check of the other gains, equals one check of all of them
    from robust.assess import assess, merge_assessments

    merged = merge_assessments(r.assessment, assess(case, starts), rename={r.gain.name: r.gain})
    fresh = assess(case, [r.gain, *starts])
    assert [v.as_record() for v in merged.verdicts] == [v.as_record() for v in fresh.verdicts]
    for a, b in zip(merged.check.gains, fresh.check.gains):
        assert a.gain is b.gain or a.gain.name == b.gain.name
        assert [(m.name, m.worst.value) for m in a.summaries] == [(m.name, m.worst.value) for m in b.summaries]
    for a, b in zip(merged.time.gains, fresh.time.gains):
        assert [w.value for m in a.manoeuvres for w in m.worst] == [w.value for m in b.manoeuvres for w in m.worst]
    assert merged.check.gains[0].gain.provenance == r.gain.provenance


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


def test_tuned_worst_case_matches_a_brute_force_grid_on_a_reduced_problem(tmp_path):
    """Outside reference: exhaustive search. Reduced problem: one ranged parameter (payload mass), two free
    entries (k_pitch, k_pitch_rate; the others fixed, the yaw loop made fast so it never limits), one
    requirement set out of reach (decay rate >= 20 1/s) so that the tuner maximises the worst-case decay
    rate over the range. A brute-force grid over the two entries (coarse, then refined about its best
    cell) with the worst case over 201 payload values gives the optimum; the tuned gain's worst case must
    match it to the grid's resolution (the largest change of the objective between the grid's best point
    and its neighbours), and may not beat the refined grid by more than that either."""
    import re

    from robust.analysis.metrics import evaluate
    from robust.gains import GainSet

    text = SMALL.read_text()
    text = re.sub(r"\[ranges\.drive\.torque_constant_n_m_per_a\]\nlow = 0\.45\nhigh = 0\.55\n", "", text)
    text = re.sub(r"\[requirements\].*?\n\n", "[requirements]\nmin_decay_rate_per_s = 20.0\n\n", text, flags=re.S)
    path = tmp_path / "reduced.toml"
    path.write_text(text)
    case = load_case(path)
    assert [r.name for r in case.box.ranges] == ["payload.mass_kg"] and list(case.requirements) == [
        "min_decay_rate_per_s"
    ]
    th0 = symmetric_part(resolve_gain(case, case.gains[0]).K)
    th0[1] *= 20.0  # a fast yaw loop: the speed-pitch entries decide the worst decay rate
    pts = np.linspace(case.box.low, case.box.high, 201)

    def worst(kp, kq):
        th = np.array([th0[0], th0[1], kp, kq])
        return float(evaluate(case.box, pts, symmetric(th), names=("decay_rate",))["decay_rate"].min())

    def search(kps, kqs):
        F = np.array([[worst(a, b) for b in kqs] for a in kps])
        i, j = np.unravel_index(int(F.argmax()), F.shape)
        around = F[max(i - 1, 0) : i + 2, max(j - 1, 0) : j + 2]
        return F[i, j], kps[i], kqs[j], float(np.abs(around - F[i, j]).max())

    kps, kqs = np.linspace(0.5 * th0[2], 4 * th0[2], 36), np.linspace(0.2 * th0[3], 4 * th0[3], 36)
    best, kp, kq, _ = search(kps, kqs)
    dp, dq = kps[1] - kps[0], kqs[1] - kqs[0]
    best, kp, kq, resolution = search(np.linspace(kp - dp, kp + dp, 31), np.linspace(kq - dq, kq + dq, 31))
    start = GainSet("start", symmetric(th0), "test")
    r = tune(case, [start], free=(2, 3), outer_iterations=2, evaluations=200)
    th = symmetric_part(r.gain.K)
    assert th[0] == th0[0] and th[1] == th0[1]  # fixed entries stay fixed
    tuned = worst(th[2], th[3])
    assert abs(tuned - best) <= max(resolution, 1e-6), (tuned, best, resolution)
