"""Sobol sensitivity indices: the SALib estimator against the analytic Ishigami values, then on a case.

Reference: Ishigami and Homma (1990), with the analytic indices for a = 7, b = 0.1 as tabulated by
Saltelli et al., Global Sensitivity Analysis: The Primer (Wiley 2008): S1 = (0.3139, 0.4424, 0),
ST = (0.5576, 0.4424, 0.2437) (the four-digit values are quoted from memory of that table; they
also follow from the closed-form variances of the Ishigami function). The check is that each
estimate lies within its bootstrap confidence interval of the analytic value, widened by 0.02 for
the interval's own sampling error.
"""

from __future__ import annotations

import numpy as np
import pytest

from robust.analysis.sensitivity import sobol_indices
from robust.case import load_case, resolve_gain

ISHIGAMI_S1 = np.array([0.3139, 0.4424, 0.0])
ISHIGAMI_ST = np.array([0.5576, 0.4424, 0.2437])


def test_salib_reproduces_the_analytic_ishigami_indices():
    from SALib.analyze import sobol as analyze
    from SALib.sample import sobol as sample
    from SALib.test_functions import Ishigami

    problem = {"num_vars": 3, "names": ["x1", "x2", "x3"], "bounds": [[-np.pi, np.pi]] * 3}
    X = sample.sample(problem, 4096, calc_second_order=False, seed=5)
    r = analyze.analyze(problem, Ishigami.evaluate(X), calc_second_order=False, seed=5)
    assert np.all(np.abs(r["S1"] - ISHIGAMI_S1) <= r["S1_conf"] + 0.02)
    assert np.all(np.abs(r["ST"] - ISHIGAMI_ST) <= r["ST_conf"] + 0.02)


def test_indices_on_the_cart_rank_the_tolerances(cart):
    K = resolve_gain(cart, cart.gains[1]).K
    r = sobol_indices(cart.box, K, "decay_rate", base_samples=256, seed=3)
    assert r.parameters == cart.box.names and r.evaluations == 256 * (len(cart.box.names) + 2)
    # indices are fractions of the variance: totals at least the first-order ones (up to sampling error)
    assert np.all(r.total >= r.first_order - r.total_conf - r.first_order_conf - 0.02)
    assert np.all(r.total > -0.05) and np.all(r.total < 1.2)
    with pytest.raises(ValueError, match="unbounded"):
        sobol_indices(cart.box, K, "gain_margin_up", base_samples=64)


def test_bad_requests_name_the_problem():
    case = load_case(__import__("pathlib").Path(__file__).resolve().parent / "data" / "small_cart.toml")
    K = resolve_gain(case, case.gains[0]).K
    with pytest.raises(ValueError, match="power of two"):
        sobol_indices(case.box, K, "decay_rate", base_samples=100)
    with pytest.raises(ValueError, match="metric"):
        sobol_indices(case.box, K, "speed")


def test_sensitivity_command(capsys):
    import json
    from pathlib import Path

    from robust.cli import main

    small = Path(__file__).resolve().parent / "data" / "small_cart.toml"
    assert main(["sensitivity", str(small), "--samples", "64", "--quiet", "--json", "--metric", "decay_rate"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data[0]["gain"] == "placed" and len(data[0]["indices"]["total"]) == 2
    assert main(["sensitivity", str(small), "--samples", "64", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "rider or cargo mass [kg]" in out and max(len(ln) for ln in out.splitlines()) <= 100


def test_conditional_failure_counts_by_hand_and_bounds_by_scipy(cart):
    """Counts per sub-range equal a direct count; the upper bound is the Clopper-Pearson bound computed from
    scipy's beta quantile (Clopper and Pearson 1934: upper = Beta(1 - (1 - c) / 2; f + 1, n - f))."""
    from scipy.stats import beta

    from robust.analysis.sensitivity import conditional_failure

    box = cart.box
    rng = np.random.default_rng(5)
    pts = box.low + rng.random((2000, len(box.names))) * (box.high - box.low)
    failed = pts[:, 0] > box.low[0] + 0.7 * (box.high[0] - box.low[0])  # failures only in the top of range 0
    cf = conditional_failure(box, pts, failed, "made_up", bins=4)
    for b in range(4):
        lo, hi = cf.edges[0, b], cf.edges[0, b + 1]
        inside = (pts[:, 0] >= lo) & ((pts[:, 0] < hi) | (b == 3))
        assert cf.samples[0, b] == inside.sum() and cf.failures[0, b] == failed[inside].sum()
        f, n = int(cf.failures[0, b]), int(cf.samples[0, b])
        want = 1.0 if f == n else float(beta.ppf(1 - 0.025, f + 1, n - f))
        assert cf.upper[0, b] == pytest.approx(want, rel=1e-9)
    assert cf.failures[0, :2].sum() == 0 and cf.failures[0, 3] > 0  # the driving tolerance is seen
    assert cf.samples.sum(axis=1).tolist() == [2000] * len(box.names)


def test_simulated_requirement_ranking():
    """A failing time-domain requirement (peak pitch) is ranked on the nonlinear model: N (k + 2) Saltelli
    points (SALib), indices within [0, 1] up to their confidence, and the one-at-a-time cuts pass through
    the worst Saltelli point (interpolated there, they give its value)."""
    from pathlib import Path
    from types import SimpleNamespace

    from robust.case import load_case, resolve_gain
    from robust.dossier import _time_ranking

    case = load_case(Path(__file__).resolve().parent / "data" / "small_cart.toml")
    K = resolve_gain(case, case.gains[0]).K
    o = SimpleNamespace(key="max_pitch_deg", status="fail")
    r = _time_ranking(case, K, o)
    sob = r["sobol"]
    k = len(case.box.names)
    assert r["metric"] == "peak_pitch_deg" and sob is not None and sob.evaluations == 64 * (k + 2)
    assert np.all(sob.first_order > -sob.first_order_conf - 0.05) and np.all(sob.total < 1 + sob.total_conf + 0.05)
    cuts = r["cuts"]
    for j, name in enumerate(case.box.names):
        lo, hi = case.box.low[j], case.box.high[j]
        got = np.interp((cuts["at"][name] - lo) / (hi - lo), cuts["position"], cuts["values"][j])
        assert got == pytest.approx(cuts["worst"], rel=0.02)
    step = SimpleNamespace(key="min_speed_step_within_limits_m_s", status="fail")
    assert _time_ranking(case, K, step)["sobol"] is None
