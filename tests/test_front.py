"""The trade-off front and the nearest reachable point (robust/synthesis/front.py)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from robust.case import CaseError, load_case, resolve_gain
from robust.cli import main
from robust.synthesis.front import best_achievable, trade_off
from robust.uncertainty import corners

DATA = Path(__file__).resolve().parent / "data"
SMALL = DATA / "small_cart.toml"
WITH_TUNING = """
[tuning]
rounds = 1
evaluations = 20
starts = ["placed"]
"""


def _variant(tmp_path: Path, extra: str, requirements: dict | None = None) -> Path:
    text = SMALL.read_text()
    for key, value in (requirements or {}).items():
        text = re.sub(rf"(?m)^{key} = .*\n", "", text)
        text = text.replace("[requirements]\n", f"[requirements]\n{key} = {value}\n", 1)
    path = tmp_path / "case.toml"
    path.write_text(text + extra)
    return path


def _decay_by_eigenvalues(case, K: np.ndarray) -> float:
    """Slowest decay rate over the corners from numpy's eigenvalues of the closed loop A - B K (reference)."""
    from robust.linear import reduced_model

    model = reduced_model(case.box.plant(corners(case.box)))
    return float(min(-np.linalg.eigvals(a - b @ K).real.max() for a, b in zip(model.A, model.B)))


def test_every_front_point_holds_what_it_claims():
    """Each point's gain, evaluated again by other means (numpy eigenvalues; one simulation call per corner
    batch), reaches the reported worst-case decay rate and, where marked feasible, keeps the swept torque bound;
    the sweep continues from the previous feasible point, so a looser bound is never reported worse."""
    from robust.simulate import simulate

    case = load_case(SMALL)
    start = resolve_gain(case, case.gains[0]).K
    fr = trade_off(
        case,
        start,
        sweep="max_wheel_torque_n_m",
        objective="min_decay_rate_per_s",
        bounds=[2.0, 4.0, 8.0],
        evaluations=30,
    )
    assert [p.bound for p in fr.points] == [2.0, 4.0, 8.0]
    assert fr.swept_unit == "N m" and fr.objective_unit == "1/s" and fr.scenarios == 4
    plant = case.box.plant(corners(case.box))
    for p in fr.points:
        assert p.K.shape == (2, 4) and np.allclose(p.K[0, [0, 2, 3]], p.K[1, [0, 2, 3]]) and p.K[0, 1] == -p.K[1, 1]
        assert _decay_by_eigenvalues(case, p.K) == pytest.approx(p.best, rel=1e-6)
        if p.feasible:
            peak = max(
                float(np.max(simulate(plant, p.K, m, case.controller).metrics["peak_torque_n_m"]))
                for m in case.manoeuvres
            )
            assert peak <= p.bound * (1 + 1e-9)
    feasible = [p.best for p in fr.points if p.feasible]
    assert len(feasible) >= 2 and all(b >= a - 1e-12 for a, b in zip(feasible, feasible[1:]))


def test_an_impossible_request_gets_the_nearest_reachable_point(tmp_path, capsys):
    """A decay rate no gain of this vehicle reaches within the torque bound: tuning fails (exit 1) and says
    how close it gets; the reported best value is the worst case of its gain by numpy's eigenvalues."""
    path = _variant(tmp_path, WITH_TUNING, {"min_decay_rate_per_s": 60.0, "max_wheel_torque_n_m": 3.0})
    code = main(["tune", str(path), "--out", str(tmp_path / "g.toml"), "--quiet", "--json"])
    assert code == 1
    doc = json.loads(capsys.readouterr().out)
    near = {n["requirement"]: n["point"] for n in doc["nearest_reachable"]}
    assert "min_decay_rate_per_s" in near
    p = near["min_decay_rate_per_s"]
    case = load_case(path)
    assert p["best"] < 60.0
    assert _decay_by_eigenvalues(case, np.array(p["K"])) == pytest.approx(p["best"], rel=1e-6)
    direct = best_achievable(case, "min_decay_rate_per_s", np.array(p["K"]), evaluations=10)
    assert direct.best >= p["best"] - 1e-9  # starting from the answer never gives less (Nelder-Mead keeps it)


def test_front_table_errors_name_the_key(tmp_path):
    f = WITH_TUNING + "[front]\n"
    bad = {
        "[front]\nsweep = 'max_pitch_deg'\nobjective = 'min_decay_rate_per_s'\n": "needs [tuning]",
        f + "sweep = 'max_pitch_deg'\nobjective = 'min_decay_rate_per_s'\nspeed = 1\n": "front.speed",
        f + "sweep = 'peak'\nobjective = 'min_decay_rate_per_s'\n": "front.sweep",
        f + "sweep = 'max_wheel_torque_n_m'\nobjective = 'min_decay_rate_per_s'\n": "front.sweep",
        f + "sweep = 'max_pitch_deg'\nobjective = 'max_pitch_deg'\n": "front.objective",
        f + "sweep = 'max_pitch_deg'\nobjective = 'min_decay_rate_per_s'\nfactors = [0]\n": "front.factors",
    }
    for extra, where in bad.items():
        with pytest.raises(CaseError, match=where.replace("[", r"\[")):
            load_case(_variant(tmp_path, extra))
    assert main(["front", str(SMALL), "--sweep", "nope", "--objective", "min_decay_rate_per_s", "--bounds", "1"]) == 2
    assert main(["front", str(SMALL), "--sweep", "max_wheel_torque_n_m", "--objective", "min_decay_rate_per_s"]) == 2


def test_dossier_draws_the_front(tmp_path):
    """With [tuning] and [front], the dossier has the section, the table, the figure, and the front in
    results.json (schema-valid)."""
    from importlib import resources

    import jsonschema

    extra = WITH_TUNING + (
        "\n[front]\nsweep = 'max_wheel_torque_n_m'\nobjective = 'min_decay_rate_per_s'\n"
        "factors = [0.8, 1.2]\nevaluations = 12\n"
    )
    path = _variant(tmp_path, extra, {"max_wheel_torque_n_m": 4.0})
    out = tmp_path / "d"
    assert main(["dossier", str(path), "--out", str(out), "--quiet"]) in (0, 1)
    md = (out / "dossier.md").read_text()
    assert "What each requirement costs (trade-off front)" in md
    assert (out / "figures" / "trade_off_front.svg").is_file()
    assert (out / "tables" / "trade_off_front.csv").is_file()
    data = json.loads((out / "results.json").read_text())
    assert [p["bound"] for p in data["front"]["points"]] == pytest.approx([3.2, 4.8])
    schema = json.loads(resources.files("robust.report").joinpath("results.schema.json").read_text())
    jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)


def test_a_trial_gain_unstable_on_a_scenario_scores_worst_instead_of_failing(tmp_path):
    """The scorer stops at the linear metrics for a gain unstable on a scenario (nothing is simulated), so a
    time-domain objective has no value there: the search must rank that trial worst, not stop."""
    from robust.synthesis.front import _objective_value
    from robust.synthesis.tuning import _Scorer

    case = load_case(_variant(tmp_path, WITH_TUNING))
    scorer = _Scorer(case, corners(case.box))
    # no feedback: the upright vehicle falls (an inverted pendulum is open-loop unstable; common practice)
    m = scorer.margins(np.zeros((2, 4)))
    assert m["closed_loop_stable"] < 0
    value, unit = _objective_value(scorer, ["max_wheel_torque_n_m"], "max_wheel_torque_n_m")
    assert np.isnan(value) and unit == ""
