"""Physical parameters of a two-wheeled balancing vehicle, in SI units.

A vehicle is a rigid body (chassis plus payload, composed by the parallel-axis
theorem) on an axle with two wheels, driven by one motor per wheel.  The
frozen dataclasses here hold one nominal vehicle; :class:`Plant` holds the
physics-level parameters of many vehicles at once (leading batch axis), which
is what the dynamics and the linear models consume.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields, replace
from functools import cached_property

import numpy as np

STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901 conventional value


@dataclass(frozen=True)
class Wheel:
    """Wheel and axle geometry (both wheels alike)."""

    radius_m: float
    mass_kg: float
    spin_inertia_kg_m2: float
    diametral_inertia_kg_m2: float
    half_track_m: float
    bearing_friction_n_m_s_per_rad: float = 0.0


@dataclass(frozen=True)
class Body:
    """A rigid body whose centre of mass lies above the axle midpoint.

    Inertias are principal inertias about the body's own centre of mass, with
    axes forward (roll), lateral (pitch) and vertical (yaw) when upright.
    """

    mass_kg: float
    cg_height_m: float
    roll_inertia_kg_m2: float
    pitch_inertia_kg_m2: float
    yaw_inertia_kg_m2: float


@dataclass(frozen=True)
class Drive:
    """One wheel drive; constants are referred to the wheel (after gearing).

    ``torque_constant_n_m_per_a`` is the value the controller assumes
    (nominal).  A range on this parameter varies the *actual* constant while
    the controller keeps the nominal one.
    """

    torque_constant_n_m_per_a: float
    back_emf_v_s_per_rad: float
    resistance_ohm: float
    supply_v: float
    current_limit_a: float


@dataclass(frozen=True)
class Vehicle:
    """One nominal vehicle."""

    wheel: Wheel
    chassis: Body
    payload: Body
    drive: Drive
    gravity_m_s2: float = STANDARD_GRAVITY


@dataclass(frozen=True)
class ParameterInfo:
    """Description of one named vehicle parameter."""

    name: str
    unit: str
    text: str
    sign: str  # "positive", "nonnegative" or "any"
    plausible: tuple[float, float] = (-math.inf, math.inf)  # physical plausibility bounds, same unit


PARAMETERS: dict[str, ParameterInfo] = {}


def _register(group: str, field: str, unit: str, text: str, allow_zero: bool = False) -> None:
    name = f"{group}.{field}"
    sign = "nonnegative" if allow_zero else "positive"
    PARAMETERS[name] = ParameterInfo(name, unit, text, sign, _PLAUSIBLE.get(field, (-math.inf, math.inf)))


# Plausibility bounds for a wheeled vehicle that a person could ride or walk beside (common practice:
# generous by orders of magnitude, they only catch unit slips and typing errors such as 1e300).
_PLAUSIBLE = {
    "radius_m": (1e-3, 2.0),
    "mass_kg": (0.0, 1e4),
    "spin_inertia_kg_m2": (0.0, 1e3),
    "diametral_inertia_kg_m2": (0.0, 1e3),
    "half_track_m": (1e-3, 5.0),
    "bearing_friction_n_m_s_per_rad": (0.0, 1e3),
    "cg_height_m": (-10.0, 10.0),
    "roll_inertia_kg_m2": (0.0, 1e5),
    "pitch_inertia_kg_m2": (0.0, 1e5),
    "yaw_inertia_kg_m2": (0.0, 1e5),
    "torque_constant_n_m_per_a": (1e-4, 1e3),
    "back_emf_v_s_per_rad": (1e-4, 1e3),
    "resistance_ohm": (1e-5, 1e3),
    "supply_v": (0.1, 1e4),
    "current_limit_a": (1e-3, 1e5),
}


for _g in ("wheel",):
    _register(_g, "radius_m", "m", "wheel radius")
    _register(_g, "mass_kg", "kg", "mass of one wheel")
    _register(_g, "spin_inertia_kg_m2", "kg m^2", "one wheel's inertia about its axle")
    _register(_g, "diametral_inertia_kg_m2", "kg m^2", "one wheel's inertia about a diameter")
    _register(_g, "half_track_m", "m", "axle midpoint to wheel mid-plane")
    _register(
        _g,
        "bearing_friction_n_m_s_per_rad",
        "N m s/rad",
        "viscous friction between wheel and body",
        allow_zero=True,
    )
for _g, _who in (("chassis", "chassis"), ("payload", "rider or cargo")):
    _register(_g, "mass_kg", "kg", f"{_who} mass", allow_zero=_g == "payload")
    _register(_g, "cg_height_m", "m", f"{_who} centre-of-mass height above the axle")
    PARAMETERS[f"{_g}.cg_height_m"] = replace(PARAMETERS[f"{_g}.cg_height_m"], sign="any")
    for _ax in ("roll", "pitch", "yaw"):
        _register(
            _g,
            f"{_ax}_inertia_kg_m2",
            "kg m^2",
            f"{_who} {_ax} inertia about its own centre of mass",
            allow_zero=_g == "payload",
        )
_register("drive", "torque_constant_n_m_per_a", "N m/A", "torque constant at the wheel")
_register("drive", "back_emf_v_s_per_rad", "V s/rad", "back-EMF constant at the wheel")
_register("drive", "resistance_ohm", "ohm", "winding resistance")
_register("drive", "supply_v", "V", "supply voltage")
_register("drive", "current_limit_a", "A", "current limit per wheel")


@dataclass(frozen=True)
class Plant:
    """Physics-level parameters of ``n`` vehicles; every field has shape ``(n,)``.

    Attributes
    ----------
    r, m_w, J_w, K_w, d, c_b
        Wheel radius [m], wheel mass [kg], wheel spin and diametral inertia
        [kg m^2], half track [m], bearing friction [N m s/rad].
    M, l, I1, I2, I3
        Composite body mass [kg], centre-of-mass height above the axle [m],
        roll, pitch and yaw inertia about the composite centre of mass [kg m^2].
    g
        Gravitational acceleration [m/s^2].
    kt, kt_nominal, ke, R, V, imax
        Actual and nominal torque constant [N m/A], back-EMF constant
        [V s/rad], resistance [ohm], supply [V], current limit [A].
    """

    r: np.ndarray
    m_w: np.ndarray
    J_w: np.ndarray
    K_w: np.ndarray
    d: np.ndarray
    c_b: np.ndarray
    M: np.ndarray
    l: np.ndarray
    I1: np.ndarray
    I2: np.ndarray
    I3: np.ndarray
    g: np.ndarray
    kt: np.ndarray
    kt_nominal: np.ndarray
    ke: np.ndarray
    R: np.ndarray
    V: np.ndarray
    imax: np.ndarray

    @property
    def n(self) -> int:
        """Number of vehicles in the batch."""
        return int(self.r.shape[0])

    @cached_property
    def Ml(self) -> np.ndarray:
        """``M l``: first moment of the body about the axle. [kg m]"""
        return self.M * self.l

    @cached_property
    def m11(self) -> np.ndarray:
        """Effective translational mass ``M + 2 m_w + 2 J_w / r^2``. [kg]"""
        return self.M + 2.0 * self.m_w + 2.0 * self.J_w / self.r**2

    @cached_property
    def m33(self) -> np.ndarray:
        """Pitch inertia about the axle ``I2 + M l^2``. [kg m^2]"""
        return self.I2 + self.Ml * self.l

    @cached_property
    def yaw_wheels(self) -> np.ndarray:
        """Yaw inertia contributed by the wheels ``2 m_w d^2 + 2 J_w d^2 / r^2 + 2 K_w``. [kg m^2]"""
        return 2.0 * self.m_w * self.d**2 + 2.0 * self.J_w * self.d**2 / self.r**2 + 2.0 * self.K_w

    @property
    def kt_ratio(self) -> np.ndarray:
        """Actual over nominal torque constant. [-]"""
        return self.kt / self.kt_nominal

    def take(self, index: np.ndarray | slice) -> Plant:
        """The sub-batch at ``index``."""
        return Plant(**{f.name: getattr(self, f.name)[index] for f in fields(self)})


def get_parameter(vehicle: Vehicle, name: str) -> float:
    """Value of the named parameter (``group.field``) of a vehicle."""
    if name not in PARAMETERS:
        raise KeyError(f"unknown vehicle parameter {name!r}; expected one of {sorted(PARAMETERS)}")
    group, field = name.split(".")
    return float(getattr(getattr(vehicle, group), field))


def with_parameter(vehicle: Vehicle, name: str, value: float) -> Vehicle:
    """A copy of ``vehicle`` with one named parameter changed (payload inertias not scaled)."""
    get_parameter(vehicle, name)
    group, field = name.split(".")
    return replace(vehicle, **{group: replace(getattr(vehicle, group), **{field: float(value)})})


def plant_batch(vehicle: Vehicle, overrides: Mapping[str, np.ndarray] | None = None) -> Plant:
    """Physics-level parameters of a batch of vehicles.

    Parameters
    ----------
    vehicle
        The nominal vehicle; every parameter not overridden keeps its value.
    overrides
        Named parameters (``"payload.mass_kg"`` etc.), each an array of shape
        ``(n,)``.  When the payload mass is overridden, the payload inertias
        scale with it (constant radii of gyration).  With no overrides the
        batch holds the nominal vehicle alone (``n = 1``).

    Returns
    -------
    Plant
        Composite parameters with a leading batch axis.

    Notes
    -----
    The chassis and payload are composed into one body whose centre of mass
    lies at ``l = (m_c h_c + m_p h_p) / (m_c + m_p)`` above the axle; roll and
    pitch inertias move to it by the parallel-axis theorem; yaw inertias add
    directly because both centres of mass lie on the same vertical line.
    """
    overrides = dict(overrides or {})
    n = 1
    arrays: dict[str, np.ndarray] = {}
    for name, value in overrides.items():
        if name not in PARAMETERS:
            raise KeyError(f"unknown vehicle parameter {name!r}")
        arr = np.asarray(value, dtype=float).reshape(-1)
        arrays[name] = arr
        n = max(n, arr.shape[0])
    for name, arr in arrays.items():
        if arr.shape[0] not in (1, n):
            raise ValueError(f"override {name!r} has {arr.shape[0]} values; expected {n}")

    def p(name: str) -> np.ndarray:
        if name in arrays:
            return np.broadcast_to(arrays[name], (n,)).astype(float)
        return np.full(n, get_parameter(vehicle, name))

    m_c, h_c = p("chassis.mass_kg"), p("chassis.cg_height_m")
    m_p, h_p = p("payload.mass_kg"), p("payload.cg_height_m")
    nominal_mp = vehicle.payload.mass_kg
    if "payload.mass_kg" in arrays and nominal_mp > 0.0:
        scale = m_p / nominal_mp
    else:
        scale = np.ones(n)
    M = m_c + m_p
    l = (m_c * h_c + m_p * h_p) / M
    shift = m_c * (h_c - l) ** 2 + m_p * (h_p - l) ** 2
    I1 = p("chassis.roll_inertia_kg_m2") + scale * p("payload.roll_inertia_kg_m2") + shift
    I2 = p("chassis.pitch_inertia_kg_m2") + scale * p("payload.pitch_inertia_kg_m2") + shift
    I3 = p("chassis.yaw_inertia_kg_m2") + scale * p("payload.yaw_inertia_kg_m2")
    return Plant(
        r=p("wheel.radius_m"),
        m_w=p("wheel.mass_kg"),
        J_w=p("wheel.spin_inertia_kg_m2"),
        K_w=p("wheel.diametral_inertia_kg_m2"),
        d=p("wheel.half_track_m"),
        c_b=p("wheel.bearing_friction_n_m_s_per_rad"),
        M=M,
        l=l,
        I1=I1,
        I2=I2,
        I3=I3,
        g=np.full(n, float(vehicle.gravity_m_s2)),
        kt=p("drive.torque_constant_n_m_per_a"),
        kt_nominal=np.full(n, vehicle.drive.torque_constant_n_m_per_a),
        ke=p("drive.back_emf_v_s_per_rad"),
        R=p("drive.resistance_ohm"),
        V=p("drive.supply_v"),
        imax=p("drive.current_limit_a"),
    )


def check_physical(values: Mapping[str, np.ndarray], *, where: str = "") -> None:
    """Raise ``ValueError`` if any named parameter value is non-physical.

    Checks signs (``nonnegative`` parameters may be zero, ``any`` may be negative) and the triangle
    inequality of each body's principal inertias.  ``values`` maps parameter
    names to arrays (or scalars); ``where`` prefixes the key in messages.
    """
    for name, value in values.items():
        info = PARAMETERS[name]
        arr = np.atleast_1d(np.asarray(value, dtype=float))
        if not np.all(np.isfinite(arr)):
            raise ValueError(f"{where}{name}: expected a finite number [{info.unit}], got {value!r}")
        if info.sign != "any":
            bad = arr < 0 if info.sign == "nonnegative" else arr <= 0
            if np.any(bad):
                want = ">= 0" if info.sign == "nonnegative" else "> 0"
                raise ValueError(f"{where}{name}: {info.text} must be {want} [{info.unit}], got {arr[bad][0]:g}")
        lo, hi = info.plausible
        out = (arr < lo) | (arr > hi)
        if np.any(out):
            raise ValueError(
                f"{where}{name}: {info.text} {arr[out][0]:g} {info.unit} is outside the plausible range "
                f"{lo:g} to {hi:g} {info.unit} (check the unit)"
            )
    for group in ("chassis", "payload"):
        keys = [f"{group}.{ax}_inertia_kg_m2" for ax in ("roll", "pitch", "yaw")]
        if all(k in values for k in keys):
            a, b, c = (np.asarray(values[k], dtype=float) for k in keys)
            tol = 1e-12 * (a + b + c)
            for x, y, z, zname in ((a, b, c, "yaw"), (b, c, a, "roll"), (c, a, b, "pitch")):
                if np.any(x + y < z - tol):
                    raise ValueError(
                        f"{where}{group}: principal inertias violate the triangle inequality "
                        f"(the {zname} inertia exceeds the sum of the other two); "
                        f"roll={float(np.max(a)):g}, pitch={float(np.max(b)):g}, "
                        f"yaw={float(np.max(c)):g} kg m^2"
                    )


def vehicle_values(vehicle: Vehicle) -> dict[str, float]:
    """All named parameters of a vehicle as a flat mapping."""
    return {name: get_parameter(vehicle, name) for name in PARAMETERS}
