"""LMI synthesis: polytopes, certificates and references."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import linalg
from scipy.spatial import ConvexHull

from robust.analysis.eigen import eigen_metrics, eigenvalues_4x4
from robust.linear import reduced_model
from robust.synthesis.lmi import Infeasible, Spec, synthesize
from robust.synthesis.polytope import (
    Polytope,
    _mass_height_vertices,
    descriptor_matrices,
    moment_box,
    sampled_hull,
)
from robust.uncertainty import corners, monte_carlo
from robust.vehicle import plant_batch


def _moments(plant):
    return np.stack([plant.m11, plant.I3 + plant.yaw_wheels, plant.m33, plant.Ml, plant.kt_ratio, plant.c_b], 1)


def test_descriptor_form_reproduces_reduced_model(cart):
    """E^-1 A and E^-1 B equal the analytic reduced model (1e-12 relative)."""
    pts = monte_carlo(cart.box, 50, seed=2)
    plant = cart.box.plant(pts)
    m = reduced_model(plant)
    d = descriptor_matrices(cart.box, _moments(plant))
    np.testing.assert_allclose(np.linalg.solve(d["E"], d["A"]), m.A, atol=1e-12 * np.abs(m.A).max())
    np.testing.assert_allclose(np.linalg.solve(d["E"], d["B"]), m.B, atol=1e-12 * np.abs(m.B).max())


def test_mass_height_polytope_contains_the_image():
    """The image (m, m h, m h^2) of a mass x height box lies inside the tangent-triangle
    prism (checked with scipy's ConvexHull facet equations on 20,000 random points)."""
    V = _mass_height_vertices((45.0, 118.0), (0.85, 1.2))
    hull = ConvexHull(V)
    rng = np.random.default_rng(0)
    m = rng.uniform(45.0, 118.0, 20000)
    h = rng.uniform(0.85, 1.2, 20000)
    P = np.stack([m, m * h, m * h * h], 1)
    assert np.all(P @ hull.equations[:, :-1].T + hull.equations[:, -1] <= 1e-9)


def test_moment_box_contains_every_model(transporter):
    """Every sampled model's descriptor matrices are convex combinations of the
    vertices: checked on the moment vector with a linear program (scipy linprog)."""
    from scipy.optimize import linprog

    P = moment_box(transporter.box)
    Vq = np.stack([P.E[:, 0, 0], P.E[:, 1, 1], P.E[:, 3, 3], P.E[:, 0, 3], -P.B[:, 3, 0]], 1)
    plant = transporter.box.plant(monte_carlo(transporter.box, 40, seed=5))
    q = _moments(plant)[:, :5]
    for row in q:
        A_eq = np.vstack([Vq.T, np.ones(len(Vq))])
        b_eq = np.concatenate([row, [1.0]])
        res = linprog(np.zeros(len(Vq)), A_eq=A_eq, b_eq=b_eq, bounds=(0, None), method="highs")
        assert res.status == 0


def test_guaranteed_cost_equals_lqr_cost_on_one_model(transporter):
    """Reference: scipy.linalg.solve_continuous_are.  With one vertex and no other
    constraint, the smallest guaranteed cost x0^T X^-1 x0 equals the LQR cost
    x0^T P x0; tolerance 1e-4 relative covers the interior-point solver's accuracy."""
    m = reduced_model(plant_batch(transporter.vehicle))
    A, B = m.A[0], m.B[0]
    Q = np.diag([1.0, 1.0, 10.0, 1.0])
    R = np.eye(2) * 1e-3
    x0 = np.array([1.0, 0.5, 0.1, 0.0])
    P = linalg.solve_continuous_are(A, B, Q, R)
    poly = Polytope("one", np.eye(4)[None], m.A, m.B, "", {})
    r = synthesize(poly, Spec(objective="cost", cost_Q=Q, cost_R=R, cost_states=x0[None, :], input_scale=70.0))
    assert r.objective_value == pytest.approx(float(x0 @ P @ x0), rel=1e-4)
    np.testing.assert_allclose(r.K, np.linalg.solve(R, B.T @ P), rtol=2e-2)
    assert r.certificate.passed


@pytest.fixture(scope="module")
def moment_result(transporter):
    poly = moment_box(transporter.box)
    spec = Spec(decay_rate=0.5, damping=0.4, objective="gain", input_scale=70.0)
    return poly, spec, synthesize(poly, spec)


def test_certificate_holds_at_vertices_and_on_samples(transporter, moment_result):
    """The Lyapunov matrix X1 (scaled coordinates) satisfies the decay inequality
    F X1 + X1 F^T + 2 a X1 < 0 for the closed loop F of every sampled model (an
    independent numpy check of what the vertex LMIs imply), and the analyzer sees
    decay and damping honoured on a dense Monte Carlo sample."""
    poly, spec, r = moment_result
    assert r.certificate.passed and r.certificate.smallest_slack < 0
    X1 = r.certificate.lyapunov
    D = np.diag(spec.state_scale)
    pts = np.concatenate([corners(transporter.box), monte_carlo(transporter.box, 3000, seed=9)])
    m = reduced_model(transporter.box.plant(pts))
    F = np.linalg.solve(D, (m.A - m.B @ r.K) @ D)  # scaled closed loop
    lyap = F @ X1 + X1 @ np.swapaxes(F, 1, 2) + 2 * spec.decay_rate * X1
    assert np.linalg.eigvalsh(lyap).max() < 0
    em = eigen_metrics(eigenvalues_4x4(m.A - m.B @ r.K))
    assert em.decay_rate.min() >= spec.decay_rate
    assert em.min_damping.min() >= spec.damping


def test_parameter_dependent_variant_is_stable_on_samples(transporter):
    poly = sampled_hull(transporter.box, points_per_axis=5, check_samples=2000)
    spec = Spec(decay_rate=0.5, objective="gain", lyapunov="parameter_dependent", input_scale=70.0)
    r = synthesize(poly, spec)
    assert r.certificate.passed and r.certificate.lyapunov.shape[0] == poly.vertices
    pts = monte_carlo(transporter.box, 3000, seed=4)
    m = reduced_model(transporter.box.plant(pts))
    assert eigen_metrics(eigenvalues_4x4(m.A - m.B @ r.K)).decay_rate.min() >= 0.5


def test_infeasible_request_says_what_can_be_met(moment_result):
    """An impossible decay rate is answered with a rate that does certify: the search grows from
    below, so a rate known to certify (0.5 1/s here, solved first) is never reported as impossible."""
    import re

    poly, spec, _r = moment_result
    spec = replace(spec, damping=None)  # the damping cone makes each solve ~6x slower; the search is the same
    known = synthesize(poly, replace(spec, decay_rate=0.5, objective="gain"))
    assert known.certificate.passed
    with pytest.raises(Infeasible, match=r"largest certifiable decay rate is about") as err:
        synthesize(poly, replace(spec, decay_rate=1000.0), bisection_steps=3)
    best = float(re.search(r"about ([0-9.eE+-]+) 1/s", str(err.value)).group(1))
    assert best >= 0.5


def test_sampled_hull_verifies_containment(transporter):
    P = sampled_hull(transporter.box, points_per_axis=5, check_samples=2000)
    assert P.facts["verification_inside_fraction"] >= 0.99
    # containment is verified against the box itself: its corners and edge midpoints are among the points
    assert P.facts["corners_inside_fraction"] == 1.0
    assert "corners" in P.facts["verification_points"]
    assert P.facts["verification_off_subspace"] < 1e-9


@pytest.mark.parametrize("case_file", ["stand_up_transporter.toml", "delivery_cart.toml"])
def test_lmi_gain_passes_every_linear_requirement(tmp_path, capsys, case_file):
    """Acceptance: on each bundled case the synthesized gain passes every linear
    requirement over the box; the gain file is written and reads back with the
    overall verdict, which is the assessment's."""
    import json

    from conftest import CASES

    from robust.cli import main
    from robust.gains import read_gain_file

    out = tmp_path / "g.toml"
    code = main(["synthesize", str(CASES / case_file), "--out", str(out), "--quiet", "--json"])
    data = json.loads(capsys.readouterr().out)
    checks = {g["gain"]["name"]: g for g in data["check"]["gains"]}
    assert checks["robust_lmi"]["passed"]
    verdicts = {v["gain"]: v for v in data["assessment"]["verdicts"]}
    assert code == (0 if all(v["status"] == "PASS" for v in verdicts.values()) else 1)
    linear = [o for o in verdicts["robust_lmi"]["outcomes"] if o["domain"] == "linear"]
    assert linear and all(o["status"] == "pass" for o in linear)
    assert data["synthesis"]["certificate"]["passed"]
    g = read_gain_file(out)
    np.testing.assert_allclose(g.K, np.array(data["gain"]["K"]), rtol=1e-15)
    assert g.provenance["case_sha256"] == data["check"]["case_sha256"]
    assert g.provenance["verdict"]["status"] == verdicts["robust_lmi"]["status"]
    assert "not a safety case" in g.provenance["caution"]


def test_a_solver_limit_is_never_reported_as_infeasible(moment_result, monkeypatch):
    """Starved of iterations, the first solve stops at its limit; the request (known to certify) must then
    be solved with escalated effort, never answered "infeasible" (our own rule: a limit proves nothing)."""
    import robust.synthesis.lmi as lmi

    poly, spec, _r = moment_result
    monkeypatch.setattr(lmi, "SOLVER_OPTIONS", {"CLARABEL": {"max_iter": 2}, "SCS": {"max_iters": 5}})
    said = []
    res = synthesize(poly, replace(spec, decay_rate=0.5, objective="gain"), progress=said.append)
    assert res.certificate.passed
    assert any("more effort" in s for s in said)
    assert not lmi.proved_infeasible("CLARABEL: user_limit") and lmi.proved_infeasible("CLARABEL: infeasible")
    assert not lmi.proved_infeasible("CLARABEL: infeasible_inaccurate")


def test_fixed_gain_certificate_agrees_with_the_synthesis_and_never_exceeds_the_samples():
    """Quadratic stability of the closed-loop polytope for a given gain (Boyd, El Ghaoui, Feron and
    Balakrishnan 1994, ch. 5): for the LMI gain, the same LMIs with the gain fixed certify at least the
    synthesis's decay rate (to the bisection's resolution), and never more than the worst decay rate
    found on samples of the box (the polytope contains every model)."""
    from pathlib import Path

    from robust.analysis.metrics import evaluate
    from robust.case import load_case
    from robust.design import design, make_spec
    from robust.synthesis.lmi import certify_gain
    from robust.uncertainty import corners, monte_carlo

    case = load_case(Path(__file__).resolve().parent / "data" / "small_cart.toml")
    d = design(case, assess_gains=False)
    spec, _ = make_spec(case)
    pts = np.concatenate([corners(case.box), monte_carlo(case.box, 500, seed=11)])
    sampled = float(evaluate(case.box, pts, d.gain.K, names=("decay_rate",))["decay_rate"].min())
    c = certify_gain(d.polytope, d.gain.K, input_scale=spec.input_scale, upper=sampled)
    assert c.certificate is not None and c.certificate.passed
    assert c.decay_rate >= d.synthesis.decay_rate - c.resolution
    assert c.decay_rate <= sampled
    # a destabilising gain cannot be certified stable
    bad = d.gain.K.copy()
    bad[:, 2:] *= -1
    assert certify_gain(d.polytope, bad, input_scale=spec.input_scale, upper=1.0).decay_rate is None


def test_check_certify_marks_evidence_certified(capsys):
    import json
    from pathlib import Path

    from robust.cli import main

    small = Path(__file__).resolve().parent / "data" / "small_cart.toml"
    main(["check", str(small), "--certify", "--linear-only", "--quiet", "--json", "--samples", "100"])
    data = json.loads(capsys.readouterr().out)
    cert = data["certificates"]["placed"]
    stab = next(o for o in data["verdicts"][0]["outcomes"] if o["key"] == "closed_loop_stable")
    assert (stab["evidence"] == "certified") == (cert["decay_rate_per_s"] is not None)


def test_symmetric_placement_places_the_poles_and_mirrors_the_rows(transporter):
    """The closed-loop eigenvalues equal the requested poles (numpy eigvals as the outside check) and the
    gain is mirror-symmetric (common practice for a left-right symmetric vehicle)."""
    from robust.linear import reduced_model
    from robust.synthesis.nominal import place_symmetric
    from robust.vehicle import plant_batch

    m = reduced_model(plant_batch(transporter.vehicle))
    A, B = m.A[0], m.B[0]
    for poles in ([-1.0, -2.5, -6.0, -9.0], [-1.5, complex(-4, 3), complex(-4, -3), -7.0]):
        K = place_symmetric(A, B, np.array(poles, dtype=complex))
        np.testing.assert_allclose(
            np.sort_complex(np.linalg.eigvals(A - B @ K)), np.sort_complex(np.array(poles, dtype=complex)), atol=1e-8
        )
        np.testing.assert_array_equal(K[1], K[0] * np.array([1, -1, 1, 1]))
    with pytest.raises(ValueError, match="real pole"):
        place_symmetric(A, B, np.array([complex(-1, 1), complex(-1, -1), complex(-3, 2), complex(-3, -2)]))


def test_certificate_rechecks_torque_ellipsoid_and_fails_when_tampered():
    """The numpy re-check covers the invariant-ellipsoid torque bound (Boyd, El Ghaoui, Feron and
    Balakrishnan 1994, sec. 7.2.3): the initial states lie in {x: x' X^-1 x <= 1} and each wheel's
    torque is bounded on it. A certificate whose gain is tampered (scaled up) must fail the check."""
    from pathlib import Path

    from robust.case import load_case
    from robust.synthesis.lmi import _check_common

    case = load_case(Path(__file__).resolve().parent / "data" / "small_cart.toml")
    poly = moment_box(case.box)
    spec = Spec(
        decay_rate=0.3,
        objective="gain",
        input_scale=7.5,
        torque_limit=10.0,
        initial_states=np.array([[0.0, 0.0, np.radians(2.0), 0.0]]),
    )
    r = synthesize(poly, spec)
    cert = r.certificate
    assert cert.passed
    assert {"torque ellipsoid: initial states inside", "torque ellipsoid: torque bound"} <= set(cert.slack)
    # rebuild Y from the gain (scaled coordinates) and tamper with it: the torque bound must fail
    X1 = cert.lyapunov
    K_s = -(r.K / spec.input_scale) @ np.diag(spec.state_scale)
    Y = K_s @ X1
    n = 4
    zero = [(np.zeros((n, n)), np.zeros((n, n)))]
    honest = _check_common(poly, spec, 0.0, X1, Y, zero * 3, 1e-6)
    tampered = _check_common(poly, spec, 0.0, X1, 1e3 * Y, zero * 3, 1e-6)
    assert honest.slack["torque ellipsoid: torque bound"] <= honest.tolerance * 10
    assert tampered.slack["torque ellipsoid: torque bound"] > 0 and not tampered.passed


def test_an_active_lyapunov_bound_is_relaxed_not_reported_as_the_limit(transporter):
    """With the Lyapunov matrix boxed between I and 3 I (condition number <= 3) not even stability of the
    single nominal model certifies at 2 1/s; the synthesis must widen the bound rather than call the
    request impossible, and the widened answer must pass the numpy certificate (Lyapunov: any stable
    model has a Lyapunov matrix, so only the bound can stop it; common practice)."""
    from robust.uncertainty import Box

    poly = moment_box(Box(transporter.box.vehicle, ()))
    spec = Spec(decay_rate=2.0, objective="gain", lyapunov_bound=3.0, input_scale=20.0)
    r = synthesize(poly, spec)
    assert r.spec.lyapunov_bound > 3.0
    assert r.certificate.passed and r.decay_rate >= 2.0
    assert float(np.linalg.eigvalsh(r.certificate.lyapunov).max()) > 3.0  # it needed the wider bound


def test_fixed_gain_certificate_widens_an_active_bound(transporter):
    """The fixed-gain certificate with a tight bound reaches the same rate as with the default bound
    (to the bisection resolution) because the bound is widened while it is active."""
    from robust.analysis.metrics import evaluate
    from robust.synthesis.lmi import certify_gain
    from robust.uncertainty import Box

    box = Box(transporter.box.vehicle, ())
    poly = moment_box(box)
    from robust.case import resolve_gain

    K = resolve_gain(transporter, transporter.gains[0]).K
    true = float(evaluate(box, box.nominal[None, :], K, names=("decay_rate",))["decay_rate"][0])
    wide = certify_gain(poly, K, input_scale=20.0, upper=true)
    tight = certify_gain(poly, K, input_scale=20.0, upper=true, lyapunov_bound=1.5)
    assert tight.lyapunov_bound > 1.5
    assert tight.decay_rate is not None and wide.decay_rate is not None
    assert abs(tight.decay_rate - wide.decay_rate) <= 2 * wide.resolution
    assert tight.decay_rate <= true


def test_moment_box_reduction_keeps_the_same_polytope(transporter, monkeypatch):
    """Dropping vertices that are convex combinations of others leaves the polytope unchanged: every vertex
    of the full product polytope is a convex combination of the kept ones (linear program, scipy linprog as
    the outside reference)."""
    from scipy.optimize import linprog

    from robust.synthesis.polytope import hull_vertices
    from robust.uncertainty import Box, Range
    from robust.vehicle import get_parameter

    v = transporter.box.vehicle
    extra = [Range("wheel.bearing_friction_n_m_s_per_rad", 0.0, 0.1)]
    for name in ("chassis.mass_kg", "chassis.cg_height_m", "payload.pitch_inertia_kg_m2"):
        x = get_parameter(v, name)
        extra.append(Range(name, 0.9 * x, 1.1 * x))
    box = Box(v, tuple(transporter.box.ranges) + tuple(extra))
    poly = moment_box(box)
    assert poly.facts["product_vertices"] > poly.vertices  # something was dropped
    # a cube with interior and face points: exactly its 8 corners survive (elementary geometry)
    cube = np.array([[i, j, k] for i in (0.0, 1.0) for j in (0.0, 1.0) for k in (0.0, 1.0)])
    rng = np.random.default_rng(0)
    cloud = np.concatenate([cube, rng.random((40, 3)), [[0.5, 0.5, 1.0], [0.0, 0.5, 0.5]]])
    got = hull_vertices(cloud)
    assert sorted(map(tuple, got)) == sorted(map(tuple, cube))
    # each dropped moment vertex is a convex combination of the kept ones: record the product vertices
    import robust.synthesis.polytope as P

    product = []
    monkeypatch.setattr(P, "hull_vertices", lambda q, tol=1e-9: product.append(q) or q)
    moment_box(box)
    monkeypatch.undo()
    q_all = product[0]
    q_kept = hull_vertices(q_all)
    for q in q_all:
        n = q_kept.shape[0]
        res = linprog(
            np.zeros(n), A_eq=np.vstack([q_kept.T, np.ones(n)]), b_eq=np.concatenate([q, [1.0]]), bounds=(0, None)
        )
        assert res.status == 0, q
    assert len(q_kept) == poly.vertices


def test_sampled_hull_refuses_a_box_it_cannot_serve(cart):
    """On the delivery cart the image of the box is so curved that the inflated hull would contain models
    whose wheel torque acts with the wrong sign; the route must refuse and say so, and point to the
    rigorous route (which does certify this box)."""
    with pytest.raises(ValueError, match="opposite sign.*moment_box"):
        sampled_hull(cart.box)


def test_synthesis_warns_when_the_gain_saturates_the_drive():
    """A gain that drives the wheels into their torque limit is flagged with the peak and the locked-rotor
    torque (kt x min(current limit, supply / resistance): the stall torque of a DC motor, common practice);
    the decay objective without a torque bound is always flagged."""
    from pathlib import Path

    from robust.assess import assess
    from robust.case import load_case, resolve_gain
    from robust.design import actuator_warnings, locked_rotor_torque, make_spec
    from robust.gains import GainSet

    case = load_case(Path(__file__).resolve().parent / "data" / "small_cart.toml")
    spec, _ = make_spec(case)
    placed = resolve_gain(case, case.gains[0])
    hard = GainSet("hard", 8.0 * placed.K, "test")
    a = assess(case, [placed, hard], linear=False)
    locked = locked_rotor_torque(case)
    assert locked == pytest.approx(0.5 * min(15.0, 36.0 / 0.5))
    warn = actuator_warnings(case, spec, hard, a)
    assert len(warn) == 1 and "saturates" in warn[0] and f"{locked:.4g} N m" in warn[0]
    peak = max(w.value for m in a.time.gains[1].manoeuvres for w in m.worst if w.name == "peak_torque_n_m")
    assert peak >= 0.98 * locked
    quiet_peak = max(w.value for m in a.time.gains[0].manoeuvres for w in m.worst if w.name == "peak_torque_n_m")
    assert (actuator_warnings(case, spec, placed, a) == ()) == (quiet_peak < 0.98 * locked)
    decay = replace(spec, objective="decay", torque_limit=None)
    assert any("without a torque bound" in w for w in actuator_warnings(case, decay, placed))


def test_rate_search_reaches_the_spectral_abscissa_of_a_single_model(transporter):
    """For one LTI model, a Lyapunov matrix with decay rate a exists for every a below the decay rate
    -max Re(lambda) of the closed loop (Lyapunov's theorem applied to A + a I; Boyd, El Ghaoui, Feron and
    Balakrishnan 1994, sec. 2.2.3). So the fixed-gain rate search on a one-model polytope must certify
    the numpy eigenvalue decay rate to within its stopping tolerance (and the Lyapunov-bound
    conditioning), never more; and every point it returns passes the numpy certificate at that rate."""
    from robust.analysis.metrics import evaluate
    from robust.case import resolve_gain
    from robust.synthesis.lmi import RATE_TOLERANCE, certify_gain
    from robust.uncertainty import Box

    box = Box(transporter.box.vehicle, ())
    poly = moment_box(box)
    for g in transporter.gains:
        K = resolve_gain(transporter, g).K
        true = float(evaluate(box, box.nominal[None, :], K, names=("decay_rate",))["decay_rate"][0])
        c = certify_gain(poly, K, input_scale=20.0, upper=10.0 * true)
        assert c.certificate is not None and c.certificate.passed
        assert c.decay_rate <= true
        assert c.decay_rate >= true * (1.0 - 10 * RATE_TOLERANCE), (g.name, c.decay_rate, true)


def test_decay_objective_matches_a_bisection_on_the_same_lmis():
    """The rate search of the decay objective against plain bisection on the same hard-feasibility LMIs
    (the textbook quasi-convex method; Boyd, El Ghaoui, Feron and Balakrishnan 1994, sec. 2.2.3): on the
    small test cart both reach the same largest certified rate to the bisection's resolution, the search
    with a passing numpy certificate."""
    from dataclasses import replace
    from pathlib import Path

    from robust.case import load_case
    from robust.design import make_spec
    from robust.synthesis import lmi

    case = load_case(Path(__file__).resolve().parent / "data" / "small_cart.toml")
    spec = replace(make_spec(case)[0], objective="decay", lyapunov_bound=lmi.X_BOUND_MAX)
    poly = moment_box(case.box)
    r = synthesize(poly, spec)
    assert r.certificate.passed
    lo, hi = spec.decay_rate, 2.0 * r.decay_rate + 1.0
    steps = 7
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        res, _st = lmi._common(poly, spec, mid, 1e-6)
        if res is not None and res["certificate"].passed:
            lo = mid
        else:
            hi = mid
    resolution = (2.0 * r.decay_rate + 1.0 - spec.decay_rate) / 2**steps
    assert abs(r.decay_rate - lo) <= resolution + 0.03 * lo, (r.decay_rate, lo)


def test_rate_search_closes_in_few_solves_when_the_root_sits_next_to_the_certified_rate(monkeypatch):
    """The rate search on a model of its own solves: a slack ``s(a)`` that rises steeply past the root
    ``r`` (so bisection from a far upper trial walks down in halvings) and points that certify just below
    the trial rate.  The search must return a rate within its tolerance below ``r``, never above, and
    close the bracket in far fewer solves than halvings from the first upper trial would take
    (root bracketing with a secant step; common practice, e.g. Press et al., Numerical Recipes, 3rd ed.,
    sec. 9.2)."""
    import math

    from robust.synthesis import lmi

    root = 0.3934
    calls = []

    def fake_solve(poly, spec, a, delta):
        calls.append(a)
        s = math.expm1(8.0 * (a - root))
        return np.eye(4), None, None, s, "model: optimal"

    def fake_rate(poly, spec, X1, Y, slacks, delta):
        # a point certifies more than its trial rate while the slack is negative, never the root itself
        a = calls[-1]
        return min(root * (1.0 - 1e-3), a - math.expm1(8.0 * (a - root)) / 8.0)

    monkeypatch.setattr(lmi, "_slack_solve", fake_solve)
    monkeypatch.setattr(lmi, "_rate_of", fake_rate)
    rate, point, solves, _status = lmi._raise_rate(None, None, 0.01, 1e-6)
    tol = lmi.RATE_TOLERANCE * root
    assert point is not None
    assert root * (1.0 - 1e-3) - 2.0 * tol <= rate <= root
    assert solves == len(calls)
    assert solves <= 8, calls  # 7 now; the alternation of bisection and secant before took 11
