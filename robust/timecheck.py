"""The time-domain check: gain sets through the case's manoeuvres on the nonlinear model.

For each gain set and manoeuvre, the corners of the box plus the first
``study.simulation_samples`` Monte Carlo samples are simulated at once; the
worst of each metric is reported with where it is, with response envelopes
and the worst sample's trace for the dossier.  The largest speed step and
yaw-rate step every model handles (within the drive limits, and without a
fall) are found by bracketing across the batch.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from robust.case import Case, Study
from robust.gains import GainSet
from robust.progress import bar
from robust.simulate import Envelope, Manoeuvre, Trace
from robust.uncertainty import corners, monte_carlo

Progress = Callable[[str], None]

# metric name -> (unit, how to reduce per-wheel values, kind)
TIME_METRICS = {
    "peak_torque_n_m": ("N m", "min"),
    "peak_current_a": ("A", "min"),
    "current_limit_fraction": ("-", "min"),
    "voltage_limit_fraction": ("-", "min"),
    "peak_pitch_deg": ("deg", "min"),
    "peak_pitch_rate_deg_s": ("deg/s", "min"),
    "speed_settling_time_s": ("s", "min"),
    "speed_rise_time_s": ("s", "min"),
    "speed_overshoot": ("-", "min"),
    "speed_final_error_m_s": ("m/s", "min"),
    "yaw_rate_settling_time_s": ("s", "min"),
    "yaw_rate_rise_time_s": ("s", "min"),
    "yaw_rate_overshoot": ("-", "min"),
    "yaw_rate_final_error_rad_s": ("rad/s", "min"),
}


@dataclass(frozen=True)
class TimeWorst:
    """Worst (largest) value of a time-domain metric over the simulated models."""

    name: str
    unit: str
    value: float
    median: float
    at: dict[str, float]


@dataclass(frozen=True)
class ManoeuvreResult:
    """One manoeuvre for one gain set."""

    name: str
    kind: str
    models: int
    fell: int
    first_fall_s: float
    worst: tuple[TimeWorst, ...]
    envelope: Envelope
    worst_trace: Trace
    worst_at: dict[str, float]


@dataclass(frozen=True)
class LargestStep:
    """Largest command step each simulated model handles.

    ``within_limits``: no fall and the current limit never reached;
    ``without_fall``: no fall (the current limit may be reached).
    ``worst*`` are the smallest values over the models, with where they are.
    """

    kind: str
    unit: str
    points: np.ndarray
    within_limits: np.ndarray
    without_fall: np.ndarray
    bounded: np.ndarray
    worst: float
    worst_at: dict[str, float]
    worst_without_fall: float
    worst_without_fall_at: dict[str, float]
    upper: float


@dataclass(frozen=True)
class TimeVerdict:
    """One time-domain requirement; ``margin < 0`` means failed."""

    requirement: str
    threshold: float
    worst: float
    unit: str
    passed: bool
    margin: float
    failures: int
    models: int


@dataclass(frozen=True)
class GainTimeCheck:
    gain: GainSet
    manoeuvres: tuple[ManoeuvreResult, ...]
    largest_steps: tuple[LargestStep, ...]
    verdicts: tuple[TimeVerdict, ...]
    passed: bool


@dataclass(frozen=True)
class TimeCheckResult:
    title: str
    case_sha256: str
    study: Study
    sample_period_s: float
    latency_s: float
    fall_angle_deg: float
    parameter_names: tuple[str, ...]
    models: int
    gains: tuple[GainTimeCheck, ...]
    passed: bool


def simulation_points(case: Case, study: Study) -> np.ndarray:
    """Corners plus the first ``simulation_samples`` Monte Carlo samples of the study's stream."""
    pts = [corners(case.box)]
    if study.simulation_samples and case.box.ranges:
        pts.append(monte_carlo(case.box, study.simulation_samples, study.seed))
    return np.concatenate(pts)


def _reduce(values: np.ndarray) -> np.ndarray:
    return values.max(axis=1) if values.ndim == 2 else values


def _at(names, point):
    return {n: float(v) for n, v in zip(names, point)}


def step_probes(case: Case) -> tuple[tuple[Manoeuvre, float], ...]:
    """The speed-step and yaw-rate-step probes and their amplitude bounds (the drive's no-load speed)."""
    v = case.vehicle
    no_load_wheel = v.drive.supply_v / v.drive.back_emf_v_s_per_rad
    speed = Manoeuvre("largest speed step", "speed_step", 3.0, start_s=0.1, speed_m_s=1.0)
    yaw = Manoeuvre("largest yaw-rate step", "yaw_rate_step", 2.0, start_s=0.1, yaw_rate_rad_s=1.0)
    return (
        (speed, no_load_wheel * v.wheel.radius_m),
        (yaw, no_load_wheel * v.wheel.radius_m / v.wheel.half_track_m),
    )


ENVELOPE_MODELS = 200  # envelopes and traces use the first this-many simulated models of each run set


@dataclass(frozen=True)
class _Runs:
    """One gain set through one manoeuvre on every model (a slice of the flat batch)."""

    metrics: dict
    fell: np.ndarray
    fall_time_s: np.ndarray
    envelope: Envelope | None
    records: np.ndarray | None


def simulate_all(case: Case, gains: list[GainSet], points: np.ndarray, *, progress=None) -> list[list[_Runs]]:
    """Every manoeuvre of every gain set on every model in one kernel call (flat batch gain x manoeuvre x model)."""
    from robust import engine as E
    from robust.simulate import envelope_from_records, manoeuvre_columns, metrics_from_outputs, plant_columns

    ctl = case.controller
    plant = case.box.plant(points)
    n = plant.n
    P0 = plant_columns(plant, ctl)
    record = np.arange(n) < ENVELOPE_MODELS
    Ps, Ks, Ms = [], [], []
    for g in gains:
        for man in case.manoeuvres:
            M = manoeuvre_columns(man, ctl, np.ones(n))
            M[:, E.M_RECORD] = record
            Ps.append(P0)
            Ks.append(np.broadcast_to(g.K, (n, 2, 4)))
            Ms.append(M)
    M_all = np.concatenate(Ms)
    steps = int(M_all[:, E.M_STEPS].max())
    out, rec = E.run_batch(
        np.concatenate(Ps),
        np.concatenate(Ks),
        M_all,
        sample_period_s=ctl.sample_period_s,
        latency_s=ctl.latency_s,
        substeps=ctl.substeps,
        fall_angle_rad=ctl.fall_angle_rad,
        record_steps=steps,
        progress=progress,
    )
    per = int(record.sum())
    result = []
    k = 0
    for _g in gains:
        row = []
        for man in case.manoeuvres:
            sl = slice(k * n, (k + 1) * n)
            mine = rec[k * per : (k + 1) * per, : int(round(man.duration_s / ctl.sample_period_s))]
            row.append(
                _Runs(
                    metrics=metrics_from_outputs(out[sl], M_all[sl], ctl, man.steps_speed, man.steps_yaw_rate),
                    fell=out[sl, E.O["fell"]] > 0,
                    fall_time_s=out[sl, E.O["fall_time"]],
                    envelope=envelope_from_records(mine, ctl.sample_period_s),
                    records=mine,
                )
            )
            k += 1
        result.append(row)
    return result


def largest_steps_all(case: Case, gains: list[GainSet], points: np.ndarray, *, progress=None, advance=None) -> list:
    """For every gain set and both step probes, the largest step of every model: within limits, then without a fall.

    Returns, per gain set, a list of ``(probe, upper, within_limits, without_fall, bounded)``.
    """
    from robust import engine as E
    from robust.simulate import bracket_rows, manoeuvre_columns, plant_columns

    ctl = case.controller
    plant = case.box.plant(points)
    n = plant.n
    P0 = plant_columns(plant, ctl)
    probes = step_probes(case)
    Ps, Ks, Ms, ups = [], [], [], []
    for g in gains:
        for man, upper in probes:
            Ps.append(P0)
            Ks.append(np.broadcast_to(g.K, (n, 2, 4)))
            Ms.append(manoeuvre_columns(man, ctl, np.ones(n), stop=True))
            ups.append(np.full(n, float(upper)))
    P, K, M, up = np.concatenate(Ps), np.concatenate(Ks), np.concatenate(Ms), np.concatenate(ups)
    lo, _hi, bounded = bracket_rows(P, K, M, ctl, upper=up, progress=progress, advance=advance)
    M_fall = M.copy()
    M_fall[:, E.M_STOP] = 0.0
    lo_fall, _hi2, _b = bracket_rows(P, K, M_fall, ctl, upper=up, lower=lo, progress=progress, advance=advance)
    out = []
    k = 0
    for _g in gains:
        row = []
        for man, upper in probes:
            sl = slice(k * n, (k + 1) * n)
            row.append((man, upper, lo[sl].copy(), lo_fall[sl].copy(), bounded[sl].copy()))
            k += 1
        out.append(row)
    return out


def time_check_gain(
    case: Case,
    gain: GainSet,
    points: np.ndarray,
    runs: list[_Runs],
    steps: list,
) -> GainTimeCheck:
    """The time-domain results of one gain set from its simulated runs and largest-step searches."""
    from robust.simulate import simulate, trace_from_records

    names = case.box.names
    ctl = case.controller
    results = []
    all_metrics: dict[str, list[np.ndarray]] = {}
    for man, r in zip(case.manoeuvres, runs):
        n = r.fell.shape[0]
        vals = dict(r.metrics)
        vals["peak_pitch_deg"] = np.degrees(vals.pop("peak_pitch_rad"))
        vals["peak_pitch_rate_deg_s"] = np.degrees(vals.pop("peak_pitch_rate_rad_s"))
        vals.pop("peak_command_n_m")
        vals.pop("reached_current_limit")
        worst = []
        for key, (unit, _kind) in TIME_METRICS.items():
            if key not in vals:
                continue
            v = _reduce(vals[key])
            i = int(np.argmax(v))
            worst.append(TimeWorst(key, unit, float(v[i]), float(np.median(v)), _at(names, points[i])))
            all_metrics.setdefault(key, []).append(v)
        stepped = [
            _reduce(vals[k])
            for k, on in (("speed_settling_time_s", man.steps_speed), ("yaw_rate_settling_time_s", man.steps_yaw_rate))
            if on and k in vals
        ]
        if stepped:  # one value per run: the later of speed and yaw-rate settling
            all_metrics.setdefault("settling_time_s", []).append(np.max(np.stack(stepped), axis=0))
        badness = np.where(r.fell, np.inf, vals["peak_pitch_deg"])
        iw = int(np.argmax(np.where(r.fell, -r.fall_time_s, badness)) if r.fell.any() else np.argmax(badness))
        if r.records is not None and iw < r.records.shape[0]:
            tr = trace_from_records(r.records[iw : iw + 1], ctl.sample_period_s)
        else:
            tr = simulate(case.box.plant(points[iw : iw + 1]), gain.K, man, ctl, trace=True).trace
        fell_any = bool(r.fell.any())
        all_metrics.setdefault("fell", []).append(r.fell.astype(float))
        results.append(
            ManoeuvreResult(
                name=man.name,
                kind=man.kind,
                models=n,
                fell=int(r.fell.sum()),
                first_fall_s=float(r.fall_time_s.min()) if fell_any else float("inf"),
                worst=tuple(worst),
                envelope=r.envelope,
                worst_trace=tr,
                worst_at=_at(names, points[iw]),
            )
        )
    surv = []
    for man, upper, within, without, bounded in steps:
        i = int(np.argmin(within))
        j = int(np.argmin(without))
        amp = man.speed_m_s if man.kind == "speed_step" else man.yaw_rate_rad_s
        unit = "m/s" if man.kind == "speed_step" else "rad/s"
        surv.append(
            LargestStep(
                kind=man.kind,
                unit=unit,
                points=points,
                within_limits=within * amp,
                without_fall=without * amp,
                bounded=bounded,
                worst=float(within[i] * amp),
                worst_at=_at(names, points[i]),
                worst_without_fall=float(without[j] * amp),
                worst_without_fall_at=_at(names, points[j]),
                upper=float(upper),
            )
        )
    verdicts = []
    req = case.requirements
    checks = (
        ("max_wheel_torque_n_m", "peak_torque_n_m", "N m", "max"),
        ("max_pitch_deg", "peak_pitch_deg", "deg", "max"),
        ("max_settling_time_s", None, "s", "max"),
    )
    for key, metric, unit, _kind in checks:
        if key not in req:
            continue
        groups = all_metrics.get(metric or "settling_time_s", [])
        if not groups:
            continue
        v = np.concatenate(groups)
        worst = float(v.max())
        verdicts.append(
            TimeVerdict(
                key,
                req[key],
                worst,
                unit,
                worst <= req[key],
                req[key] - worst,
                int(np.sum(v > req[key])),
                v.size,
            )
        )
    for key, s in (
        ("min_speed_step_within_limits_m_s", surv[0]),
        ("min_yaw_rate_step_within_limits_rad_s", surv[1]),
    ):
        if key in req:
            verdicts.append(
                TimeVerdict(
                    key,
                    req[key],
                    s.worst,
                    s.unit,
                    s.worst >= req[key],
                    s.worst - req[key],
                    int(np.sum(s.within_limits < req[key])),
                    s.within_limits.size,
                )
            )
    if case.manoeuvres:
        falls = np.concatenate(all_metrics["fell"])
        verdicts.append(
            TimeVerdict(
                "no_fall_in_any_manoeuvre",
                0.0,
                float(falls.sum()),
                "models",
                not falls.any(),
                -float(falls.sum()),
                int(falls.sum()),
                falls.size,
            )
        )
    return GainTimeCheck(
        gain=gain,
        manoeuvres=tuple(results),
        largest_steps=tuple(surv),
        verdicts=tuple(verdicts),
        passed=all(v.passed for v in verdicts),
    )


def run_time_check(
    case: Case, gains: list[GainSet], *, study: Study | None = None, progress: Progress | None = None
) -> TimeCheckResult:
    """Time-domain check of every gain set."""
    study = study or case.study
    if not gains:
        raise ValueError("no gain set to simulate: add [gains.NAME] to the case or pass a gain file")
    points = simulation_points(case, study)
    total = 1 + 2 * 5
    with bar(progress, total, f"time-domain check of {len(gains)} gain sets on {len(points)} models") as advance:
        runs = simulate_all(case, gains, points, progress=progress)
        advance(1)
        steps = largest_steps_all(case, gains, points, progress=progress, advance=advance)
    checks = tuple(time_check_gain(case, g, points, runs[i], steps[i]) for i, g in enumerate(gains))
    return TimeCheckResult(
        title=case.title,
        case_sha256=case.sha256,
        study=study,
        sample_period_s=case.controller.sample_period_s,
        latency_s=case.controller.latency_s,
        fall_angle_deg=float(np.degrees(case.controller.fall_angle_rad)),
        parameter_names=case.box.names,
        models=int(points.shape[0]),
        gains=checks,
        passed=all(c.passed for c in checks),
    )
