"""Failure-probability statistics."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats

from robust.analysis.stats import clopper_pearson, samples_needed


@pytest.mark.parametrize(("k", "n"), [(0, 10), (3, 50), (17, 1000), (1000, 1000), (1, 2)])
@pytest.mark.parametrize("conf", [0.9, 0.95, 0.99])
def test_clopper_pearson_matches_scipy(k, n, conf):
    """Reference: scipy.stats.binomtest(k, n).proportion_ci(method='exact')."""
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=conf, method="exact")
    lo, hi = clopper_pearson(k, n, conf)
    assert lo == pytest.approx(ci.low, rel=1e-10, abs=1e-14)
    assert hi == pytest.approx(ci.high, rel=1e-10, abs=1e-14)


def test_samples_needed():
    """Tempo, Bai and Dabbene (1997): N >= ln(1/delta)/ln(1/(1-eps)).
    eps = 0.01, delta = 0.05 -> 298.07 -> 299 (hand calculation); and the
    defining property (1 - eps)^N <= delta holds at N and fails at N - 1."""
    assert samples_needed(0.01, 0.95) == 299
    for eps, conf in ((0.05, 0.99), (0.001, 0.999), (0.2, 0.5)):
        n = samples_needed(eps, conf)
        assert (1 - eps) ** n <= 1 - conf < (1 - eps) ** (n - 1)
    with pytest.raises(ValueError):
        samples_needed(0.0, 0.9)


def test_monte_carlo_failure_probability_covers_analytic_value(transporter):
    """A gain loses stability when the actual torque constant falls below a
    critical fraction of nominal.  That fraction is found here without the
    tool's analysis: the Routh-Hurwitz conditions for a quartic (textbook;
    e.g. Ogata, Modern Control Engineering) on numpy.poly of the closed loop,
    solved with brentq.  With the torque constant uniform on its range, the
    analytic failure probability must lie in the Clopper-Pearson interval of
    the check's Monte Carlo estimate (95%, so this fails by chance 1 time in
    20 seeds at most; the seed is fixed)."""
    from dataclasses import replace

    from robust.case import resolve_gain
    from robust.check import run_check
    from robust.linear import reduced_model
    from robust.uncertainty import Box, Range
    from robust.vehicle import plant_batch, with_parameter

    K = resolve_gain(transporter, transporter.gains[0]).K
    nominal = transporter.vehicle.drive.torque_constant_n_m_per_a
    lo, hi = 0.1 * nominal, nominal

    def hurwitz(frac):
        v = with_parameter(transporter.vehicle, "drive.torque_constant_n_m_per_a", frac * nominal)
        p = plant_batch(v)
        p = replace(p, kt_nominal=np.array([nominal]))
        m = reduced_model(p)
        a = np.poly(m.A[0] - m.B[0] @ K).real
        a3, a2, a1, a0 = a[1:] / a[0]
        return min(a3, a2 * a3 - a1, (a3 * a2 - a1) * a1 - a3**2 * a0, a0)

    crit = optimize.brentq(hurwitz, 0.1, 1.0, xtol=1e-12)
    p_true = (crit * nominal - lo) / (hi - lo)
    assert 0.05 < p_true < 0.95
    box = Box(transporter.vehicle, (Range("drive.torque_constant_n_m_per_a", lo, hi),))
    case = replace(transporter, box=box, requirements={"min_decay_rate_per_s": 0.0})
    study = replace(case.study, samples=2000, search=False, seed=123)
    res = run_check(case, [resolve_gain(transporter, transporter.gains[0])], study=study)
    v = next(v for v in res.gains[0].verdicts if v.metric == "decay_rate")
    assert v.failure_interval[0] <= p_true <= v.failure_interval[1]
    assert not v.passed
