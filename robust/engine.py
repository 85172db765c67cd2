"""The compiled time-domain engine: one numba kernel over a flat batch of runs.

Every row of the batch is one run: one vehicle, one gain, one manoeuvre (its
amplitudes already scaled), one controller.  The kernel integrates each row
through its whole manoeuvre, in parallel across rows, with:

* classical fourth-order Runge-Kutta substeps (the latency instant is a step
  boundary), the drive evaluated inside every stage (current and voltage
  limits, back-EMF);
* the sampled-data controller ``u = -K (x - x_ref)`` plus the friction trim,
  its command reaching the drives after the latency (zero-order hold);
* fall detection (a fallen row keeps its state frozen, as the numpy
  reference engine in the tests does);
* the running metrics (peaks, time at the limits, response timing), which
  the recorders in :mod:`robust.simulate` turn into named metrics.

Optional per-step records (for envelopes and traces) are written into
arrays the caller provides; they observe the state and never change it.

The kernel is compiled once per machine (``cache=True``); the first call in a
process reports the time spent loading or compiling it through ``progress``.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable

import numpy as np

try:  # numba is a dependency; the import is guarded only so that a broken install gives a clear message
    import numba
except ImportError as exc:  # pragma: no cover
    raise ImportError("the simulation engine needs numba: pip install numba") from exc

# plant columns
(P_R, P_D, P_CB, P_ML, P_M11, P_M33, P_I1, P_I3, P_L, P_YW, P_G, P_KT, P_KTN, P_KE, P_RES, P_V, P_IMAX) = range(17)
P_TRIM_V, P_TRIM_W = 17, 18
PLANT_COLUMNS = 19
# manoeuvre columns (amplitudes already multiplied by the row's scale)
(M_STEPS, M_START, M_V, M_W, M_RAMP, M_PUSH_F, M_PUSH_H, M_PUSH_T, M_PITCH0, M_STOP, M_RECORD) = range(11)
MANOEUVRE_COLUMNS = 11
# outputs
O = {
    name: i
    for i, name in enumerate(
        (
            "peak_torque_l",
            "peak_torque_r",
            "peak_command_l",
            "peak_command_r",
            "peak_current_l",
            "peak_current_r",
            "at_current_l",
            "at_current_r",
            "at_voltage_l",
            "at_voltage_r",
            "peak_pitch",
            "peak_pitch_rate",
            "fell",
            "fall_time",
            "sv_t10",
            "sv_t90",
            "sv_extreme",
            "sv_last_out",
            "sv_final_error",
            "sv_band",
            "sw_t10",
            "sw_t90",
            "sw_extreme",
            "sw_last_out",
            "sw_final_error",
            "sw_band",
        )
    )
}
OUTPUT_COLUMNS = len(O)
RECORD_COLUMNS = 17  # state (7), command (2), torque (2), current (2), vref, wref, spin (2)


@numba.njit(cache=True, inline="always")
def _drive(P, cmd, spin):
    """Clipped current, ``lo``, ``hi`` and the voltage-limited bounds for one wheel."""
    wanted = cmd / P[P_KTN]
    v_hi = (P[P_V] - P[P_KE] * spin) / P[P_RES]
    v_lo = (-P[P_V] - P[P_KE] * spin) / P[P_RES]
    lo = min(max(-P[P_IMAX], v_lo), v_hi)
    hi = min(max(P[P_IMAX], v_lo), v_hi)
    current = min(max(wanted, lo), hi)
    return wanted, current, lo, hi, v_lo, v_hi


@numba.njit(cache=True, inline="always")
def _deriv(P, x, tl, tr, pf, ph, live, out):
    """Time derivative of the 7-state vector (same arithmetic as :func:`robust.dynamics.accelerations`)."""
    v, w, p, q = x[3], x[4], x[5], x[6]
    r, d, cb, Ml, l = P[P_R], P[P_D], P[P_CB], P[P_ML], P[P_L]
    rel_l = (v - d * w) / r - q
    rel_r = (v + d * w) / r - q
    net_l = tl - cb * rel_l
    net_r = tr - cb * rel_r
    S = net_l + net_r
    D = net_r - net_l
    s = math.sin(p)
    c = math.cos(p)
    s2 = s * s
    m22 = (P[P_I1] + Ml * l) * s2 + P[P_I3] * (1.0 - s2) + P[P_YW]
    w2 = w * w
    f1 = S / r + Ml * s * (q * q + w2)
    f3 = Ml * P[P_G] * s - S - (P[P_I3] - P[P_I1] - Ml * l) * s * c * w2
    f1 = f1 + pf
    f3 = f3 + pf * ph * c
    Mlc = Ml * c
    det = P[P_M11] * P[P_M33] - Mlc * Mlc
    dv = (P[P_M33] * f1 - Mlc * f3) / det
    ddp = (P[P_M11] * f3 - Mlc * f1) / det
    dw = (d * D / r - 2.0 * (P[P_I1] - P[P_I3] + Ml * l) * s * c * w * q - Ml * s * v * w) / m22
    hd = x[2]
    out[0] = v * math.cos(hd) * live
    out[1] = v * math.sin(hd) * live
    out[2] = w * live
    out[3] = dv * live
    out[4] = dw * live
    out[5] = q * live
    out[6] = ddp * live


@numba.njit(cache=True, inline="always")
def _delivered(P, wanted_l, wanted_r, x, out):
    """Delivered torques for wanted currents at state ``x`` into ``out`` (no bookkeeping)."""
    r, d = P[P_R], P[P_D]
    v, w, q = x[3], x[4], x[6]
    for j in range(2):
        spin = ((v - d * w) if j == 0 else (v + d * w)) / r - q
        v_hi = (P[P_V] - P[P_KE] * spin) / P[P_RES]
        v_lo = (-P[P_V] - P[P_KE] * spin) / P[P_RES]
        lo = min(max(-P[P_IMAX], v_lo), v_hi)
        hi = min(max(P[P_IMAX], v_lo), v_hi)
        wanted = wanted_l if j == 0 else wanted_r
        out[j] = P[P_KT] * min(max(wanted, lo), hi)


@numba.njit(cache=True, inline="always")
def _response(o, base, t, y, target, start, live):
    """Online rise / overshoot / settling statistics (same rules as the numpy reference engine)."""
    sgn = 0.0 if target == 0 else (1.0 if target > 0 else -1.0)
    frac = y / target if target != 0 else 0.0
    after = t >= start
    if live and after and frac >= 0.1 and math.isinf(o[base + 0]):
        o[base + 0] = t - start
    if live and after and frac >= 0.9 and math.isinf(o[base + 1]):
        o[base + 1] = t - start
    if live and after:
        o[base + 2] = max(o[base + 2], sgn * y)
    band = max(0.02 * abs(target), 0.02)
    if live and abs(y - target) > band:
        o[base + 3] = max(t - start, 0.0)
    if live:
        o[base + 4] = abs(y - target)
    o[base + 5] = band


@numba.njit(cache=True)
def _run_row(P, K, M, T, latency, substeps, fall_angle, o, rec):
    steps = int(M[M_STEPS])
    start = M[M_START]
    record = M[M_RECORD] > 0
    stop_at_limit = M[M_STOP] > 0
    x = np.zeros(7)
    x[5] = M[M_PITCH0]
    for i in range(OUTPUT_COLUMNS):
        o[i] = 0.0
    o[10] = abs(x[5])
    o[13] = math.inf
    for base in (14, 20):
        o[base + 0] = math.inf
        o[base + 1] = math.inf
    final_v = M[M_V]
    final_w = M[M_W]
    # segments of one controller period: (length, substeps, which command)
    if latency > 0:
        m1 = max(1, int(math.ceil(substeps * latency / T)))
        m2 = max(1, substeps - m1)
        nseg = 2
    else:
        m1 = substeps
        m2 = 0
        nseg = 1
    u = np.zeros(2)
    u_prev = np.zeros(2)
    k1 = np.empty(7)
    k2 = np.empty(7)
    k3 = np.empty(7)
    k4 = np.empty(7)
    xs = np.empty(7)
    tq = np.empty(2)
    cur = np.empty(2)
    tau = np.empty(2)
    fell = False
    stopped = False
    for k in range(steps):
        t = k * T
        if t < start:
            frac = 0.0
        elif M[M_RAMP] > 0:
            frac = min(1.0, (t - start) / M[M_RAMP])
        else:
            frac = 1.0
        vref = M[M_V] * frac
        wref = M[M_W] * frac
        for j in range(2):
            e0 = x[3] - vref
            e1 = x[4] - wref
            u[j] = -(e0 * K[j, 0] + e1 * K[j, 1] + x[5] * K[j, 2] + x[6] * K[j, 3])
        base_t = P[P_TRIM_V] * vref
        turn = P[P_TRIM_W] * wref
        u[0] += base_t - turn
        u[1] += base_t + turn
        live = not fell and not stopped
        livef = 1.0 if live else 0.0
        if live:
            o[2] = max(o[2], abs(u[0]))
            o[3] = max(o[3], abs(u[1]))
        _response(o, 14, t, x[3], final_v, start, live)
        _response(o, 20, t, x[4], final_w, start, live)
        tt = t
        for seg in range(nseg):
            if nseg == 2:
                length = latency if seg == 0 else T - latency
                m = m1 if seg == 0 else m2
                c0 = u_prev[0] if seg == 0 else u[0]
                c1 = u_prev[1] if seg == 0 else u[1]
            else:
                length = T
                m = m1
                c0 = u[0]
                c1 = u[1]
            h = length / m
            wl = c0 / P[P_KTN]
            wr = c1 / P[P_KTN]
            for sub in range(m):
                pushing = M[M_PUSH_F] != 0 and start <= tt < start + M[M_PUSH_T]
                pf = M[M_PUSH_F] if pushing else 0.0
                ph = M[M_PUSH_H] if pushing else 0.0
                # measure: drive output at x (peaks, limits)
                r, d = P[P_R], P[P_D]
                for j in range(2):
                    spin = ((x[3] - d * x[4]) if j == 0 else (x[3] + d * x[4])) / r - x[6]
                    wanted, current, lo, hi, v_lo, v_hi = _drive(P, c0 if j == 0 else c1, spin)
                    limited = current != wanted
                    vlim = limited and ((wanted > hi and hi >= v_hi) or (wanted < lo and lo <= v_lo))
                    tq[j] = P[P_KT] * current
                    cur[j] = current
                    if live:
                        o[0 + j] = max(o[0 + j], abs(tq[j]))
                        o[4 + j] = max(o[4 + j], abs(current))
                        if limited and not vlim:
                            o[6 + j] += 1.0
                        if vlim:
                            o[8 + j] += 1.0
                if live:
                    o[10] = max(o[10], abs(x[5]))
                    o[11] = max(o[11], abs(x[6]))
                if record and seg == 0 and sub == 0:
                    for i in range(7):
                        rec[k, i] = x[i]
                    rec[k, 7] = u[0]
                    rec[k, 8] = u[1]
                    rec[k, 9] = tq[0]
                    rec[k, 10] = tq[1]
                    rec[k, 11] = cur[0]
                    rec[k, 12] = cur[1]
                    rec[k, 13] = vref
                    rec[k, 14] = wref
                    rec[k, 15] = (x[3] - d * x[4]) / r - x[6]
                    rec[k, 16] = (x[3] + d * x[4]) / r - x[6]
                _deriv(P, x, tq[0], tq[1], pf, ph, livef, k1)
                for i in range(7):
                    xs[i] = x[i] + 0.5 * h * k1[i]
                _delivered(P, wl, wr, xs, tau)
                _deriv(P, xs, tau[0], tau[1], pf, ph, livef, k2)
                for i in range(7):
                    xs[i] = x[i] + 0.5 * h * k2[i]
                _delivered(P, wl, wr, xs, tau)
                _deriv(P, xs, tau[0], tau[1], pf, ph, livef, k3)
                for i in range(7):
                    xs[i] = x[i] + h * k3[i]
                _delivered(P, wl, wr, xs, tau)
                _deriv(P, xs, tau[0], tau[1], pf, ph, livef, k4)
                for i in range(7):
                    x[i] = x[i] + (h / 6.0) * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i])
                tt += h
        u_prev[0] = u[0]
        u_prev[1] = u[1]
        if not fell and abs(x[5]) > fall_angle:
            o[13] = (k + 1) * T
            fell = True
        if stop_at_limit and max(o[6], o[7]) > 0:
            stopped = True
        if (fell or stopped) and not record:
            break  # the state is frozen from here on: nothing more can change
    live = not fell and not stopped
    _response(o, 14, steps * T, x[3], final_v, start, live)
    _response(o, 20, steps * T, x[4], final_w, start, live)
    o[12] = 1.0 if fell else 0.0


@numba.njit(cache=True, parallel=True)
def _run_batch(P, K, M, T, latency, substeps, fall_angle, out, rec, rec_index):
    n = P.shape[0]
    for i in numba.prange(n):
        ri = rec_index[i]
        _run_row(P[i], K[i], M[i], T, latency, substeps, fall_angle, out[i], rec[max(ri, 0)])


_LOADED = False


def run_batch(
    P: np.ndarray,
    K: np.ndarray,
    M: np.ndarray,
    *,
    sample_period_s: float,
    latency_s: float,
    substeps: int,
    fall_angle_rad: float,
    record_steps: int = 0,
    progress: Callable[[str], None] | None = None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Run every row of a flat batch; returns ``(outputs (n, OUTPUT_COLUMNS), records or None)``.

    Rows with ``M[:, M_RECORD] > 0`` get a per-step record ``(record_steps, RECORD_COLUMNS)``;
    records are returned in row order of those rows.
    """
    global _LOADED
    n = P.shape[0]
    out = np.empty((n, OUTPUT_COLUMNS))
    want = M[:, M_RECORD] > 0
    rec_index = np.full(n, -1, dtype=np.int64)
    rec_index[want] = np.arange(int(want.sum()))
    rec = np.zeros((max(int(want.sum()), 1), max(record_steps, 1), RECORD_COLUMNS))
    if want.any() and record_steps < int(M[want, M_STEPS].max()):
        raise ValueError("record_steps is smaller than the longest recorded manoeuvre")
    t0 = time.perf_counter()
    _run_batch(
        np.ascontiguousarray(P, dtype=np.float64),
        np.ascontiguousarray(K, dtype=np.float64),
        np.ascontiguousarray(M, dtype=np.float64),
        float(sample_period_s),
        float(latency_s),
        int(substeps),
        float(fall_angle_rad),
        out,
        rec,
        rec_index,
    )
    if not _LOADED:
        _LOADED = True
        took = time.perf_counter() - t0
        if progress is not None and took > 2.0:
            progress(f"simulation kernel compiled or loaded in {took:.1f} s (cached for later runs on this machine)")
    return out, (rec[: int(want.sum())] if want.any() else None)
