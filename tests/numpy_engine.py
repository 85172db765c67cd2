"""The numpy time-domain engine, kept as the reference implementation for the tests.

It steps all samples together in Python over controller periods with numpy
calls; the product runs the compiled kernel in :mod:`robust.engine`.  The
tests check that both give the same metrics to 1e-9 relative.  The only
change from the engine the product used before: the share of time at a
limit is counted over the manoeuvre's full duration for every sample.
"""

from __future__ import annotations

import numpy as np

from robust.dynamics import PITCH, PITCH_RATE, SPEED, YAW_RATE, delivered_torque, derivative, drive_output
from robust.linear import REDUCED_INDEX, reference_shift, trim_torque
from robust.simulate import ENVELOPE_QUANTITIES, ENVELOPE_UNITS, Controller, Envelope, Manoeuvre, SimResult, Trace
from robust.vehicle import Plant


def _spin(plant: Plant, x: np.ndarray) -> np.ndarray:
    v, w, thd = x[:, SPEED], x[:, YAW_RATE], x[:, PITCH_RATE]
    return np.stack([(v - plant.d * w) / plant.r - thd, (v + plant.d * w) / plant.r - thd], axis=-1)


class _Response:
    """Online rise / overshoot / settling statistics of one response channel."""

    def __init__(self, n: int, band_floor: float):
        self.band_floor = band_floor
        self.t10 = np.full(n, np.inf)
        self.t90 = np.full(n, np.inf)
        self.extreme = np.zeros(n)
        self.last_out = np.zeros(n)
        self.final_error = np.zeros(n)

    def update(self, t, y, target, start, live):
        sgn = np.sign(target)
        frac = np.where(target != 0, y / np.where(target != 0, target, 1.0), 0.0)
        after = t >= start
        self.t10 = np.where(live & after & (frac >= 0.1) & np.isinf(self.t10), t - start, self.t10)
        self.t90 = np.where(live & after & (frac >= 0.9) & np.isinf(self.t90), t - start, self.t90)
        self.extreme = np.where(live & after, np.maximum(self.extreme, sgn * y), self.extreme)
        band = np.maximum(0.02 * np.abs(target), self.band_floor)
        outside = np.abs(y - target) > band
        self.last_out = np.where(live & outside, np.maximum(t - start, 0.0), self.last_out)
        self.final_error = np.where(live, np.abs(y - target), self.final_error)
        self.band = band

    def settling(self) -> np.ndarray:
        """Time after the start of the last exit from the band; ``inf`` if outside it at the end."""
        return np.where(self.final_error > self.band, np.inf, self.last_out)


def simulate_numpy(
    plant: Plant,
    K: np.ndarray,
    manoeuvre: Manoeuvre,
    controller: Controller,
    *,
    scale: np.ndarray | None = None,
    envelope: bool = False,
    trace: bool = False,
    stop_at_current_limit: bool = False,
) -> SimResult:
    """The numpy reference: same arguments and result as :func:`robust.simulate.simulate` (one ``K``)."""
    n = plant.n
    scale = np.ones(n) if scale is None else np.broadcast_to(np.asarray(scale, dtype=float), (n,)).copy()
    T = controller.sample_period_s
    d = controller.latency_s
    steps = int(round(manoeuvre.duration_s / T))
    sub = controller.substeps
    seg = [(d, max(1, int(np.ceil(sub * d / T))))] if d > 0 else []
    seg.append((T - d, max(1, sub - (seg[0][1] if seg else 0))))

    x = np.zeros((n, 7))
    x[:, PITCH] = manoeuvre.initial_pitch_rad * scale if manoeuvre.kind == "tilted_start" else 0.0
    fell = np.zeros(n, dtype=bool)
    stopped = np.zeros(n, dtype=bool)
    fall_time = np.full(n, np.inf)
    u_prev = np.zeros((n, 2))
    peak_torque = np.zeros((n, 2))
    peak_command = np.zeros((n, 2))
    peak_current = np.zeros((n, 2))
    at_current = np.zeros((n, 2))
    at_voltage = np.zeros((n, 2))
    peak_pitch = np.abs(x[:, PITCH])
    peak_pitch_rate = np.zeros(n)
    speed_resp = _Response(n, 0.02)
    yaw_resp = _Response(n, 0.02)
    counted = 0
    env_rows: list[np.ndarray] = []
    rec: dict[str, list] = {k: [] for k in ("t", "state", "command", "torque", "current", "v", "w", "spin")}
    idx = np.array(REDUCED_INDEX)

    def measure(xx, cmd, live):
        """Drive output at ``xx``; updates the running peaks; returns the output."""
        nonlocal counted
        out = drive_output(plant, cmd, _spin(plant, xx))
        lv = live[:, None]
        np.maximum(peak_torque, np.where(lv, np.abs(out["torque"]), 0.0), out=peak_torque)
        np.maximum(peak_current, np.where(lv, np.abs(out["current"]), 0.0), out=peak_current)
        at_current[:] += lv & out["current_limited"]
        at_voltage[:] += lv & out["voltage_limited"]
        counted += 1
        np.maximum(peak_pitch, np.where(live, np.abs(xx[:, PITCH]), 0.0), out=peak_pitch)
        np.maximum(peak_pitch_rate, np.where(live, np.abs(xx[:, PITCH_RATE]), 0.0), out=peak_pitch_rate)
        return out

    total_evaluations = steps * sum(m for _, m in seg)
    final_v, final_w = manoeuvre.reference(manoeuvre.duration_s + 1.0, scale)
    ktn = plant.kt_nominal[:, None]
    shift = reference_shift(plant) if controller.trim else None
    for k in range(steps):
        t = k * T
        vref, wref = manoeuvre.reference(t, scale)
        xref = np.zeros((n, 4))
        xref[:, 0], xref[:, 1] = vref, wref
        u = -(x[:, idx] - xref) @ K.T
        if controller.trim:
            u = u + trim_torque(plant, vref, wref, shift=shift)
        live = ~fell & ~stopped
        livef = live[:, None].astype(float)
        np.maximum(peak_command, np.where(live[:, None], np.abs(u), 0.0), out=peak_command)
        speed_resp.update(t, x[:, SPEED], final_v, manoeuvre.start_s, live)
        yaw_resp.update(t, x[:, YAW_RATE], final_w, manoeuvre.start_s, live)
        tt = t
        for j, ((length, m), cmd) in enumerate(zip(seg, ([u_prev, u] if d > 0 else [u]))):
            h = length / m
            wanted = cmd / ktn
            for _ in range(m):
                push = manoeuvre.push(tt, scale)
                out = measure(x, cmd, live)
                if j == 0 and _ == 0:
                    if envelope:
                        row = np.stack(
                            [
                                x[:, SPEED],
                                x[:, YAW_RATE],
                                x[:, PITCH],
                                out["torque"][:, 0],
                                out["torque"][:, 1],
                            ],
                            -1,
                        )
                        env_rows.append(np.stack([row.min(0), np.median(row, 0), row.max(0)]))
                    if trace:
                        rec["spin"].append(_spin(plant, x))
                        for key, val in (
                            ("t", t),
                            ("state", x.copy()),
                            ("command", u.copy()),
                            ("torque", out["torque"]),
                            ("current", out["current"]),
                            ("v", vref),
                            ("w", wref),
                        ):
                            rec[key].append(val)

                def f(xx, wanted=wanted, push=push, livef=livef):
                    tau = delivered_torque(plant, wanted, _spin(plant, xx))
                    return derivative(plant, xx, tau, push) * livef

                k1 = derivative(plant, x, out["torque"], push) * livef
                k2 = f(x + 0.5 * h * k1)
                k3 = f(x + 0.5 * h * k2)
                k4 = f(x + h * k3)
                x = x + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
                tt += h
        u_prev = u
        newly = ~fell & (np.abs(x[:, PITCH]) > controller.fall_angle_rad)
        fall_time[newly] = (k + 1) * T
        fell |= newly
        if stop_at_current_limit:
            stopped |= at_current.max(axis=1) > 0
        if (fell | stopped).all():
            break
    live = ~fell & ~stopped
    speed_resp.update(steps * T, x[:, SPEED], final_v, manoeuvre.start_s, live)
    yaw_resp.update(steps * T, x[:, YAW_RATE], final_w, manoeuvre.start_s, live)
    metrics = {
        "peak_torque_n_m": peak_torque,
        "peak_command_n_m": peak_command,
        "peak_current_a": peak_current,
        "current_limit_fraction": at_current / total_evaluations,
        "voltage_limit_fraction": at_voltage / total_evaluations,
        "peak_pitch_rad": peak_pitch,
        "peak_pitch_rate_rad_s": peak_pitch_rate,
        "reached_current_limit": at_current.max(axis=1) > 0,
        "speed_settling_time_s": np.where(fell, np.inf, speed_resp.settling()),
        "speed_final_error_m_s": np.where(fell, np.inf, speed_resp.final_error),
        "yaw_rate_settling_time_s": np.where(fell, np.inf, yaw_resp.settling()),
        "yaw_rate_final_error_rad_s": np.where(fell, np.inf, yaw_resp.final_error),
    }
    for resp, key, on, target in (
        (speed_resp, "speed", manoeuvre.steps_speed, final_v),
        (yaw_resp, "yaw_rate", manoeuvre.steps_yaw_rate, final_w),
    ):
        if on:
            rise = np.where(np.isfinite(resp.t90), resp.t90 - np.where(np.isfinite(resp.t10), resp.t10, 0.0), np.inf)
            metrics[f"{key}_rise_time_s"] = np.where(fell, np.inf, rise)
            over = np.where(target != 0, resp.extreme / np.abs(np.where(target != 0, target, 1.0)) - 1.0, 0.0)
            metrics[f"{key}_overshoot"] = np.where(fell, np.inf, np.maximum(over, 0.0))
    env = None
    if envelope and env_rows:
        arr = np.stack(env_rows)  # (m, 3, q)
        env = Envelope(
            t=np.arange(arr.shape[0]) * T,
            quantities=ENVELOPE_QUANTITIES,
            units=ENVELOPE_UNITS,
            low=arr[:, 0],
            median=arr[:, 1],
            high=arr[:, 2],
        )
    tr = None
    if trace and rec["t"]:
        tr = Trace(
            t=np.array(rec["t"]),
            state=np.stack(rec["state"], 1),
            command=np.stack(rec["command"], 1),
            torque=np.stack(rec["torque"], 1),
            current=np.stack(rec["current"], 1),
            speed_ref=np.stack(rec["v"], 1),
            yaw_rate_ref=np.stack(rec["w"], 1),
            spin=np.stack(rec["spin"], 1),
        )
    return SimResult(
        manoeuvre=manoeuvre.name, metrics=metrics, fell=fell, fall_time_s=fall_time, envelope=env, trace=tr
    )
