"""Plain-JSON rendering of result dataclasses (numbers in SI units)."""

from __future__ import annotations

import dataclasses
import json
import math
from typing import Any

import numpy as np


def to_plain(value: Any) -> Any:
    """Convert dataclasses, arrays and complex numbers to JSON-ready values.

    Complex numbers become ``{"re": .., "im": ..}``; non-finite floats become
    the strings ``"inf"``, ``"-inf"`` or ``"nan"`` so they are never lost.
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): to_plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "biu" or (value.dtype.kind == "f" and bool(np.all(np.isfinite(value)))):
            return value.tolist()  # plain Python numbers already: no per-element conversion needed
        return to_plain(value.tolist())
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (complex, np.complexfloating)):
        return {"re": to_plain(float(value.real)), "im": to_plain(float(value.imag))}
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if math.isfinite(f):
            return f
        return "nan" if math.isnan(f) else ("inf" if f > 0 else "-inf")
    return value


def dumps(value: Any) -> str:
    """Stable JSON text (sorted keys, two-space indent, trailing newline)."""
    return json.dumps(to_plain(value), indent=2, sort_keys=True) + "\n"
