"""The sampled loop: the reduced model discretised exactly with the controller's period, hold and latency.

The controller samples the state every ``T`` seconds, computes ``u[k] = -K x[k]``
and the drive applies it ``tau`` seconds later (``0 <= tau <= T``), holding it until the
next value arrives (zero-order hold).  Over one period the input is ``u[k-1]`` for
the first ``tau`` seconds and ``u[k]`` for the rest, so (exact discretisation, e.g.
Franklin, Powell and Workman, *Digital Control of Dynamic Systems*, 3rd ed., sec. 4.3.4)

    x[k+1] = Ad x[k] + B0 u[k] + B1 u[k-1],
    Ad = e^{A T},  B0 = int_0^{T - tau} e^{A s} ds B,  B1 = e^{A (T - tau)} int_0^{tau} e^{A s} ds B,

and with the augmented state ``z = (x, u[k-1])`` the closed loop is
``z[k+1] = [[Ad - B0 K, B1], [-K, 0]] z[k]``.  Its eigenvalues ``z_i`` give the
sampled loop's decay rate ``-ln(max |z_i|) / T`` (positive: stable), to be set against
the continuous-time decay rate of the same gain.  Everything is batched over models.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm


def zoh_pair(A: np.ndarray, B: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray]:
    """``e^{A h}`` and ``int_0^h e^{A s} ds B`` for a batch ``A (n, m, m)``, ``B (n, m, p)`` (block exponential)."""
    n, m, p = B.shape
    M = np.zeros((n, m + p, m + p))
    M[:, :m, :m] = A * h
    M[:, :m, m:] = B * h
    E = expm(M)
    return E[:, :m, :m], E[:, :m, m:]


def discretize(A: np.ndarray, B: np.ndarray, period: float, latency: float) -> dict[str, np.ndarray]:
    """``Ad``, ``B0``, ``B1`` of the sampled model with input latency ``0 <= latency <= period`` [s]."""
    if not 0.0 <= latency <= period or period <= 0.0:
        raise ValueError(f"expected 0 <= latency <= period and period > 0, got latency {latency}, period {period}")
    A = np.asarray(A, dtype=float)
    B = np.asarray(B, dtype=float)
    Ad, _ = zoh_pair(A, B, period)
    Ea, B0 = zoh_pair(A, B, period - latency)
    _Eb, Bt = zoh_pair(A, B, latency)
    return {"Ad": Ad, "B0": B0, "B1": Ea @ Bt}


def closed_loop(d: dict[str, np.ndarray], K: np.ndarray) -> np.ndarray:
    """The augmented closed-loop matrix ``[[Ad - B0 K, B1], [-K, 0]]`` for ``u = -K x``, ``(n, m + p, m + p)``."""
    Ad, B0, B1 = d["Ad"], d["B0"], d["B1"]
    n, m, p = B0.shape
    Phi = np.zeros((n, m + p, m + p))
    Phi[:, :m, :m] = Ad - B0 @ K
    Phi[:, :m, m:] = B1
    Phi[:, m:, :m] = -K
    return Phi


def sampled_decay_rate(A: np.ndarray, B: np.ndarray, K: np.ndarray, period: float, latency: float) -> np.ndarray:
    """Decay rate of the sampled loop per model, ``-ln(max |eig|) / period`` [1/s]; negative: unstable
    (``inf`` only for a deadbeat loop, every eigenvalue zero)."""
    Phi = closed_loop(discretize(A, B, period, latency), np.asarray(K, dtype=float))
    rho = np.abs(np.linalg.eigvals(Phi)).max(axis=-1)
    with np.errstate(divide="ignore"):
        return -np.log(rho) / period
