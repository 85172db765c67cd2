"""Gains scheduled on a measured parameter: polytope, LMI certificate, per-model evaluation, case keys."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import linprog

from robust.analysis.eigen import eigenvalues_4x4
from robust.case import CaseError, load_case, parse_case, resolve_gain
from robust.gains import Schedule, ScheduledGain, read_gain_file, scheduled_gain_file_text
from robust.linear import reduced_model
from robust.synthesis.lmi import RATE_TOLERANCE, Spec, certify_gain, synthesize
from robust.synthesis.polytope import moment_box
from robust.uncertainty import corners, monte_carlo

DATA = Path(__file__).resolve().parent / "data"
SCHEDULE = Schedule("payload.mass_kg", 5.0, 1.0)  # the small cart: payload 0 to 10 kg, measured within 1 kg


@pytest.fixture(scope="module")
def small():
    return load_case(DATA / "small_cart.toml")


def _coordinates(E, A, B, r):
    """The vertex coordinates ``(m11, m22, m33, Ml, k, c_b)`` read back from descriptor matrices."""
    return np.stack([E[:, 0, 0], E[:, 1, 1], E[:, 3, 3], E[:, 0, 3], -B[:, 3, 0], -A[:, 0, 0] * r**2 / 2], axis=1)


def _models_and_errors(box, n, seed):
    pts = np.concatenate([corners(box), corners(box), monte_carlo(box, n, seed=seed)])
    rng = np.random.default_rng(seed)
    nc = len(corners(box))
    err = np.concatenate([np.full(nc, -SCHEDULE.error), np.full(nc, SCHEDULE.error)])
    err = np.concatenate([err, rng.uniform(-SCHEDULE.error, SCHEDULE.error, n)])
    return pts, err


def test_scheduled_polytope_contains_every_model_at_every_measurement_error(small):
    """Every model's ``(q, d, k d)`` (moments, measured deviation, its product with the torque-constant
    ratio) is a convex combination of the vertices' (feasibility LP, scipy.optimize.linprog): the
    containment the vertex LMIs rest on."""
    box = small.box
    S = moment_box(box, schedule=SCHEDULE)
    r = box.vehicle.wheel.radius_m
    q = _coordinates(S.E, S.A, S.B, r)
    V = np.column_stack([q, S.schedule, q[:, 4] * S.schedule])
    pts, err = _models_and_errors(box, 200, seed=5)
    plant = box.plant(pts)
    d = pts[:, box.names.index("payload.mass_kg")] + err - SCHEDULE.nominal
    qm = np.stack([plant.m11, plant.I3 + plant.yaw_wheels, plant.m33, plant.Ml, plant.kt_ratio, plant.c_b], 1)
    P = np.column_stack([qm, d, plant.kt_ratio * d])
    scale = np.maximum(np.abs(V).max(axis=0), 1e-12)
    m = V.shape[0]
    A_eq = np.vstack([(V / scale).T, np.ones((1, m))])
    for p in P:
        res = linprog(np.zeros(m), A_eq=A_eq, b_eq=np.append(p / scale, 1.0), bounds=(0, None), method="highs")
        assert res.status == 0, f"model {p} outside the scheduled polytope"
    # and the hull reduction kept a vertex set whose q-projection is the fixed polytope's
    F = moment_box(box)
    qf = _coordinates(F.E, F.A, F.B, r)
    assert S.fixed is not None and S.fixed.vertices == F.vertices
    for row in qf:
        assert np.min(np.abs(q - row).max(axis=1)) <= 1e-9 * np.abs(row).max()


def test_zero_slope_reproduces_the_fixed_gain_certificate_exactly(small):
    """A scheduled gain with K1 = 0 is the fixed gain: its certificate equals the fixed gain's exactly
    (same vertices, reduced in the coordinates the LMIs depend on); certified on the full scheduled vertex
    set instead, the extra vertices are redundant and the rate agrees to the search's tolerance (the
    certificate is quadratic stability of the closed-loop polytope; Boyd, El Ghaoui, Feron and Balakrishnan
    1994, ch. 5)."""
    K = resolve_gain(small, small.gains[0]).K
    F = moment_box(small.box)
    S = moment_box(small.box, schedule=SCHEDULE)
    fixed = certify_gain(F, K, input_scale=20.0, upper=10.0)
    zero = certify_gain(S, K, input_scale=20.0, upper=10.0, slope=np.zeros((2, 4)))
    assert fixed.decay_rate is not None and fixed.decay_rate > 0
    assert zero.decay_rate == fixed.decay_rate
    np.testing.assert_array_equal(zero.certificate.lyapunov, fixed.certificate.lyapunov)
    full = certify_gain(replace(S, fixed=None), K, input_scale=20.0, upper=10.0)
    assert S.vertices > F.vertices
    assert abs(full.decay_rate - fixed.decay_rate) <= 3 * RATE_TOLERANCE * fixed.decay_rate + 2e-4


@pytest.fixture(scope="module")
def designs(small):
    """The largest certified decay rate of a fixed and of a scheduled gain on the small cart (damping 0.3)."""
    spec = Spec(decay_rate=0.0, damping=0.3, objective="decay", input_scale=20.0)
    F = moment_box(small.box)
    S = moment_box(small.box, schedule=SCHEDULE)
    return {"fixed": synthesize(F, spec), "scheduled": synthesize(S, replace(spec, scheduled=True)), "S": S}


def test_scheduled_certificate_holds_on_every_sampled_model_and_error(small, designs):
    """Lyapunov's theorem for each frozen model: a common Lyapunov matrix certifying decay ``a`` over the
    scheduled polytope puts every eigenvalue of ``A - B K(measured)`` left of ``-a`` for every model of the
    box at every measurement error within its bound (numpy eigenvalues on samples; corners at both extreme
    errors included); the fixed-gain route of the certificate, given K0 and K1, certifies the synthesis's
    rate to the search's tolerance and never more than the samples allow."""
    r = designs["scheduled"]
    assert r.K1 is not None and np.abs(r.K1).max() > 0
    g = ScheduledGain("s", r.K, r.K1, SCHEDULE, "lmi")
    pts, err = _models_and_errors(small.box, 400, seed=9)
    model = reduced_model(small.box.plant(pts))
    measured = pts[:, small.box.names.index("payload.mass_kg")] + err
    lam = eigenvalues_4x4(model.A - model.B @ g.at(measured))
    worst = float(-lam.real.max())
    assert worst >= r.decay_rate * (1 - 1e-9)
    c = certify_gain(designs["S"], r.K, input_scale=20.0, upper=worst, slope=r.K1)
    assert c.decay_rate is not None
    assert c.decay_rate >= r.decay_rate * (1 - 3 * RATE_TOLERANCE) - 1e-4
    assert c.decay_rate <= worst


def test_measuring_the_payload_never_certifies_less_than_one_fixed_gain(designs):
    """The scheduled problem contains the fixed one (K1 = 0 on a vertex set whose q-projection is the fixed
    polytope), so its optimum is at least the fixed optimum; both searches stop within a few tenths of a
    percent and return the smallest gain up to 2 % below, hence the 3 % slack."""
    assert designs["scheduled"].decay_rate >= 0.97 * designs["fixed"].decay_rate


def test_per_model_gains_in_the_linear_metrics_match_one_model_at_a_time(small):
    """``evaluate`` with one gain per point equals evaluating each point with its own gain."""
    from robust.analysis.metrics import evaluate

    K = resolve_gain(small, small.gains[0]).K
    g = ScheduledGain("s", K, 0.02 * K, SCHEDULE, "test")
    pts = monte_carlo(small.box, 6, seed=2)
    measured = pts[:, small.box.names.index("payload.mass_kg")]
    Ks = g.at(measured)
    batch = evaluate(small.box, pts, Ks)
    for i in range(len(pts)):
        one = evaluate(small.box, pts[i : i + 1], Ks[i])
        for name, v in one.items():
            np.testing.assert_allclose(batch[name][i], v[0], rtol=1e-9, atol=1e-12)
    assert np.ptp(batch["decay_rate"]) > 0


SMALL_TEXT = (DATA / "small_cart.toml").read_text(encoding="utf-8")


@pytest.mark.parametrize(
    ("table", "key"),
    [
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\ncolour = 3', "schedule.colour"),
        ('parameter = "payload.cg_height_m"\nmeasurement_error = 0.01', "schedule.parameter"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = -1.0', "schedule.measurement_error"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = 11.0', "schedule.measurement_error"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\nnominal = 12.0', "schedule.nominal"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\nname = "placed"', "schedule.name"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\nname = "lmi"', "schedule.name"),  # [synthesis]'s
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\ntorque_limit_n_m = 5.0', "torque_limit_n_m"),
        ('parameter = "payload.mass_kg"\nmeasurement_error = 1.0\nspeed_step_m_s = 1.0', "speed_step_m_s"),
        ("measurement_error = 1.0", "schedule.parameter"),
    ],
)
def test_schedule_table_errors_name_the_key(table, key):
    with pytest.raises(CaseError, match=key.replace(".", r"\.")):
        parse_case(SMALL_TEXT + "\n[schedule]\n" + table + "\n")


def test_schedule_on_an_unranged_parameter_is_refused():
    text = SMALL_TEXT.replace("[ranges.payload.mass_kg]\nlow = 0.0\nhigh = 10.0\n", "")
    with pytest.raises(CaseError, match="no range"):
        parse_case(text + '\n[schedule]\nparameter = "payload.mass_kg"\nmeasurement_error = 1.0\n')


def test_schedule_table_is_read():
    case = parse_case(SMALL_TEXT + '\n[schedule]\nparameter = "payload.mass_kg"\nmeasurement_error = 0.5\n')
    s = case.schedule["schedule"]
    assert (s.parameter, s.nominal, s.error) == ("payload.mass_kg", 5.0, 0.5)
    assert case.schedule["name"] == "scheduled" and case.schedule["constraints"] == {}


def test_a_scheduled_gain_file_is_not_read_as_a_fixed_gain(tmp_path):
    g = ScheduledGain("s", np.ones((2, 4)), 0.1 * np.ones((2, 4)), SCHEDULE, "test")
    np.testing.assert_allclose(g.at(np.array([5.0, 7.0]))[1], 1.2 * np.ones((2, 4)))
    p = tmp_path / "s.toml"
    p.write_text(scheduled_gain_file_text(g), encoding="utf-8")
    with pytest.raises(ValueError, match="missing table 'gain'"):
        read_gain_file(p)


def test_scheduled_tuning_starts_from_the_fixed_gain_and_scores_it_per_model(small):
    """The scheduled tuning's start (K1 = 0) scores exactly what the tuning's scorer gives the fixed gain on
    the same scenarios (the box corners at both extreme errors), and the result never scores less; its
    score is recomputed here from the returned K0 and K1 at each scenario's measured value."""
    from robust.synthesis.tuning import _score, _Scorer, scheduled_scenarios, tune_scheduled

    case = replace(small, schedule={"name": "s", "schedule": SCHEDULE, "constraints": {}})
    start = resolve_gain(case, case.gains[0])
    out = tune_scheduled(case, start, name="s_tuned", evaluations=30)
    pts, err = scheduled_scenarios(case)
    scorer = _Scorer(case, pts)
    assert out["start_score"] == pytest.approx(_score(scorer.margins(start.K)), rel=1e-12, abs=1e-12)
    measured = pts[:, case.box.names.index("payload.mass_kg")] + err
    again = _score(scorer.margins(out["gain"].at(measured)))
    assert again == pytest.approx(out["score"], rel=1e-9, abs=1e-12)
    assert out["score"] >= out["start_score"]


def test_schedule_command_prints_the_comparison_within_100_columns(tmp_path, capsys):
    """`robust schedule`: the comparison on a screen (at most 100 columns), JSON on request, exit 2 and the
    table's name when the case has no [schedule]."""
    import json

    from robust.cli import main

    plain = tmp_path / "plain.toml"
    plain.write_text(SMALL_TEXT, encoding="utf-8")
    assert main(["schedule", str(plain), "--quiet"]) == 2
    assert "[schedule]" in capsys.readouterr().err
    case = tmp_path / "sched.toml"
    case.write_text(SMALL_TEXT + '\n[schedule]\nparameter = "payload.mass_kg"\nmeasurement_error = 1.0\n', "utf-8")
    assert main(["schedule", str(case), "--gain", "placed", "--evaluations", "20", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "certified decay rate (LMI) [1/s]" in out and "scheduled_tuned" in out
    assert max(len(line) for line in out.splitlines()) <= 100
    assert main(["schedule", str(case), "--quiet", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)["scheduling"]
    assert data["gains_compared"] == ["best_fixed", "scheduled"]
    rates = data["certified_decay_rate_per_s"]
    assert rates["scheduled"] >= 0.97 * rates["best_fixed"] > 0


def test_a_failed_synthesis_keeps_its_column_and_says_why(monkeypatch):
    """When neither LMI gain can be synthesized, both keep their columns with no value, the reasons are
    recorded, and nothing is evaluated for them (no row claims a value it does not have).  The failure is
    injected (a real infeasible request spends minutes proving it)."""
    import robust.scheduling as S
    from robust.report.dossier import schedule_rows
    from robust.synthesis.lmi import Infeasible

    def refuse(*_a, **_k):
        raise Infeasible("test: not certifiable")

    monkeypatch.setattr(S, "synthesize", refuse)
    case = parse_case(SMALL_TEXT + '\n[schedule]\nparameter = "payload.mass_kg"\nmeasurement_error = 0.5\n')
    sc = S.run_schedule_study(case, samples=50)
    assert sc.columns == ("best_fixed", "scheduled")
    assert sc.errors == {"best_fixed": "test: not certifiable", "scheduled": "test: not certifiable"}
    assert sc.fixed is None and sc.scheduled is None
    for r in schedule_rows(sc, case.requirements):
        assert r["values"] == [None, None] and r["meets"] == [None, None]


HEIGHT = Schedule("payload.cg_height_m", 0.35, 0.02)  # measured within 2 cm


def test_a_gain_scheduled_on_the_payload_height_is_contained_and_certified():
    """Scheduling on the centre-of-mass height: the payload group's vertices carry their height, ``(m, m u,
    m v, u)``; every model's ``(q, d, k d)`` is inside the vertices' hull (linprog), and the scheduled LMI
    gain's certified rate holds for every sampled model at every measurement error (numpy eigenvalues,
    Lyapunov's theorem) and is at least the fixed gain's (its problem contains the fixed one)."""
    text = SMALL_TEXT.replace(
        "[ranges.drive.torque_constant_n_m_per_a]",
        "[ranges.payload.cg_height_m]\nlow = 0.3\nhigh = 0.45\n\n[ranges.drive.torque_constant_n_m_per_a]",
        1,
    )
    box = parse_case(text).box
    S = moment_box(box, schedule=HEIGHT)
    r = box.vehicle.wheel.radius_m
    q = _coordinates(S.E, S.A, S.B, r)
    V = np.column_stack([q, S.schedule, q[:, 4] * S.schedule])
    rng = np.random.default_rng(4)
    pts = np.concatenate([corners(box), monte_carlo(box, 150, seed=4)])
    err = rng.uniform(-HEIGHT.error, HEIGHT.error, len(pts))
    err[: len(corners(box))] = HEIGHT.error
    plant = box.plant(pts)
    d = pts[:, box.names.index("payload.cg_height_m")] + err - HEIGHT.nominal
    qm = np.stack([plant.m11, plant.I3 + plant.yaw_wheels, plant.m33, plant.Ml, plant.kt_ratio, plant.c_b], 1)
    P = np.column_stack([qm, d, plant.kt_ratio * d])
    scale = np.maximum(np.abs(V).max(axis=0), 1e-12)
    A_eq = np.vstack([(V / scale).T, np.ones((1, V.shape[0]))])
    for p in P:
        res = linprog(np.zeros(V.shape[0]), A_eq=A_eq, b_eq=np.append(p / scale, 1.0), bounds=(0, None))
        assert res.status == 0, f"model {p} outside the height-scheduled polytope"
    spec = Spec(decay_rate=0.0, damping=0.3, objective="decay", input_scale=20.0)
    fixed = synthesize(moment_box(box), spec)
    sched = synthesize(S, replace(spec, scheduled=True))
    assert sched.decay_rate >= 0.97 * fixed.decay_rate
    g = ScheduledGain("h", sched.K, sched.K1, HEIGHT, "lmi")
    model = reduced_model(plant)
    lam = eigenvalues_4x4(model.A - model.B @ g.at(pts[:, box.names.index("payload.cg_height_m")] + err))
    assert float(-lam.real.max()) >= sched.decay_rate * (1 - 1e-9)


def test_schedule_command_tunes_first_when_the_case_asks_for_tuning(tmp_path, capsys):
    """Without --gain, `robust schedule` tunes the gain the case's [tuning] asks for (as the dossier does)
    and sets the scheduled gain tuned from it beside it; --no-tuning leaves the pair out."""
    from robust.cli import main

    case = tmp_path / "tuned.toml"
    extra = "\n[tuning]\nrounds = 1\nevaluations = 10\n"
    extra += '\n[schedule]\nparameter = "payload.mass_kg"\nmeasurement_error = 1.0\n'
    case.write_text(SMALL_TEXT + extra, "utf-8")
    assert main(["schedule", str(case), "--evaluations", "10", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "'tuned' and a scheduled gain tuned from it" in out and "scheduled_tuned" in out
    assert main(["schedule", str(case), "--no-tuning", "--quiet"]) == 0
    assert "scheduled_tuned" not in capsys.readouterr().out
