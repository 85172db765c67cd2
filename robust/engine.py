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
import os
import time
from collections.abc import Callable

import numpy as np

# idle kernel threads sleep rather than spin between calls, so the cores stay free for the work that runs
# beside the kernel (figures, LMI solves); read by the OpenMP runtime when the first parallel call loads it
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

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
def _drive(P, wanted, spin, inv_res):
    """Clipped current, ``lo``, ``hi`` and the voltage-limited bounds for one wheel wanting current ``wanted``."""
    v_hi = (P[P_V] - P[P_KE] * spin) * inv_res
    v_lo = (-P[P_V] - P[P_KE] * spin) * inv_res
    lo = min(max(-P[P_IMAX], v_lo), v_hi)
    hi = min(max(P[P_IMAX], v_lo), v_hi)
    current = min(max(wanted, lo), hi)
    return current, lo, hi, v_lo, v_hi


@numba.njit(cache=True, inline="always")
def _accel(P, v, w, p, q, tl, tr, pf, ph, live, inv_r):
    """``(dv, dw, dp, dq)`` at one state (same arithmetic as :func:`robust.dynamics.accelerations`).

    The state lives in scalars, not arrays, so the compiler keeps it in registers.
    """
    d, cb, Ml, l = P[P_D], P[P_CB], P[P_ML], P[P_L]
    rel_l = (v - d * w) * inv_r - q
    rel_r = (v + d * w) * inv_r - q
    net_l = tl - cb * rel_l
    net_r = tr - cb * rel_r
    S = net_l + net_r
    D = net_r - net_l
    s = math.sin(p)
    # cos from sin where the sign is known (|p| < 1.5 < pi/2): a square root is cheaper than a cosine
    c = math.sqrt(1.0 - s * s) if abs(p) < 1.5 else math.cos(p)
    s2 = s * s
    m22 = (P[P_I1] + Ml * l) * s2 + P[P_I3] * (1.0 - s2) + P[P_YW]
    w2 = w * w
    f1 = S * inv_r + Ml * s * (q * q + w2)
    f3 = Ml * P[P_G] * s - S - (P[P_I3] - P[P_I1] - Ml * l) * s * c * w2
    f1 = f1 + pf
    f3 = f3 + pf * ph * c
    Mlc = Ml * c
    det = P[P_M11] * P[P_M33] - Mlc * Mlc
    inv_det = 1.0 / det
    dv = (P[P_M33] * f1 - Mlc * f3) * inv_det
    ddp = (P[P_M11] * f3 - Mlc * f1) * inv_det
    dw = (d * D * inv_r - 2.0 * (P[P_I1] - P[P_I3] + Ml * l) * s * c * w * q - Ml * s * v * w) / m22
    return dv * live, dw * live, q * live, ddp * live


@numba.njit(cache=True, inline="always")
def _delivered(P, wanted_l, wanted_r, v, w, q, inv_r, inv_res):
    """Delivered torques ``(left, right)`` for wanted currents at a state (no bookkeeping)."""
    d = P[P_D]
    current_l = _drive(P, wanted_l, (v - d * w) * inv_r - q, inv_res)[0]
    current_r = _drive(P, wanted_r, (v + d * w) * inv_r - q, inv_res)[0]
    return P[P_KT] * current_l, P[P_KT] * current_r


@numba.njit(cache=True, inline="always")
def _stage(P, v, w, p, q, hd, dv, dw, dp, dq, dhd, f, wl, wr, pf, ph, live, inv_r, inv_res):
    """One later RK4 stage: the state moved by ``f`` times the previous stage's slopes, the drive's torques
    there, and the slopes there: ``(speed, heading, dv, dw, dp, dq, dheading)``."""
    sv, sw, sp, sq = v + f * dv, w + f * dw, p + f * dp, q + f * dq
    s_hd = hd + f * dhd
    tl, tr = _delivered(P, wl, wr, sv, sw, sq, inv_r, inv_res)
    av, aw, ap, aq = _accel(P, sv, sw, sp, sq, tl, tr, pf, ph, live, inv_r)
    return sv, s_hd, av, aw, ap, aq, sw * live


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
    # the state (position x, y, heading, speed, yaw rate, pitch, pitch rate) in scalars
    px = 0.0
    py = 0.0
    hd = 0.0
    v = 0.0
    w = 0.0
    p = M[M_PITCH0]
    q = 0.0
    for i in range(OUTPUT_COLUMNS):
        o[i] = 0.0
    o[10] = abs(p)
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
    u0_prev = u1_prev = 0.0
    tq0 = tq1 = cur0 = cur1 = 0.0
    inv_r = 1.0 / P[P_R]
    inv_res = 1.0 / P[P_RES]
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
        e0 = v - vref
        e1 = w - wref
        u0 = -(e0 * K[0, 0] + e1 * K[0, 1] + p * K[0, 2] + q * K[0, 3])
        u1 = -(e0 * K[1, 0] + e1 * K[1, 1] + p * K[1, 2] + q * K[1, 3])
        base_t = P[P_TRIM_V] * vref
        turn = P[P_TRIM_W] * wref
        u0 += base_t - turn
        u1 += base_t + turn
        live = not fell and not stopped
        livef = 1.0 if live else 0.0
        if live:
            o[2] = max(o[2], abs(u0))
            o[3] = max(o[3], abs(u1))
        _response(o, 14, t, v, final_v, start, live)
        _response(o, 20, t, w, final_w, start, live)
        tt = t
        for seg in range(nseg):
            if nseg == 2:
                length = latency if seg == 0 else T - latency
                m = m1 if seg == 0 else m2
                c0 = u0_prev if seg == 0 else u0
                c1 = u1_prev if seg == 0 else u1
            else:
                length = T
                m = m1
                c0 = u0
                c1 = u1
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
                    spin = ((v - d * w) if j == 0 else (v + d * w)) * inv_r - q
                    wanted = wl if j == 0 else wr
                    current, lo, hi, v_lo, v_hi = _drive(P, wanted, spin, inv_res)
                    limited = current != wanted
                    vlim = limited and ((wanted > hi and hi >= v_hi) or (wanted < lo and lo <= v_lo))
                    torque = P[P_KT] * current
                    if j == 0:
                        tq0, cur0 = torque, current
                    else:
                        tq1, cur1 = torque, current
                    if live:
                        o[0 + j] = max(o[0 + j], abs(torque))
                        o[4 + j] = max(o[4 + j], abs(current))
                        if limited and not vlim:
                            o[6 + j] += 1.0
                        if vlim:
                            o[8 + j] += 1.0
                if live:
                    o[10] = max(o[10], abs(p))
                    o[11] = max(o[11], abs(q))
                if record and seg == 0 and sub == 0:
                    rec[k, 0] = px
                    rec[k, 1] = py
                    rec[k, 2] = hd
                    rec[k, 3] = v
                    rec[k, 4] = w
                    rec[k, 5] = p
                    rec[k, 6] = q
                    rec[k, 7] = u0
                    rec[k, 8] = u1
                    rec[k, 9] = tq0
                    rec[k, 10] = tq1
                    rec[k, 11] = cur0
                    rec[k, 12] = cur1
                    rec[k, 13] = vref
                    rec[k, 14] = wref
                    rec[k, 15] = (v - d * w) / r - q
                    rec[k, 16] = (v + d * w) / r - q
                # classical RK4 on (heading, v, w, p, q); the position only where it is recorded
                a1v, a1w, a1p, a1q = _accel(P, v, w, p, q, tq0, tq1, pf, ph, livef, inv_r)
                h1 = w * livef
                hh = 0.5 * h
                s2v, s2hd, a2v, a2w, a2p, a2q, h2 = _stage(
                    P, v, w, p, q, hd, a1v, a1w, a1p, a1q, h1, hh, wl, wr, pf, ph, livef, inv_r, inv_res
                )
                s3v, s3hd, a3v, a3w, a3p, a3q, h3 = _stage(
                    P, v, w, p, q, hd, a2v, a2w, a2p, a2q, h2, hh, wl, wr, pf, ph, livef, inv_r, inv_res
                )
                s4v, s4hd, a4v, a4w, a4p, a4q, h4 = _stage(
                    P, v, w, p, q, hd, a3v, a3w, a3p, a3q, h3, h, wl, wr, pf, ph, livef, inv_r, inv_res
                )
                h6 = h / 6.0
                if record:
                    x1 = v * math.cos(hd) * livef
                    y1 = v * math.sin(hd) * livef
                    x2 = s2v * math.cos(s2hd) * livef
                    y2 = s2v * math.sin(s2hd) * livef
                    x3 = s3v * math.cos(s3hd) * livef
                    y3 = s3v * math.sin(s3hd) * livef
                    x4 = s4v * math.cos(s4hd) * livef
                    y4 = s4v * math.sin(s4hd) * livef
                    px = px + h6 * (x1 + 2.0 * x2 + 2.0 * x3 + x4)
                    py = py + h6 * (y1 + 2.0 * y2 + 2.0 * y3 + y4)
                hd = hd + h6 * (h1 + 2.0 * h2 + 2.0 * h3 + h4)
                v = v + h6 * (a1v + 2.0 * a2v + 2.0 * a3v + a4v)
                w = w + h6 * (a1w + 2.0 * a2w + 2.0 * a3w + a4w)
                p = p + h6 * (a1p + 2.0 * a2p + 2.0 * a3p + a4p)
                q = q + h6 * (a1q + 2.0 * a2q + 2.0 * a3q + a4q)
                tt += h
        u0_prev = u0
        u1_prev = u1
        if not fell and abs(p) > fall_angle:
            o[13] = (k + 1) * T
            fell = True
        if stop_at_limit and max(o[6], o[7]) > 0:
            stopped = True
        if (fell or stopped) and not record:
            break  # the state is frozen from here on: nothing more can change
    live = not fell and not stopped
    _response(o, 14, steps * T, v, final_v, start, live)
    _response(o, 20, steps * T, w, final_w, start, live)
    o[12] = 1.0 if fell else 0.0


@numba.njit(cache=True, parallel=True)
def _run_batch(P, K, M, T, latency, substeps, fall_angle, out, rec, rec_index):
    n = P.shape[0]
    for i in numba.prange(n):
        ri = rec_index[i]
        _run_row(P[i], K[i], M[i], T, latency, substeps, fall_angle, out[i], rec[max(ri, 0)])


_LOADED = False
_OWNER: int | None = None  # the process whose OpenMP runtime the kernel started


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
    global _LOADED, _OWNER
    if _OWNER is None:
        _OWNER = os.getpid()
    elif _OWNER != os.getpid():
        raise RuntimeError(
            "the simulation kernel cannot run in a process forked after it started (the OpenMP runtime is "
            "not fork-safe): run it in the main process (see robust.beside)"
        )
    n = P.shape[0]
    out = np.empty((n, OUTPUT_COLUMNS))
    want = M[:, M_RECORD] > 0
    rec_index = np.full(n, -1, dtype=np.int64)
    rec_index[want] = np.arange(int(want.sum()))
    rec = np.zeros((max(int(want.sum()), 1), max(record_steps, 1), RECORD_COLUMNS))
    if want.any() and record_steps < int(M[want, M_STEPS].max()):
        raise ValueError("record_steps is smaller than the longest recorded manoeuvre")
    t0 = time.perf_counter()
    # rows differ in length (manoeuvre durations, early stops): the threads take them one at a time
    chunk = numba.get_parallel_chunksize()
    numba.set_parallel_chunksize(1)
    # a core busy with work run beside (robust.beside) is left to it
    from robust.beside import busy

    threads = numba.get_num_threads()
    numba.set_num_threads(max(1, threads - busy()))
    try:
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
    finally:
        numba.set_parallel_chunksize(chunk)
        numba.set_num_threads(threads)
    if not _LOADED:
        _LOADED = True
        took = time.perf_counter() - t0
        if progress is not None and took > 2.0:
            progress(f"simulation kernel compiled or loaded in {took:.1f} s (cached for later runs on this machine)")
    return out, (rec[: int(want.sum())] if want.any() else None)
