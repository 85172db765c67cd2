"""The compiled engine against the numpy reference engine (tests/numpy_engine.py).

Both integrate the same equations with the same fixed-step RK4 and the same controller; only the
order of floating-point operations differs (the numpy engine multiplies K by BLAS).  So every
metric must agree to 1e-9 of its largest value over the batch (values below 1e-3 SI units are
roundoff around zero, e.g. the yaw rate of a symmetric vehicle in a straight run: there the
tolerance is 1e-12 absolute).  The numpy engine itself is checked against scipy's solve_ivp in
tests/test_simulate.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import CASES
from numpy_engine import simulate_numpy

from robust.case import load_case, resolve_gain
from robust.simulate import Controller, Manoeuvre, simulate
from robust.timecheck import simulation_points

MANOEUVRES = [
    Manoeuvre("step", "speed_and_yaw_rate_step", 2.0, start_s=0.2, speed_m_s=1.5, yaw_rate_rad_s=0.8),
    Manoeuvre("ramp", "speed_ramp", 2.0, start_s=0.2, speed_m_s=2.5, ramp_time_s=0.7),
    Manoeuvre("yaw", "yaw_rate_step", 1.5, start_s=0.1, yaw_rate_rad_s=1.2),
    Manoeuvre("push", "push", 2.0, start_s=0.2, push_force_n=150.0, push_height_m=1.0, push_duration_s=0.2),
    Manoeuvre("tilt", "tilted_start", 1.5, initial_pitch_rad=0.2),
]
CONTROLLERS = [
    Controller(0.004, 0.002, np.radians(30.0), True),
    Controller(0.005, 0.0, np.radians(30.0), False, substeps=3),
]


@pytest.fixture(scope="module")
def batch():
    case = load_case(CASES / "delivery_cart.toml")
    plant = case.box.plant(simulation_points(case, case.study)[:24])
    gains = [resolve_gain(case, g).K for g in case.gains]
    return plant, gains


def _close(a: dict, b: dict) -> None:
    assert set(a) == set(b)
    for k in b:
        x, y = np.asarray(a[k], dtype=float), np.asarray(b[k], dtype=float)
        fin = np.isfinite(y)
        assert np.array_equal(np.isfinite(x), fin), k
        if fin.any():
            scale = max(1e-3, float(np.abs(y[fin]).max()))
            assert np.max(np.abs(x[fin] - y[fin])) <= 1e-9 * scale, k


@pytest.mark.parametrize("ctl", CONTROLLERS, ids=["latency+trim", "no-latency"])
@pytest.mark.parametrize("man", MANOEUVRES, ids=[m.name for m in MANOEUVRES])
def test_kernel_equals_numpy_reference(batch, man, ctl):
    plant, gains = batch
    for K in gains:
        scale = np.linspace(0.5, 1.5, plant.n)
        a = simulate(plant, K, man, ctl, scale=scale, envelope=True)
        b = simulate_numpy(plant, K, man, ctl, scale=scale, envelope=True)
        np.testing.assert_array_equal(a.fell, b.fell)
        np.testing.assert_allclose(a.fall_time_s, b.fall_time_s, rtol=1e-12)
        _close(a.metrics, b.metrics)
        if b.envelope is not None and len(b.envelope.t) == len(a.envelope.t):
            scale_env = np.maximum(np.abs(b.envelope.high).max(axis=0), 1e-3)
            assert np.all(np.abs(a.envelope.median - b.envelope.median) <= 1e-9 * scale_env)


def test_stop_at_current_limit_and_trace(batch):
    plant, gains = batch
    man = MANOEUVRES[0]
    ctl = CONTROLLERS[0]
    a = simulate(plant, gains[1], man, ctl, scale=np.full(plant.n, 2.0), stop_at_current_limit=True)
    b = simulate_numpy(plant, gains[1], man, ctl, scale=np.full(plant.n, 2.0), stop_at_current_limit=True)
    np.testing.assert_array_equal(a.metrics["reached_current_limit"], b.metrics["reached_current_limit"])
    assert a.metrics["reached_current_limit"].any()
    one = plant.take(slice(3, 4))
    ta = simulate(one, gains[0], man, ctl, trace=True).trace
    tb = simulate_numpy(one, gains[0], man, ctl, trace=True).trace
    n = min(len(ta.t), len(tb.t))
    np.testing.assert_allclose(ta.state[:, :n], tb.state[:, :n], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(ta.torque[:, :n], tb.torque[:, :n], rtol=1e-9, atol=1e-9)


def test_one_gain_per_row_equals_separate_runs(batch):
    plant, gains = batch
    man, ctl = MANOEUVRES[1], CONTROLLERS[0]
    Ks = np.stack([gains[i % 2] for i in range(plant.n)])
    mixed = simulate(plant, Ks, man, ctl)
    for g in (0, 1):
        rows = np.arange(plant.n) % 2 == g
        sep = simulate(plant.take(rows), gains[g], man, ctl)
        for k, v in sep.metrics.items():
            np.testing.assert_array_equal(mixed.metrics[k][rows], v, err_msg=k)
