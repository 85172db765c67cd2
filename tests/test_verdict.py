"""One honest overall verdict: stability always checked, the same verdict in every command, readable screens.

The destabilising gain below is test data: the small cart's placed gain with the pitch and pitch-rate
columns negated, so the pitch loop feeds the fall instead of opposing it. That such a gain makes
the upright equilibrium unstable is a textbook fact of the inverted pendulum on a cart (any
control text, e.g. Ogata, Modern Control Engineering, the inverted-pendulum examples; cited from
memory); here the
linear check itself shows a negative decay rate, which the test asserts first.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from conftest import CASES

from robust.case import load_case, parse_case, resolve_gain
from robust.cli import main

SMALL = Path(__file__).resolve().parent / "data" / "small_cart.toml"


def _no_requirements_case(tmp_path: Path) -> Path:
    text = SMALL.read_text()
    start = text.index("[requirements]")
    end = text.index("[study]")
    text = text[:start] + text[end:]
    text = text[: text.index("[manoeuvres.go]")]  # no manoeuvres either: the defaults must be simulated
    case = parse_case(text)
    K = resolve_gain(case, case.gains[0]).K.copy()
    K[:, 2:] *= -1
    rows = ", ".join("[" + ", ".join(repr(float(x)) for x in row) + "]" for row in K)
    text = text.replace(
        '[gains.placed]\nmethod = "poles"\npoles = [-1.5, -3.0, -8.0, -12.0]\n',
        f'[gains.flipped]\nmethod = "matrix"\nmatrix = [{rows}]\n',
    )
    path = tmp_path / "flipped.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def flipped(tmp_path_factory):
    return _no_requirements_case(tmp_path_factory.mktemp("flipped"))


def test_flipped_gain_fails_in_every_command(flipped, tmp_path, capsys):
    case = load_case(flipped)
    assert not case.requirements and case.default_manoeuvres
    code = main(["check", str(flipped), "--json", "--quiet"])
    data = json.loads(capsys.readouterr().out)
    decay = next(s for s in data["check"]["gains"][0]["summaries"] if s["name"] == "decay_rate")
    assert float(decay["worst"]["value"]) < 0  # the gain really is destabilising
    assert code == 1 and data["verdicts"][0]["status"] == "FAIL"
    assert "closed_loop_stable" in data["verdicts"][0]["failing"]

    assert main(["simulate", str(flipped), "--quiet"]) == 1
    out = capsys.readouterr().out
    assert "Overall verdict for 'flipped': FAIL" in out and "default manoeuvres" in out

    assert main(["synthesize", str(flipped), "--quiet", "--out", str(tmp_path / "g.toml")]) == 1
    out = capsys.readouterr().out
    assert "Overall verdict for 'flipped': FAIL" in out

    assert main(["dossier", str(flipped), "--strict", "--quiet", "--no-synthesis", "--out", str(tmp_path / "d")]) == 1
    results = json.loads((tmp_path / "d" / "results.json").read_text())
    assert results["verdicts"][0]["status"] == "FAIL"
    assert results["verdicts"][0]["outcomes"] == data["verdicts"][0]["outcomes"]


def test_linear_only_is_never_a_pass(capsys):
    code = main(["check", str(SMALL), "--linear-only", "--quiet", "--no-search", "--samples", "50", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    for v in data["verdicts"]:
        assert v["status"] in ("FAIL", "INCOMPLETE")
        assert "no_fall_in_any_manoeuvre" in v["not_evaluated"]


FORBIDDEN = (r"\bm11\b", r"\bc_b\b", r"\bTrue\b", r"\bFalse\b", "optimal_inaccurate", r"\binf\b", r"\bnan\b")


def _screens(case_file: Path, capsys, tmp_path) -> dict[str, str]:
    fast = ["--samples", "200", "--no-search", "--simulation-samples", "0", "--quiet"]
    out = {}
    main(["model", str(case_file)])
    out["model"] = capsys.readouterr().out
    main(["check", str(case_file), *fast])
    out["check"] = capsys.readouterr().out
    main(["check", str(case_file), *fast, "--compare", "--linear-only"])
    out["compare"] = capsys.readouterr().out
    main(["simulate", str(case_file), *fast])
    out["simulate"] = capsys.readouterr().out
    return out


@pytest.mark.parametrize("case_file", ["stand_up_transporter.toml", "delivery_cart.toml"])
def test_screens_fit_100_columns_and_use_plain_words(case_file, capsys, tmp_path):
    for name, text in _screens(CASES / case_file, capsys, tmp_path).items():
        assert text.strip(), name
        wide = [ln for ln in text.splitlines() if len(ln) > 100]
        assert not wide, (name, wide[:2])
        for pattern in FORBIDDEN:
            assert not re.search(pattern, text), (name, pattern)
        # no Python lists of numbers outside tables
        assert not re.search(r"\[\s*-?\d+(\.\d+)?,\s*-?\d", text), name


def test_corner_plan_never_shows_a_probability(capsys):
    main(["check", str(SMALL), "--plan", "corners", "--linear-only", "--quiet", "--no-search"])
    out = capsys.readouterr().out
    assert "failing corners" in out
    block = out[out.index("Linear requirements") :].split("\n\n")[0]
    assert "%" not in block


def test_verdict_line_names_what_fails():
    from robust.verdict import LABELS, Outcome, OverallVerdict

    o = Outcome("max_pitch_deg", LABELS["max_pitch_deg"], "time", "fail", "sampled", 10.0, 12.0, -2.0, "deg", "")
    v = OverallVerdict("g", "FAIL", (o,), ("time domain",), (), ("max_pitch_deg",))
    assert v.line() == "g: FAIL - fails peak pitch" and not v.passed


def test_gain_file_carries_verdict(tmp_path, capsys):
    out = tmp_path / "g.toml"
    main(["synthesize", str(SMALL), "--quiet", "--out", str(out), "--gain", "placed"])
    text = capsys.readouterr().out
    from robust.gains import read_gain_file

    g = read_gain_file(out)
    assert g.provenance["verdict"]["status"] in ("PASS", "FAIL", "INCOMPLETE")
    assert f"Overall verdict for '{g.name}': {g.provenance['verdict']['status']}" in text
    assert "not a safety case" in g.provenance["caution"]
