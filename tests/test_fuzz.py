"""Fuzz suite (hypothesis, seeded, under a minute): mutated case files, gain files and output paths.

Property (our own robustness rule, no outside reference): every run ends with exit 0 or 1 and
valid output, or exit 2 with a one-line message; never a traceback; no file outside the named
output is changed.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from robust.cli import main  # noqa: E402
from robust.gains import _toml_value as toml_value  # noqa: E402

SMALL = Path(__file__).resolve().parent / "data" / "small_cart.toml"
BASE = tomllib.loads(SMALL.read_text())
SETTINGS = settings(
    derandomize=True,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    database=None,
)


def _toml_value(v) -> str:
    """Scalars and lists as the gain-file writer spells them; dicts as inline tables (test documents only)."""
    if isinstance(v, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {_toml_value(x)}" for k, x in v.items()) + "}"
    return toml_value(v)


def to_toml(doc: dict) -> str:
    """A minimal TOML writer for test documents (tables of tables and values)."""
    lines: list[str] = []

    def emit(table: dict, path: list[str]) -> None:
        scalars = {k: v for k, v in table.items() if not isinstance(v, dict)}
        subs = {k: v for k, v in table.items() if isinstance(v, dict)}
        if path and (scalars or not subs):
            lines.append("[" + ".".join(json.dumps(p) for p in path) + "]")
        for k, v in scalars.items():
            lines.append(f"{json.dumps(k)} = {_toml_value(v)}")
        for k, v in subs.items():
            emit(v, [*path, k])

    emit(doc, [])
    return "\n".join(lines) + "\n"


def _paths(doc: dict, prefix=()) -> list[tuple]:
    out = []
    for k, v in doc.items():
        out.append((*prefix, k))
        if isinstance(v, dict):
            out += _paths(v, (*prefix, k))
    return out


PATHS = _paths(BASE)
VALUES = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, -1, 1, 1e-300, 1e300, -1e300, 5, 10**12, 2**70]),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.text(max_size=8),
    st.booleans(),
    st.lists(st.floats(allow_nan=False, width=32), max_size=5),
    st.lists(st.lists(st.integers(-5, 5), max_size=5), max_size=3),
    st.dictionaries(st.sampled_from(["low", "high", "x", "kind"]), st.integers(-3, 3), max_size=3),
)


def _mutate(path: tuple, value, delete: bool) -> dict:
    doc = json.loads(json.dumps(BASE))
    node = doc
    for p in path[:-1]:
        node = node[p]
    if delete:
        node.pop(path[-1])
    else:
        node[path[-1]] = value
    return doc


def _run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = main(argv)
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def _assert_clean(code: int, out: str, err: str) -> None:
    assert "Traceback" not in err and "Traceback" not in out
    assert code in (0, 1, 2), (code, err)
    if code == 2:
        lines = [ln for ln in err.splitlines() if ln.startswith("robust: error")]
        assert len(lines) == 1, err


@settings(SETTINGS, max_examples=200)
@given(path=st.sampled_from(PATHS), value=VALUES, delete=st.booleans())
def test_mutated_case_files_model(tmp_path, capsys, path, value, delete):
    case = tmp_path / "case.toml"
    case.write_text(to_toml(_mutate(path, value, delete)))
    code, out, err = _run(["model", str(case), "--json"], capsys)
    _assert_clean(code, out, err)
    if code == 0:
        json.loads(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml"]


@settings(SETTINGS, max_examples=100)
@given(path=st.sampled_from(PATHS), value=VALUES, delete=st.booleans())
def test_mutated_case_files_check(tmp_path, capsys, path, value, delete):
    case = tmp_path / "case.toml"
    case.write_text(to_toml(_mutate(path, value, delete)))
    argv = ["check", str(case), "--samples", "16", "--no-search", "--linear-only", "--quiet", "--json"]
    code, out, err = _run(argv, capsys)
    _assert_clean(code, out, err)
    if code in (0, 1):
        json.loads(out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml"]


GAIN_KEYS = ["name", "origin", "states", "inputs", "matrix", "provenance", "extra"]


@settings(SETTINGS, max_examples=100)
@given(key=st.sampled_from(GAIN_KEYS), value=VALUES, delete=st.booleans())
def test_mutated_gain_files(tmp_path, capsys, key, value, delete):
    gain = {
        "name": "g",
        "origin": "test",
        "states": ["speed", "yaw_rate", "pitch", "pitch_rate"],
        "inputs": ["torque_left", "torque_right"],
        "matrix": [[-5.0, -3.0, -60.0, -10.0], [-5.0, 3.0, -60.0, -10.0]],
        "provenance": {"note": "test data"},
    }
    if delete:
        gain.pop(key, None)
    else:
        gain[key] = value
    path = tmp_path / "g.toml"
    path.write_text(to_toml({"gain": gain}))
    argv = ["check", str(SMALL), "--gain-file", str(path), "--samples", "16", "--no-search", "--linear-only"]
    code, out, err = _run([*argv, "--quiet"], capsys)
    _assert_clean(code, out, err)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["g.toml"]


@settings(SETTINGS, max_examples=150)
@given(
    parts=st.lists(
        st.sampled_from(["", ".", "..", "a", "b", "x.txt", "case.toml", "keep", "sub", "/", "\\x00", "é"]),
        min_size=1,
        max_size=4,
    )
)
def test_output_paths_never_touch_other_files(tmp_path, parts):
    from robust.outputs import OutputError, plan_folder, plan_gain_file

    (tmp_path / "keep").mkdir(exist_ok=True)
    (tmp_path / "keep" / "thesis.tex").write_text("mine")
    (tmp_path / "x.txt").write_text("mine too")
    (tmp_path / "case.toml").write_text("title = 'x'\n")
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    target = tmp_path.joinpath(*[p.replace("\\x00", "_") for p in parts])
    for plan in (plan_folder, plan_gain_file):
        try:
            plan(target, protect=[tmp_path / "case.toml"])
        except OutputError as exc:
            assert str(exc) and "\n" not in str(exc)
    after = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert after == before
