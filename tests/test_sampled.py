"""The sampled loop: exact discretisation with zero-order hold and latency, against python-control."""

from __future__ import annotations

import control
import numpy as np
import pytest

from robust.analysis.eigen import eigen_metrics, eigenvalues_4x4
from robust.analysis.sampled import discretize, sampled_decay_rate
from robust.case import resolve_gain
from robust.linear import reduced_model
from robust.uncertainty import corners


@pytest.fixture(scope="module")
def models(transporter):
    m = reduced_model(transporter.box.plant(corners(transporter.box)))
    return m.A, m.B, resolve_gain(transporter, transporter.gains[0]).K


def _c2d(A, B, h):
    """python-control's zero-order-hold discretisation (the outside reference)."""
    sysd = control.sample_system(control.ss(A, B, np.eye(4), np.zeros((4, 2))), h, method="zoh")
    return np.asarray(sysd.A), np.asarray(sysd.B)


@pytest.mark.parametrize("latency_fraction", [0.0, 0.3, 1.0])
def test_discretisation_equals_python_control_zoh(models, latency_fraction):
    """Ad = c2d(T).A; B0 = c2d(T - tau).B; B1 = e^{A (T - tau)} c2d(tau).B; B0 + B1 = c2d(T).B, to 1e-12."""
    A, B, _K = models
    T = 0.01
    tau = latency_fraction * T
    d = discretize(A, B, T, tau)
    for i in range(A.shape[0]):
        Ad, Bd = _c2d(A[i], B[i], T)
        scale = max(1.0, np.abs(Bd).max())
        np.testing.assert_allclose(d["Ad"][i], Ad, atol=1e-12)
        np.testing.assert_allclose(d["B0"][i] + d["B1"][i], Bd, atol=1e-12 * scale)
        if tau < T:
            np.testing.assert_allclose(d["B0"][i], _c2d(A[i], B[i], T - tau)[1], atol=1e-12 * scale)
        else:
            assert np.all(d["B0"][i] == 0)
        if tau > 0:
            Ea = _c2d(A[i], B[i], T - tau)[0]
            np.testing.assert_allclose(d["B1"][i], Ea @ _c2d(A[i], B[i], tau)[1], atol=1e-12 * scale)
        else:
            assert np.all(d["B1"][i] == 0)


def test_sampled_decay_rate_tends_to_the_continuous_one(models):
    """As the period shrinks the sampled loop's decay rate approaches the continuous-time one (the
    discretisation converges; common practice); a latency beyond the period is refused."""
    A, B, K = models
    cont = eigen_metrics(eigenvalues_4x4(A - B @ K)).decay_rate
    fine = sampled_decay_rate(A, B, K, 1e-5, 0.0)
    np.testing.assert_allclose(fine, cont, rtol=1e-3)
    with pytest.raises(ValueError, match="latency"):
        discretize(A, B, 0.01, 0.02)
