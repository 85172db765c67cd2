"""Gain sets: a 2 x 4 state-feedback matrix with a name and its provenance.

The control law is ``u = -K (x - x_ref)`` with ``x = (speed, yaw_rate,
pitch, pitch_rate)`` in SI units and ``u = (torque_left, torque_right)``
[N m].  Gain files are TOML written by :func:`write_gain_file`.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
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


def gain_file_text(gain: GainSet) -> str:
    """TOML text of a gain file."""
    lines = [
        "# Gain set: u = -K (x - x_ref); x = (speed, yaw_rate, pitch, pitch_rate) [SI];",
        "# u = (torque_left, torque_right) [N m].",
        "[gain]",
        f"name = {_toml_value(gain.name)}",
        f"origin = {_toml_value(gain.origin)}",
        f"states = {_toml_value(list(REDUCED_STATES))}",
        f"inputs = {_toml_value(list(INPUTS))}",
        "matrix = [",
        *(f"  {_toml_value(row)}," for row in gain.K.tolist()),
        "]",
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


def atomic_write(path: str | Path, text: str) -> None:
    """Write ``text`` to ``path`` via a temporary file and a rename (never half-written)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_gain_file(path: str | Path, gain: GainSet) -> None:
    """Write a gain file atomically."""
    atomic_write(path, gain_file_text(gain))


def read_gain_file(path: str | Path) -> GainSet:
    """Read a gain file; ``ValueError`` names the key on any problem."""
    path = Path(path)
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise ValueError(f"cannot read gain file {str(path)!r}: {exc.strerror}") from None
    except tomllib.TOMLDecodeError as exc:
        raise ValueError(f"{path}: not valid TOML: {exc}") from None
    g = doc.get("gain")
    if not isinstance(g, dict):
        raise ValueError(f"{path}: missing table 'gain'")
    unknown = set(g) - {"name", "origin", "states", "inputs", "matrix", "provenance"}
    if unknown:
        raise ValueError(f"{path}: unknown key 'gain.{sorted(unknown)[0]}'")
    for key in ("name", "matrix"):
        if key not in g:
            raise ValueError(f"{path}: missing key 'gain.{key}'")
    if tuple(g.get("states", REDUCED_STATES)) != REDUCED_STATES:
        raise ValueError(f"{path}: 'gain.states' must be {list(REDUCED_STATES)}")
    if tuple(g.get("inputs", INPUTS)) != INPUTS:
        raise ValueError(f"{path}: 'gain.inputs' must be {list(INPUTS)}")
    m = g["matrix"]
    ok = (
        isinstance(m, list)
        and len(m) == 2
        and all(isinstance(r, list) and len(r) == 4 for r in m)
        and all(isinstance(x, (int, float)) and not isinstance(x, bool) for r in m for x in r)
    )
    if not ok:
        raise ValueError(f"{path}: 'gain.matrix' expected 2 rows of 4 numbers")
    return GainSet(
        name=str(g["name"]),
        K=np.array(m, dtype=float),
        origin=str(g.get("origin", "file")),
        provenance=dict(g.get("provenance", {})) | {"file": str(path)},
    )
