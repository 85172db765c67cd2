"""Which tolerance drives a metric: variance-based (Sobol) sensitivity indices over the box.

Saltelli's sampling scheme and the Sobol first-order and total indices with
bootstrap confidence intervals come from SALib (Herman and Usher 2017), the
well-kept library for this; the metric values come from the same closed-form
analysis as the check.  Parameters are taken uniform over their ranges (the
indices describe the box, not the case's distributions), which is the usual
question "which tolerance, if narrowed, would change this metric most".
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.analysis.metrics import METRICS, evaluate
from robust.uncertainty import Box

SOBOL_TIME_BASE_SAMPLES = 64  # the same for a simulated metric: N (k + 2) runs per manoeuvre
SOBOL_BASE_SAMPLES = 256  # Saltelli's N in the dossier's ranking: N (k + 2) evaluations of a linear metric


@dataclass(frozen=True)
class SensitivityResult:
    """Sobol indices of one metric for one gain set; arrays are per ranged parameter."""

    metric: str
    parameters: tuple[str, ...]
    first_order: np.ndarray
    first_order_conf: np.ndarray
    total: np.ndarray
    total_conf: np.ndarray
    evaluations: int
    seed: int
    confidence: float


def sobol_indices(
    box: Box,
    K: np.ndarray,
    metric: str,
    *,
    base_samples: int = 1024,
    seed: int = 0,
    confidence: float = 0.95,
) -> SensitivityResult:
    """First-order and total Sobol indices of a linear metric over the box, with confidence intervals.

    ``base_samples`` is Saltelli's ``N`` (a power of two); the metric is
    evaluated at ``N (k + 2)`` points.  Metrics that are infinite somewhere
    (an unbounded margin) are refused: their variance is undefined.
    """
    if metric not in METRICS:
        raise ValueError(f"metric: expected one of {', '.join(METRICS)}, got {metric!r}")
    return sobol_of(
        box,
        lambda X: evaluate(box, X, K, names=(metric,))[metric],
        metric,
        base_samples=base_samples,
        seed=seed,
        confidence=confidence,
    )


def sobol_of(
    box: Box,
    f,
    metric: str,
    *,
    base_samples: int = 1024,
    seed: int = 0,
    confidence: float = 0.95,
) -> SensitivityResult:
    """Sobol indices of any batched function ``f(points) -> values`` over the box (a simulated metric too)."""
    from SALib.analyze import sobol as analyze
    from SALib.sample import sobol as sample

    if not box.ranges:
        raise ValueError("sensitivity needs [ranges]: with one nominal vehicle nothing varies")
    if base_samples < 2 or base_samples & (base_samples - 1):
        raise ValueError(f"base_samples: expected a power of two >= 2, got {base_samples}")
    names = box.names
    problem = {
        "num_vars": len(names),
        "names": list(names),
        "bounds": [[float(lo), float(hi)] for lo, hi in zip(box.low, box.high)],
    }
    X = sample.sample(problem, base_samples, calc_second_order=False, seed=seed)
    y = np.asarray(f(X), dtype=float)
    if not np.all(np.isfinite(y)):
        raise ValueError(f"metric {metric!r} is unbounded somewhere in the box: its variance is undefined")
    res = analyze.analyze(problem, y, calc_second_order=False, conf_level=confidence, seed=seed, print_to_console=False)
    return SensitivityResult(
        metric=metric,
        parameters=tuple(names),
        first_order=np.asarray(res["S1"]),
        first_order_conf=np.asarray(res["S1_conf"]),
        total=np.asarray(res["ST"]),
        total_conf=np.asarray(res["ST_conf"]),
        evaluations=int(len(y)),
        seed=seed,
        confidence=confidence,
    )


@dataclass(frozen=True)
class ConditionalFailure:
    """Failure fraction of one requirement on the check's samples, per equal sub-range of each parameter."""

    metric: str
    parameters: tuple[str, ...]
    edges: np.ndarray  # (parameters, bins + 1) sub-range edges
    samples: np.ndarray  # (parameters, bins) samples in each sub-range
    failures: np.ndarray  # (parameters, bins)
    upper: np.ndarray  # (parameters, bins) Clopper-Pearson upper bound of the failure probability
    confidence: float


def conditional_failure(
    box: Box,
    points: np.ndarray,
    failed: np.ndarray,
    metric: str,
    *,
    bins: int = 4,
    confidence: float = 0.95,
) -> ConditionalFailure:
    """Failure fraction and its Clopper-Pearson upper bound conditional on each parameter lying in each of
    ``bins`` equal sub-ranges of its range (the other parameters as sampled): which part of a tolerance the
    failures come from.  ``points`` are Monte Carlo samples of the box, ``failed`` one flag per sample."""
    from robust.analysis.stats import clopper_pearson

    points = np.asarray(points, dtype=float)
    failed = np.asarray(failed, dtype=bool)
    if points.ndim != 2 or points.shape[1] != len(box.names) or failed.shape != (points.shape[0],):
        raise ValueError("conditional_failure: expected points (n, parameters) and one flag per point")
    k = len(box.names)
    edges = np.linspace(box.low, box.high, bins + 1).T  # (k, bins + 1)
    n = np.zeros((k, bins), dtype=int)
    f = np.zeros((k, bins), dtype=int)
    up = np.zeros((k, bins))
    for p in range(k):
        idx = np.clip(np.searchsorted(edges[p], points[:, p], side="right") - 1, 0, bins - 1)
        n[p] = np.bincount(idx, minlength=bins)
        f[p] = np.bincount(idx, weights=failed, minlength=bins).astype(int)
        up[p] = [clopper_pearson(int(f[p, b]), int(n[p, b]), confidence)[1] if n[p, b] else 1.0 for b in range(bins)]
    return ConditionalFailure(metric, tuple(box.names), edges, n, f, up, confidence)
