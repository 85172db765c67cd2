"""Statistics for sampled requirements: exact binomial intervals and sample sizes."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats


def clopper_pearson(failures: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact two-sided binomial confidence interval for a failure probability.

    Reference: Clopper and Pearson (1934), Biometrika 26(4):404-413:
    ``[B(a/2; k, n-k+1), B(1-a/2; k+1, n-k)]`` with ``B`` the beta quantile
    and ``a = 1 - confidence``; the bounds are 0 and 1 at ``k = 0`` and ``k = n``.
    """
    if n < 1 or not 0 <= failures <= n:
        raise ValueError(f"need 0 <= failures <= n and n >= 1, got {failures} of {n}")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence: expected a number in (0, 1), got {confidence}")
    a = 1.0 - confidence
    lo = 0.0 if failures == 0 else float(stats.beta.ppf(a / 2, failures, n - failures + 1))
    hi = 1.0 if failures == n else float(stats.beta.ppf(1 - a / 2, failures + 1, n - failures))
    return lo, hi


def samples_needed(failure_rate: float, confidence: float) -> int:
    """Samples with no failure needed to claim ``P(fail) < failure_rate`` at ``confidence``.

    Reference: Tempo, Bai and Dabbene (1997), Systems & Control Letters 30:237-242,
    the one-sided bound ``N >= ln(1/delta) / ln(1/(1 - eps))`` with
    ``delta = 1 - confidence`` and ``eps = failure_rate``.
    """
    if not 0 < failure_rate < 1 or not 0 < confidence < 1:
        raise ValueError("failure rate and confidence must lie in (0, 1)")
    return int(math.ceil(math.log(1.0 / (1.0 - confidence)) / math.log(1.0 / (1.0 - failure_rate))))


def percentiles(values: np.ndarray, qs=(1, 5, 50, 95, 99)) -> dict[str, float]:
    """Percentiles (linear interpolation, numpy's default) keyed ``"p1"`` ... ``"p99"``."""
    v = np.asarray(values, dtype=float)
    finite = v[np.isfinite(v)]
    if finite.size == 0:
        return {f"p{q}": float(v[0]) for q in qs}
    # inf is a legitimate value (e.g. no upper gain limit): rank with it included
    return {f"p{q}": float(np.percentile(v, q, method="inverted_cdf")) for q in qs}
