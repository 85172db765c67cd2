"""Facts about the open-loop model of a case: the job of the model command.

Computes, for the nominal vehicle and for every corner of the parameter box,
the linear models, controllability (rank and PBH), open-loop poles, the
pitch divergence rate and its time to double, the exactness of the state
shift used for speed / yaw-rate commands and the trim torque, and the
drive's locked-wheel torque and no-load speed.  Returns plain data.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.case import Case
from robust.dynamics import STATE_NAMES
from robust.linear import (
    UncontrollableMode,
    controllability_rank,
    full_model,
    open_loop_facts,
    pbh_uncontrollable,
    reduced_model,
    reference_shift,
)
from robust.uncertainty import corners
from robust.vehicle import Plant, plant_batch

_WHY = {
    ("y",): (
        "lateral position: at zero speed and heading the base cannot move sideways "
        "(y' = v sin(heading) has no first-order term), so no input reaches y"
    ),
    ("heading",): "heading: decoupled from the wheel torques in this model",
}


def explain(mode: UncontrollableMode) -> str:
    """Plain-words reason why an uncontrollable mode cannot be moved."""
    return _WHY.get(mode.states, "states " + ", ".join(mode.states) + " are not reached by the inputs")


@dataclass(frozen=True)
class CornerFacts:
    """Open-loop facts at each corner of the box (arrays over corners)."""

    names: tuple[str, ...]
    points: np.ndarray
    unstable_pole: np.ndarray
    time_to_double_s: np.ndarray
    reduced_rank: np.ndarray
    full_rank: np.ndarray


@dataclass(frozen=True)
class ModelFacts:
    """Everything the model command reports."""

    title: str
    case_sha256: str
    composite: dict[str, float]
    full_A: np.ndarray
    full_B: np.ndarray
    reduced_A: np.ndarray
    reduced_B: np.ndarray
    full_rank: int
    reduced_rank: int
    uncontrollable: tuple[tuple[UncontrollableMode, str], ...]
    poles: np.ndarray
    unstable_pole: float
    time_to_double_s: float
    shift_exact: bool
    speed_residual: np.ndarray
    yaw_rate_residual: np.ndarray
    trim_per_speed_n_m_s: float
    trim_per_yaw_rate_n_m_s: float
    locked_torque_n_m: float
    no_load_wheel_speed_rad_s: float
    no_load_vehicle_speed_m_s: float
    corners: CornerFacts | None


def _composite(p: Plant) -> dict[str, float]:
    return {
        "mass_kg": float(p.M[0]),
        "cg_height_m": float(p.l[0]),
        "roll_inertia_kg_m2": float(p.I1[0]),
        "pitch_inertia_kg_m2": float(p.I2[0]),
        "yaw_inertia_kg_m2": float(p.I3[0]),
    }


def model_facts(case: Case) -> ModelFacts:
    """Compute the open-loop facts of a case (nominal and box corners)."""
    plant = plant_batch(case.vehicle)
    full = full_model(plant)
    red = reduced_model(plant)
    ol = open_loop_facts(red)
    shift = reference_shift(plant)
    modes = pbh_uncontrollable(full.A[0], full.B[0], STATE_NAMES)
    drive = case.vehicle.drive
    no_load = drive.supply_v / drive.back_emf_v_s_per_rad
    corner_facts = None
    if case.box.ranges:
        pts = corners(case.box)
        cp = case.box.plant(pts)
        cred = reduced_model(cp)
        cfull = full_model(cp)
        col = open_loop_facts(cred)
        corner_facts = CornerFacts(
            names=case.box.names,
            points=pts,
            unstable_pole=col.unstable_pole,
            time_to_double_s=col.time_to_double_s,
            reduced_rank=controllability_rank(cred.A, cred.B),
            full_rank=controllability_rank(cfull.A, cfull.B),
        )
    return ModelFacts(
        title=case.title,
        case_sha256=case.sha256,
        composite=_composite(plant),
        full_A=full.A[0],
        full_B=full.B[0],
        reduced_A=red.A[0],
        reduced_B=red.B[0],
        full_rank=int(controllability_rank(full.A, full.B)[0]),
        reduced_rank=int(controllability_rank(red.A, red.B)[0]),
        uncontrollable=tuple((m, explain(m)) for m in modes),
        poles=ol.poles[0],
        unstable_pole=float(ol.unstable_pole[0]),
        time_to_double_s=float(ol.time_to_double_s[0]),
        shift_exact=bool(shift.exact[0]),
        speed_residual=shift.speed_residual[0],
        yaw_rate_residual=shift.yaw_rate_residual[0],
        trim_per_speed_n_m_s=float(shift.trim_per_speed_n_m_s[0]),
        trim_per_yaw_rate_n_m_s=float(shift.trim_per_yaw_rate_n_m_s[0]),
        locked_torque_n_m=drive.torque_constant_n_m_per_a
        * min(drive.current_limit_a, drive.supply_v / drive.resistance_ohm),
        no_load_wheel_speed_rad_s=no_load,
        no_load_vehicle_speed_m_s=no_load * case.vehicle.wheel.radius_m,
        corners=corner_facts,
    )
