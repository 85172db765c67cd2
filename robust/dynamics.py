"""Nonlinear equations of motion of a two-wheeled balancing vehicle, batched.

States (7, in this order; SI units)::

    0 x          position of the axle midpoint, east      [m]
    1 y          position of the axle midpoint, north     [m]
    2 heading    yaw angle of the axle                    [rad]
    3 speed      forward speed of the axle midpoint       [m/s]
    4 yaw_rate   heading rate                             [rad/s]
    5 pitch      body lean, positive forward              [rad]
    6 pitch_rate                                          [rad/s]

Inputs (2): delivered wheel torque, left then right [N m], acting between
the body and the wheel (positive drives the vehicle forward).

Notes
-----
Derived with Kane's method for generalized speeds (speed, yaw_rate,
pitch_rate), rigid wheels rolling without slip on flat level ground, no
wheel lift, and viscous bearing friction ``c_b`` on the relative rotation of
each wheel with respect to the body.  With ``S`` and ``D`` the sum and the
difference (right minus left) of the net wheel torques,

    m11 v' + M l cos(p) p'' = S / r + M l sin(p) (p'^2 + w^2)
    M l cos(p) v' + m33 p'' = M g l sin(p) - S - (I3 - I1 - M l^2) sin(p) cos(p) w^2
    m22(p) w' = d D / r - 2 (I1 - I3 + M l^2) sin(p) cos(p) w p' - M l sin(p) v w

with ``m11 = M + 2 m_w + 2 J_w / r^2``, ``m33 = I2 + M l^2`` and
``m22(p) = I1 sin^2 p + I3 cos^2 p + M l^2 sin^2 p + 2 m_w d^2 + 2 J_w d^2/r^2 + 2 K_w``.
The tests derive the same equations independently with sympy.physics.mechanics.
"""

from __future__ import annotations

import numpy as np

from robust.vehicle import Plant

STATE_NAMES = ("x", "y", "heading", "speed", "yaw_rate", "pitch", "pitch_rate")
STATE_UNITS = ("m", "m", "rad", "m/s", "rad/s", "rad", "rad/s")
INPUT_NAMES = ("torque_left", "torque_right")
X, Y, HEADING, SPEED, YAW_RATE, PITCH, PITCH_RATE = range(7)


def wheel_spin_rates(plant: Plant, speed, yaw_rate, pitch_rate):
    """Wheel spin rates relative to the body, left and right.

    Returns an array of shape ``(n, 2)`` [rad/s]: the rate at which each motor
    turns, ``(v -/+ d w) / r - p'``.
    """
    left = (speed - plant.d * yaw_rate) / plant.r - pitch_rate
    right = (speed + plant.d * yaw_rate) / plant.r - pitch_rate
    return np.stack([left, right], axis=-1)


def accelerations(plant: Plant, speed, yaw_rate, pitch, pitch_rate, torque, push=None):
    """Accelerations ``(v', w', p'')`` of a batch of vehicles.

    Parameters
    ----------
    plant
        Batch of ``n`` vehicles.
    speed, yaw_rate, pitch, pitch_rate
        Arrays of shape ``(n,)``. [m/s, rad/s, rad, rad/s]
    torque
        Delivered wheel torques, shape ``(n, 2)``, left then right. [N m]
    push
        Optional ``(force, height)``: a horizontal forward force on the body
        [N] at a height above the axle along the body axis [m], each ``(n,)``.
        Its generalized forces are ``F`` (speed) and ``F h cos(p)`` (pitch).

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 3)``: forward acceleration [m/s^2], yaw acceleration
        [rad/s^2], pitch acceleration [rad/s^2].
    """
    p = plant
    torque = np.asarray(torque, dtype=float)
    if np.any(p.c_b):
        rel = wheel_spin_rates(p, speed, yaw_rate, pitch_rate)
        net = torque - p.c_b[:, None] * rel
    else:
        net = torque
    S = net[:, 0] + net[:, 1]
    D = net[:, 1] - net[:, 0]
    s, c = np.sin(pitch), np.cos(pitch)
    Ml, m11, m33 = p.Ml, p.m11, p.m33
    s2 = s * s
    m22 = (p.I1 + Ml * p.l) * s2 + p.I3 * (1.0 - s2) + p.yaw_wheels
    w2 = yaw_rate * yaw_rate
    f1 = S / p.r + Ml * s * (pitch_rate * pitch_rate + w2)
    f3 = Ml * p.g * s - S - (p.I3 - p.I1 - Ml * p.l) * s * c * w2
    if push is not None:
        force, height = push
        f1 = f1 + force
        f3 = f3 + force * height * c
    Mlc = Ml * c
    det = m11 * m33 - Mlc * Mlc
    dv = (m33 * f1 - Mlc * f3) / det
    ddp = (m11 * f3 - Mlc * f1) / det
    dw = (
        p.d * D / p.r - 2.0 * (p.I1 - p.I3 + Ml * p.l) * s * c * yaw_rate * pitch_rate - Ml * s * speed * yaw_rate
    ) / m22
    return np.stack([dv, dw, ddp], axis=-1)


def derivative(plant: Plant, state, torque, push=None):
    """Time derivative of the 7-state vector, shape ``(n, 7)``.

    ``state`` has shape ``(n, 7)`` (see module docstring); ``torque`` the
    delivered wheel torques ``(n, 2)`` [N m]; ``push`` as in :func:`accelerations`.
    """
    state = np.asarray(state, dtype=float)
    v, w, th, thd = state[:, SPEED], state[:, YAW_RATE], state[:, PITCH], state[:, PITCH_RATE]
    acc = accelerations(plant, v, w, th, thd, torque, push)
    hd = state[:, HEADING]
    out = np.empty_like(state)
    out[:, X] = v * np.cos(hd)
    out[:, Y] = v * np.sin(hd)
    out[:, HEADING] = w
    out[:, SPEED] = acc[:, 0]
    out[:, YAW_RATE] = acc[:, 1]
    out[:, PITCH] = thd
    out[:, PITCH_RATE] = acc[:, 2]
    return out


def energy(plant: Plant, state):
    """Kinetic plus potential energy of each vehicle, shape ``(n,)`` [J].

    Potential energy is measured from the axle height.
    """
    p = plant
    state = np.asarray(state, dtype=float)
    v, w, th, thd = state[:, SPEED], state[:, YAW_RATE], state[:, PITCH], state[:, PITCH_RATE]
    s, c = np.sin(th), np.cos(th)
    Ml, m11 = p.Ml, p.m11
    m22 = (p.I1 + Ml * p.l) * s**2 + p.I3 * c**2 + p.yaw_wheels
    kinetic = 0.5 * m11 * v**2 + Ml * c * v * thd + 0.5 * (p.I2 + Ml * p.l) * thd**2
    kinetic = kinetic + 0.5 * m22 * w**2
    return kinetic + Ml * p.g * c


def torque_envelope(plant: Plant, spin_rate):
    """Wheel torque the drive can deliver at a given motor speed.

    Parameters
    ----------
    plant
        Batch of ``n`` vehicles.
    spin_rate
        Wheel speed relative to the body, shape ``(n,)`` or ``(n, k)``. [rad/s]

    Returns
    -------
    dict
        ``"low"`` and ``"high"``: the most negative and most positive
        deliverable torque [N m], same shape as ``spin_rate``.

    Notes
    -----
    Textbook permanent-magnet DC motor: terminal voltage ``u = R i + k_e w``
    with ``|u| <= V`` and ``|i| <= i_max``; torque ``k_t i``.  At the no-load
    speed ``V / k_e`` the forward torque is zero; with the wheel locked it is
    ``k_t min(i_max, V / R)``.
    """
    spin_rate = np.asarray(spin_rate, dtype=float)
    lo, hi, _, _ = _current_bounds(plant, spin_rate)
    extra = (slice(None),) + (None,) * (spin_rate.ndim - 1)
    return {"low": plant.kt[extra] * lo, "high": plant.kt[extra] * hi}


def _current_bounds(plant: Plant, spin_rate: np.ndarray):
    """Reachable current interval and the two voltage-limited currents.

    The supply voltage is a hard limit; the current limit is enforced within
    it.  Beyond the no-load speed plus ``R i_max / k_e`` (motor back-driven
    into overspeed) no current within the limit is reachable and the
    interval collapses to the voltage-limited current nearest to it.
    """
    extra = (slice(None),) + (None,) * (spin_rate.ndim - 1)
    ke, R, V, imax = (a[extra] for a in (plant.ke, plant.R, plant.V, plant.imax))
    v_hi = (V - ke * spin_rate) / R
    v_lo = (-V - ke * spin_rate) / R
    lo = np.clip(-imax, v_lo, v_hi)
    hi = np.clip(imax, v_lo, v_hi)
    return lo, hi, v_lo, v_hi


def delivered_torque(plant: Plant, wanted_current: np.ndarray, spin_rate: np.ndarray) -> np.ndarray:
    """Delivered torque ``(n, 2)`` [N m] for wanted currents ``(n, 2)`` [A] (hot path of the simulator)."""
    lo, hi, _, _ = _current_bounds(plant, spin_rate)
    return plant.kt[:, None] * np.minimum(np.maximum(wanted_current, lo), hi)


def drive_output(plant: Plant, command, spin_rate):
    """Torque and current a drive delivers for a commanded torque.

    The controller converts its torque command to a current with the
    *nominal* torque constant; the current is clipped by the current limit
    and by the voltage headroom left after back-EMF; the wheel receives the
    *actual* torque constant times that current.

    Parameters
    ----------
    plant
        Batch of ``n`` vehicles.
    command
        Commanded torques, shape ``(n, 2)``. [N m]
    spin_rate
        Wheel speeds relative to the body, shape ``(n, 2)``. [rad/s]

    Returns
    -------
    dict
        ``"torque"`` delivered [N m], ``"current"`` [A], ``"current_limited"``
        and ``"voltage_limited"`` (bool), each of shape ``(n, 2)``.
    """
    command = np.asarray(command, dtype=float)
    spin_rate = np.asarray(spin_rate, dtype=float)
    kt, ktn = plant.kt[:, None], plant.kt_nominal[:, None]
    wanted = command / ktn
    lo, hi, v_lo, v_hi = _current_bounds(plant, spin_rate)
    current = np.clip(wanted, lo, hi)
    limited = current != wanted
    voltage_limited = limited & (((wanted > hi) & (hi >= v_hi)) | ((wanted < lo) & (lo <= v_lo)))
    return {
        "torque": kt * current,
        "current": current,
        "current_limited": limited & ~voltage_limited,
        "voltage_limited": voltage_limited,
    }
