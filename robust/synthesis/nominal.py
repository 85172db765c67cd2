"""Nominal designs on one linear model: pole placement and LQR."""

from __future__ import annotations

import numpy as np
from scipy import linalg, signal


def place(A: np.ndarray, B: np.ndarray, poles: np.ndarray) -> np.ndarray:
    """Gain ``K`` (2 x 4) with ``eig(A - B K) = poles`` (scipy.signal.place_poles, YT method).

    Raises ``ValueError`` when the requested poles cannot be placed
    (multiplicity above the input count, not closed under conjugation).
    """
    poles = np.asarray(poles, dtype=complex)
    res = signal.place_poles(A, B, poles, method="YT", maxiter=100)
    K = np.asarray(res.gain_matrix, dtype=float)
    got = np.sort_complex(np.linalg.eigvals(A - B @ K))
    want = np.sort_complex(poles)
    if not np.allclose(got, want, rtol=1e-6, atol=1e-8 * max(1.0, float(np.abs(want).max()))):
        raise ValueError(f"pole placement missed the requested poles: got {got}, wanted {want}")
    return K


def lqr(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: np.ndarray) -> dict[str, np.ndarray]:
    """Continuous-time LQR: ``K = R^-1 B^T P`` with ``P`` from the algebraic Riccati equation.

    Returns ``{"K": (2, 4), "P": (4, 4)}``; minimises the integral of
    ``x^T Q x + u^T R u``; the optimal cost from ``x0`` is ``x0^T P x0``.
    """
    Q = np.asarray(Q, dtype=float)
    R = np.asarray(R, dtype=float)
    if np.any(np.linalg.eigvalsh(Q) < -1e-12 * max(1.0, float(np.abs(Q).max()))):
        raise ValueError("LQR state weight must be positive semidefinite")
    if np.any(np.linalg.eigvalsh(R) <= 0):
        raise ValueError("LQR input weight must be positive definite")
    P = linalg.solve_continuous_are(A, B, Q, R)
    K = np.linalg.solve(R, B.T @ P)
    return {"K": K, "P": P}


def bryson_weights(max_state: np.ndarray, max_input: np.ndarray) -> dict[str, np.ndarray]:
    """Bryson's rule: ``Q = diag(1 / x_max^2)``, ``R = diag(1 / u_max^2)``.

    Reference: Bryson and Ho, *Applied Optimal Control* (1975).
    """
    max_state = np.asarray(max_state, dtype=float)
    max_input = np.asarray(max_input, dtype=float)
    if np.any(max_state <= 0) or np.any(max_input <= 0):
        raise ValueError("Bryson's rule needs positive maximum excursions")
    return {"Q": np.diag(1.0 / max_state**2), "R": np.diag(1.0 / max_input**2)}


BRYSON_KEYS = (
    "max_speed_error_m_s",
    "max_yaw_rate_error_rad_s",
    "max_pitch_deg",
    "max_pitch_rate_deg_s",
    "max_torque_n_m",
)


def bryson_from_keys(d) -> dict[str, np.ndarray]:
    """Bryson weights from the case-file keys in :data:`BRYSON_KEYS` (angles in degrees there)."""
    return bryson_weights(
        np.array(
            [
                d["max_speed_error_m_s"],
                d["max_yaw_rate_error_rad_s"],
                np.radians(d["max_pitch_deg"]),
                np.radians(d["max_pitch_rate_deg_s"]),
            ]
        ),
        np.array([d["max_torque_n_m"]] * 2),
    )
