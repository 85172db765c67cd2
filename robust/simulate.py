"""Batched time-domain simulation of the full nonlinear vehicle with its drives.

One call simulates ``n`` vehicles (leading batch axis) through the same
manoeuvre.  The controller runs at a fixed sample period on the shifted
state ``x - x_ref`` with a computation latency (the new command reaches the
drives ``latency`` after the sample; zero-order hold); the drives clip the
current by the current limit and by the voltage left after back-EMF.  The
plant is integrated with the classical fourth-order Runge-Kutta method on a
fixed step that divides each controller period exactly (the latency instant
is a step boundary).  Metrics are accumulated on the fly, so memory does
not grow with the number of steps; response envelopes (min / median / max
across samples per controller step) are optional.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.linear import reference_shift
from robust.vehicle import Plant

MANOEUVRE_KINDS = (
    "speed_step",
    "speed_ramp",
    "yaw_rate_step",
    "speed_and_yaw_rate_step",
    "push",
    "tilted_start",
)
ENVELOPE_QUANTITIES = ("speed", "yaw_rate", "pitch", "torque_left", "torque_right")
ENVELOPE_UNITS = ("m/s", "rad/s", "rad", "N m", "N m")


@dataclass(frozen=True)
class Controller:
    """The sampled-data balance controller.

    Attributes
    ----------
    sample_period_s
        Controller period. [s]
    latency_s
        Delay from sampling to the new command reaching the drives (0 to one period). [s]
    fall_angle_rad
        Pitch beyond which a sample counts as fallen and stops being integrated. [rad]
    trim
        Add the trim torque that cancels bearing friction at the reference motion.
    substeps
        Runge-Kutta steps per controller period.
    """

    sample_period_s: float = 0.005
    latency_s: float = 0.0
    fall_angle_rad: float = np.radians(45.0)
    trim: bool = True
    substeps: int = 2


@dataclass(frozen=True)
class Manoeuvre:
    """A manoeuvre; every amplitude is multiplied by the per-sample ``scale`` of a run.

    Attributes
    ----------
    name, kind
        Name from the case file; kind from :data:`MANOEUVRE_KINDS`.
    duration_s
        Simulated time. [s]
    start_s
        When the step, ramp or push begins. [s]
    speed_m_s, yaw_rate_rad_s
        Commanded speed and yaw-rate change. [m/s, rad/s]
    ramp_time_s
        Time to reach ``speed_m_s`` (speed ramp). [s]
    push_force_n, push_height_m, push_duration_s
        Horizontal force on the body, its height above the axle, its duration. [N, m, s]
    initial_pitch_rad
        Initial lean (tilted start). [rad]
    """

    name: str
    kind: str
    duration_s: float
    start_s: float = 0.0
    speed_m_s: float = 0.0
    yaw_rate_rad_s: float = 0.0
    ramp_time_s: float = 0.0
    push_force_n: float = 0.0
    push_height_m: float = 0.0
    push_duration_s: float = 0.0
    initial_pitch_rad: float = 0.0

    def reference(self, t: float, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Speed and yaw-rate references at time ``t`` [s], each ``(n,)``."""
        if t < self.start_s:
            frac = 0.0
        elif self.kind == "speed_ramp" and self.ramp_time_s > 0:
            frac = min(1.0, (t - self.start_s) / self.ramp_time_s)
        else:
            frac = 1.0
        v = self.speed_m_s * frac * scale if self.kind != "yaw_rate_step" else 0.0 * scale
        w = (
            self.yaw_rate_rad_s * frac * scale
            if self.kind in ("yaw_rate_step", "speed_and_yaw_rate_step")
            else 0.0 * scale
        )
        return v, w

    def push(self, t: float, scale: np.ndarray):
        """``(force, height)`` acting at time ``t``, or ``None``."""
        if self.kind != "push" or not (self.start_s <= t < self.start_s + self.push_duration_s):
            return None
        return self.push_force_n * scale, np.full_like(scale, self.push_height_m)

    @property
    def steps_speed(self) -> bool:
        return self.kind in ("speed_step", "speed_ramp", "speed_and_yaw_rate_step") and self.speed_m_s != 0

    @property
    def steps_yaw_rate(self) -> bool:
        return self.kind in ("yaw_rate_step", "speed_and_yaw_rate_step") and self.yaw_rate_rad_s != 0


@dataclass(frozen=True)
class Envelope:
    """Per controller step, min / median / max across samples, shape ``(m, q)`` each."""

    t: np.ndarray
    quantities: tuple[str, ...]
    units: tuple[str, ...]
    low: np.ndarray
    median: np.ndarray
    high: np.ndarray


@dataclass(frozen=True)
class Trace:
    """Full record of one sample at every controller step."""

    t: np.ndarray
    state: np.ndarray
    command: np.ndarray
    torque: np.ndarray
    current: np.ndarray
    speed_ref: np.ndarray
    yaw_rate_ref: np.ndarray
    spin: np.ndarray


@dataclass(frozen=True)
class SimResult:
    """Metrics of every sample (arrays ``(n,)`` or ``(n, 2)`` for per-wheel values).

    ``metrics`` maps a metric name to its values; response metrics (rise,
    overshoot) appear only when the manoeuvre steps that quantity.
    """

    manoeuvre: str
    metrics: dict[str, np.ndarray]
    fell: np.ndarray
    fall_time_s: np.ndarray
    envelope: Envelope | None
    trace: Trace | None


def plant_columns(plant: Plant, controller: Controller) -> np.ndarray:
    """The kernel's plant table ``(n, PLANT_COLUMNS)`` (trim gains zero when the trim is off)."""
    from robust import engine as E

    P = np.empty((plant.n, E.PLANT_COLUMNS))
    cols = {
        E.P_R: plant.r,
        E.P_D: plant.d,
        E.P_CB: plant.c_b,
        E.P_ML: plant.Ml,
        E.P_M11: plant.m11,
        E.P_M33: plant.m33,
        E.P_I1: plant.I1,
        E.P_I3: plant.I3,
        E.P_L: plant.l,
        E.P_YW: plant.yaw_wheels,
        E.P_G: plant.g,
        E.P_KT: plant.kt,
        E.P_KTN: plant.kt_nominal,
        E.P_KE: plant.ke,
        E.P_RES: plant.R,
        E.P_V: plant.V,
        E.P_IMAX: plant.imax,
    }
    for j, v in cols.items():
        P[:, j] = v
    if controller.trim:
        shift = reference_shift(plant)
        P[:, E.P_TRIM_V] = shift.trim_per_speed_n_m_s
        P[:, E.P_TRIM_W] = shift.trim_per_yaw_rate_n_m_s
    else:
        P[:, E.P_TRIM_V] = 0.0
        P[:, E.P_TRIM_W] = 0.0
    return P


def manoeuvre_columns(
    manoeuvre: Manoeuvre, controller: Controller, scale: np.ndarray, *, stop: bool = False, record: bool = False
) -> np.ndarray:
    """The kernel's manoeuvre table ``(n, MANOEUVRE_COLUMNS)``: amplitudes times ``scale``."""
    from robust import engine as E

    n = scale.shape[0]
    M = np.zeros((n, E.MANOEUVRE_COLUMNS))
    M[:, E.M_STEPS] = int(round(manoeuvre.duration_s / controller.sample_period_s))
    M[:, E.M_START] = manoeuvre.start_s
    if manoeuvre.kind != "yaw_rate_step":
        M[:, E.M_V] = manoeuvre.speed_m_s * scale
    if manoeuvre.kind in ("yaw_rate_step", "speed_and_yaw_rate_step"):
        M[:, E.M_W] = manoeuvre.yaw_rate_rad_s * scale
    if manoeuvre.kind == "speed_ramp" and manoeuvre.ramp_time_s > 0:
        M[:, E.M_RAMP] = manoeuvre.ramp_time_s
    if manoeuvre.kind == "push":
        M[:, E.M_PUSH_F] = manoeuvre.push_force_n * scale
        M[:, E.M_PUSH_H] = manoeuvre.push_height_m
        M[:, E.M_PUSH_T] = manoeuvre.push_duration_s
    if manoeuvre.kind == "tilted_start":
        M[:, E.M_PITCH0] = manoeuvre.initial_pitch_rad * scale
    M[:, E.M_STOP] = 1.0 if stop else 0.0
    M[:, E.M_RECORD] = 1.0 if record else 0.0
    return M


def _evaluations_per_step(controller: Controller) -> int:
    T, d, sub = controller.sample_period_s, controller.latency_s, controller.substeps
    if d > 0:
        m1 = max(1, int(np.ceil(sub * d / T)))
        return m1 + max(1, sub - m1)
    return sub


def metrics_from_outputs(out: np.ndarray, M: np.ndarray, controller: Controller, steps_speed, steps_yaw) -> dict:
    """Named metrics from the kernel's output table (the recorders' view of a run)."""
    from robust import engine as E

    o = {k: out[:, i] for k, i in E.O.items()}
    fell = o["fell"] > 0
    total = M[:, E.M_STEPS] * _evaluations_per_step(controller)
    both = lambda a, b: np.stack([o[a], o[b]], axis=-1)  # noqa: E731
    at_current = both("at_current_l", "at_current_r")
    metrics = {
        "peak_torque_n_m": both("peak_torque_l", "peak_torque_r"),
        "peak_command_n_m": both("peak_command_l", "peak_command_r"),
        "peak_current_a": both("peak_current_l", "peak_current_r"),
        "current_limit_fraction": at_current / total[:, None],
        "voltage_limit_fraction": both("at_voltage_l", "at_voltage_r") / total[:, None],
        "peak_pitch_rad": o["peak_pitch"],
        "peak_pitch_rate_rad_s": o["peak_pitch_rate"],
        "reached_current_limit": at_current.max(axis=1) > 0,
    }
    for key, p, target, on in (
        ("speed", "sv", M[:, E.M_V], steps_speed),
        ("yaw_rate", "sw", M[:, E.M_W], steps_yaw),
    ):
        unit = "m_s" if key == "speed" else "rad_s"
        final_error = o[f"{p}_final_error"]
        settling = np.where(final_error > o[f"{p}_band"], np.inf, o[f"{p}_last_out"])
        metrics[f"{key}_settling_time_s"] = np.where(fell, np.inf, settling)
        metrics[f"{key}_final_error_{unit}"] = np.where(fell, np.inf, final_error)
        if on:
            t10, t90 = o[f"{p}_t10"], o[f"{p}_t90"]
            rise = np.where(np.isfinite(t90), t90 - np.where(np.isfinite(t10), t10, 0.0), np.inf)
            metrics[f"{key}_rise_time_s"] = np.where(fell, np.inf, rise)
            over = np.where(target != 0, o[f"{p}_extreme"] / np.abs(np.where(target != 0, target, 1.0)) - 1.0, 0.0)
            metrics[f"{key}_overshoot"] = np.where(fell, np.inf, np.maximum(over, 0.0))
    return metrics


def simulate(
    plant: Plant,
    K: np.ndarray,
    manoeuvre: Manoeuvre,
    controller: Controller,
    *,
    scale: np.ndarray | None = None,
    envelope: bool = False,
    trace: bool = False,
    stop_at_current_limit: bool = False,
    progress=None,
) -> SimResult:
    """Simulate ``n`` vehicles through one manoeuvre (one call of the compiled kernel).

    Parameters
    ----------
    plant
        Batch of ``n`` vehicles.
    K
        Gain ``(2, 4)``, or one per vehicle ``(n, 2, 4)``; ``u = -K (x - x_ref)`` plus trim when enabled.
    manoeuvre, controller
        What is commanded and how the controller runs.
    scale
        Per-sample amplitude factor ``(n,)`` (default 1): multiplies the
        manoeuvre's speed, yaw rate, push force and initial pitch.
    envelope, trace
        Record min / median / max across samples per controller step; record
        every step of every sample (use with small ``n`` only).
    stop_at_current_limit
        Stop integrating a sample once it reaches its current limit (marked in
        ``metrics["reached_current_limit"]``); used by the largest-step search.
    """
    from robust import engine as E

    n = plant.n
    scale = np.ones(n) if scale is None else np.broadcast_to(np.asarray(scale, dtype=float), (n,)).copy()
    T = controller.sample_period_s
    Ks = np.broadcast_to(np.asarray(K, dtype=float), (n, 2, 4))
    P = plant_columns(plant, controller)
    M = manoeuvre_columns(manoeuvre, controller, scale, stop=stop_at_current_limit, record=envelope or trace)
    steps = int(M[0, E.M_STEPS]) if n else 0
    out, rec = E.run_batch(
        P,
        Ks,
        M,
        sample_period_s=T,
        latency_s=controller.latency_s,
        substeps=controller.substeps,
        fall_angle_rad=controller.fall_angle_rad,
        record_steps=steps if (envelope or trace) else 0,
        progress=progress,
    )
    metrics = metrics_from_outputs(out, M, controller, manoeuvre.steps_speed, manoeuvre.steps_yaw_rate)
    fell = out[:, E.O["fell"]] > 0
    return SimResult(
        manoeuvre=manoeuvre.name,
        metrics=metrics,
        fell=fell,
        fall_time_s=out[:, E.O["fall_time"]],
        envelope=envelope_from_records(rec, T) if envelope and rec is not None else None,
        trace=trace_from_records(rec, T) if trace and rec is not None else None,
    )


def envelope_from_records(rec: np.ndarray, T: float) -> Envelope:
    """Min / median / max across runs per controller step (speed, yaw rate, pitch, wheel torques)."""
    rows = rec[:, :, [3, 4, 5, 9, 10]]  # (runs, steps, 5)
    return Envelope(
        t=np.arange(rec.shape[1]) * T,
        quantities=ENVELOPE_QUANTITIES,
        units=ENVELOPE_UNITS,
        low=rows.min(axis=0),
        median=np.median(rows, axis=0),
        high=rows.max(axis=0),
    )


def trace_from_records(rec: np.ndarray, T: float) -> Trace:
    """Every controller step of every recorded run."""
    return Trace(
        t=np.arange(rec.shape[1]) * T,
        state=rec[:, :, 0:7],
        command=rec[:, :, 7:9],
        torque=rec[:, :, 9:11],
        current=rec[:, :, 11:13],
        speed_ref=rec[:, :, 13],
        yaw_rate_ref=rec[:, :, 14],
        spin=rec[:, :, 15:17],
    )


STEP_CRITERIA = ("within_limits", "without_fall")


def largest_step(
    plant: Plant,
    K: np.ndarray,
    manoeuvre: Manoeuvre,
    controller: Controller,
    *,
    upper: float,
    criterion: str = "within_limits",
    lower: np.ndarray | None = None,
    rounds: int = 4,
    points_per_round: int = 7,
) -> dict[str, np.ndarray]:
    """Largest amplitude of a manoeuvre each model handles, by bracketing across the batch.

    With ``criterion="within_limits"`` a run is handled when the model does
    not fall and never reaches its current limit; with ``"without_fall"``
    when it does not fall (the current limit may be reached).  ``lower``
    (per model, as a fraction of the manoeuvre's amplitude) is a value known
    to be handled, e.g. the within-limits result when searching without a
    fall.  Each round simulates ``points_per_round`` amplitudes,
    evenly spaced inside every model's current bracket, for all models at
    once (one batch of ``n * points_per_round`` runs); the bracket shrinks to
    the interval below the first failing amplitude, so the bracket width
    after ``r`` rounds is ``upper / (points_per_round + 1)^r``.  If the
    outcome were not monotonic in the amplitude, the result is the
    conservative (smaller) one.

    The manoeuvre is scaled by a per-sample factor; ``upper`` bounds that
    factor (e.g. the drive's no-load speed over the manoeuvre's amplitude).

    Returns
    -------
    dict
        ``"handled"``: largest amplitude known to be handled ``(n,)``, in
        the manoeuvre's unit; ``"failed"``: smallest amplitude known to fail
        (``upper`` times the amplitude if none failed); ``"bounded"``: True
        where ``upper`` itself was handled; ``"fraction"``: ``handled`` as a
        fraction of the manoeuvre's amplitude.
    """
    if criterion not in STEP_CRITERIA:
        raise ValueError(f"criterion: expected one of {', '.join(STEP_CRITERIA)}, got {criterion!r}")
    n = plant.n
    P = plant_columns(plant, controller)
    M = manoeuvre_columns(manoeuvre, controller, np.ones(n), stop=criterion == "within_limits")
    Ks = np.broadcast_to(np.asarray(K, dtype=float), (n, 2, 4))
    lo, hi, top_ok = bracket_rows(
        P,
        Ks,
        M,
        controller,
        upper=np.full(n, float(upper)),
        lower=lower,
        rounds=rounds,
        points_per_round=points_per_round,
    )
    amp = {
        "speed_step": manoeuvre.speed_m_s,
        "speed_ramp": manoeuvre.speed_m_s,
        "speed_and_yaw_rate_step": manoeuvre.speed_m_s,
        "yaw_rate_step": manoeuvre.yaw_rate_rad_s,
        "push": manoeuvre.push_force_n,
        "tilted_start": manoeuvre.initial_pitch_rad,
    }[manoeuvre.kind]
    return {"handled": lo * amp, "failed": hi * amp, "bounded": top_ok, "fraction": lo}


def _scaled_rows(M: np.ndarray, scale: np.ndarray) -> np.ndarray:
    from robust import engine as E

    out = M.copy()
    for c in (E.M_V, E.M_W, E.M_PUSH_F, E.M_PITCH0):
        out[:, c] = M[:, c] * scale
    return out


def _handled(P, Ks, M, controller, scale, progress=None) -> np.ndarray:
    """True where the scaled run is handled (no fall; within limits where the row stops at the limit)."""
    from robust import engine as E

    out, _ = E.run_batch(
        P,
        Ks,
        _scaled_rows(M, scale),
        sample_period_s=controller.sample_period_s,
        latency_s=controller.latency_s,
        substeps=controller.substeps,
        fall_angle_rad=controller.fall_angle_rad,
        progress=progress,
    )
    fell = out[:, E.O["fell"]] > 0
    limit = np.maximum(out[:, E.O["at_current_l"]], out[:, E.O["at_current_r"]]) > 0
    return ~fell & ~(limit & (M[:, E.M_STOP] > 0))


def bracket_rows(
    P: np.ndarray,
    Ks: np.ndarray,
    M: np.ndarray,
    controller: Controller,
    *,
    upper: np.ndarray,
    lower: np.ndarray | None = None,
    rounds: int = 4,
    points_per_round: int = 7,
    progress=None,
    advance=None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The largest-step bracketing on a flat set of rows (any mix of vehicles, gains and probes).

    Row ``i`` is the unit-amplitude probe ``M[i]`` (its ``M_STOP`` column set for the
    within-limits criterion) on vehicle ``P[i]`` with gain ``Ks[i]``; ``upper[i]``
    bounds its amplitude factor.  Every round is one kernel call over all rows
    times ``points_per_round`` amplitudes.  Returns ``(lo, hi, top_ok)`` as
    amplitude factors.

    Rows handled at their upper bound are not simulated again (their result is that bound).
    """
    n = P.shape[0]
    m = points_per_round
    upper = np.asarray(upper, dtype=float)
    lo = np.zeros(n) if lower is None else np.minimum(np.asarray(lower, dtype=float), upper)
    hi = upper.copy()
    top_ok = _handled(P, Ks, M, controller, hi, progress)
    if advance is not None:
        advance(1)
    frac = np.arange(1, m + 1) / (m + 1)
    a = np.flatnonzero(~top_ok)  # a row handled at its upper bound is done (lo = hi = upper)
    rep = np.repeat(a, m)
    Pr, Kr, Mr = P[rep], Ks[rep], M[rep]
    for _ in range(rounds):
        if a.size:
            amps = lo[a, None] + (hi[a] - lo[a])[:, None] * frac[None, :]
            ok = _handled(Pr, Kr, Mr, controller, amps.reshape(-1), progress).reshape(a.size, m)
            first_fail = np.where(~ok.all(axis=1), np.argmin(ok, axis=1), m)
            rows = np.arange(a.size)
            new_lo = np.where(first_fail > 0, amps[rows, np.maximum(first_fail - 1, 0)], lo[a])
            new_hi = np.where(first_fail < m, amps[rows, np.minimum(first_fail, m - 1)], hi[a])
            lo[a], hi[a] = new_lo, new_hi
        if advance is not None:
            advance(1)
    lo = np.where(top_ok, hi, lo)
    return lo, hi, top_ok
