"""Closed-loop eigenvalue metrics of ``A - B K`` over a batch of 4-state models.

The eigenvalues of a 4 x 4 real matrix are the roots of its characteristic
quartic.  :func:`eigenvalues_4x4` finds them in closed form (Ferrari's
factorisation into two quadratics through the resolvent cubic), polishes
them with Newton steps, checks the polynomial residual of every root and
recomputes the few samples that fail the check with ``numpy.linalg.eigvals``.
That makes it several times faster than ``eigvals`` on large batches with
the same answers (see benchmarks/bench_eigen.py and the tests).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def charpoly_4x4(A: np.ndarray) -> np.ndarray:
    """Coefficients ``(c3, c2, c1, c0)`` of ``det(s I - A) = s^4 + c3 s^3 + c2 s^2 + c1 s + c0``.

    ``A`` has shape ``(n, 4, 4)``; returns ``(n, 4)``.  Faddeev-LeVerrier recursion.
    """
    I = np.eye(4)
    c3 = -np.trace(A, axis1=-2, axis2=-1)
    M = A + c3[:, None, None] * I
    AM = A @ M
    c2 = -0.5 * np.trace(AM, axis1=-2, axis2=-1)
    M = AM + c2[:, None, None] * I
    AM = A @ M
    c1 = -np.trace(AM, axis1=-2, axis2=-1) / 3.0
    M = AM + c1[:, None, None] * I
    c0 = -0.25 * np.einsum("nij,nji->n", A, M)
    return np.stack([c3, c2, c1, c0], axis=-1)


def _cubic_largest_real_root(b: np.ndarray, c: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Largest real root of ``z^3 + b z^2 + c z + d`` (real coefficients), vectorised."""
    p = c - b * b / 3.0
    q = 2.0 * b**3 / 27.0 - b * c / 3.0 + d
    disc = (q / 2.0) ** 2 + (p / 3.0) ** 3
    z = np.empty_like(b)
    one = disc > 0
    sq = np.sqrt(np.where(one, disc, 0.0))
    u = np.cbrt(-q / 2.0 + sq)
    v = np.cbrt(-q / 2.0 - sq)
    z_one = u + v
    rr = np.sqrt(np.maximum(-p / 3.0, 0.0))
    arg = np.where(rr > 0, -q / (2.0 * np.where(rr > 0, rr, 1.0) ** 3), 0.0)
    phi = np.arccos(np.clip(arg, -1.0, 1.0))
    z_three = 2.0 * rr * np.cos(phi / 3.0)
    z = np.where(one, z_one, z_three) - b / 3.0
    for _ in range(2):  # Newton polish
        f = ((z + b) * z + c) * z + d
        fp = (3.0 * z + 2.0 * b) * z + c
        step = np.where(np.abs(fp) > 0, f / np.where(fp != 0, fp, 1.0), 0.0)
        z = z - step
    return z


def quartic_roots(coef: np.ndarray) -> np.ndarray:
    """Roots of monic quartics ``s^4 + c3 s^3 + c2 s^2 + c1 s + c0``; ``coef`` is ``(n, 4)``.

    Returns ``(n, 4)`` complex.  Ferrari: depress, solve the resolvent cubic
    for its largest root ``m >= 0``, split into two quadratics, then two
    Newton steps on the original quartic.
    """
    a, b, c, d = (coef[:, i] for i in range(4))
    sh = a / 4.0
    p = b - 6.0 * sh**2
    q = c - 2.0 * b * sh + 8.0 * sh**3
    r = d - c * sh + b * sh**2 - 3.0 * sh**4
    m = _cubic_largest_real_root(2.0 * p, p * p - 4.0 * r, -q * q)
    m = np.maximum(m, 0.0)
    sm = np.sqrt(m)
    small = sm <= 1e-150
    half = np.where(small, 0.0, q / (2.0 * np.where(small, 1.0, sm)))
    # biquadratic when q ~ 0: y^2 = (-p +/- sqrt(p^2 - 4 r)) / 2
    base = (p + m) / 2.0
    roots = np.empty((a.shape[0], 4), dtype=complex)
    for k, (s1, s2) in enumerate(((sm, base - half), (-sm, base + half))):
        disc = np.sqrt((s1 * s1 - 4.0 * s2).astype(complex))
        roots[:, 2 * k] = (-s1 + disc) / 2.0
        roots[:, 2 * k + 1] = (-s1 - disc) / 2.0
    bq = np.sqrt((p * p - 4.0 * r).astype(complex))
    y2 = np.stack([(-p + bq) / 2.0, (-p - bq) / 2.0], axis=-1)
    ybi = np.sqrt(y2)
    bi = np.concatenate([ybi, -ybi], axis=-1)
    roots = np.where(small[:, None], bi, roots) - sh[:, None]
    for _ in range(2):
        s = roots
        f = (((s + a[:, None]) * s + b[:, None]) * s + c[:, None]) * s + d[:, None]
        fp = ((4.0 * s + 3.0 * a[:, None]) * s + 2.0 * b[:, None]) * s + c[:, None]
        ok = np.abs(fp) > 1e-300
        roots = np.where(ok, s - f / np.where(ok, fp, 1.0), s)
    return roots


def eigenvalues_4x4(A: np.ndarray, *, rtol: float = 1e-9, cluster: float = 1e-3) -> np.ndarray:
    """Eigenvalues of a batch of real 4 x 4 matrices, ``(n, 4)`` complex.

    Samples whose quartic roots have a relative residual above ``rtol``, or
    two roots closer than ``cluster`` times the largest root, are recomputed
    with ``numpy.linalg.eigvals``, so clustered (ill-conditioned) roots keep
    LAPACK's accuracy.
    """
    A = np.asarray(A, dtype=float)
    coef = charpoly_4x4(A)
    roots = quartic_roots(coef)
    s = roots
    mag = np.abs(s)
    f = (((s + coef[:, None, 0]) * s + coef[:, None, 1]) * s + coef[:, None, 2]) * s + coef[:, None, 3]
    scale = mag**4 + np.abs(coef[:, None, 0]) * mag**3 + np.abs(coef[:, None, 1]) * mag**2
    scale = scale + np.abs(coef[:, None, 2]) * mag + np.abs(coef[:, None, 3])
    bad = ~np.all(np.abs(f) <= rtol * np.maximum(scale, 1e-300), axis=-1)
    # clustered roots are ill-conditioned as polynomial roots (error ~ sqrt(eps));
    # LAPACK works on the matrix and keeps them accurate
    size = np.maximum(mag.max(axis=-1), 1e-300)
    for i, j in ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3)):
        bad |= np.abs(s[:, i] - s[:, j]) < cluster * size
    bad |= ~np.all(np.isfinite(roots), axis=-1)
    if np.any(bad):
        roots[bad] = np.linalg.eigvals(A[bad])
    return roots


@dataclass(frozen=True)
class EigenMetrics:
    """Closed-loop eigenvalue metrics, each of shape ``(n,)``.

    Attributes
    ----------
    spectral_abscissa
        Largest real part. [1/s]
    decay_rate
        ``-spectral_abscissa``: the slowest mode's decay rate (negative when unstable). [1/s]
    min_damping
        Smallest damping ratio ``-Re(s) / |s|`` (``-1`` for an unstable real
        pole, ``0`` for a pole at the origin). [-]
    slowest_time_constant_s
        ``1 / decay_rate``; ``inf`` when the loop is not stable. [s]
    max_natural_frequency
        Largest ``|s|``. [rad/s]
    stable
        All real parts negative.
    """

    spectral_abscissa: np.ndarray
    decay_rate: np.ndarray
    min_damping: np.ndarray
    slowest_time_constant_s: np.ndarray
    max_natural_frequency: np.ndarray
    stable: np.ndarray


def eigen_metrics(eigs: np.ndarray) -> EigenMetrics:
    """Metrics from closed-loop eigenvalues of shape ``(n, k)``."""
    re = eigs.real
    mag = np.abs(eigs)
    zeta = np.where(mag > 0, -re / np.where(mag > 0, mag, 1.0), 0.0)
    absc = re.max(axis=-1)
    stable = absc < 0
    with np.errstate(divide="ignore"):
        tau = np.where(stable, 1.0 / np.where(stable, -absc, 1.0), np.inf)
    return EigenMetrics(
        spectral_abscissa=absc,
        decay_rate=-absc,
        min_damping=zeta.min(axis=-1),
        slowest_time_constant_s=tau,
        max_natural_frequency=mag.max(axis=-1),
        stable=stable,
    )


def closed_loop(A: np.ndarray, B: np.ndarray, K: np.ndarray) -> np.ndarray:
    """``A - B K`` for a batch; ``K`` is ``(2, 4)`` or ``(n, 2, 4)``."""
    return A - B @ K


def closed_loop_metrics(A: np.ndarray, B: np.ndarray, K: np.ndarray) -> EigenMetrics:
    """Eigen metrics of ``A - B K`` for a batch of reduced models."""
    return eigen_metrics(eigenvalues_4x4(closed_loop(A, B, K)))
