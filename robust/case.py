"""Case files: reading and validating one design problem from TOML.

A case file names the nominal vehicle and, optionally, ranges on its
parameters.  Every problem in the file is reported as a :class:`CaseError`
naming the key path, the value, the unit and what was expected.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from robust.simulate import MANOEUVRE_KINDS, Controller, Manoeuvre
from robust.uncertainty import DISTRIBUTIONS, Box, Range
from robust.vehicle import (
    PARAMETERS,
    STANDARD_GRAVITY,
    Body,
    Drive,
    Vehicle,
    Wheel,
    check_physical,
    get_parameter,
    plant_batch,
    vehicle_values,
)


class CaseError(ValueError):
    """A problem in a case file; the message names the key and what was expected."""


@dataclass(frozen=True)
class Study:
    """How the check samples the box (``[study]`` in the case file).

    Attributes
    ----------
    plan
        ``"monte_carlo"``, ``"sobol"``, ``"latin_hypercube"``, ``"grid"`` or ``"corners"``.
    samples
        Number of samples (random and quasi-random plans).
    grid_points
        Points per range (grid plan).
    seed
        Seed of every random choice (samples and the worst-case search).
    confidence
        Confidence level of failure-probability intervals. [-]
    search
        Run the worst-case search inside the box.
    simulation_samples
        Monte Carlo samples (the first of the same random stream) simulated in
        the time domain, in addition to the corners.
    """

    plan: str = "monte_carlo"
    samples: int = 2000
    grid_points: int = 5
    seed: int = 1
    confidence: float = 0.95
    search: bool = True
    simulation_samples: int = 40


@dataclass(frozen=True)
class GainSpec:
    """A candidate gain as written in the case file (resolved by :func:`resolve_gain`)."""

    name: str
    method: str
    data: dict


@dataclass(frozen=True)
class Case:
    """One validated design problem."""

    title: str
    source: str
    sha256: str
    box: Box
    requirements: dict[str, float] = field(default_factory=dict)
    study: Study = field(default_factory=Study)
    gains: tuple[GainSpec, ...] = ()
    controller: Controller = field(default_factory=Controller)
    manoeuvres: tuple[Manoeuvre, ...] = ()
    synthesis: dict = field(default_factory=dict)
    default_manoeuvres: bool = False
    tuning: dict = field(default_factory=dict)
    front: dict = field(default_factory=dict)
    schedule: dict = field(default_factory=dict)  # [schedule]: {"name", "schedule": gains.Schedule}

    @property
    def vehicle(self) -> Vehicle:
        """The nominal vehicle."""
        return self.box.vehicle


_GROUPS = {"wheel": Wheel, "chassis": Body, "payload": Body, "drive": Drive}
_OPTIONAL = {"wheel.bearing_friction_n_m_s_per_rad": 0.0}
TOP_KEYS = (
    "title",
    "description",
    "vehicle",
    "ranges",
    "requirements",
    "study",
    "gains",
    "controller",
    "manoeuvres",
    "synthesis",
    "tuning",
    "front",
    "schedule",
)
SYNTHESIS_KEYS = {
    "name": ("text", None),
    "route": ("text", None),
    "lyapunov": ("text", None),
    "objective": ("text", None),
    "min_decay_rate_per_s": ("1/s", (0.0, None)),
    "min_damping_ratio": ("-", (0.0, 0.99)),
    "max_natural_frequency_rad_s": ("rad/s", (0.0, None)),
    "torque_limit_n_m": ("N m", (0.0, None)),
    "speed_step_m_s": ("m/s", (0.0, None)),
    "yaw_rate_step_rad_s": ("rad/s", (0.0, None)),
    "initial_pitch_deg": ("deg", (0.0, 45.0)),
    "hull_margin": ("-", (0.0, 1.0)),
    "max_speed_error_m_s": ("m/s", (0.0, None)),
    "max_yaw_rate_error_rad_s": ("rad/s", (0.0, None)),
    "max_pitch_deg": ("deg", (0.0, None)),
    "max_pitch_rate_deg_s": ("deg/s", (0.0, None)),
    "max_torque_n_m": ("N m", (0.0, None)),
}
SYNTHESIS_CHOICES = {
    "route": ("moment_box", "sampled_hull"),
    "lyapunov": ("common", "parameter_dependent"),
    "objective": ("gain", "decay", "cost"),
}
REQUIREMENT_UNITS = {
    "min_decay_rate_per_s": ("1/s", 0.0, None),
    "min_damping_ratio": ("-", -1.0, 1.0),
    "max_natural_frequency_rad_s": ("rad/s", 0.0, None),
    "min_gain_margin_db": ("dB", 0.0, None),
    "min_phase_margin_deg": ("deg", 0.0, 180.0),
    "min_delay_margin_ms": ("ms", 0.0, None),
    "min_disk_margin": ("-", 0.0, 2.0),
    "min_multiloop_disk_margin": ("-", 0.0, 2.0),
    "max_wheel_torque_n_m": ("N m", 0.0, None),
    "max_pitch_deg": ("deg", 0.0, 90.0),
    "max_settling_time_s": ("s", 0.0, None),
    "min_speed_step_within_limits_m_s": ("m/s", 0.0, None),
    "min_yaw_rate_step_within_limits_rad_s": ("rad/s", 0.0, None),
}
RENAMED_KEYS = {
    "min_survivable_speed_step_m_s": "min_speed_step_within_limits_m_s",
    "min_survivable_yaw_rate_step_rad_s": "min_yaw_rate_step_within_limits_rad_s",
}
# Work budget (common practice for a 24 GiB machine: the check keeps a few arrays of 8-byte values per
# sample; the budgets keep one run well inside memory and inside a working day).
MAX_SAMPLES = 20_000_000
MAX_GRID_POINTS = 2_000_000
MAX_SIMULATION_SAMPLES = 100_000
MANOEUVRE_KEYS = {
    "speed_step": ("duration_s", "start_s", "speed_m_s"),
    "speed_ramp": ("duration_s", "start_s", "speed_m_s", "ramp_time_s"),
    "yaw_rate_step": ("duration_s", "start_s", "yaw_rate_rad_s"),
    "speed_and_yaw_rate_step": ("duration_s", "start_s", "speed_m_s", "yaw_rate_rad_s"),
    "push": ("duration_s", "start_s", "push_force_n", "push_height_m", "push_duration_s"),
    "tilted_start": ("duration_s", "initial_pitch_deg"),
}
MANOEUVRE_UNITS = {
    "duration_s": "s",
    "start_s": "s",
    "speed_m_s": "m/s",
    "ramp_time_s": "s",
    "yaw_rate_rad_s": "rad/s",
    "push_force_n": "N",
    "push_height_m": "m",
    "push_duration_s": "s",
    "initial_pitch_deg": "deg",
}
GAIN_METHODS = {
    "matrix": ("matrix",),
    "poles": ("poles", "complex_poles"),
    "lqr": (
        "state_weights",
        "input_weights",
        "max_speed_error_m_s",
        "max_yaw_rate_error_rad_s",
        "max_pitch_deg",
        "max_pitch_rate_deg_s",
        "max_torque_n_m",
    ),
    "file": ("path",),
}


def _type_name(value: Any) -> str:
    return {str: "text", bool: "true/false", int: "number", float: "number", dict: "table", list: "list"}.get(
        type(value), type(value).__name__
    )


def _check_keys(table: dict, allowed: tuple[str, ...] | list[str], path: str) -> None:
    for key in table:
        if key not in allowed:
            where = f"{path}.{key}" if path else key
            raise CaseError(f"unknown key '{where}'; expected one of: {', '.join(allowed)}")


def _table(parent: dict, key: str, path: str, *, required: bool = True) -> dict:
    full = f"{path}.{key}" if path else key
    if key not in parent:
        if required:
            raise CaseError(f"missing table '{full}'")
        return {}
    value = parent[key]
    if not isinstance(value, dict):
        raise CaseError(f"'{full}': expected a table, got {_type_name(value)} {value!r}")
    return value


def _number(table: dict, key: str, path: str, unit: str, *, default: float | None = None) -> float:
    full = f"{path}.{key}"
    if key not in table:
        if default is not None:
            return default
        raise CaseError(f"missing key '{full}': expected a number [{unit}]")
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise CaseError(f"'{full}': expected a number [{unit}], got {_type_name(value)} {value!r}")
    if not math.isfinite(value):
        raise CaseError(f"'{full}': expected a finite number [{unit}], got {value!r}")
    return float(value)


def _text(table: dict, key: str, path: str, *, default: str | None = None) -> str:
    full = f"{path}.{key}" if path else key
    if key not in table:
        if default is not None:
            return default
        raise CaseError(f"missing key '{full}': expected text")
    value = table[key]
    if not isinstance(value, str):
        raise CaseError(f"'{full}': expected text, got {_type_name(value)} {value!r}")
    return value


def _vehicle(doc: dict) -> Vehicle:
    vt = _table(doc, "vehicle", "")
    _check_keys(vt, [*_GROUPS, "gravity_m_s2"], "vehicle")
    parts = {}
    for group, cls in _GROUPS.items():
        gt = _table(vt, group, "vehicle")
        names = [n.split(".")[1] for n in PARAMETERS if n.startswith(group + ".")]
        _check_keys(gt, names, f"vehicle.{group}")
        values = {}
        for key in names:
            info = PARAMETERS[f"{group}.{key}"]
            values[key] = _number(
                gt,
                key,
                f"vehicle.{group}",
                info.unit,
                default=_OPTIONAL.get(f"{group}.{key}"),
            )
        parts[group] = cls(**values)
    g = _number(vt, "gravity_m_s2", "vehicle", "m/s^2", default=STANDARD_GRAVITY)
    if g <= 0:
        raise CaseError(f"'vehicle.gravity_m_s2': expected > 0 [m/s^2], got {g:g}")
    vehicle = Vehicle(**parts, gravity_m_s2=g)
    try:
        check_physical(vehicle_values(vehicle), where="vehicle.")
    except ValueError as exc:
        raise CaseError(str(exc)) from None
    _check_composite(vehicle, {}, "vehicle")
    return vehicle


def _check_composite(vehicle: Vehicle, overrides: dict, where: str) -> None:
    plant = plant_batch(vehicle, overrides)
    if np.any(plant.l <= 0):
        raise CaseError(
            f"{where}: the composite centre of mass must lie above the axle "
            f"(got {float(plant.l.min()):g} m); this tool models inverted-pendulum vehicles"
        )


def _ranges(doc: dict, vehicle: Vehicle) -> tuple[Range, ...]:
    rt = _table(doc, "ranges", "", required=False)
    groups = sorted({n.split(".")[0] for n in PARAMETERS})
    _check_keys(rt, groups, "ranges")
    out: list[Range] = []
    for group, gt in rt.items():
        gt = _table(rt, group, "ranges")
        names = [n.split(".")[1] for n in PARAMETERS if n.startswith(group + ".")]
        _check_keys(gt, names, f"ranges.{group}")
        for fname in gt:
            name = f"{group}.{fname}"
            path = f"ranges.{name}"
            info = PARAMETERS[name]
            tab = _table(gt, fname, f"ranges.{group}")
            _check_keys(tab, ["low", "high", "distribution", "mode", "std"], path)
            low = _number(tab, "low", path, info.unit)
            high = _number(tab, "high", path, info.unit)
            dist = _text(tab, "distribution", path, default="uniform")
            nominal = get_parameter(vehicle, name)
            if dist not in DISTRIBUTIONS:
                raise CaseError(f"'{path}.distribution': expected one of {', '.join(DISTRIBUTIONS)}, got {dist!r}")
            if not low < high:
                raise CaseError(f"'{path}': expected low < high [{info.unit}], got low={low:g}, high={high:g}")
            if not low <= nominal <= high:
                raise CaseError(
                    f"'{path}': the nominal value {nominal:g} {info.unit} (vehicle.{name}) must lie "
                    f"within low={low:g} and high={high:g}"
                )
            try:
                check_physical({name: np.array([low, high])}, where="ranges.")
            except ValueError as exc:
                raise CaseError(str(exc)) from None
            mode = std = None
            if dist in ("triangular", "normal"):
                mode = _number(tab, "mode", path, info.unit, default=nominal)
                if not low <= mode <= high:
                    raise CaseError(f"'{path}.mode': expected within [{low:g}, {high:g}] {info.unit}, got {mode:g}")
            elif "mode" in tab:
                raise CaseError(f"'{path}.mode': only used with a triangular or normal distribution")
            if dist == "normal":
                std = _number(tab, "std", path, info.unit)
                if std <= 0:
                    raise CaseError(f"'{path}.std': expected > 0 [{info.unit}], got {std:g}")
            elif "std" in tab:
                raise CaseError(f"'{path}.std': only used with a normal distribution")
            if name == "payload.mass_kg" and vehicle.payload.mass_kg < 1e-3 * high:
                raise CaseError(
                    f"'{path}': the nominal payload mass (vehicle.payload.mass_kg = {vehicle.payload.mass_kg:g} kg) "
                    f"must be at least 1/1000 of the range's high value {high:g} kg when the mass has a range, "
                    "because payload inertias scale with the mass over its nominal value"
                )
            out.append(Range(name, low, high, dist, mode, std))
    _check_inertia_corners(vehicle, out)
    return tuple(out)


def _check_inertia_corners(vehicle: Vehicle, ranges: list[Range]) -> None:
    if not ranges:
        return
    from robust.uncertainty import corners

    box = Box(vehicle, tuple(ranges))
    pts = corners(box)
    values = {n: np.full(len(pts), v) for n, v in vehicle_values(vehicle).items()}
    for j, n in enumerate(box.names):
        values[n] = pts[:, j]
    try:
        check_physical(values, where="ranges (at a corner of the box): ")
    except ValueError as exc:
        raise CaseError(str(exc)) from None
    _check_composite(vehicle, {n: pts[:, j] for j, n in enumerate(box.names)}, "ranges (at a corner of the box)")


def parse_case(text: str, *, source: str = "<text>") -> Case:
    """Validate the TOML text of a case file; raise :class:`CaseError` on any problem."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(f"{source}: not valid TOML: {exc}") from None
    _check_keys(doc, TOP_KEYS, "")
    title = _text(doc, "title", "")
    _text(doc, "description", "", default="")
    vehicle = _vehicle(doc)
    ranges = _ranges(doc, vehicle)
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    study = _study(doc)
    check_study_budget(study, len(ranges))
    ctl = _controller(doc)
    manoeuvres = _manoeuvres(doc, vehicle, ctl)
    defaults = not manoeuvres
    if defaults:
        manoeuvres = default_manoeuvres(vehicle, ctl)
    return Case(
        title=title,
        source=source,
        sha256=digest,
        box=Box(vehicle, ranges),
        requirements=_requirements(doc),
        study=study,
        gains=_gains(doc),
        controller=ctl,
        manoeuvres=manoeuvres,
        synthesis=_synthesis(doc),
        default_manoeuvres=defaults,
        tuning=_tuning(doc),
        front=_front(doc),
        schedule=_schedule(doc, vehicle, ranges),
    )


def _tuning(doc: dict) -> dict:
    """``[tuning]``: ask the dossier for a tuned gain (``name``, ``rounds``, ``evaluations``, ``starts``)."""
    tt = _table(doc, "tuning", "", required=False)
    if "tuning" not in doc:
        return {}
    _check_keys(tt, ["name", "rounds", "evaluations", "starts"], "tuning")
    out: dict = {"name": _text(tt, "name", "tuning", default="tuned")}
    from robust.outputs import OutputError, check_name

    try:
        check_name(out["name"], "tuning.name")
    except OutputError as exc:
        raise CaseError(str(exc)) from None
    out["rounds"] = _integer(tt, "rounds", "tuning", default=3, low=1)
    out["evaluations"] = _integer(tt, "evaluations", "tuning", default=150, low=10)
    if out["rounds"] > 20:
        raise CaseError(f"'tuning.rounds': expected at most 20, got {out['rounds']}")
    if out["evaluations"] > 5000:
        raise CaseError(f"'tuning.evaluations': expected at most 5000, got {out['evaluations']}")
    starts = tt.get("starts", [])
    if not isinstance(starts, list) or not all(isinstance(x, str) for x in starts):
        raise CaseError(f"'tuning.starts': expected a list of gain set names, got {starts!r}")
    names = set(_table(doc, "gains", "", required=False))
    unknown = [x for x in starts if x not in names]
    if unknown:
        raise CaseError(f"'tuning.starts': unknown gain set {unknown[0]!r}; the case defines: {', '.join(names)}")
    out["starts"] = list(starts)
    return out


SCHEDULE_KEYS = ("name", "parameter", "nominal", "measurement_error")
SCHEDULE_CONSTRAINTS = ("torque_limit_n_m", "speed_step_m_s", "yaw_rate_step_rad_s", "initial_pitch_deg")
FIXED_NAME = "best_fixed"  # the schedule study's fixed gain (robust.scheduling)


def _schedule(doc: dict, vehicle: Vehicle, ranges) -> dict:
    """``[schedule]``: a gain scheduled on a measured parameter (``parameter``, ``measurement_error`` in the
    parameter's unit, optional ``nominal`` and ``name``); the dossier sets it beside the best fixed gain."""
    if "schedule" not in doc:
        return {}
    from robust.gains import Schedule
    from robust.outputs import OutputError, check_name
    from robust.synthesis.polytope import SCHEDULABLE
    from robust.vehicle import PARAMETERS

    st = _table(doc, "schedule", "", required=False)
    _check_keys(st, [*SCHEDULE_KEYS, *SCHEDULE_CONSTRAINTS], "schedule")
    name = _text(st, "name", "schedule", default="scheduled")
    try:
        check_name(name, "schedule.name")
    except OutputError as exc:
        raise CaseError(str(exc)) from None
    parameter = _text(st, "parameter", "schedule")
    if parameter not in SCHEDULABLE:
        raise CaseError(
            f"'schedule.parameter': expected one of {', '.join(SCHEDULABLE)} (the measured parameter must be a "
            f"coordinate of the rigorous polytope), got {parameter!r}"
        )
    unit = PARAMETERS[parameter].unit
    found = [r for r in ranges if r.name == parameter]
    if not found:
        raise CaseError(
            f"'schedule.parameter': {parameter!r} has no range under [ranges]; a gain scheduled on a parameter "
            "that does not vary buys nothing"
        )
    rng = found[0]
    error = _number(st, "measurement_error", "schedule", unit)
    if error < 0:
        raise CaseError(f"'schedule.measurement_error': expected >= 0 [{unit}] (a +- bound), got {error:g}")
    if error > rng.high - rng.low:
        raise CaseError(
            f"'schedule.measurement_error': expected at most the range's width {rng.high - rng.low:g} [{unit}] "
            f"(a larger error measures nothing), got {error:g}"
        )
    from robust.vehicle import get_parameter

    nominal = _number(st, "nominal", "schedule", unit, default=get_parameter(vehicle, parameter))
    if not rng.low <= nominal <= rng.high:
        raise CaseError(
            f"'schedule.nominal': expected a value inside the range [{rng.low:g}, {rng.high:g}] [{unit}], got "
            f"{nominal:g}"
        )
    names = set(_table(doc, "gains", "", required=False))
    if "synthesis" in doc:  # the LMI gain's name (default as in design.design)
        names.add(doc["synthesis"].get("name", "lmi"))
    if "tuning" in doc:
        names.add(doc["tuning"].get("name", "tuned"))
    if name in names or name == FIXED_NAME:
        raise CaseError(f"'schedule.name': {name!r} is already the name of a gain set; choose another")
    if f"{name}_tuned" in names:
        raise CaseError(
            f"'schedule.name': the schedule study also names a gain {name + '_tuned'!r}, already a gain set's name; "
            "choose another"
        )
    if FIXED_NAME in names:
        raise CaseError(
            f"'gains.{FIXED_NAME}': with [schedule] the name {FIXED_NAME!r} is taken by the schedule study's best "
            "fixed gain; rename the gain set"
        )
    constraints = {}
    for key in SCHEDULE_CONSTRAINTS:  # the torque ellipsoid of both gains, as in [synthesis]
        if key in st:
            unit, (lo, hi) = SYNTHESIS_KEYS[key]
            v = _number(st, key, "schedule", unit)
            if v <= lo or (hi is not None and v > hi):
                want = f"> {lo:g}" if hi is None else f"in ({lo:g}, {hi:g}]"
                raise CaseError(f"'schedule.{key}': expected {want} [{unit}], got {v:g}")
            constraints[key] = v
    if "torque_limit_n_m" in constraints and len(constraints) == 1:
        raise CaseError(
            "'schedule.torque_limit_n_m': say which motions it must cover with speed_step_m_s, "
            "yaw_rate_step_rad_s and/or initial_pitch_deg"
        )
    if constraints and "torque_limit_n_m" not in constraints:
        raise CaseError(
            f"'schedule.{next(iter(constraints))}': a motion without 'schedule.torque_limit_n_m' bounds nothing"
        )
    return {"name": name, "schedule": Schedule(parameter, nominal, error), "constraints": constraints}


FRONT_KEYS = ("sweep", "objective", "factors", "evaluations")


def _front(doc: dict) -> dict:
    """``[front]``: the trade-off front the dossier draws (``sweep``, ``objective``, ``factors``,
    ``evaluations``); needs ``[tuning]`` (the front starts from the tuned gain)."""
    from robust.verdict import LABELS, STABILITY

    if "front" not in doc:
        return {}
    ft = _table(doc, "front", "", required=False)
    _check_keys(ft, list(FRONT_KEYS), "front")
    if "tuning" not in doc:
        raise CaseError("'front': needs [tuning] in the same case (the front starts from the tuned gain)")
    req = _table(doc, "requirements", "", required=False)
    keys = [k for k in LABELS if k != STABILITY]
    out: dict = {}
    for key in ("sweep", "objective"):
        value = _text(ft, key, "front")
        if value not in LABELS or (key == "sweep" and value == STABILITY):
            raise CaseError(f"'front.{key}': expected a requirement key ({', '.join(keys)}), got {value!r}")
        out[key] = value
    if out["sweep"] not in req:
        raise CaseError(f"'front.sweep': {out['sweep']!r} is not under [requirements]; the front scales its bound")
    if out["sweep"] == out["objective"]:
        raise CaseError("'front.objective': expected a requirement other than front.sweep")
    out["factors"] = _number_list(ft, "factors", "front", "-", None) if "factors" in ft else [0.6, 0.8, 1.0, 1.25, 1.5]
    if not 1 <= len(out["factors"]) <= 12 or min(out["factors"]) <= 0:
        raise CaseError(
            f"'front.factors': expected 1 to 12 positive multipliers of the case bound, got {out['factors']}"
        )
    out["evaluations"] = _integer(ft, "evaluations", "front", default=60, low=10)
    if out["evaluations"] > 2000:
        raise CaseError(f"'front.evaluations': expected at most 2000, got {out['evaluations']}")
    return out


def default_manoeuvres(vehicle: Vehicle, controller: Controller) -> tuple[Manoeuvre, ...]:
    """The manoeuvres a case without ``[manoeuvres]`` gets (shown as defaults in every output).

    A speed step of 1 m/s, a yaw-rate step of 0.5 rad/s (each at most a quarter of what the drive's
    no-load speed allows) and a start tilted by 5 deg (at most a third of the fall angle).
    """
    no_load = vehicle.drive.supply_v / vehicle.drive.back_emf_v_s_per_rad * vehicle.wheel.radius_m
    speed = min(1.0, 0.25 * no_load)
    yaw = min(0.5, 0.25 * no_load / vehicle.wheel.half_track_m)
    tilt = min(np.radians(5.0), controller.fall_angle_rad / 3)
    return (
        Manoeuvre("default speed step", "speed_step", 5.0, start_s=0.2, speed_m_s=float(f"{speed:.3g}")),
        Manoeuvre("default yaw-rate step", "yaw_rate_step", 5.0, start_s=0.2, yaw_rate_rad_s=float(f"{yaw:.3g}")),
        Manoeuvre("default tilted start", "tilted_start", 4.0, initial_pitch_rad=float(tilt)),
    )


def _synthesis(doc: dict) -> dict:
    st = _table(doc, "synthesis", "", required=False)
    _check_keys(st, list(SYNTHESIS_KEYS), "synthesis")
    out: dict = {}
    for key in st:
        unit, bounds = SYNTHESIS_KEYS[key]
        if unit == "text":
            v = _text(st, key, "synthesis")
            choices = SYNTHESIS_CHOICES.get(key)
            if choices and v not in choices:
                raise CaseError(f"'synthesis.{key}': expected one of {', '.join(choices)}, got {v!r}")
            if key == "name" and not v.replace("_", "").replace("-", "").isalnum():
                raise CaseError(f"'synthesis.name': expected letters, digits, '-' or '_', got {v!r}")
            out[key] = v
        else:
            v = _number(st, key, "synthesis", unit)
            lo, hi = bounds
            if v <= lo or (hi is not None and v > hi):
                want = f"> {lo:g}" if hi is None else f"in ({lo:g}, {hi:g}]"
                if key == "min_decay_rate_per_s" and v == 0:
                    out[key] = v
                    continue
                raise CaseError(f"'synthesis.{key}': expected {want} [{unit}], got {v:g}")
            out[key] = v
    cost_keys = [
        k
        for k in (
            "max_speed_error_m_s",
            "max_yaw_rate_error_rad_s",
            "max_pitch_deg",
            "max_pitch_rate_deg_s",
            "max_torque_n_m",
        )
        if k in out
    ]
    if out.get("objective") == "cost" and len(cost_keys) != 5:
        raise CaseError(
            "'synthesis': the cost objective needs the Bryson weights max_speed_error_m_s, "
            "max_yaw_rate_error_rad_s, max_pitch_deg, max_pitch_rate_deg_s and max_torque_n_m"
        )
    if "torque_limit_n_m" in out and not any(
        k in out for k in ("speed_step_m_s", "yaw_rate_step_rad_s", "initial_pitch_deg")
    ):
        raise CaseError(
            "'synthesis.torque_limit_n_m': say which motions it must cover with speed_step_m_s, "
            "yaw_rate_step_rad_s and/or initial_pitch_deg"
        )
    return out


def _requirements(doc: dict) -> dict[str, float]:
    rt = _table(doc, "requirements", "", required=False)
    for old, new in RENAMED_KEYS.items():
        if old in rt:
            raise CaseError(f"'requirements.{old}' was renamed '{new}' (same meaning and unit); rename the key")
    _check_keys(rt, list(REQUIREMENT_UNITS), "requirements")
    out = {}
    for key in rt:
        unit, lo, hi = REQUIREMENT_UNITS[key]
        v = _number(rt, key, "requirements", unit)
        if v < lo or (hi is not None and v > hi):
            want = f">= {lo:g}" if hi is None else f"between {lo:g} and {hi:g}"
            raise CaseError(f"'requirements.{key}': expected {want} [{unit}], got {v:g}")
        out[key] = v
    return out


def _integer(table: dict, key: str, path: str, *, default: int, low: int) -> int:
    full = f"{path}.{key}"
    if key not in table:
        return default
    v = table[key]
    if isinstance(v, bool) or not isinstance(v, int):
        raise CaseError(f"'{full}': expected a whole number, got {_type_name(v)} {v!r}")
    if v < low:
        raise CaseError(f"'{full}': expected >= {low}, got {v}")
    return v


def _study(doc: dict) -> Study:
    from robust.uncertainty import PLANS

    st = _table(doc, "study", "", required=False)
    _check_keys(
        st,
        ["plan", "samples", "grid_points", "seed", "confidence", "worst_case_search", "simulation_samples"],
        "study",
    )
    base = Study()
    plan = _text(st, "plan", "study", default=base.plan)
    if plan not in PLANS:
        raise CaseError(f"'study.plan': expected one of {', '.join(PLANS)}, got {plan!r}")
    confidence = _number(st, "confidence", "study", "-", default=base.confidence)
    if not 0 < confidence < 1:
        raise CaseError(f"'study.confidence': expected a number between 0 and 1, got {confidence:g}")
    search = st.get("worst_case_search", base.search)
    if not isinstance(search, bool):
        raise CaseError(f"'study.worst_case_search': expected true or false, got {search!r}")
    study = Study(
        plan=plan,
        samples=_integer(st, "samples", "study", default=base.samples, low=1),
        grid_points=_integer(st, "grid_points", "study", default=base.grid_points, low=2),
        seed=_integer(st, "seed", "study", default=base.seed, low=0),
        confidence=confidence,
        search=search,
        simulation_samples=_integer(st, "simulation_samples", "study", default=base.simulation_samples, low=0),
    )
    return study


def check_study_budget(study: Study, ranges: int, *, where: str = "study") -> None:
    """Refuse sample counts and grids beyond the work budget, naming the key."""
    if study.seed >= 2**63:
        raise CaseError(f"'{where}.seed': expected below 2^63, got {study.seed}")
    if study.samples > MAX_SAMPLES:
        raise CaseError(
            f"'{where}.samples': {study.samples} is beyond the budget of {MAX_SAMPLES} samples for one run; "
            "split the study or use a campaign"
        )
    if study.simulation_samples > MAX_SIMULATION_SAMPLES:
        raise CaseError(
            f"'{where}.simulation_samples': {study.simulation_samples} is beyond the budget of "
            f"{MAX_SIMULATION_SAMPLES} simulated samples for one run"
        )
    if study.plan == "grid" and ranges and float(study.grid_points) ** ranges > MAX_GRID_POINTS:
        raise CaseError(
            f"'{where}.grid_points': {study.grid_points} points on each of {ranges} ranges make "
            f"{float(study.grid_points) ** ranges:.3g} grid points, beyond the budget of {MAX_GRID_POINTS}"
        )


def _controller(doc: dict) -> Controller:
    ct = _table(doc, "controller", "", required=False)
    _check_keys(ct, ["sample_period_s", "latency_s", "fall_angle_deg", "trim"], "controller")
    base = Controller()
    period = _number(ct, "sample_period_s", "controller", "s", default=base.sample_period_s)
    if not 1e-4 <= period <= 0.1:
        raise CaseError(f"'controller.sample_period_s': expected between 0.0001 and 0.1 [s], got {period:g}")
    latency = _number(ct, "latency_s", "controller", "s", default=base.latency_s)
    if not 0 <= latency <= period:
        raise CaseError(
            f"'controller.latency_s': expected between 0 and the sample period {period:g} [s], got {latency:g}"
        )
    fall = _number(ct, "fall_angle_deg", "controller", "deg", default=float(np.degrees(base.fall_angle_rad)))
    if not 0 < fall < 90:
        raise CaseError(f"'controller.fall_angle_deg': expected between 0 and 90 [deg], got {fall:g}")
    trim = ct.get("trim", base.trim)
    if not isinstance(trim, bool):
        raise CaseError(f"'controller.trim': expected true or false, got {trim!r}")
    return Controller(sample_period_s=period, latency_s=latency, fall_angle_rad=float(np.radians(fall)), trim=trim)


def _manoeuvres(doc: dict, vehicle: Vehicle, controller: Controller) -> tuple[Manoeuvre, ...]:
    mt = _table(doc, "manoeuvres", "", required=False)
    out = []
    no_load = vehicle.drive.supply_v / vehicle.drive.back_emf_v_s_per_rad * vehicle.wheel.radius_m
    for name in mt:
        path = f"manoeuvres.{name}"
        tab = _table(mt, name, "manoeuvres")
        kind = _text(tab, "kind", path)
        if kind not in MANOEUVRE_KINDS:
            raise CaseError(f"'{path}.kind': expected one of {', '.join(MANOEUVRE_KINDS)}, got {kind!r}")
        keys = MANOEUVRE_KEYS[kind]
        _check_keys(tab, ["kind", *keys], path)
        vals = {}
        for key in keys:
            default = 0.0 if key == "start_s" else None
            vals[key] = _number(tab, key, path, MANOEUVRE_UNITS[key], default=default)
        dur = vals["duration_s"]
        if not 0 < dur <= 120:
            raise CaseError(f"'{path}.duration_s': expected between 0 and 120 [s], got {dur:g}")
        if dur < 10 * controller.sample_period_s:
            raise CaseError(f"'{path}.duration_s': expected at least 10 controller periods, got {dur:g} s")
        if not 0 <= vals.get("start_s", 0.0) < dur:
            raise CaseError(
                f"'{path}.start_s': expected between 0 and the duration {dur:g} [s], got {vals['start_s']:g}"
            )
        if "speed_m_s" in vals and abs(vals["speed_m_s"]) >= no_load:
            raise CaseError(
                f"'{path}.speed_m_s': {vals['speed_m_s']:g} m/s is beyond the drive's no-load speed "
                f"{no_load:.3g} m/s (supply / back-EMF constant x wheel radius)"
            )
        if "yaw_rate_rad_s" in vals:
            turn = no_load / vehicle.wheel.half_track_m
            wheel = abs(vals["yaw_rate_rad_s"]) * vehicle.wheel.half_track_m + abs(vals.get("speed_m_s", 0.0))
            if wheel >= no_load:
                raise CaseError(
                    f"'{path}.yaw_rate_rad_s': {vals['yaw_rate_rad_s']:g} rad/s (with the speed step) asks an outer "
                    f"wheel for {wheel:.3g} m/s, beyond the drive's no-load speed {no_load:.3g} m/s; on the spot "
                    f"the drive can turn at most {turn:.3g} rad/s"
                )
        if "push_force_n" in vals and abs(vals["push_force_n"]) > 1e5:
            raise CaseError(f"'{path}.push_force_n': expected at most 1e5 N in size, got {vals['push_force_n']:g}")
        if "push_height_m" in vals and vals["push_height_m"] > 10:
            raise CaseError(f"'{path}.push_height_m': expected at most 10 m, got {vals['push_height_m']:g}")
        for key in ("ramp_time_s", "push_duration_s"):
            if key in vals and vals[key] <= 0:
                raise CaseError(f"'{path}.{key}': expected > 0 [s], got {vals[key]:g}")
        if "push_height_m" in vals and vals["push_height_m"] < 0:
            raise CaseError(f"'{path}.push_height_m': expected >= 0 [m], got {vals['push_height_m']:g}")
        pitch = float(np.radians(vals.pop("initial_pitch_deg", 0.0)))
        if abs(pitch) >= controller.fall_angle_rad:
            raise CaseError(f"'{path}.initial_pitch_deg': must be smaller than the fall angle")
        out.append(Manoeuvre(name=name, kind=kind, initial_pitch_rad=pitch, **vals))
    return tuple(out)


def _number_list(table: dict, key: str, path: str, unit: str, length: int | None) -> list:
    full = f"{path}.{key}"
    v = table[key]
    if not isinstance(v, list) or (length is not None and len(v) != length):
        n = f"{length} " if length else ""
        raise CaseError(f"'{full}': expected a list of {n}numbers [{unit}], got {v!r}")
    for x in v:
        if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
            raise CaseError(f"'{full}': expected finite numbers [{unit}], got {x!r}")
    return [float(x) for x in v]


def _gains(doc: dict) -> tuple[GainSpec, ...]:
    gt = _table(doc, "gains", "", required=False)
    out = []
    for name in gt:
        path = f"gains.{name}"
        tab = _table(gt, name, "gains")
        method = _text(tab, "method", path)
        if method not in GAIN_METHODS:
            raise CaseError(f"'{path}.method': expected one of {', '.join(GAIN_METHODS)}, got {method!r}")
        _check_keys(tab, ["method", *GAIN_METHODS[method]], path)
        data: dict = {}
        if method == "matrix":
            m = tab.get("matrix")
            if not (isinstance(m, list) and len(m) == 2):
                raise CaseError(f"'{path}.matrix': expected 2 rows of 4 numbers (left, right wheel), got {m!r}")
            data["matrix"] = [_number_list({"r": r}, "r", f"{path}.matrix", "SI", 4) for r in m]
        elif method == "poles":
            if "poles" not in tab:
                raise CaseError(f"missing key '{path}.poles': expected a list of real poles [1/s]")
            real = _number_list(tab, "poles", path, "1/s", None)
            pairs = []
            cp = tab.get("complex_poles", [])
            if not isinstance(cp, list):
                raise CaseError(f"'{path}.complex_poles': expected a list of [re, im] pairs [1/s], got {cp!r}")
            for i, pair in enumerate(cp):
                pairs.append(_number_list({"p": pair}, "p", f"{path}.complex_poles[{i}]", "1/s", 2))
            if len(real) + 2 * len(pairs) != 4:
                raise CaseError(
                    f"'{path}': expected 4 closed-loop poles in all (real poles plus 2 per complex pair), "
                    f"got {len(real)} real and {len(pairs)} pairs"
                )
            if any(p >= 0 for p in real) or any(p[0] >= 0 for p in pairs):
                raise CaseError(f"'{path}': every pole must have a negative real part [1/s]")
            data = {"poles": real, "complex_poles": pairs}
        elif method == "lqr":
            direct = "state_weights" in tab or "input_weights" in tab
            bryson = [k for k in GAIN_METHODS["lqr"][2:] if k in tab]
            if direct and bryson:
                raise CaseError(f"'{path}': give either state_weights/input_weights or the max_* keys, not both")
            if direct:
                for key, n in (("state_weights", 4), ("input_weights", 2)):
                    if key not in tab:
                        raise CaseError(f"missing key '{path}.{key}': expected {n} numbers")
                    vals = _number_list(tab, key, path, "SI", n)
                    if any(x < 0 for x in vals) or (key == "input_weights" and any(x <= 0 for x in vals)):
                        raise CaseError(f"'{path}.{key}': weights must be positive, got {vals}")
                    data[key] = vals
            else:
                units = ["m/s", "rad/s", "deg", "deg/s", "N m"]
                for key, unit in zip(GAIN_METHODS["lqr"][2:], units):
                    v = _number(tab, key, path, unit)
                    if v <= 0:
                        raise CaseError(f"'{path}.{key}': expected > 0 [{unit}], got {v:g}")
                    data[key] = v
        else:
            data["path"] = _text(tab, "path", path)
        out.append(GainSpec(name=name, method=method, data=data))
    return tuple(out)


def resolve_gain(case: Case, spec: GainSpec):
    """Turn a gain spec into a :class:`robust.gains.GainSet`.

    Poles are placed and LQR solved on the nominal reduced model.
    """
    from robust.gains import GainSet, read_gain_file
    from robust.linear import reduced_model
    from robust.synthesis.nominal import bryson_from_keys, lqr, place_symmetric

    path = f"gains.{spec.name}"
    nominal = reduced_model(plant_batch(case.vehicle))
    A, B = nominal.A[0], nominal.B[0]
    prov = {"case_sha256": case.sha256, "method": spec.method}
    if spec.method in ("poles", "lqr"):
        from robust.linear import controllability_rank

        rank = int(np.atleast_1d(controllability_rank(nominal.A, nominal.B))[0])
        if rank < 4:  # a fault of the vehicle, not of the gain set: say so
            raise CaseError(
                f"vehicle: the nominal reduced model is controllable only in rank {rank} of 4, so no gain can be "
                f"designed on it ('{path}' needs one); check the [vehicle.*] values"
            )
    try:
        if spec.method == "matrix":
            return GainSet(spec.name, np.array(spec.data["matrix"]), "matrix", prov)
        if spec.method == "poles":
            poles = list(spec.data["poles"])
            for re, im in spec.data["complex_poles"]:
                poles += [complex(re, im), complex(re, -im)]
            K = place_symmetric(A, B, np.array(poles))
            prov["poles"] = [float(p) for p in spec.data["poles"]]
            prov["structure"] = "mirror-symmetric: slowest real pole on the yaw loop, the others on speed and pitch"
            if spec.data["complex_poles"]:
                prov["complex_poles"] = [list(p) for p in spec.data["complex_poles"]]
            return GainSet(spec.name, K, "mirror-symmetric pole placement on the nominal model", prov)
        if spec.method == "lqr":
            if "state_weights" in spec.data:
                Q = np.diag(spec.data["state_weights"])
                R = np.diag(spec.data["input_weights"])
            else:
                w = bryson_from_keys(spec.data)
                Q, R = w["Q"], w["R"]
            K = lqr(A, B, Q, R)["K"]
            prov |= {"state_weights": np.diag(Q).tolist(), "input_weights": np.diag(R).tolist()}
            return GainSet(spec.name, K, "LQR on the nominal model", prov)
        file = Path(spec.data["path"])
        if not file.is_absolute() and case.source not in ("<text>",):
            file = Path(case.source).parent / file
        g = read_gain_file(file)
        return replace(g, name=spec.name)
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise CaseError(f"'{path}': {exc}") from None


def load_case(path: str | Path) -> Case:
    """Read and validate a case file."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise CaseError(f"cannot read case file {str(path)!r}: {exc.strerror}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise CaseError(f"{path}: expected UTF-8 text") from None
    try:
        return parse_case(text, source=str(path))
    except CaseError as exc:
        msg = str(exc)
        if not msg.startswith(str(path)):
            msg = f"{path}: {msg}"
        raise CaseError(msg) from None
