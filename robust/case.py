"""Case files: reading and validating one design problem from TOML.

A case file names the nominal vehicle and, optionally, ranges on its
parameters.  Every problem in the file is reported as a :class:`CaseError`
naming the key path, the value, the unit and what was expected.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

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
class Case:
    """One validated design problem."""

    title: str
    source: str
    sha256: str
    box: Box

    @property
    def vehicle(self) -> Vehicle:
        """The nominal vehicle."""
        return self.box.vehicle


_GROUPS = {"wheel": Wheel, "chassis": Body, "payload": Body, "drive": Drive}
_OPTIONAL = {"wheel.bearing_friction_n_m_s_per_rad": 0.0}
TOP_KEYS = ("title", "description", "vehicle", "ranges")


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
        for field in names:
            info = PARAMETERS[f"{group}.{field}"]
            values[field] = _number(
                gt,
                field,
                f"vehicle.{group}",
                info.unit,
                default=_OPTIONAL.get(f"{group}.{field}"),
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
        for field in gt:
            name = f"{group}.{field}"
            path = f"ranges.{name}"
            info = PARAMETERS[name]
            tab = _table(gt, field, f"ranges.{group}")
            _check_keys(tab, ["low", "high", "distribution", "mode", "std"], path)
            low = _number(tab, "low", path, info.unit)
            high = _number(tab, "high", path, info.unit)
            dist = _text(tab, "distribution", path, default="uniform")
            nominal = get_parameter(vehicle, name)
            if dist not in DISTRIBUTIONS:
                raise CaseError(
                    f"'{path}.distribution': expected one of {', '.join(DISTRIBUTIONS)}, got {dist!r}"
                )
            if not low < high:
                raise CaseError(
                    f"'{path}': expected low < high [{info.unit}], got low={low:g}, high={high:g}"
                )
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
                    raise CaseError(
                        f"'{path}.mode': expected within [{low:g}, {high:g}] {info.unit}, got {mode:g}"
                    )
            elif "mode" in tab:
                raise CaseError(f"'{path}.mode': only used with a triangular or normal distribution")
            if dist == "normal":
                std = _number(tab, "std", path, info.unit)
                if std <= 0:
                    raise CaseError(f"'{path}.std': expected > 0 [{info.unit}], got {std:g}")
            elif "std" in tab:
                raise CaseError(f"'{path}.std': only used with a normal distribution")
            if name == "payload.mass_kg" and vehicle.payload.mass_kg <= 0:
                raise CaseError(
                    f"'{path}': the nominal payload mass must be > 0 when it has a range, "
                    "because payload inertias scale with the mass"
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
    _check_composite(
        vehicle, {n: pts[:, j] for j, n in enumerate(box.names)}, "ranges (at a corner of the box)"
    )


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
    return Case(title=title, source=source, sha256=digest, box=Box(vehicle, ranges))


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
