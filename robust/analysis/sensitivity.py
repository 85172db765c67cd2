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
    from SALib.analyze import sobol as analyze
    from SALib.sample import sobol as sample

    if metric not in METRICS:
        raise ValueError(f"metric: expected one of {', '.join(METRICS)}, got {metric!r}")
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
    y = evaluate(box, X, K, names=(metric,))[metric]
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
