"""Closed-loop eigenvalues and their metrics."""

from __future__ import annotations

import control
import numpy as np
import pytest

from robust.analysis.eigen import charpoly_4x4, eigen_metrics, eigenvalues_4x4


def _match(a, b):
    """Largest distance from a root in ``a`` to the nearest root in ``b``, per row."""
    return np.abs(a[:, :, None] - b[:, None, :]).min(-1).max(-1)


def test_eigenvalues_match_lapack_on_random_matrices():
    """Reference: numpy.linalg.eigvals (LAPACK).  Well-separated roots agree to
    ~1e-12 relative; we allow 1e-9 times the spectral radius."""
    rng = np.random.default_rng(0)
    A = rng.normal(size=(20000, 4, 4)) * rng.uniform(0.1, 50, size=(20000, 1, 1))
    ours = eigenvalues_4x4(A)
    ref = np.linalg.eigvals(A)
    scale = np.abs(ref).max(-1)
    assert np.all(_match(ours, ref) <= 1e-9 * scale)
    assert np.all(_match(ref, ours) <= 1e-9 * scale)


def test_clustered_and_repeated_eigenvalues_fall_back_to_lapack():
    rng = np.random.default_rng(1)
    D = np.zeros((500, 4, 4))
    D[:, range(4), range(4)] = [-1.0, -1.0, -2.0, -3.0]
    Q = rng.normal(size=(500, 4, 4))
    A = Q @ D @ np.linalg.inv(Q)
    ours = eigenvalues_4x4(A)
    assert np.all(_match(ours, np.linalg.eigvals(A)) <= 1e-9 * 3)


def test_charpoly_matches_numpy_poly():
    """Reference: numpy.poly (characteristic polynomial from eigenvalues)."""
    rng = np.random.default_rng(2)
    A = rng.normal(size=(50, 4, 4))
    ours = charpoly_4x4(A)
    for i in range(50):
        np.testing.assert_allclose(ours[i], np.poly(A[i])[1:].real, rtol=1e-9, atol=1e-10)


def test_metrics_match_python_control_damp(transporter):
    """Reference: python-control's poles() and damp() (natural frequency and
    damping of every pole), on closed loops of the bundled case."""
    from robust.case import resolve_gain
    from robust.linear import reduced_model
    from robust.uncertainty import monte_carlo

    K = resolve_gain(transporter, transporter.gains[0]).K
    m = reduced_model(transporter.box.plant(monte_carlo(transporter.box, 40, seed=1)))
    em = eigen_metrics(eigenvalues_4x4(m.A - m.B @ K))
    for i in range(40):
        sys = control.ss(m.A[i] - m.B[i] @ K, m.B[i], np.eye(4), 0)
        wn, zeta, poles = control.damp(sys, doprint=False)
        assert em.spectral_abscissa[i] == pytest.approx(poles.real.max(), rel=1e-9)
        assert em.min_damping[i] == pytest.approx(zeta.min(), rel=1e-9, abs=1e-12)
        assert em.max_natural_frequency[i] == pytest.approx(wn.max(), rel=1e-9)
        assert em.slowest_time_constant_s[i] == pytest.approx(-1 / poles.real.max(), rel=1e-9)


def test_unstable_metrics_are_flagged_not_nan():
    e = np.array([[1.0 + 0j, -2.0, -3.0 + 1j, -3.0 - 1j], [0.0, -1.0, -2.0, -3.0]])
    m = eigen_metrics(e)
    assert list(m.stable) == [False, False]
    assert m.min_damping[0] == -1.0 and m.min_damping[1] == 0.0
    assert np.isinf(m.slowest_time_constant_s).all()
