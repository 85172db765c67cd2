"""The design dossier: contents, reproducibility, atomic writing, agreement with the check."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from robust.cli import main

CASE = Path(__file__).resolve().parent / "data" / "small_cart.toml"


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """Two dossiers of the same case: the first with its one-core stages run beside in forked processes
    (the default on Linux), the second all in one process (``ROBUST_BESIDE=0``); they must be identical."""
    import os

    base = tmp_path_factory.mktemp("dossier")
    codes = [main(["dossier", str(CASE), "--out", str(base / "a"), "--quiet"])]
    before = os.environ.get("ROBUST_BESIDE")
    os.environ["ROBUST_BESIDE"] = "0"
    try:
        codes.append(main(["dossier", str(CASE), "--out", str(base / "b"), "--quiet"]))
    finally:
        if before is None:
            del os.environ["ROBUST_BESIDE"]
        else:
            os.environ["ROBUST_BESIDE"] = before
    return base / "a", base / "b", codes


def test_files_written(two_runs):
    a, _b, codes = two_runs
    assert codes[0] in (0, 1)
    for name in ("dossier.html", "dossier.pdf", "dossier.md", "results.json", "COMPLETE"):
        assert (a / name).stat().st_size > 0, name
    assert len(list((a / "tables").glob("*.csv"))) >= 10
    assert len(list((a / "figures").glob("*.svg"))) >= 4
    assert (a / "dossier.pdf").read_bytes().startswith(b"%PDF")


def test_same_case_same_seed_identical_tables_and_json(two_runs):
    a, b, _ = two_runs
    assert (a / "results.json").read_bytes() == (b / "results.json").read_bytes()
    names = sorted(p.name for p in (a / "tables").glob("*.csv"))
    assert names == sorted(p.name for p in (b / "tables").glob("*.csv"))
    for n in names:
        assert (a / "tables" / n).read_bytes() == (b / "tables" / n).read_bytes(), n


def test_safety_stamp_and_self_contained_html(two_runs):
    a, _b, _ = two_runs
    md = (a / "dossier.md").read_text()
    html = (a / "dossier.html").read_text()
    for text in (md, html):
        assert "analysis of a model is not a safety case" in text
        assert "restrained" in text and "licensed engineering practice" in text
        assert "no slip" in text
    data = json.loads((a / "results.json").read_text())
    assert data["stamp"]["case_sha256"] in md
    assert set(data["stamp"]["packages"]) >= {"numpy", "scipy", "control", "cvxpy", "clarabel", "matplotlib"}
    assert "<svg" in html and 'src="http' not in html and 'href="http' not in html


def test_dossier_numbers_equal_check_numbers(two_runs, capsys):
    a, _b, _ = two_runs
    results = json.loads((a / "results.json").read_text())
    dossier = results["check"]
    main(["check", str(CASE), "--json", "--quiet"])
    full = json.loads(capsys.readouterr().out)
    check = full["check"]
    by_name = {g["gain"]["name"]: g for g in dossier["gains"]}
    for g in check["gains"]:
        d = by_name[g["gain"]["name"]]
        assert d["summaries"] == g["summaries"]
        assert d["verdicts"] == g["verdicts"]
    # one overall verdict per gain set, the same in the dossier and in the check command
    overall = {v["gain"]: v for v in results["verdicts"]}
    for v in full["verdicts"]:
        assert overall[v["gain"]]["status"] == v["status"]
        assert overall[v["gain"]]["outcomes"] == v["outcomes"]


def test_failed_run_keeps_previous_dossier(two_runs, monkeypatch, tmp_path):
    import shutil

    import robust.report.dossier as rd

    a, _b, _ = two_runs
    target = tmp_path / "keep"
    shutil.copytree(a, target)
    before = {p.relative_to(target): p.read_bytes() for p in target.rglob("*") if p.is_file()}

    def boom(*args, **kwargs):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(rd, "render_pdf", boom)
    assert main(["dossier", str(CASE), "--out", str(target), "--quiet", "--no-synthesis"]) == 3
    after = {p.relative_to(target): p.read_bytes() for p in target.rglob("*") if p.is_file()}
    assert after == before
    assert [p.name for p in tmp_path.iterdir()] == ["keep"]  # no half-written folder left beside it


def test_bad_case_exits_2_and_writes_nothing(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text('title = "x"\n')
    out = tmp_path / "out"
    assert main(["dossier", str(bad), "--out", str(out)]) == 2
    assert "missing table 'vehicle'" in capsys.readouterr().err
    assert not out.exists()


def test_dossier_text_has_no_internal_names(two_runs):
    """Plain words in the reviewer's documents: no internal symbols, Python literals or raw solver states."""
    import re

    a, _b, _ = two_runs
    for name in ("dossier.md", "dossier.html"):
        text = (a / name).read_text()
        # the appendix holds the input files verbatim (TOML arrays included): judged on the tool's own words
        text = re.sub(r"Appendix: the inputs, verbatim.*?(?=Figures)", "", text, flags=re.S)
        assert "Appendix" not in text
        for pattern in (r"\bm11\b", r"\bc_b\b", r"\bTrue\b", r"\bFalse\b", "optimal_inaccurate", r"\[\s*-?\d+\.\d+,"):
            assert not re.search(pattern, text), (name, pattern)
    assert (a / ".robust-dossier").is_file()


def test_results_validate_against_the_published_schema(two_runs):
    """results.json validates against robust/report/results.schema.json (jsonschema, Draft 2020-12)."""
    from importlib import resources

    import jsonschema

    a, _b, _ = two_runs
    schema = json.loads(resources.files("robust.report").joinpath("results.schema.json").read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    data = json.loads((a / "results.json").read_text())
    jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)
    bad = dict(data, verdicts=[dict(data["verdicts"][0], status="MAYBE")])
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, schema, cls=jsonschema.Draft202012Validator)


def test_decision_page_and_the_inputs_kept_verbatim(two_runs):
    """Page 1 names the gain to use (or the closest one, never as recommended); the case file and every gain
    set are in the dossier folder at full precision, with SHA-256 values a reviewer can recompute; no figure
    file exceeds 1 MB."""
    import hashlib

    import numpy as np

    from robust.gains import read_gain_file

    a, _b, _ = two_runs
    md = (a / "dossier.md").read_text()
    assert md.index("## Decision page") < md.index("## Safety cautions")
    data = json.loads((a / "results.json").read_text())
    passing = [v["gain"] for v in data["verdicts"] if v["status"] == "PASS"]
    page1 = md[md.index("## Decision page") : md.index("## Safety cautions")]
    if passing:
        name = page1.split("Recommended gain set: '")[1].split("'")[0]
        assert name in passing
    else:
        assert "Closest gain set (NOT recommended)" in page1 and "Recommended gain set" not in page1
    assert "Sign-off" in page1 and "Reviewer" in page1 and "Open items" in page1
    assert (a / "case.toml").read_bytes() == CASE.read_bytes()
    files = {i["file"]: i for i in data["inputs"]}
    for name, entry in files.items():
        assert hashlib.sha256((a / name).read_bytes()).hexdigest() == entry["sha256"], name
        assert entry["sha256"] in md
    K = {g["gain"]["name"]: np.array(g["gain"]["K"]) for g in data["check"]["gains"]}
    for name, k in K.items():
        g = read_gain_file(a / "gains" / f"{name}.toml")
        np.testing.assert_array_equal(g.K, k)  # full precision, not a rounded table
    assert max(p.stat().st_size for p in (a / "figures").glob("*")) < 1_000_000


def test_previous_dossier_is_compared_and_a_bad_one_refused(two_runs, tmp_path, capsys):
    a, _b, _ = two_runs
    out = tmp_path / "again"
    assert main(["dossier", str(CASE), "--out", str(out), "--quiet", "--no-synthesis", "--previous", str(a)]) in (0, 1)
    md = (out / "dossier.md").read_text()
    assert "Changes since the previous dossier" in md and "Case file unchanged" in md
    assert "(removed)" in md or "no change" in md
    capsys.readouterr()
    bad = tmp_path / "bad"
    assert main(["dossier", str(CASE), "--out", str(bad), "--quiet", "--previous", str(tmp_path / "nowhere")]) == 2
    assert "--previous" in capsys.readouterr().err and not bad.exists()


def test_recommendation_prefers_room_on_the_tightest_requirement():
    """The recommended gain passes everything and has the largest smallest normalised margin; when nothing
    passes, the closest (fewest failures) is returned but flagged as not meeting every requirement."""
    from robust.verdict import Outcome, OverallVerdict, recommend

    def v(name, status, margins):
        outs = tuple(
            Outcome(f"k{i}", f"req {i}", "linear", "pass" if m >= 0 else "fail", "sampled", 1.0, 1.0 + m, m, "1/s", "")
            for i, m in enumerate(margins)
        )
        failing = tuple(o.label for o in outs if o.status == "fail")
        return OverallVerdict(name, status, outs, (), (), failing)

    best, why = recommend([v("a", "PASS", [0.1, 0.5]), v("b", "PASS", [0.3, 0.4]), v("c", "FAIL", [-0.1, 2.0])])
    assert best.gain == "b" and "meets every requirement" in why
    best, why = recommend([v("c", "FAIL", [-0.1, -0.2]), v("d", "FAIL", [-0.5, 1.0])])
    assert best.gain == "d" and "NO gain set meets every requirement" in why


def test_non_finite_values_are_null_with_their_meaning(two_runs):
    """Strict JSON (RFC 8259 has no infinity): every null that stands for a non-finite number is listed with a
    JSON Pointer (RFC 6901) that resolves to it, and numeric arrays hold only numbers or nulls."""
    import math

    from robust.report.jsonout import dumps

    text = dumps({"a": [1.0, math.inf], "b": {"c/d": float("nan")}, "e": -math.inf})
    doc = json.loads(text)
    assert doc["a"] == [1.0, None] and doc["b"] == {"c/d": None} and doc["e"] is None
    assert [(x["path"], x["value"]) for x in doc["non_finite"]] == [("/a/1", "inf"), ("/b/c~1d", "nan"), ("/e", "-inf")]
    a, _b, _ = two_runs
    raw = (a / "results.json").read_text()
    assert "Infinity" not in raw and "NaN" not in raw and '"inf"' not in raw.replace('"value": "inf"', "")
    data = json.loads(raw)

    def resolve(doc, pointer):
        for part in pointer.split("/")[1:]:
            part = part.replace("~1", "/").replace("~0", "~")
            doc = doc[int(part)] if isinstance(doc, list) else doc[part]
        return doc

    for entry in data["non_finite"]:
        assert resolve(data, entry["path"]) is None, entry
    from robust.report.jsonout import restore_non_finite

    back = restore_non_finite(json.loads(text))
    assert back["a"][1] == math.inf and math.isnan(back["b"]["c/d"]) and back["e"] == -math.inf


def test_csv_tables_carry_full_precision_with_flags_in_their_own_columns(two_runs):
    """The CSV files are for computation: every number parses back to the exact value in results.json (not the
    rounded figure the documents show), and a flag shown inside a cell (the worst gain set, the worst corner)
    sits in a column of its own."""
    import csv

    from robust.report.jsonout import SI_UNITS

    a, _b, _ = two_runs
    data = json.loads((a / "results.json").read_text())
    rows = list(csv.reader((a / "tables" / "comparison.csv").open()))
    head = rows[0]
    assert not any("(worst)" in c for r in rows for c in r)
    for g in data["check"]["gains"]:
        col = head.index(g["gain"]["name"])
        for s in g["summaries"]:
            row = next(r for r in rows if r[0].startswith(s["name"] + " ["))
            want = s["worst"]["value"]
            shown_unit = row[0].split(" [", 1)[1].rstrip("]")  # the CSV keeps the document's display unit
            factor = SI_UNITS[shown_unit][1] if shown_unit in SI_UNITS else 1.0
            got = float(row[col]) * factor
            assert (want is None and not np.isfinite(got)) or got == want, (s["name"], row[col], want)
    corners = next(p for p in (a / "tables").glob("*_corners.csv") if not p.name.startswith("open_loop"))
    chead = next(csv.reader(corners.open()))
    assert any(h.endswith(" flag") for h in chead)


def test_results_are_si_with_unit_suffixed_keys(two_runs):
    """SI throughout (SI Brochure, 9th edition: s, rad; dB accepted for use with the SI): display units are
    converted on the way out, values scaled exactly, parameter points untouched; the schema rejects a key in
    a display unit anywhere in the document."""
    import math
    import re
    from importlib import resources

    import jsonschema

    from robust.report.jsonout import plain_document

    doc = plain_document(
        {
            "worst": {"delay_margin_ms": 150.0, "phase_margin_deg": 90.0, "gain_margin_up_db": 6.0},
            "record": {"unit": "deg", "worst": {"value": 180.0, "at": {"payload.mass_kg": 40.0}}, "samples": 30},
            "gain": {
                "summaries": [{"name": "delay_margin", "unit": "ms"}, {"name": "damping", "unit": "-"}],
                "corner_values": {"delay_margin": [100.0, math.inf], "damping": [0.5, 0.7]},
            },
        }
    )
    assert doc["worst"] == {"delay_margin_s": 0.15, "phase_margin_rad": math.pi / 2, "gain_margin_up_db": 6.0}
    assert doc["record"] == {"unit": "rad", "worst": {"value": math.pi, "at": {"payload.mass_kg": 40.0}}, "samples": 30}
    assert doc["gain"]["summaries"][0]["unit"] == "s"
    assert doc["gain"]["corner_values"] == {"delay_margin_s": [0.1, None], "damping": [0.5, 0.7]}
    assert doc["non_finite"][0]["path"] == "/gain/corner_values/delay_margin_s/1"

    a, _b, _ = two_runs
    data = json.loads((a / "results.json").read_text())
    text = json.dumps(data)
    # keys only: identifiers such as the requirement name "max_pitch_deg" are names, their record's unit is SI
    assert not re.search(r'_(ms|deg)": ', text) and '"unit": "ms"' not in text and '"unit": "deg"' not in text
    assert '"unit": "rad"' in text and "delay_margin_s" in text
    schema = json.loads(resources.files("robust.report").joinpath("results.schema.json").read_text())
    data["check"]["gains"][0]["inputs"][0]["worst"]["delay_margin_ms"] = 1.0
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)


def test_sampled_loop_section_and_period_sweep(two_runs):
    """The dossier sets the sampled loop's margins beside the continuous ones and sweeps the sample period;
    the sweep's row at the case's own period repeats the margins table (one computation, two views), and a
    longer period never shows a larger phase margin on this case (more hold delay, common practice)."""
    a, _b, _ = two_runs
    md = (a / "dossier.md").read_text()
    assert "Margins, continuous / sampled (worst)" in md and "Sample period sweep" in md
    data = json.loads((a / "results.json").read_text())
    sweep = data["sampled_loop"]["period_sweep"]
    margins = data["sampled_loop"]["margins"]
    assert set(sweep) == {g["gain"]["name"] for g in data["check"]["gains"]}
    for name, rows in sweep.items():
        at_case = next(r for r in rows if r["period_s"] == data["time"]["sample_period_s"])
        assert at_case["phase_margin_rad"] == min(min(r) for r in margins[name]["phase_margin_rad"])
        corner_rows = [r for r in rows if r["models"] == rows[0]["models"]]  # the sweep runs on the corners
        assert len(corner_rows) >= 4
        pms = [r["phase_margin_rad"] for r in sorted(corner_rows, key=lambda r: r["period_s"])]
        assert all(b <= a_ + 1e-12 for a_, b in zip(pms, pms[1:]))
        assert all(isinstance(r["lost"], list) for r in rows)


def test_tolerance_section_matches_the_check(two_runs):
    """Every gain set gets a tolerance ranking; the failures counted per sub-range of any parameter add up
    to the check's own count of failing samples for that requirement (the same samples, counted apart)."""
    a, _b, _ = two_runs
    md = (a / "dossier.md").read_text()
    assert "## Which tolerance drives each requirement" in md
    data = json.loads((a / "results.json").read_text())
    tol = data["tolerances"]
    assert set(tol) == {g["gain"]["name"] for g in data["check"]["gains"]}
    verdicts = {v["gain"]: {o["key"]: o for o in v["outcomes"]} for v in data["verdicts"]}
    for name, rows in tol.items():
        assert rows
        for r in rows:
            if r["metric"] is None or r["conditional"] is None:
                continue
            cond = r["conditional"]
            assert all(sum(row) == data["check"]["samples"] for row in cond["samples"])
            failing = verdicts[name][r["requirement"]]["failing"]  # "f of n samples"
            assert all(sum(row) == int(failing.split(" of ")[0]) for row in cond["failures"])
            sob = r["sobol"]
            assert sob is None or (len(sob["first_order"]) == len(cond["parameters"]) and sob["evaluations"] > 0)
            # each one-at-a-time cut passes through the worst sample: interpolated there, it gives the worst value
            cuts = r["cuts"]
            names = cond["parameters"]
            for j, name in enumerate(names):
                lo, hi = cond["edges"][j][0], cond["edges"][j][-1]
                pos = (cuts["at"][name] - lo) / (hi - lo)
                got = np.interp(pos, cuts["position"], cuts["values"][j])
                assert got == pytest.approx(cuts["worst"], rel=0.02, abs=1e-9), (name, got, cuts["worst"])


def test_figures_drawn_in_processes_equal_those_drawn_in_one(two_runs):
    """Figures are drawn in forked processes on Linux; each is drawn independently, so the SVG text and the
    PDF's PNG must be the same bytes as when all are drawn in this process (and the same in both runs)."""
    from robust.report import figures as F
    from robust.report.dossier import draw_figures

    a, b, _ = two_runs
    for p in sorted((a / "figures").glob("*.svg")):
        assert p.read_bytes() == (b / "figures" / p.name).read_bytes(), p.name
    w = np.logspace(-1, 2, 40)
    rng = np.random.default_rng(0)
    plan = []
    for k in range(5):
        shapes = {key: np.abs(rng.normal(1.0, 0.3, (6, 2, w.size))) + 0.1 * k for key in ("L", "S", "T")}
        plan.append((f"f{k}", f"figure {k}", lambda shapes=shapes, k=k: F.loop_shape_bands(w, shapes, f"case {k}")))
    one = draw_figures(plan, workers=1)
    two = draw_figures(plan, workers=2)
    assert [f.name for f in one] == [f.name for f in two] == [f"f{k}" for k in range(5)]
    for f, g in zip(one, two):
        assert f.svg == g.svg and f.png == g.png and f.size_in == g.size_in
        assert f.png.startswith(b"\x89PNG")
