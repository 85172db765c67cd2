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


def broken_loop(d: dict[str, np.ndarray], K: np.ndarray, j: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The sampled loop broken at wheel input ``j`` (the other input's loop closed): ``(Phi, Gamma, C)`` with
    ``L_j(z) = C (z I - Phi)^{-1} Gamma`` and the closed loop ``1 + L_j = 0`` (negative feedback, as in
    continuous time ``L_j(s) = K_j (sI - A + B_o K_o)^{-1} B_j``).

    State ``(x, v[k-1])``: the injected command ``v_j`` and the other input's ``v_o = -K_o x`` both pass the
    latency and the hold: ``x+ = Ad x + B0 v + B1 v[k-1]``."""
    Ad, B0, B1 = d["Ad"], d["B0"], d["B1"]
    K = np.asarray(K, dtype=float)
    n, m, p = B0.shape
    o = 1 - j
    Phi = np.zeros((n, m + p, m + p))
    Phi[:, :m, :m] = Ad - B0[:, :, o : o + 1] @ K[o : o + 1]
    Phi[:, :m, m:] = B1
    Phi[:, m + o, :m] = -K[o]
    Gamma = np.zeros((n, m + p, 1))
    Gamma[:, :m, 0] = B0[:, :, j]
    Gamma[:, m + j, 0] = 1.0
    C = np.zeros((1, m + p))
    C[0, :m] = K[j]
    return Phi, Gamma, np.broadcast_to(C, (n, 1, m + p))


def _response(Phi: np.ndarray, Gamma: np.ndarray, C: np.ndarray, z: np.ndarray) -> np.ndarray:
    """``C (z I - Phi)^{-1} Gamma`` for every model and every ``z`` ``(n, W)`` by the eigen-decomposition of
    ``Phi`` (a diagonalisable batch; models where it is ill-conditioned are solved directly)."""
    lam, V = np.linalg.eig(Phi)
    cond = np.linalg.cond(V)
    ok = np.isfinite(cond) & (cond < 1e8)
    out = np.empty((Phi.shape[0], z.size), dtype=complex)
    if ok.any():
        Vi = np.linalg.inv(V[ok])
        left = (C[ok] @ V[ok])[:, 0, :]  # (k, s)
        right = (Vi @ Gamma[ok])[:, :, 0]  # (k, s)
        out[ok] = np.einsum("ks,kws->kw", left * right, 1.0 / (z[None, :, None] - lam[ok][:, None, :]))
    for i in np.flatnonzero(~ok):
        s = Phi.shape[1]
        for w, zw in enumerate(z):
            out[i, w] = (C[i] @ np.linalg.solve(zw * np.eye(s) - Phi[i], Gamma[i]))[0, 0]
    return out


def sampled_loop_margins(
    A: np.ndarray, B: np.ndarray, K: np.ndarray, period: float, latency: float, points: int = 3000
) -> dict[str, np.ndarray]:
    """Loop-at-a-time margins of the sampled loop at each wheel input, per model: arrays ``(n, 2)``.

    Frequency response on the unit circle ``z = e^{j w T}``, ``w`` on a logarithmic grid up to the Nyquist
    frequency ``pi / T`` (``points`` values; crossings refined by linear interpolation between grid points):
    ``gain_margin_up_db`` / ``gain_margin_down_db`` (``inf`` when there is no such crossing; the loop at one
    wheel is broken with the other wheel's loop closed),
    ``phase_margin_deg``, ``delay_margin_s`` (phase margin over its crossover frequency: the extra delay
    the loop tolerates, not rounded to whole periods), ``disk_margin`` (balanced, ``1 / max |S - 1/2|``,
    Seiler, Packard and Gahinet, IEEE Control Systems 2020).  Margins of a loop that is unstable when
    closed are 0.
    """
    d = discretize(A, B, period, latency)
    K = np.asarray(K, dtype=float)
    n = np.asarray(A).shape[0]
    nyq = np.pi / period
    # from just above w = 0 (a pole at z = 1, an undamped yaw mode, would make L(1) infinite) to Nyquist
    w = np.logspace(np.log10(nyq) - 7.0, np.log10(nyq), points)
    z = np.exp(1j * w * period)
    stable = sampled_decay_rate(A, B, K, period, latency) > 0
    out = {k: np.zeros((n, 2)) for k in ("gain_margin_up_db", "gain_margin_down_db", "phase_margin_deg")}
    out["delay_margin_s"] = np.zeros((n, 2))
    out["disk_margin"] = np.zeros((n, 2))
    for j in range(2):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # a pole on the circle: inf, handled
            L = _response(*broken_loop(d, K, j), z)  # (n, W)
        S = 1.0 / (1.0 + L)
        out["disk_margin"][:, j] = 1.0 / np.abs(S - 0.5).max(axis=1)
        # phase crossings: Im L changes sign with Re L < 0; gain factor -1 / Re L there
        im, re = L.imag, L.real
        a, b = im[:, :-1], im[:, 1:]
        cross = (np.sign(a) != np.sign(b)) & (a != b)
        t = np.where(cross, a / np.where(cross, a - b, 1.0), 0.0)
        re_x = re[:, :-1] + t * (re[:, 1:] - re[:, :-1])
        neg = cross & (re_x < 0)
        factor = np.where(neg, -1.0 / np.where(neg, re_x, -1.0), np.nan)
        # the two ends of the grid, next to z = 1 and at z = -1 (Nyquist), where L is (nearly) real
        ends = re[:, [0, -1]]
        end_neg = ends < 0
        factor = np.concatenate([factor, np.where(end_neg, -1.0 / np.where(end_neg, ends, -1.0), np.nan)], 1)
        up = np.where(factor > 1.0, factor, np.inf).min(axis=1)
        down = np.where(factor < 1.0, factor, 0.0).max(axis=1)
        out["gain_margin_up_db"][:, j] = 20.0 * np.log10(up)
        with np.errstate(divide="ignore"):
            out["gain_margin_down_db"][:, j] = np.where(
                down > 0, -20.0 * np.log10(np.where(down > 0, down, 1.0)), np.inf
            )
        # gain crossings: |L| = 1
        mag = np.abs(L)
        a, b = mag[:, :-1] - 1.0, mag[:, 1:] - 1.0
        cross = (np.sign(a) != np.sign(b)) & (a != b)
        t = np.where(cross, a / np.where(cross, a - b, 1.0), 0.0)
        wc = w[:-1] + t * (w[1:] - w[:-1])
        ph0 = np.angle(L[:, :-1])
        dph = np.angle(L[:, 1:] / L[:, :-1])
        ph = ph0 + t * dph
        pm = np.degrees(np.mod(ph + np.pi, 2 * np.pi) - np.pi) + 180.0  # 180 + angle, angle in (-180, 180]
        pm = np.where(pm > 180.0, pm - 360.0, pm)
        pm_c = np.where(cross, np.abs(pm), np.inf)
        k = pm_c.argmin(axis=1)
        rows = np.arange(n)
        has = np.isfinite(pm_c[rows, k])
        out["phase_margin_deg"][:, j] = np.where(has, pm_c[rows, k], np.inf)
        dm = np.where(cross, np.radians(np.where(pm > 0, pm, 0.0)) / np.where(cross, wc, 1.0), np.inf)
        out["delay_margin_s"][:, j] = dm.min(axis=1)
    for key in out:
        out[key][~stable] = 0.0
    return out
