"""Gain sets: a 2 x 4 state-feedback matrix with a name and its provenance.

The control law is ``u = -K (x - x_ref)`` with ``x = (speed, yaw_rate,
pitch, pitch_rate)`` in SI units and ``u = (torque_left, torque_right)``
[N m].  Gain files are TOML written by :func:`write_gain_file`.
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from robust.linear import REDUCED_STATES

INPUTS = ("torque_left", "torque_right")
GAIN_UNITS = ("N m s/m", "N m s/rad", "N m/rad", "N m s/rad")


@dataclass(frozen=True)
class GainSet:
    """A named gain matrix ``K`` (2 x 4) and where it came from."""

    name: str
    K: np.ndarray
    origin: str
    provenance: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        K = np.asarray(self.K, dtype=float)
        if K.shape != (2, 4):
            raise ValueError(f"gain {self.name!r}: expected a 2 x 4 matrix, got shape {K.shape}")
        if not np.all(np.isfinite(K)):
            raise ValueError(f"gain {self.name!r}: matrix has non-finite entries")
        object.__setattr__(self, "K", K)


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if math.isnan(f):
            return "nan"
        if math.isinf(f):
            return "inf" if f > 0 else "-inf"
        return repr(f)
    if isinstance(v, str):
        return json.dumps(v)  # JSON string escapes are valid TOML basic strings
    if isinstance(v, (list, tuple, np.ndarray)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to a gain file")


def _gain_lines(table: str, name: str, origin: str, matrices: dict[str, np.ndarray]) -> list[str]:
    """The table header, name, origin, states, inputs and each named 2 x 4 matrix of a gain file."""
    lines = [
        f"[{table}]",
        f"name = {_toml_value(name)}",
        f"origin = {_toml_value(origin)}",
        f"states = {_toml_value(list(REDUCED_STATES))}",
        f"inputs = {_toml_value(list(INPUTS))}",
    ]
    for key, M in matrices.items():
        lines += [f"{key} = [", *(f"  {_toml_value(row)}," for row in np.asarray(M).tolist()), "]"]
    return lines


def gain_file_text(gain: GainSet) -> str:
    """TOML text of a gain file."""
    lines = [
        "# Gain set: u = -K (x - x_ref); x = (speed, yaw_rate, pitch, pitch_rate) [SI];",
        "# u = (torque_left, torque_right) [N m].",
        *_gain_lines("gain", gain.name, gain.origin, {"matrix": gain.K}),
        "",
        "[gain.provenance]",
    ]
    for key in sorted(gain.provenance):
        value = gain.provenance[key]
        if isinstance(value, dict):
            continue
        lines.append(f"{key} = {_toml_value(value)}")
    for key in sorted(gain.provenance):
        value = gain.provenance[key]
        if isinstance(value, dict):
            lines += ["", f"[gain.provenance.{key}]"]
            lines += [f"{k} = {_toml_value(v)}" for k, v in sorted(value.items())]
    return "\n".join(lines) + "\n"


def write_gain_file(path: str | Path, gain: GainSet) -> None:
    """Write a gain file atomically."""
    from robust.outputs import atomic_write_text

    atomic_write_text(path, gain_file_text(gain))


def read_gain_file(path: str | Path) -> GainSet:
    """Read a gain file; ``ValueError`` names the key on any problem."""
    path = Path(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise ValueError(f"cannot read gain file {str(path)!r}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ValueError(f"{path}: gain file expected UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"{path}: gain file is not valid TOML: {exc}") from None
    g = doc.get("gain")
    if not isinstance(g, dict):
        raise ValueError(f"{path}: missing table 'gain'")
    unknown = set(g) - {"name", "origin", "states", "inputs", "matrix", "provenance"}
    if unknown:
        raise ValueError(f"{path}: unknown key 'gain.{sorted(unknown)[0]}'")
    for key in ("name", "origin", "states", "inputs", "matrix"):
        if key not in g:
            raise ValueError(
                f"{path}: missing key 'gain.{key}' (a gain file needs name, origin, states, inputs, matrix)"
            )
    for key in ("name", "origin"):
        if key in g and not isinstance(g[key], str):
            raise ValueError(f"{path}: 'gain.{key}' expected text, got {g[key]!r}")
    from robust.outputs import OutputError, check_name

    try:
        check_name(g["name"], "gain.name")
    except OutputError as exc:
        raise ValueError(f"{path}: {exc}") from None
    for key, want in (("states", REDUCED_STATES), ("inputs", INPUTS)):
        if key in g and (not isinstance(g[key], list) or tuple(g[key]) != want):
            raise ValueError(f"{path}: 'gain.{key}' must be the list {list(want)}, got {g[key]!r}")
    if "provenance" in g and not isinstance(g["provenance"], dict):
        raise ValueError(f"{path}: 'gain.provenance' expected a table, got {g['provenance']!r}")
    m = g["matrix"]
    ok = (
        isinstance(m, list)
        and len(m) == 2
        and all(isinstance(r, list) and len(r) == 4 for r in m)
        and all(isinstance(x, (int, float)) and not isinstance(x, bool) for r in m for x in r)
    )
    if not ok or not all(math.isfinite(x) for r in m for x in r):
        raise ValueError(f"{path}: 'gain.matrix' expected 2 rows of 4 finite numbers, got {m!r}")
    return GainSet(
        name=str(g["name"]),
        K=np.array(m, dtype=float),
        origin=str(g.get("origin", "file")),
        provenance=dict(g.get("provenance", {})) | {"file": str(path)},
    )


@dataclass(frozen=True)
class Schedule:
    """A measured parameter the gain is scheduled on, with the measurement's error bound.

    Attributes
    ----------
    parameter
        The measured parameter's name (``"payload.mass_kg"``). [-]
    nominal
        The value at which the scheduled gain equals its base gain ``K0``. [unit of the parameter]
    error
        The measured value is within ``+-error`` of the true one. [unit of the parameter]
    """

    parameter: str
    nominal: float
    error: float

    def __post_init__(self) -> None:
        if not (math.isfinite(self.nominal) and math.isfinite(self.error) and self.error >= 0):
            raise ValueError(
                f"schedule on {self.parameter!r}: expected a finite nominal and an error >= 0, "
                f"got {self.nominal!r} and {self.error!r}"
            )


@dataclass(frozen=True)
class ScheduledGain:
    """A gain scheduled on one measured parameter: ``K(p) = K0 + (p_measured - nominal) K1``.

    The control law is ``u = -K(p) (x - x_ref)``; ``K1`` is per unit of the
    parameter (``N m s/m per kg`` and so on for the payload mass).
    """

    name: str
    K0: np.ndarray
    K1: np.ndarray
    schedule: Schedule
    origin: str
    provenance: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for key in ("K0", "K1"):
            K = np.asarray(getattr(self, key), dtype=float)
            if K.shape != (2, 4) or not np.all(np.isfinite(K)):
                raise ValueError(f"scheduled gain {self.name!r}: {key} must be a finite 2 x 4 matrix, got {K!r}")
            object.__setattr__(self, key, K)

    def at(self, measured: np.ndarray) -> np.ndarray:
        """The gains ``(n, 2, 4)`` at measured values ``(n,)`` of the scheduling parameter."""
        d = np.asarray(measured, dtype=float) - self.schedule.nominal
        return self.K0[None] + d[:, None, None] * self.K1[None]

    def fixed_part(self, name: str | None = None) -> GainSet:
        """The base gain ``K0`` alone, as a fixed gain set (what the gain is at the nominal measurement)."""
        return GainSet(name or self.name, self.K0, self.origin, dict(self.provenance))


def scheduled_gain_file_text(gain: ScheduledGain) -> str:
    """TOML text of a scheduled gain: ``K0`` (``matrix``), ``K1`` (``slope``) and the schedule.

    Its table is ``[scheduled_gain]``, not ``[gain]``: a scheduled gain is not a fixed gain set, and
    :func:`read_gain_file` refuses it rather than reading ``K0`` alone."""
    s = gain.schedule
    lines = [
        "# Scheduled gain: u = -(K0 + (p_measured - nominal) K1) (x - x_ref);",
        "# x = (speed, yaw_rate, pitch, pitch_rate) [SI]; u = (torque_left, torque_right) [N m];",
        "# K1 per unit of the measured parameter.",
        *_gain_lines("scheduled_gain", gain.name, gain.origin, {"matrix": gain.K0, "slope": gain.K1}),
        "",
        "[scheduled_gain.schedule]",
        f"parameter = {_toml_value(s.parameter)}",
        f"nominal = {_toml_value(s.nominal)}",
        f"measurement_error = {_toml_value(s.error)}",
        "",
        "[scheduled_gain.provenance]",
    ]
    lines += [f"{k} = {_toml_value(v)}" for k, v in sorted(gain.provenance.items()) if not isinstance(v, dict)]
    return "\n".join(lines) + "\n"
