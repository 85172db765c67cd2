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


SPEED_PITCH = [0, 2, 3]  # speed, pitch, pitch rate: moved by the common torque; yaw rate by the difference


def place_symmetric(A: np.ndarray, B: np.ndarray, poles: np.ndarray) -> np.ndarray:
    """Mirror-symmetric gain ``K`` (2 x 4) with ``eig(A - B K) = poles``.

    At upright the reduced model of a left-right symmetric vehicle splits in
    two: the common torque ``(u_L + u_R) / 2`` moves speed, pitch and pitch
    rate; the differential torque ``(u_R - u_L) / 2`` moves the yaw rate
    alone.  Three poles are placed on the first subsystem (single input:
    the assignment is unique) and one real pole on the yaw loop: the slowest
    real pole, so the balance loop gets the fastest ones.  The right row of
    ``K`` is the left row with the yaw-rate column negated, so speed and
    pitch commands never make the vehicle turn.
    """
    poles = np.asarray(poles, dtype=complex)
    A = np.asarray(A, dtype=float)
    B = np.asarray(B, dtype=float)
    scale = max(1.0, float(np.abs(A).max()), float(np.abs(B).max()))
    tol = 1e-9 * scale
    coupled = np.abs(A[1, SPEED_PITCH]).max() > tol or np.abs(A[SPEED_PITCH, 1]).max() > tol
    mirrored = np.allclose(B[SPEED_PITCH, 0], B[SPEED_PITCH, 1], atol=tol) and abs(B[1, 0] + B[1, 1]) <= tol
    if coupled or not mirrored:
        raise ValueError("the model is not left-right symmetric: the mirror-symmetric placement does not apply")
    real = [p for p in poles if abs(p.imag) <= 1e-12 * max(1.0, abs(p))]
    if not real:
        raise ValueError("mirror-symmetric placement needs at least one real pole for the yaw loop")
    yaw = max(real, key=lambda p: p.real).real  # the slowest real pole
    rest = list(poles)
    rest.remove(min(rest, key=lambda p: abs(p - yaw)))
    A_sp = A[np.ix_(SPEED_PITCH, SPEED_PITCH)]
    b_c = (B[SPEED_PITCH, 0] + B[SPEED_PITCH, 1])[:, None]
    k_c = np.asarray(signal.place_poles(A_sp, b_c, np.array(rest)).gain_matrix, dtype=float)[0]
    b_d = B[1, 1] - B[1, 0]
    k_w = (A[1, 1] - yaw) / b_d
    K = np.array([[k_c[0], -k_w, k_c[1], k_c[2]], [k_c[0], k_w, k_c[1], k_c[2]]])
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
