"""The command line, run as a user would."""

from __future__ import annotations

import json
import subprocess
import sys

from conftest import CASES

from robust.cli import main


def test_model_text_and_json(capsys):
    assert main(["model", str(CASES / "delivery_cart.toml")]) == 0
    text = capsys.readouterr().out
    assert "rank 6 of 7" in text and "rank 4 of 4" in text
    assert "not exact" in text and "trim torque" in text
    assert "Corners of the parameter box (16)" in text
    assert main(["model", "--json", str(CASES / "stand_up_transporter.toml")]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["full_rank"] == 6 and data["reduced_rank"] == 4
    assert data["shift_exact"] is True
    assert data["uncontrollable"][0][0]["states"] == ["y"]
    assert data["time_to_double_s"] > 0
    assert len(data["corners"]["points"]) == 8


def test_console_script_help_and_errors(tmp_path):
    run = subprocess.run([sys.executable, "-m", "robust", "--help"], capture_output=True, text=True)
    assert run.returncode == 0 and "model" in run.stdout
    run = subprocess.run([sys.executable, "-m", "robust", "model"], capture_output=True, text=True)
    assert run.returncode == 2
    bad = tmp_path / "bad.toml"
    bad.write_text('title = "x"\n')
    run = subprocess.run([sys.executable, "-m", "robust", "model", str(bad)], capture_output=True, text=True)
    assert run.returncode == 2
    assert "missing table 'vehicle'" in run.stderr and "Traceback" not in run.stderr
    assert run.stdout == ""
