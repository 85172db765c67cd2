"""Plain-JSON rendering of result dataclasses (numbers in SI units).

Numbers stay numbers.  A value that is not a finite number (an infinite
margin, an undefined ratio) becomes ``null`` in place, and the document gets a
top-level list ``non_finite`` that says, for each such place (a JSON Pointer,
RFC 6901), what the value was and what it means, so no information is lost
and every numeric array stays an array of numbers or nulls.
"""

from __future__ import annotations

import dataclasses
import json
import math
from typing import Any

import numpy as np

MEANINGS = {
    "inf": "+infinity: unbounded (for a margin: no crossing, so no limit in that direction)",
    "-inf": "-infinity: unbounded below (for a margin: the requirement cannot be met at all)",
    "nan": "undefined (no value exists for this model, for example no oscillatory mode)",
}


def _pointer(path: tuple) -> str:
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in path)


def to_plain(value: Any, _path: tuple = (), _sink: list | None = None) -> Any:
    """Convert dataclasses, arrays and complex numbers to JSON-ready values.

    Complex numbers become ``{"re": .., "im": ..}``; non-finite floats become
    ``None`` and, when ``_sink`` is a list, are recorded there as
    ``(JSON Pointer, "inf" | "-inf" | "nan")``.
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_plain(getattr(value, f.name), (*_path, f.name), _sink) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): to_plain(v, (*_path, str(k)), _sink) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_plain(v, (*_path, i), _sink) for i, v in enumerate(value)]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "biu" or (value.dtype.kind == "f" and bool(np.all(np.isfinite(value)))):
            return value.tolist()  # plain Python numbers already: no per-element conversion needed
        return to_plain(value.tolist(), _path, _sink)
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (complex, np.complexfloating)):
        return {
            "re": to_plain(float(value.real), (*_path, "re"), _sink),
            "im": to_plain(float(value.imag), (*_path, "im"), _sink),
        }
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if math.isfinite(f):
            return f
        if _sink is not None:
            _sink.append((_pointer(_path), "nan" if math.isnan(f) else ("inf" if f > 0 else "-inf")))
        return None
    return value


def plain_document(value: Any) -> Any:
    """:func:`to_plain`, plus the top-level ``non_finite`` list when ``value`` renders as an object."""
    sink: list = []
    doc = to_plain(value, (), sink)
    if isinstance(doc, dict):
        doc["non_finite"] = [{"path": p, "value": v, "meaning": MEANINGS[v]} for p, v in sink]
    return doc


def dumps(value: Any) -> str:
    """Stable JSON text (sorted keys, two-space indent, trailing newline); strict JSON (no NaN or Infinity)."""
    return json.dumps(plain_document(value), indent=2, sort_keys=True, allow_nan=False) + "\n"


def restore_non_finite(doc: Any) -> Any:
    """The inverse of :func:`plain_document` for a reader: put ``inf``, ``-inf`` and ``nan`` back at the places
    ``doc["non_finite"]`` lists (in place; returns ``doc``)."""
    if not isinstance(doc, dict):
        return doc
    for entry in doc.get("non_finite", []):
        parts = [p.replace("~1", "/").replace("~0", "~") for p in entry["path"].split("/")[1:]]
        if not parts:
            continue
        node = doc
        for p in parts[:-1]:
            node = node[int(p)] if isinstance(node, list) else node[p]
        last = parts[-1]
        value = float(entry["value"])
        if isinstance(node, list):
            node[int(last)] = value
        else:
            node[last] = value
    return doc
