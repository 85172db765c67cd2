"""Linearisation, controllability and reference-shift facts."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from conftest import random_plant

from robust.dynamics import STATE_NAMES, derivative
from robust.linear import (
    controllability_rank,
    full_model,
    open_loop_facts,
    pbh_uncontrollable,
    reduced_model,
    reference_shift,
    steady_state_error,
    trim_torque,
)
from robust.vehicle import plant_batch


def test_linear_model_matches_central_difference_jacobian():
    """Reference: central-difference Jacobian of the nonlinear model at upright
    (step 1e-6; truncation error O(h^2) ~ 1e-12, so atol 1e-6 relative to
    the largest entry covers rounding)."""
    rng = np.random.default_rng(2)
    n = 20
    p = random_plant(rng, n)
    lin = full_model(p)
    h = 1e-6
    x0 = np.zeros((n, 7))
    u0 = np.zeros((n, 2))
    J = np.zeros((n, 7, 7))
    Jb = np.zeros((n, 7, 2))
    for j in range(7):
        e = np.zeros(7)
        e[j] = h
        J[:, :, j] = (derivative(p, x0 + e, u0) - derivative(p, x0 - e, u0)) / (2 * h)
    for j in range(2):
        e = np.zeros(2)
        e[j] = h
        delivered = (p.kt / p.kt_nominal)[:, None]
        Jb[:, :, j] = (derivative(p, x0, (u0 + e) * delivered) - derivative(p, x0, (u0 - e) * delivered)) / (2 * h)
    scale = np.abs(lin.A).max()
    np.testing.assert_allclose(lin.A, J, rtol=1e-6, atol=1e-6 * scale)
    np.testing.assert_allclose(lin.B, Jb, rtol=1e-6, atol=1e-6 * np.abs(lin.B).max())


def test_pitch_pole_tends_to_physical_pendulum(transporter):
    """Handbook physics: with wheels of huge mass and inertia the base cannot
    move, and the unstable pole tends to sqrt(M g l / (I_pitch + M l^2)).
    With wheel mass 1e9 the remaining coupling is O(1e-9): rtol 1e-6."""
    v = transporter.vehicle
    heavy = replace(v, wheel=replace(v.wheel, mass_kg=1e9, spin_inertia_kg_m2=1e9))
    p = plant_batch(heavy)
    top = open_loop_facts(reduced_model(p)).unstable_pole[0]
    expect = np.sqrt(p.M[0] * p.g[0] * p.l[0] / (p.I2[0] + p.M[0] * p.l[0] ** 2))
    assert top == pytest.approx(expect, rel=1e-6)
    # and the real vehicle diverges faster than the pinned pendulum (base reacts)
    assert open_loop_facts(reduced_model(plant_batch(v))).unstable_pole[0] > expect


def test_controllability_ranks(cart, transporter):
    """Common practice for this vehicle class (no source needed): the full
    7-state model has rank 6 (lateral position unreachable), the reduced
    4-state model rank 4."""
    for case in (cart, transporter):
        p = plant_batch(case.vehicle)
        assert controllability_rank(full_model(p).A, full_model(p).B)[0] == 6
        assert controllability_rank(reduced_model(p).A, reduced_model(p).B)[0] == 4
    rng = np.random.default_rng(0)
    p = random_plant(rng, 100)
    assert np.all(controllability_rank(full_model(p).A, full_model(p).B) == 6)
    assert np.all(controllability_rank(reduced_model(p).A, reduced_model(p).B) == 4)


def test_pbh_names_lateral_position(transporter):
    p = plant_batch(transporter.vehicle)
    m = full_model(p)
    modes = pbh_uncontrollable(m.A[0], m.B[0], STATE_NAMES)
    assert len(modes) == 1
    assert modes[0].states == ("y",)
    assert abs(modes[0].eigenvalue) < 1e-12
    # a model with no yaw input would lose heading and yaw rate too
    B = m.B[0].copy()
    B[4, :] = 0.0
    named = {s for mode in pbh_uncontrollable(m.A[0], B, STATE_NAMES) for s in mode.states}
    assert "yaw_rate" in named or "heading" in named


def test_reference_shift_exact_without_friction(transporter, cart):
    assert reference_shift(plant_batch(transporter.vehicle)).exact[0]
    assert not reference_shift(plant_batch(cart.vehicle)).exact[0]


def test_trim_torque_holds_steady_motion_in_nonlinear_model(cart):
    """Physics check: with the trim torque, steady speed and yaw rate at zero
    pitch is an equilibrium of the full nonlinear model (accelerations vanish)."""
    p = plant_batch(cart.vehicle)
    v, w = 1.3, 0.4
    tau = trim_torque(p, v, w) * p.kt_ratio[:, None]
    x = np.array([[0.0, 0.0, 0.0, v, w, 0.0, 0.0]])
    dx = derivative(p, x, tau)
    np.testing.assert_allclose(dx[0, 3:], 0.0, atol=1e-12)
    # without trim the linear closed loop has a steady-state error
    K = np.array([[-10.0, -5.0, -200.0, -30.0], [-10.0, 5.0, -200.0, -30.0]])
    err = steady_state_error(reduced_model(p), K, np.array([v, w, 0.0, 0.0]))
    assert np.abs(err).max() > 1e-4
