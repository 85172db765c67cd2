"""The dossier of each bundled case, end to end: it is written, validates against the published schema
(jsonschema, Draft 2020-12) and keeps every figure under 1 MB.

These are the slowest tests of the suite (one full dossier per bundled case, about a minute each on
2 cores, the transporter's nearly two with its schedule study); the small test cart's dossier is checked
in detail in ``test_dossier.py``.
"""

from __future__ import annotations

import json
from importlib import resources
from pathlib import Path

import pytest

from robust.cli import main

CASES = Path(__file__).resolve().parents[1] / "cases"


@pytest.mark.parametrize("name", ["delivery_cart", "stand_up_transporter"])
def test_bundled_dossier_validates_against_the_schema(name, tmp_path):
    import jsonschema

    out = tmp_path / name
    code = main(["dossier", str(CASES / f"{name}.toml"), "--out", str(out), "--quiet"])
    assert code in (0, 1)  # written; 1 only with --strict, which is not given
    assert (out / "COMPLETE").is_file()
    schema = json.loads(resources.files("robust.report").joinpath("results.schema.json").read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    data = json.loads((out / "results.json").read_text())
    jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)
    # one verdict per gain set, the case's own gain sets, the LMI gain and the tuned gain among them
    names = [v["gain"] for v in data["verdicts"]]
    assert len(names) == len(set(names)) >= 3
    figures = list((out / "figures").glob("*.svg"))
    assert len(figures) >= 10
    for f in figures:
        assert f.stat().st_size <= 1_000_000, f.name
    # the transporter asks for [schedule]: the certified decay rates of the best fixed gain and of the gain
    # scheduled on the measured rider mass side by side, with the tuned pair; the scheduled gains as files
    sc = data["scheduling"]
    if name != "stand_up_transporter":
        assert sc is None
        return
    assert sc["gains_compared"] == ["best_fixed", "scheduled", "tuned", "scheduled_tuned"]
    rates = sc["certified_decay_rate_per_s"]
    assert all(rates[g] is not None and rates[g] > 0 for g in sc["gains_compared"])
    assert sc["comparison"][0]["values"] == [rates[g] for g in sc["gains_compared"]]
    assert (out / "gains" / "scheduled.toml").is_file() and (out / "gains" / "scheduled_tuned.toml").is_file()
    assert "What measuring the rider or cargo mass buys" in (out / "dossier.md").read_text(encoding="utf-8")
