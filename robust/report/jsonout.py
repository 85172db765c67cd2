"""Plain-JSON rendering of result dataclasses, in SI units with unit-suffixed keys.

Numbers stay numbers.  A value that is not a finite number (an infinite
margin, an undefined ratio) becomes ``null`` in place, and the document gets a
top-level list ``non_finite`` that says, for each such place (a JSON Pointer,
RFC 6901), what the value was and what it means, so no information is lost
and every numeric array stays an array of numbers or nulls.

SI throughout: the in-memory results keep the display units engineers read
(delay margins in ms, angles in degrees); :func:`plain_document` converts
them on the way out.  A key ending in ``_ms`` becomes ``_s`` and one ending in
``_deg`` becomes ``_rad`` (value scaled); a record with a ``unit`` field in
``ms``, ``deg`` or ``deg/s`` has its value fields scaled and its unit rewritten;
per-metric maps (``corner_values``) get the unit suffix in the key.  Gain
levels stay in decibels (``_db``, unit ``dB``): the decibel is accepted for
use with the SI (SI Brochure, 9th edition, Table 8), and a margin in dB is a
difference of levels, which a ratio would not be.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re
from typing import Any

import numpy as np

MEANINGS = {
    "inf": "+infinity: unbounded (for a margin: no crossing, so no limit in that direction)",
    "-inf": "-infinity: unbounded below (for a margin: the requirement cannot be met at all)",
    "nan": "undefined (no value exists for this model, for example no oscillatory mode)",
}


def _pointer(path: tuple) -> str:
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in path)


def to_plain(value: Any, _path: tuple = (), _sink: list | None = None, *, keep_non_finite: bool = False) -> Any:
    """Convert dataclasses, arrays and complex numbers to JSON-ready values.

    Complex numbers become ``{"re": .., "im": ..}``; non-finite floats become
    ``None`` and, when ``_sink`` is a list, are recorded there as
    ``(JSON Pointer, "inf" | "-inf" | "nan")`` (kept as floats when ``keep_non_finite``).
    """
    if keep_non_finite:
        return _to_plain_raw(value)
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


def _to_plain_raw(value: Any) -> Any:
    """:func:`to_plain` keeping non-finite floats as floats (for the unit pass, which may rename keys)."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _to_plain_raw(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): _to_plain_raw(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_to_plain_raw(v) for v in value]
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "biuf":
            return value  # kept whole (a leaf) through the unit pass, never changed in place; listed by _nullify
        return _to_plain_raw(value.tolist())
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (complex, np.complexfloating)):
        return {"re": float(value.real), "im": float(value.imag)}
    if isinstance(value, (float, np.floating)):
        return float(value)
    return value


# display unit -> (SI unit, factor); every conversion is a pure scaling, so margins (differences) stay coherent
SI_UNITS = {"ms": ("s", 1e-3), "deg": ("rad", math.pi / 180.0), "deg/s": ("rad/s", math.pi / 180.0)}
# key suffix -> (SI suffix, factor)
SI_SUFFIXES = {"_ms": ("_s", 1e-3), "_deg": ("_rad", math.pi / 180.0)}
# key suffix for a unit, used where a map is keyed by metric name (corner_values)
UNIT_SUFFIX = {
    "1/s": "_per_s",
    "s": "_s",
    "rad": "_rad",
    "rad/s": "_rad_s",
    "dB": "_db",
    "-": "",
    "N m": "_n_m",
    "A": "_a",
    "m/s": "_m_s",
    "models": "",
}
# quantity keys named without a unit in the in-memory results, and the suffix they get
KEY_SUFFIX = {"decay_rate": "_per_s", "unstable_pole": "_per_s", "torque_limit": "_n_m", "max_frequency": "_rad_s"}
# the fields of a record with a ``unit`` that hold values in that unit (the rest are counts, fractions, points)
VALUE_FIELDS = frozenset(
    {"nominal", "worst", "threshold", "margin", "bound", "value", "median", "percentiles"}
    | {"worst_corner", "worst_sample", "worst_search", "low", "high", "values"}
)
_PERCENTILE = re.compile(r"p\d+(\.\d+)?$")


def _scale(node: Any, factor: float, *, records: bool = True) -> Any:
    """Scale the numbers in ``node`` (a number or a list of them); inside a dict (``records``) only the
    :data:`VALUE_FIELDS` and percentiles, never counts or parameter points."""
    if isinstance(node, bool) or node is None:
        return node
    if isinstance(node, np.ndarray):
        return node if node.dtype.kind == "b" else node.astype(float) * factor
    if isinstance(node, (int, float)):
        return float(node) * factor
    if isinstance(node, list):
        return [_scale(v, factor, records=records) for v in node]
    if isinstance(node, dict) and records:
        return {k: (_scale(v, factor) if k in VALUE_FIELDS or _PERCENTILE.match(k) else v) for k, v in node.items()}
    return node


def to_si(node: Any) -> Any:
    """Rewrite a plain document in SI units with unit-suffixed keys (see the module text)."""
    if isinstance(node, np.ndarray):
        return node
    if isinstance(node, list):
        return [to_si(v) for v in node]
    if not isinstance(node, dict):
        return node
    out: dict = {}
    unit = node.get("unit")
    si = SI_UNITS.get(unit) if isinstance(unit, str) else None
    units_of = {}
    if isinstance(node.get("summaries"), list):
        units_of = {s["name"]: s.get("unit") for s in node["summaries"] if isinstance(s, dict) and "name" in s}
    for key, value in node.items():
        new_key, new_value = key, value
        for suffix, (si_suffix, factor) in SI_SUFFIXES.items():
            if key.endswith(suffix):
                new_key, new_value = key[: -len(suffix)] + si_suffix, _scale(value, factor, records=False)
                break
        if key in KEY_SUFFIX and not isinstance(value, (dict, str)):
            new_key = key + KEY_SUFFIX[key]
        if si is not None and key in VALUE_FIELDS:
            new_value = _scale(value, si[1])
        if si is not None and key == "unit":
            new_value = si[0]
        if key == "corner_values" and isinstance(value, dict) and units_of:
            new_value = {}
            for name, values in value.items():
                u = units_of.get(name)
                conv = SI_UNITS.get(u)
                u_si = conv[0] if conv else u
                new_value[name + UNIT_SUFFIX.get(u_si, "")] = _scale(values, conv[1], records=False) if conv else values
        out[new_key] = to_si(new_value)
    return out


def _word(x: float) -> str:
    return "nan" if math.isnan(x) else ("inf" if x > 0 else "-inf")


def _array(a: np.ndarray, path: tuple, sink: list) -> list:
    """A numeric array as nested lists, its non-finite entries ``None`` and recorded (row-major order)."""
    if a.dtype.kind != "f":
        return a.tolist()
    bad = ~np.isfinite(a)
    if not bad.any():
        return a.tolist()
    for idx in np.argwhere(bad):
        sink.append((_pointer((*path, *map(int, idx))), _word(float(a[tuple(idx)]))))
    obj = a.astype(object)
    obj[bad] = None
    return obj.tolist()


def _nullify(node: Any, path: tuple, sink: list, packed: list | None = None) -> Any:
    if isinstance(node, dict):
        return {k: _nullify(v, (*path, k), sink, packed) for k, v in node.items()}
    if isinstance(node, list):
        return [_nullify(v, (*path, i), sink, packed) for i, v in enumerate(node)]
    if isinstance(node, np.ndarray):
        values = _array(node, path, sink)
        if packed is None or node.size < PACK_MIN_SIZE:
            return values
        packed.append(json.dumps(values, allow_nan=False))  # compact, by the C encoder
        return f"{_TOKEN}{len(packed) - 1}{_TOKEN}"
    if isinstance(node, float) and not math.isfinite(node):
        sink.append((_pointer(path), _word(node)))
        return None
    return node


PACK_MIN_SIZE = 64  # numeric arrays at least this long are written on one line (fast, and easier to scan)
_TOKEN = "\x00robust-array\x00"
_TOKEN_RE = re.compile(r'"\\u0000robust-array\\u0000(\d+)\\u0000robust-array\\u0000"')


def plain_document(value: Any) -> Any:
    """:func:`to_plain` in SI units (:func:`to_si`), plus the top-level ``non_finite`` list when ``value``
    renders as an object."""
    return _document(value, None)


def _document(value: Any, packed: list | None) -> Any:
    sink: list = []
    doc = _nullify(to_si(_to_plain_raw(value)), (), sink, packed)
    if isinstance(doc, dict):
        doc["non_finite"] = [{"path": p, "value": v, "meaning": MEANINGS[v]} for p, v in sink]
    return doc


def dumps(value: Any) -> str:
    """Stable JSON text (sorted keys, two-space indent, trailing newline); strict JSON (no NaN or Infinity).

    Long numeric arrays are written compactly on one line each (the indenting encoder is pure Python and
    took seconds on a dossier's time series); the parsed document is the same as :func:`plain_document`.
    """
    packed: list[str] = []
    text = json.dumps(_document(value, packed), indent=2, sort_keys=True, allow_nan=False)
    seen: list[int] = []

    def put(m: re.Match) -> str:
        seen.append(int(m.group(1)))
        return packed[int(m.group(1))]

    out = _TOKEN_RE.sub(put, text)
    if sorted(seen) != list(range(len(packed))):  # a user string imitating a token: take the slow, plain way
        out = json.dumps(plain_document(value), indent=2, sort_keys=True, allow_nan=False)
    return out + "\n"


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
