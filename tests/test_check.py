"""The check command on the bundled cases."""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import CASES

from robust.analysis.metrics import METRICS
from robust.cli import main


@pytest.fixture(scope="module")
def transporter_json():
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(
            [
                "check",
                str(CASES / "stand_up_transporter.toml"),
                "--json",
                "--samples",
                "600",
                "--quiet",
                "--linear-only",
            ]
        )
    from robust.report.jsonout import restore_non_finite

    full = restore_non_finite(json.loads(buf.getvalue()))
    return code, full["check"] | {"overall": full["verdicts"], "time": full["time"]}


def test_check_runs_two_gain_sets_and_exit_code_follows_verdicts(transporter_json):
    code, data = transporter_json
    names = [g["gain"]["name"] for g in data["gains"]]
    assert names == ["placed", "lqr"]
    assert data["samples"] == 600
    assert data["passed"] == all(v["passed"] for g in data["gains"] for v in g["verdicts"])
    # --linear-only leaves the time domain out: never a PASS, so exit 1 whatever the linear verdicts
    assert data["time"] is None and code == 1
    assert {v["status"] for v in data["overall"]} <= {"FAIL", "INCOMPLETE"}
    for v in data["overall"]:
        assert "no_fall_in_any_manoeuvre" in v["not_evaluated"]


def test_search_is_at_least_as_bad_as_corners_and_samples(transporter_json):
    _, data = transporter_json
    for g in data["gains"]:
        for s in g["summaries"]:
            m = METRICS[s["name"]]
            w = float(s["worst"]["value"])
            for key in ("worst_corner", "worst_sample", "worst_search"):
                if s[key] is None:
                    continue
                v = float(s[key]["value"])
                assert not m.worse(np.array(v), np.array(w)), (s["name"], key)
            if s["worst_search"] is not None:
                ws = float(s["worst_search"]["value"])
                for key in ("worst_corner", "worst_sample"):
                    assert not m.worse(np.array(float(s[key]["value"])), np.array(ws)), (s["name"], key)


def test_verdict_margin_and_interval_consistent(transporter_json):
    _, data = transporter_json
    for g in data["gains"]:
        for v in g["verdicts"]:
            assert v["passed"] == (float(v["margin"]) >= 0)
            lo, hi = v["failure_interval"]
            assert lo <= v["failure_fraction"] <= hi


def test_check_text_and_unknown_gain(capsys):
    base = ["check", str(CASES / "delivery_cart.toml"), "--samples", "200", "--no-search", "--quiet", "--linear-only"]
    code = main(base)
    out = capsys.readouterr().out
    assert code == 1
    assert "Gain set 'placed'" in out and "Gain set 'lqr'" in out and "Linear requirements" in out
    assert "Overall verdict for 'placed'" in out
    code = main([*base, "--compare"])
    out = capsys.readouterr().out
    assert "side by side" in out and "placed" in out and "lqr" in out and "Overall verdicts" in out
    assert main(["check", str(CASES / "delivery_cart.toml"), "--gain", "nope"]) == 2
    assert "unknown gain set 'nope'" in capsys.readouterr().err
    assert main(["check", str(CASES / "delivery_cart.toml"), "--samples", "0"]) == 2


def test_check_reads_gain_file(tmp_path, capsys):
    from robust.case import load_case, resolve_gain
    from robust.gains import write_gain_file

    case = load_case(CASES / "delivery_cart.toml")
    g = resolve_gain(case, case.gains[1])
    path = tmp_path / "g.toml"
    write_gain_file(path, g)
    code = main(
        [
            "check",
            str(CASES / "delivery_cart.toml"),
            "--gain-file",
            str(path),
            "--samples",
            "100",
            "--no-search",
            "--quiet",
            "--json",
            "--linear-only",
        ]
    )
    data = json.loads(capsys.readouterr().out)["check"]
    assert code == 1
    assert len(data["gains"]) == 1
    np.testing.assert_allclose(np.array(data["gains"][0]["gain"]["K"]), g.K, rtol=1e-15)


def test_same_seed_same_numbers(capsys):
    args = [
        "check",
        str(CASES / "delivery_cart.toml"),
        "--samples",
        "300",
        "--quiet",
        "--json",
        "--linear-only",
        "--seed",
        "5",
    ]
    main(args)
    a = capsys.readouterr().out
    main(args)
    b = capsys.readouterr().out
    assert a == b
    main(args[:-1] + ["6"])
    assert capsys.readouterr().out != a
