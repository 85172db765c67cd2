"""Linear models at upright, zero speed and zero torque; controllability facts.

The full model has the 7 states of :mod:`robust.dynamics`; the reduced model
keeps ``(speed, yaw_rate, pitch, pitch_rate)``, the states a balance
controller feeds back.  Every function works on a batch (leading axis ``n``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.dynamics import HEADING, PITCH, PITCH_RATE, SPEED, STATE_NAMES, YAW_RATE, X
from robust.vehicle import Plant

REDUCED_STATES = ("speed", "yaw_rate", "pitch", "pitch_rate")
REDUCED_UNITS = ("m/s", "rad/s", "rad", "rad/s")
REDUCED_INDEX = (SPEED, YAW_RATE, PITCH, PITCH_RATE)


@dataclass(frozen=True)
class LinearModel:
    """State-space matrices with a leading batch axis.

    ``A`` has shape ``(n, k, k)`` and ``B`` shape ``(n, k, 2)`` (inputs:
    commanded torque left and right [N m]; the drive's torque
    constant ratio is included in ``B``).
    """

    A: np.ndarray
    B: np.ndarray
    states: tuple[str, ...]


def _pieces(p: Plant):
    Ml = p.M * p.l
    m11 = p.M + 2.0 * p.m_w + 2.0 * p.J_w / p.r**2
    m33 = p.I2 + Ml * p.l
    m22 = p.I3 + 2.0 * p.m_w * p.d**2 + 2.0 * p.J_w * p.d**2 / p.r**2 + 2.0 * p.K_w
    det = m11 * m33 - Ml**2
    return Ml, m11, m22, m33, det


def reduced_model(plant: Plant) -> LinearModel:
    """Reduced 4-state model ``x' = A x + B u`` at upright.

    Inputs are the *commanded* torques; the delivered torque is the ratio of
    actual to nominal torque constant times the command (drive below its
    limits).

    Notes
    -----
    Linearising the equations in :mod:`robust.dynamics` at ``p = v = w = 0``
    with ``S = tau_L + tau_R - 2 c_b (v / r - p')`` gives
    ``v' = ((m33/r + M l) S - M^2 g l^2 p) / det``,
    ``p'' = (m11 M g l p - (m11 + M l / r) S) / det`` and
    ``w' = d (tau_R - tau_L - 2 c_b d w / r) / (r m22(0))``,
    with ``det = m11 m33 - (M l)^2``.
    """
    p = plant
    n = p.n
    Ml, m11, m22, m33, det = _pieces(p)
    a_v = (m33 / p.r + Ml) / det  # dv'/dS
    a_p = -(m11 + Ml / p.r) / det  # dp''/dS
    A = np.zeros((n, 4, 4))
    B = np.zeros((n, 4, 2))
    dS_dv = -2.0 * p.c_b / p.r
    dS_dpr = 2.0 * p.c_b
    A[:, 0, 0] = a_v * dS_dv
    A[:, 0, 2] = -(Ml**2) * p.g / det
    A[:, 0, 3] = a_v * dS_dpr
    A[:, 1, 1] = -2.0 * p.c_b * p.d**2 / (p.r**2 * m22)
    A[:, 2, 3] = 1.0
    A[:, 3, 0] = a_p * dS_dv
    A[:, 3, 2] = m11 * Ml * p.g / det
    A[:, 3, 3] = a_p * dS_dpr
    k = p.kt_ratio
    B[:, 0, :] = (a_v * k)[:, None]
    B[:, 1, 0] = -p.d / (p.r * m22) * k
    B[:, 1, 1] = p.d / (p.r * m22) * k
    B[:, 3, :] = (a_p * k)[:, None]
    return LinearModel(A=A, B=B, states=REDUCED_STATES)


def full_model(plant: Plant) -> LinearModel:
    """Full 7-state model at upright, heading zero: adds ``x' = v``, ``y' = 0``, ``heading' = w``."""
    red = reduced_model(plant)
    n = plant.n
    A = np.zeros((n, 7, 7))
    B = np.zeros((n, 7, 2))
    idx = np.array(REDUCED_INDEX)
    A[:, idx[:, None], idx[None, :]] = red.A
    B[:, idx, :] = red.B
    A[:, X, SPEED] = 1.0
    A[:, HEADING, YAW_RATE] = 1.0
    return LinearModel(A=A, B=B, states=STATE_NAMES)


def controllability_matrix(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Batched ``[B, AB, ..., A^(k-1) B]``, shape ``(n, k, k m)``."""
    blocks = [B]
    for _ in range(A.shape[-1] - 1):
        blocks.append(A @ blocks[-1])
    return np.concatenate(blocks, axis=-1)


def _scaled(A: np.ndarray, B: np.ndarray):
    """Diagonally balanced copies of ``A`` and ``B`` (rank is invariant to scaling)."""
    k = A.shape[-1]
    d = np.ones(A.shape[:-2] + (k,))
    for _ in range(5):
        row = np.abs(A).sum(-1) + np.abs(B).sum(-1)
        col = np.abs(A).sum(-2)
        ratio = np.sqrt(np.where((row > 0) & (col > 0), col / np.where(row > 0, row, 1), 1.0))
        d = d * ratio
        A = A * ratio[..., :, None] / ratio[..., None, :]
        B = B * ratio[..., :, None]
    return A, B


def controllability_rank(A: np.ndarray, B: np.ndarray, *, rtol: float = 1e-9) -> np.ndarray:
    """Numerical rank of the controllability matrix for each model, shape ``(n,)``.

    States are balanced first; a singular value counts when it exceeds
    ``rtol`` times the largest.
    """
    As, Bs = _scaled(A, B)
    sv = np.linalg.svd(controllability_matrix(As, Bs), compute_uv=False)
    return np.sum(sv > rtol * sv[..., :1], axis=-1)


@dataclass(frozen=True)
class UncontrollableMode:
    """A mode that the inputs cannot move (PBH test)."""

    eigenvalue: complex
    left_vector: tuple[float, ...]
    states: tuple[str, ...]


def pbh_uncontrollable(
    A: np.ndarray, B: np.ndarray, states: tuple[str, ...], *, rtol: float = 1e-9
) -> list[UncontrollableMode]:
    """Popov-Belevitch-Hautus test for one model (2-D ``A``, ``B``).

    For each distinct eigenvalue ``s`` of ``A``, the mode is uncontrollable
    when ``[s I - A, B]`` loses rank; the left null vector ``q`` (with
    ``q^T A = s q^T`` and ``q^T B = 0``) names the states involved.
    """
    k = A.shape[0]
    eig = np.linalg.eigvals(A)
    scale = max(1.0, float(np.max(np.abs(A))), float(np.max(np.abs(B))))
    out: list[UncontrollableMode] = []
    seen: list[complex] = []
    for s in eig:
        if any(abs(s - t) <= 1e-8 * scale for t in seen):
            continue
        seen.append(complex(s))
        M = np.concatenate([s * np.eye(k) - A, B], axis=1)
        u, sv, _ = np.linalg.svd(M)
        nullity = int(np.sum(sv <= rtol * scale))
        for j in range(nullity):
            q = u[:, k - 1 - j]
            q = q / q[np.argmax(np.abs(q))]
            involved = tuple(states[i] for i in range(k) if abs(q[i]) > 1e-6)
            out.append(
                UncontrollableMode(
                    eigenvalue=complex(s),
                    left_vector=tuple(float(np.real(x)) for x in q),
                    states=involved,
                )
            )
    return out


@dataclass(frozen=True)
class OpenLoopFacts:
    """Open-loop facts of a batch of reduced models; arrays of shape ``(n,)``.

    Attributes
    ----------
    poles
        Open-loop poles of the reduced model, shape ``(n, 4)``, sorted by real part.
    unstable_pole
        The largest real part (the pitch divergence rate). [1/s]
    time_to_double_s
        ``ln 2 / unstable_pole``; ``inf`` if the model is not unstable. [s]
    """

    poles: np.ndarray
    unstable_pole: np.ndarray
    time_to_double_s: np.ndarray


def open_loop_facts(model: LinearModel) -> OpenLoopFacts:
    """Open-loop poles, divergence rate and time to double."""
    poles = np.linalg.eigvals(model.A)
    order = np.argsort(poles.real, axis=-1)
    poles = np.take_along_axis(poles, order, axis=-1)
    top = poles.real[:, -1]
    with np.errstate(divide="ignore"):
        ttd = np.where(top > 0, np.log(2.0) / np.where(top > 0, top, 1.0), np.inf)
    return OpenLoopFacts(poles=poles, unstable_pole=top, time_to_double_s=ttd)


@dataclass(frozen=True)
class ReferenceShift:
    """Whether shifting the state by a speed / yaw-rate reference is exact.

    Attributes
    ----------
    speed_residual, yaw_rate_residual
        ``A @ e`` for a unit speed [1 m/s] and unit yaw-rate [1 rad/s]
        reference, shape ``(n, 4)``; zero when the shift is exact.
    exact
        True where both residuals vanish, shape ``(n,)``.
    trim_per_speed_n_m_s
        Trim torque per wheel per unit speed that holds a steady speed
        (both wheels alike). [N m s/m]
    trim_per_yaw_rate_n_m_s
        Trim torque per unit yaw rate, right wheel (left is the negative). [N m s/rad]
    """

    speed_residual: np.ndarray
    yaw_rate_residual: np.ndarray
    exact: np.ndarray
    trim_per_speed_n_m_s: np.ndarray
    trim_per_yaw_rate_n_m_s: np.ndarray


def reference_shift(plant: Plant) -> ReferenceShift:
    """Check the state shift ``x - x_ref`` used for speed and yaw-rate commands.

    Notes
    -----
    A steady state ``x_ref = (v, w, 0, 0)`` is an equilibrium of the
    unforced model only when ``A x_ref = 0``.  Bearing friction breaks this:
    holding speed ``v`` and yaw rate ``w`` needs the wheel torques
    ``tau = c_b (v -/+ d w) / r`` (left, right), which cancel the friction
    at each bearing.  The commanded torque is the delivered torque divided by
    the torque-constant ratio.
    """
    A = reduced_model(plant).A
    rs = A[:, :, 0]
    ry = A[:, :, 1]
    scale = np.maximum(1.0, np.abs(A).max(axis=(1, 2)))
    exact = (np.abs(rs).max(-1) <= 1e-12 * scale) & (np.abs(ry).max(-1) <= 1e-12 * scale)
    k = plant.kt_ratio
    return ReferenceShift(
        speed_residual=rs,
        yaw_rate_residual=ry,
        exact=exact,
        trim_per_speed_n_m_s=plant.c_b / plant.r / k,
        trim_per_yaw_rate_n_m_s=plant.c_b * plant.d / plant.r / k,
    )


def trim_torque(plant: Plant, speed, yaw_rate, *, shift: ReferenceShift | None = None) -> np.ndarray:
    """Commanded trim torques ``(n, 2)`` [N m] that hold ``speed`` [m/s] and ``yaw_rate`` [rad/s].

    Pass a precomputed ``shift`` (from :func:`reference_shift`) to save work in loops.
    """
    shift = shift or reference_shift(plant)
    base = shift.trim_per_speed_n_m_s * speed
    turn = shift.trim_per_yaw_rate_n_m_s * yaw_rate
    return np.stack([base - turn, base + turn], axis=-1)


def steady_state_error(model: LinearModel, K: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Steady-state error ``x_ss - x_ref`` of ``u = -K (x - x_ref)`` without trim.

    ``K`` has shape ``(2, 4)``; ``reference`` shape ``(4,)``; returns ``(n, 4)``.
    Solves ``(A - B K) x_ss = -B K x_ref``.
    """
    Acl = model.A - model.B @ K
    rhs = -(model.B @ K @ reference)
    xss = np.linalg.solve(Acl, rhs[..., None])[..., 0]
    return xss - reference
