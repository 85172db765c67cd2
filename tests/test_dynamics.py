"""Nonlinear equations of motion and the drive envelope."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import random_plant
from scipy.integrate import solve_ivp

from robust.dynamics import accelerations, derivative, drive_output, energy, torque_envelope
from robust.vehicle import plant_batch


def test_accelerations_match_independent_kane_derivation():
    """Reference: sympy.physics.mechanics (Kane's method with the three rolling
    constraints written from the contact-point velocities), an independent
    derivation in tests/sympy_model.py.  rtol 1e-9: both are exact formulas,
    differences are floating-point rounding only."""
    from sympy_model import derive

    mass_f, forcing_f, dep_f = derive()
    rng = np.random.default_rng(7)
    p = random_plant(rng, 12)
    state = rng.normal(size=(12, 4)) * [2.0, 1.5, 0.6, 2.0]
    torque = rng.normal(size=(12, 2)) * 20
    ours = accelerations(p, state[:, 0], state[:, 1], state[:, 2], state[:, 3], torque)
    for i in range(12):
        v, w, th, thd = state[i]
        r, d = p.r[i], p.d[i]
        params = [
            p.r[i],
            p.m_w[i],
            p.J_w[i],
            p.K_w[i],
            d,
            p.c_b[i],
            p.M[i],
            p.l[i],
            p.I1[i],
            p.I2[i],
            p.I3[i],
            p.g[i],
            torque[i, 0],
            torque[i, 1],
        ]
        uind = [thd, (v - d * w) / r - thd, (v + d * w) / r - thd]
        q = [0.1, 0.2, 0.3, th, 0.4, 0.5]
        u = uind + list(np.asarray(dep_f(params, q, uind), dtype=float).ravel())
        acc = np.linalg.solve(
            np.asarray(mass_f(params, q, u), dtype=float),
            np.asarray(forcing_f(params, q, u), dtype=float).ravel(),
        )[:3]
        thdd, uld, urd = acc
        ref = [r / 2 * (uld + urd + 2 * thdd), r / (2 * d) * (urd - uld), thdd]
        np.testing.assert_allclose(ours[i], ref, rtol=1e-9, atol=1e-9)


def test_energy_conserved_without_torque_or_friction():
    """Physics law: with zero torque and zero friction the total energy is
    conserved.  Integrated with scipy's solve_ivp (DOP853, rtol 1e-11) for
    5 s from a leaning, turning state; tolerance 1e-7 relative to the
    energy scale M g l, far above the integrator error."""
    rng = np.random.default_rng(3)
    p = random_plant(rng, 3, friction=False)
    for i in range(3):
        pi = p.take(slice(i, i + 1))
        x0 = np.array([0.0, 0.0, 0.0, 0.5, 0.8, 0.05, 0.0])

        def f(t, x, pi=pi):
            return derivative(pi, x[None, :], np.zeros((1, 2)))[0]

        sol = solve_ivp(f, (0, 5), x0, method="DOP853", rtol=1e-11, atol=1e-12, dense_output=True)
        xs = sol.y.T
        # stop before the body falls below horizontal (the model has no ground contact)
        keep = np.abs(xs[:, 5]) < 1.4
        e = energy(pi.take(np.zeros(keep.sum(), dtype=int)), xs[keep])
        scale = float(pi.M[0] * pi.l[0] * pi.g[0])
        assert keep.sum() > 10
        assert np.max(np.abs(e - e[0])) / scale < 1e-7


def test_energy_rate_equals_torque_power_and_friction_loss():
    """Physics law (work-energy theorem): dE/dt equals the power of the wheel
    torques minus the bearing-friction loss, each on the wheel's rotation
    relative to the body.  Checked pointwise at random states; rtol 1e-9."""
    rng = np.random.default_rng(11)
    n = 50
    p = random_plant(rng, n)
    x = rng.normal(size=(n, 7)) * [1, 1, 1, 2, 1, 0.5, 2]
    tau = rng.normal(size=(n, 2)) * 15
    h = 1e-6
    dx = derivative(p, x, tau)
    dedt = (energy(p, x + h * dx) - energy(p, x - h * dx)) / (2 * h)
    v, w, thd = x[:, 3], x[:, 4], x[:, 6]
    rel = np.stack([(v - p.d * w) / p.r - thd, (v + p.d * w) / p.r - thd], -1)
    power = np.sum(tau * rel, -1) - p.c_b * np.sum(rel**2, -1)
    np.testing.assert_allclose(dedt, power, rtol=1e-6, atol=1e-6 * np.abs(power).max())


def test_drive_envelope_textbook_points(transporter):
    """Textbook DC-motor relations: wheel locked -> k_t min(i_max, V/R); at the
    no-load speed V/k_e the forward torque is zero."""
    p = plant_batch(transporter.vehicle)
    d = transporter.vehicle.drive
    env = torque_envelope(p, np.array([0.0]))
    assert env["high"][0] == pytest.approx(
        d.torque_constant_n_m_per_a * min(d.current_limit_a, d.supply_v / d.resistance_ohm), rel=1e-12
    )
    env = torque_envelope(p, np.array([d.supply_v / d.back_emf_v_s_per_rad]))
    assert abs(env["high"][0]) < 1e-9
    # half the no-load speed, a weak current limit: voltage line k_t (V - k_e w) / R
    from dataclasses import replace

    weak = plant_batch(replace(transporter.vehicle, drive=replace(d, current_limit_a=1000.0)))
    w = 0.5 * d.supply_v / d.back_emf_v_s_per_rad
    env = torque_envelope(weak, np.array([w]))
    assert env["high"][0] == pytest.approx(
        d.torque_constant_n_m_per_a * (d.supply_v - d.back_emf_v_s_per_rad * w) / d.resistance_ohm
    )


def test_drive_output_scales_and_clips():
    rng = np.random.default_rng(5)
    p = random_plant(rng, 200)
    cmd = rng.normal(size=(200, 2)) * 40
    spin = rng.normal(size=(200, 2)) * 20
    out = drive_output(p, cmd, spin)
    env = torque_envelope(p, spin)
    assert np.all(out["torque"] <= env["high"] + 1e-12)
    assert np.all(out["torque"] >= np.minimum(env["low"], env["high"]) - 1e-12)
    free = ~(out["current_limited"] | out["voltage_limited"])
    np.testing.assert_allclose(out["torque"][free], (cmd * (p.kt / p.kt_nominal)[:, None])[free], rtol=1e-12)
    # within the limit wherever the supply can hold it; beyond that the motor is
    # back-driven past no-load speed and the voltage limit rules
    ke, R, V, imax = (a[:, None] for a in (p.ke, p.R, p.V, p.imax))
    holdable = ((V - ke * spin) / R >= -imax) & ((-V - ke * spin) / R <= imax)
    assert np.all(np.abs(out["current"][holdable]) <= np.broadcast_to(imax, spin.shape)[holdable] + 1e-12)
    assert np.all(np.abs(out["current"][~holdable]) > np.broadcast_to(imax, spin.shape)[~holdable])
    assert free.any() and out["current_limited"].any() and out["voltage_limited"].any()
