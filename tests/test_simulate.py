"""Batched nonlinear simulation with the drive model and a sampled-data controller."""

from __future__ import annotations

from dataclasses import replace

import control
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from robust.case import CaseError, parse_case, resolve_gain
from robust.dynamics import SPEED, derivative, drive_output, energy
from robust.linear import REDUCED_INDEX, reduced_model
from robust.simulate import Controller, Manoeuvre, largest_step, simulate
from robust.uncertainty import corners
from robust.vehicle import plant_batch


@pytest.fixture(scope="module")
def setup(transporter):
    K = resolve_gain(transporter, transporter.gains[0]).K
    plant = transporter.box.plant(corners(transporter.box)[[0, 3, 5]])
    return transporter, K, plant


def _reference_solve_ivp(plant1, K, man, ctl):
    """Per-sample reference: scipy solve_ivp (RK45, rtol 1e-10) between controller samples."""
    T = ctl.sample_period_s
    x = np.zeros(7)
    starts = []
    peak_pitch = 0.0
    peak_torque = 0.0
    steps = int(round(man.duration_s / T))
    one = np.ones(1)
    for k in range(steps):
        starts.append(x.copy())
        vref, wref = man.reference(k * T, one)
        xref = np.array([vref[0], wref[0], 0.0, 0.0])
        u = -(x[list(REDUCED_INDEX)] - xref) @ K.T

        def f(t, y, u=u):
            yy = y[None, :]
            spin = np.array(
                [
                    [
                        (y[3] - plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                        (y[3] + plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                    ]
                ]
            )
            tau = drive_output(plant1, u[None, :], spin)["torque"]
            return derivative(plant1, yy, tau)[0]

        sol = solve_ivp(f, (k * T, (k + 1) * T), x, method="RK45", rtol=1e-10, atol=1e-12, dense_output=True)
        for tt in np.linspace(k * T, (k + 1) * T, ctl.substeps + 1)[:-1]:
            y = sol.sol(tt)
            spin = np.array(
                [
                    [
                        (y[3] - plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                        (y[3] + plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                    ]
                ]
            )
            peak_torque = max(peak_torque, float(np.abs(drive_output(plant1, u[None, :], spin)["torque"]).max()))
            peak_pitch = max(peak_pitch, abs(float(y[5])))
        x = sol.y[:, -1]
    return np.array(starts), peak_pitch, peak_torque


def test_batched_rk4_matches_solve_ivp(setup):
    """Reference: scipy.integrate.solve_ivp (RK45, rtol 1e-10), one sample at a
    time with the same zero-order-hold controller and drive model.  Our fixed
    step is 2.5 ms; RK4's error there is ~1e-8 of the state scale, so 1e-6
    relative is a safe bound.  The step saturates the drive (current limit)."""
    case, K, plant = setup
    ctl = Controller(sample_period_s=0.005, latency_s=0.0, trim=False)
    man = Manoeuvre("step", "speed_step", 1.5, start_s=0.1, speed_m_s=2.0)
    res = simulate(plant, K, man, ctl, trace=True)
    assert not res.fell.any()
    assert res.metrics["current_limit_fraction"].max() > 0  # the drive limit is exercised
    for i in range(plant.n):
        p1 = plant.take(slice(i, i + 1))
        states_ref, pitch_ref, torque_ref = _reference_solve_ivp(p1, K, man, ctl)
        ours = res.trace.state[i]
        assert ours.shape == states_ref.shape
        scale = np.abs(states_ref).max(axis=0) + 1e-3
        assert np.abs(ours - states_ref).max(axis=0).max() / scale.max() < 1e-6
        assert res.metrics["peak_pitch_rad"][i] == pytest.approx(pitch_ref, rel=1e-6)
        assert res.metrics["peak_torque_n_m"][i].max() == pytest.approx(torque_ref, rel=1e-6)


def test_energy_conserved_with_no_torque(setup):
    """Physics law: with zero gain (no torque) and no friction, energy is
    conserved while the body falls from a small lean; RK4 at 1 ms keeps it to
    1e-7 of M g l."""
    case, _K, plant = setup
    ctl = Controller(sample_period_s=0.001, latency_s=0.0, trim=False, fall_angle_rad=np.radians(80), substeps=1)
    man = Manoeuvre("lean", "tilted_start", 2.0, initial_pitch_rad=np.radians(3.0))
    res = simulate(plant, np.zeros((2, 4)), man, ctl, trace=True)
    tr = res.trace
    for i in range(plant.n):
        live = np.abs(tr.state[i, :, 5]) < np.radians(79)
        e = energy(plant.take(np.zeros(live.sum(), dtype=int) + i), tr.state[i, live])
        scale = plant.M[i] * plant.l[i] * plant.g[i]
        assert np.abs(e - e[0]).max() / scale < 1e-7
        assert np.abs(tr.state[i, live, 5]).max() > np.radians(40)  # it really fell a long way


def test_energy_change_equals_work_of_wheel_torques(cart):
    """Work-energy theorem: E(t) - E(0) equals the integral of the wheel
    torques times the wheels' rotation relative to the body, minus the
    friction loss (trapezoid rule on a 1 kHz record; tolerance 1e-4 of the
    energy change covers the quadrature error)."""
    K = resolve_gain(cart, cart.gains[0]).K
    plant = plant_batch(cart.vehicle)
    ctl = Controller(sample_period_s=0.001, latency_s=0.0, trim=True, substeps=1)
    man = Manoeuvre("go", "speed_and_yaw_rate_step", 2.0, start_s=0.1, speed_m_s=1.0, yaw_rate_rad_s=0.5)
    tr = simulate(plant, K, man, ctl, trace=True).trace
    x = tr.state[0]
    e = energy(plant.take(np.zeros(len(x), dtype=int)), x)
    spin = np.stack(
        [
            (x[:, 3] - plant.d[0] * x[:, 4]) / plant.r[0] - x[:, 6],
            (x[:, 3] + plant.d[0] * x[:, 4]) / plant.r[0] - x[:, 6],
        ],
        -1,
    )
    tau = tr.torque[0]
    power_left = np.sum(tau[:-1] * 0.5 * (spin[:-1] + spin[1:]), -1)
    loss = plant.c_b[0] * np.sum(0.5 * (spin[:-1] ** 2 + spin[1:] ** 2), -1)
    work = np.cumsum((power_left - loss) * ctl.sample_period_s)
    change = e[1:] - e[0]
    assert np.abs(change).max() > 1.0
    np.testing.assert_allclose(work, change, atol=1e-4 * np.abs(change).max() + 1e-3)


def test_small_step_matches_linear_sampled_data_response(transporter):
    """Reference: python-control.  The linear model, discretised with a
    zero-order hold at the controller period (control.sample_system), closed
    with u = -K (x - r), and simulated by control.forced_response.  A 2 cm/s
    step stays within 0.1 deg of pitch, so nonlinear terms are ~1e-4 of the
    response: tolerance 1e-3 of the peak."""
    K = resolve_gain(transporter, transporter.gains[0]).K
    plant = plant_batch(transporter.vehicle)
    T = 0.005
    ctl = Controller(sample_period_s=T, latency_s=0.0, trim=False, substeps=2)
    man = Manoeuvre("tiny", "speed_step", 4.0, start_s=0.0, speed_m_s=0.02)
    tr = simulate(plant, K, man, ctl, trace=True).trace
    lin = reduced_model(plant)
    sysd = control.sample_system(control.ss(lin.A[0], lin.B[0], np.eye(4), 0), T, method="zoh")
    Ad, Bd = sysd.A, sysd.B
    cl = control.ss(Ad - Bd @ K, Bd @ K, np.eye(4), 0, dt=T)
    steps = tr.t.size
    r = np.zeros((4, steps))
    r[0] = 0.02
    resp = control.forced_response(cl, T=np.arange(steps) * T, U=r)
    ours = tr.state[0][:, list(REDUCED_INDEX)].T
    for j in (0, 2):
        scale = np.abs(resp.outputs[j]).max()
        np.testing.assert_allclose(ours[j], resp.outputs[j], atol=1e-3 * scale)


def test_large_step_falls_and_largest_step_is_found(setup):
    """Acceptance: a gain that passes the linear checks still falls for a big
    enough speed step; the largest handled step lies between a handled and a failed run."""
    case, K, plant = setup
    ctl = case.controller
    man = Manoeuvre("probe", "speed_step", 3.0, start_s=0.1, speed_m_s=1.0)
    no_load = case.vehicle.drive.supply_v / case.vehicle.drive.back_emf_v_s_per_rad * case.vehicle.wheel.radius_m
    s = largest_step(plant, K, man, ctl, upper=no_load, rounds=3)
    assert np.all(s["handled"] > 0.5) and np.all(s["handled"] < s["failed"])
    big = simulate(plant, K, man, ctl, scale=np.full(plant.n, 0.95 * no_load))
    assert big.fell[2]  # the heavy rider falls; light riders may survive by leaning far back
    ok = simulate(plant, K, man, ctl, scale=s["handled"])
    assert not ok.fell.any() and ok.metrics["current_limit_fraction"].max() == 0
    bad = simulate(plant, K, man, ctl, scale=s["failed"])
    assert np.all(bad.fell | (bad.metrics["current_limit_fraction"].max(axis=1) > 0))


def test_speed_step_response_metrics(setup):
    case, K, plant = setup
    man = Manoeuvre("step", "speed_step", 10.0, start_s=0.5, speed_m_s=1.0)
    res = simulate(plant, K, man, case.controller, envelope=True)
    m = res.metrics
    assert np.all(m["speed_rise_time_s"] > 0) and np.all(np.isfinite(m["speed_rise_time_s"]))
    assert np.all(m["speed_final_error_m_s"] < 0.02)
    env = res.envelope
    assert env.low.shape == env.high.shape == (2000, 5)
    assert np.all(env.low <= env.median + 1e-12) and np.all(env.median <= env.high + 1e-12)
    assert env.high[-1, 0] == pytest.approx(1.0, abs=0.02)


def _edit(case_text, old, new):
    assert old in case_text
    return case_text.replace(old, new, 1)


@pytest.mark.parametrize(
    ("old", "new", "msg"),
    [
        (
            'kind = "speed_step"\nduration_s = 10.0',
            'kind = "speed_step"\nduration_s = -1.0',
            r"'manoeuvres\.pull_away\.duration_s': expected between 0 and 120",
        ),
        ('kind = "speed_step"', 'kind = "cartwheel"', r"'manoeuvres\.pull_away\.kind': expected one of"),
        ("speed_m_s = 1.5", "speed_m_s = 9.5", r"beyond the drive's no-load speed 8\.64 m/s"),
        ("push_duration_s = 0.2", "push_duration_s = 0.0", r"push_duration_s': expected > 0"),
        (
            "latency_s = 0.001",
            "latency_s = 0.01",
            r"'controller\.latency_s': expected between 0 and the sample period",
        ),
        (
            "yaw_rate_rad_s = 1.0\n",
            "yaw_rate_rad_s = 1.0\nspeed_m_s = 1.0\n",
            r"unknown key 'manoeuvres\.turn_on_the_spot\.speed_m_s'",
        ),
    ],
)
def test_bad_manoeuvres_rejected(transporter, old, new, msg):
    text = open(transporter.source).read()
    with pytest.raises(CaseError, match=msg):
        parse_case(_edit(text, old, new))


def test_push_moves_the_vehicle(setup):
    """A forward push on the body makes the controller drive forward to catch it."""
    case, K, plant = setup
    man = Manoeuvre("push", "push", 3.0, start_s=0.2, push_force_n=100.0, push_height_m=1.2, push_duration_s=0.2)
    tr = simulate(plant.take(slice(0, 1)), K, man, case.controller, trace=True).trace
    assert tr.state[0, :, SPEED].max() > 0.05
    assert tr.state[0, :, 5].max() > 0.0


def test_replace_controller_keeps_defaults():
    c = replace(Controller(), latency_s=0.002)
    assert c.sample_period_s == 0.005 and c.latency_s == 0.002


def test_bracketing_equals_the_plain_algorithm_exactly(cart):
    """The largest-step bracketing skips the rows handled at their upper bound; it must still equal, to the
    bit, the plain algorithm written out here (every row simulated every round).  Reference: the
    algorithm's own definition (exact equality, no tolerance)."""
    from robust.simulate import _handled, bracket_rows, manoeuvre_columns, plant_columns
    from robust.uncertainty import monte_carlo

    case = cart
    ctl = case.controller
    pts = np.concatenate([corners(case.box), monte_carlo(case.box, 24, seed=3)])
    plant = case.box.plant(pts)
    K = resolve_gain(case, case.gains[0]).K
    man = Manoeuvre("probe", "speed_step", 2.0, start_s=0.1, speed_m_s=1.0)
    P = plant_columns(plant, ctl)
    M = manoeuvre_columns(man, ctl, np.ones(plant.n), stop=True)
    Ks = np.broadcast_to(K, (plant.n, 2, 4))
    wide = bracket_rows(P, Ks, M, ctl, upper=np.full(plant.n, 4.0), rounds=3, points_per_round=5)
    upper = np.where(np.arange(plant.n) % 2 == 0, float(np.median(wide[0])), 4.0)  # some rows pass their bound
    full = bracket_rows(P, Ks, M, ctl, upper=upper, rounds=3, points_per_round=5)
    assert full[2].any() and not full[2].all()  # both kinds of rows are present
    lo, hi = np.zeros(plant.n), upper.copy()
    top = _handled(P, Ks, M, ctl, hi)
    frac = np.arange(1, 6) / 6
    rep = np.repeat(np.arange(plant.n), 5)
    for _ in range(3):
        amps = lo[:, None] + (hi - lo)[:, None] * frac[None, :]
        ok = _handled(P[rep], Ks[rep], M[rep], ctl, amps.reshape(-1)).reshape(plant.n, 5)
        ff = np.where(~ok.all(axis=1), np.argmin(ok, axis=1), 5)
        new_lo = np.where(ff > 0, amps[np.arange(plant.n), np.maximum(ff - 1, 0)], lo)
        new_hi = np.where(ff < 5, amps[np.arange(plant.n), np.minimum(ff, 4)], hi)
        lo, hi = np.where(top, hi, new_lo), np.where(top, hi, new_hi)
    np.testing.assert_array_equal(full[0], lo)
    np.testing.assert_array_equal(full[1], hi)
