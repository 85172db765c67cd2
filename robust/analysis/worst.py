"""Worst case of a metric over the parameter box.

The worst model is not always at a corner: the search starts from the worst
corners and samples (placed in the initial population of a seeded,
vectorised differential evolution in normalised coordinates) and polishes
the best point with a bounded Nelder-Mead.  Both are elitist, so the result
is never better than the worst corner or sample it started from.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from robust.analysis.metrics import METRICS, evaluate
from robust.uncertainty import Box

_CLIP = 1e9


@dataclass(frozen=True)
class SearchResult:
    """Worst point found by the search.

    Attributes
    ----------
    value
        Metric value at the worst point found.
    point
        Parameter values there, shape ``(k,)`` (order of ``Box.names``).
    evaluations
        Number of models evaluated.
    """

    value: float
    point: np.ndarray
    evaluations: int


def search_worst(
    box: Box,
    K: np.ndarray,
    metric: str,
    starts: np.ndarray,
    *,
    seed: int,
    generations: int = 25,
    population: int = 24,
    local_evaluations: int = 150,
) -> SearchResult:
    """Search the box for the worst value of one metric.

    Parameters
    ----------
    box
        The parameter box (at least one range).
    K
        Gain ``(2, 4)``.
    metric
        A name from :data:`robust.analysis.metrics.METRICS`.
    starts
        Parameter points ``(m, k)`` to seed the search (worst corners and samples).
    seed
        Seed of the differential evolution.
    """
    m = METRICS[metric]
    k = len(box.ranges)
    if k == 0:
        raise ValueError("worst-case search needs at least one range")
    low, span = box.low, box.high - box.low
    count = 0

    def goodness(u: np.ndarray) -> np.ndarray:
        """Minimised by the search: the negative of the metric's badness."""
        nonlocal count
        u = np.clip(np.atleast_2d(u), 0.0, 1.0)
        pts = low + u * span
        count += pts.shape[0]
        vals = evaluate(box, pts, K, names=(metric,))[metric]
        return np.clip(-m.badness(vals), -_CLIP, _CLIP)

    ustarts = np.clip((np.asarray(starts, dtype=float) - low) / span, 0.0, 1.0)
    rng = np.random.default_rng(seed)
    fill = max(population - ustarts.shape[0], 5)
    init = np.concatenate([ustarts[:population], rng.random((fill, k))])
    de = optimize.differential_evolution(
        lambda u: goodness(u.T),
        bounds=[(0.0, 1.0)] * k,
        init=init,
        maxiter=generations,
        seed=seed,
        vectorized=True,
        updating="deferred",
        polish=False,
        tol=1e-8,
    )
    best_u, best_f = np.clip(de.x, 0, 1), float(de.fun)
    loc = optimize.minimize(
        lambda u: float(goodness(u)[0]),
        best_u,
        method="Nelder-Mead",
        bounds=[(0.0, 1.0)] * k,
        options={"maxfev": local_evaluations, "xatol": 1e-6, "fatol": 1e-10},
    )
    if loc.fun < best_f:
        best_u = np.clip(loc.x, 0, 1)
    point = low + best_u * span
    value = float(evaluate(box, point[None, :], K, names=(metric,))[metric][0])
    return SearchResult(value=value, point=point, evaluations=count + 1)
