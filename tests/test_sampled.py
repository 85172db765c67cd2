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


def _crossings(w, L):
    """Gain crossover phase margins [deg] and frequencies from a frequency response on a dense grid."""
    mag = np.abs(L)
    i = np.flatnonzero(np.diff(np.sign(mag - 1.0)))
    t = (1.0 - mag[i]) / (mag[i + 1] - mag[i])
    ph = np.angle(L[i]) + t * np.angle(L[i + 1] / L[i])
    pm = np.degrees(np.mod(ph + np.pi, 2 * np.pi) - np.pi) + 180.0
    pm = np.where(pm > 180.0, pm - 360.0, pm)
    return pm, w[i] + t * (w[i + 1] - w[i])


def test_sampled_loop_margins_against_python_control_frequency_response(models):
    """The broken sampled loop's response equals python-control's evaluation of the same state-space system
    (1e-9), and its phase margin, delay margin and gain margin at Nyquist equal those read off python-control's
    frequency response on a 400,000-point uniform grid. (python-control 0.10's stability_margins on these
    6-state discrete loops reports crossovers where its own frequency response has |L| far from 1 - seen on
    the delivery cart - so its frequency response, not that routine, is the reference here.)"""
    from robust.analysis.sampled import _response, broken_loop, sampled_loop_margins

    A, B, K = models
    T, tau = 0.004, 0.002
    d = discretize(A, B, T, tau)
    r = sampled_loop_margins(A, B, K, T, tau)
    w = np.linspace(1e-3, np.pi / T, 400_000)
    for i in (0, 3, 6):
        for j in (0, 1):
            Phi, G, C = broken_loop(d, K, j)
            sys = control.ss(Phi[i], G[i], C[i], 0, dt=T)
            z = np.exp(1j * np.array([0.5, 7.0, 60.0, 700.0]) * T)
            ref = np.array([complex(np.squeeze(sys(zz))) for zz in z])
            np.testing.assert_allclose(_response(Phi[i : i + 1], G[i : i + 1], C[i : i + 1], z)[0], ref, rtol=1e-9)
            L = np.squeeze(sys.frequency_response(w).complex)
            pm, wc = _crossings(w, L)
            k = np.argmin(np.abs(pm))
            assert r["phase_margin_deg"][i, j] == pytest.approx(abs(pm[k]), abs=1e-3)
            assert r["delay_margin_s"][i, j] == pytest.approx(
                min(np.radians(p) / c for p, c in zip(pm, wc) if p > 0), rel=1e-4
            )
            nyq = np.squeeze(sys(np.exp(1j * np.pi))).real
            if nyq < 0 and -1 / nyq > 1:
                assert r["gain_margin_up_db"][i, j] <= 20 * np.log10(-1 / nyq) + 1e-9


def test_sampled_loop_margins_tend_to_the_continuous_ones(models):
    """With a period 100 times shorter than the case's and no latency, the sampled loop's margins are the
    continuous-time ones (themselves checked against python-control in test_margins)."""
    from robust.analysis.margins import loop_margins
    from robust.analysis.sampled import sampled_loop_margins

    A, B, K = models
    r = sampled_loop_margins(A, B, K, 4e-5, 0.0, points=20_000)
    lm = loop_margins(A, B, K)
    np.testing.assert_allclose(r["phase_margin_deg"], lm.phase_margin_deg, atol=0.05)
    np.testing.assert_allclose(r["delay_margin_s"], lm.delay_margin_s, rtol=2e-3)
    np.testing.assert_allclose(r["disk_margin"], lm.disk_margin, rtol=2e-3)
