"""Sampling plans over the parameter box."""

from __future__ import annotations

import numpy as np
from scipy import stats

from robust.uncertainty import corners, grid, monte_carlo, plan_points, quasi_random


def test_corners_and_grid(transporter):
    box = transporter.box
    c = corners(box)
    assert c.shape == (8, 3)
    assert {tuple(row) for row in c} == {(a, b, d) for a in (45.0, 118.0) for b in (0.85, 1.2) for d in (1.7, 2.1)}
    g = grid(box, 4)
    assert g.shape == (64, 3)
    np.testing.assert_allclose(np.unique(g[:, 0]), np.linspace(45.0, 118.0, 4), rtol=1e-15)


def test_monte_carlo_independent_of_chunking_and_reproducible(transporter):
    box = transporter.box
    whole = monte_carlo(box, 9000, seed=11)
    parts = np.concatenate(
        [monte_carlo(box, 9000, 11, start=s, stop=min(s + 1234, 9000)) for s in range(0, 9000, 1234)]
    )
    assert np.array_equal(whole, parts)
    assert np.array_equal(whole, monte_carlo(box, 9000, seed=11))
    assert not np.array_equal(whole, monte_carlo(box, 9000, seed=12))
    assert np.all(whole >= box.low) and np.all(whole <= box.high)


def test_distributions_match_scipy(transporter):
    """Reference: scipy.stats distributions (general-purpose library); a
    Kolmogorov-Smirnov test at 20,000 samples.  p > 1e-3 fails by chance
    once in a thousand seeds; the seed is fixed, so the test is deterministic."""
    box = transporter.box
    x = monte_carlo(box, 20000, seed=5)
    tri = box.ranges[0]
    c = (tri.mode - tri.low) / (tri.high - tri.low)
    assert stats.kstest(x[:, 0], stats.triang(c, loc=tri.low, scale=tri.high - tri.low).cdf).pvalue > 1e-3
    nor = box.ranges[1]
    a, b = (nor.low - nor.mode) / nor.std, (nor.high - nor.mode) / nor.std
    assert stats.kstest(x[:, 1], stats.truncnorm(a, b, loc=nor.mode, scale=nor.std).cdf).pvalue > 1e-3
    uni = box.ranges[2]
    assert stats.kstest(x[:, 2], stats.uniform(loc=uni.low, scale=uni.high - uni.low).cdf).pvalue > 1e-3
    # and a wrong distribution is rejected (the test can fail)
    assert stats.kstest(x[:, 0], stats.uniform(loc=tri.low, scale=tri.high - tri.low).cdf).pvalue < 1e-3


def test_quasi_random_plans(transporter):
    box = transporter.box
    for kind in ("sobol", "latin_hypercube"):
        x = quasi_random(box, 512, seed=3, kind=kind)
        assert x.shape == (512, 3)
        assert np.all(x >= box.low) and np.all(x <= box.high)
        assert np.array_equal(x, plan_points(box, kind, samples=512, seed=3))
