"""The synthesis command: one LMI gain for the whole box, written to a gain file and checked.

Case -> polytope (route) -> LMI synthesis with the certificate re-checked in
numpy -> gain file with provenance -> the analyzer on the new gain beside the
case's nominal designs.
"""

from __future__ import annotations

import datetime as _dt
import itertools
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from robust import __version__
from robust.case import Case
from robust.check import CheckResult, run_check
from robust.gains import GainSet
from robust.synthesis.lmi import Spec, SynthesisResult, synthesize
from robust.synthesis.nominal import bryson_from_keys
from robust.synthesis.polytope import Polytope, build_polytope

Progress = Callable[[str], None]


@dataclass(frozen=True)
class DesignResult:
    """Everything the synthesis command reports."""

    polytope: Polytope
    synthesis: SynthesisResult
    gain: GainSet
    check: CheckResult


def _initial_states(opts: dict) -> np.ndarray | None:
    dv = opts.get("speed_step_m_s", 0.0)
    dw = opts.get("yaw_rate_step_rad_s", 0.0)
    dp = np.radians(opts.get("initial_pitch_deg", 0.0))
    pts = {(a * dv, b * dw, c * dp, 0.0) for a, b, c in itertools.product((-1, 1), repeat=3)}
    pts.discard((0.0, 0.0, 0.0, 0.0))
    return np.array(sorted(pts)) if pts else None


def make_spec(case: Case, overrides: dict | None = None) -> Spec:
    """The synthesis request from ``[synthesis]`` (defaults from ``[requirements]``) and overrides."""
    opts = dict(case.synthesis)
    opts.update({k: v for k, v in (overrides or {}).items() if v is not None})
    req = case.requirements
    drive = case.vehicle.drive
    locked = drive.torque_constant_n_m_per_a * min(drive.current_limit_a, drive.supply_v / drive.resistance_ohm)
    objective = opts.get("objective", "gain")
    Q = R = xs = None
    if objective == "cost":
        w = bryson_from_keys(opts)
        Q, R = w["Q"], w["R"]
        xs = _initial_states(opts)
        if xs is None:
            xs = np.diag(
                [
                    opts["max_speed_error_m_s"],
                    opts["max_yaw_rate_error_rad_s"],
                    np.radians(opts["max_pitch_deg"]),
                    0.0,
                ]
            )[:3]
    return Spec(
        decay_rate=float(opts.get("min_decay_rate_per_s", req.get("min_decay_rate_per_s", 0.0))),
        damping=opts.get("min_damping_ratio", req.get("min_damping_ratio")),
        max_frequency=opts.get("max_natural_frequency_rad_s", req.get("max_natural_frequency_rad_s")),
        torque_limit=opts.get("torque_limit_n_m"),
        initial_states=_initial_states(opts),
        cost_Q=Q,
        cost_R=R,
        cost_states=xs,
        objective=objective,
        lyapunov=opts.get("lyapunov", "common"),
        input_scale=float(locked),
    )


def design(
    case: Case,
    *,
    overrides: dict | None = None,
    progress: Progress | None = None,
    compare_with: list[GainSet] | None = None,
) -> DesignResult:
    """Build the polytope, synthesize, and check the new gain beside ``compare_with``."""
    say = progress or (lambda _m: None)
    opts = dict(case.synthesis)
    opts.update({k: v for k, v in (overrides or {}).items() if v is not None})
    route = opts.get("route", "moment_box")
    spec = make_spec(case, overrides)
    say(f"building the {route} polytope")
    kw = {"seed": case.study.seed}
    if "hull_margin" in opts:
        kw["margin"] = opts["hull_margin"]
    poly = build_polytope(case.box, route, **(kw if route == "sampled_hull" else {}))
    say(f"solving the LMIs on {poly.vertices} vertices ({spec.lyapunov} Lyapunov matrix, objective {spec.objective})")
    res = synthesize(poly, spec)
    name = opts.get("name", "lmi")
    cert = res.certificate
    provenance = {
        "case_sha256": case.sha256,
        "method": "LMI synthesis",
        "route": route,
        "lyapunov": spec.lyapunov,
        "objective": spec.objective,
        "vertices": poly.vertices,
        "guarantee": poly.guarantee,
        "certified_decay_rate_per_s": res.decay_rate,
        "solver": res.solver,
        "solver_status": res.status,
        "certificate_largest_lmi_eigenvalue": cert.smallest_slack,
        "certificate_smallest_lyapunov_eigenvalue": cert.smallest_x_eig,
        "certificate_passed": cert.passed,
        "tool_version": __version__,
        "date": _dt.date.today().isoformat(),
        "constraints": {
            k: v
            for k, v in {
                "min_decay_rate_per_s": spec.decay_rate,
                "min_damping_ratio": spec.damping,
                "max_natural_frequency_rad_s": spec.max_frequency,
                "torque_limit_n_m": spec.torque_limit,
            }.items()
            if v is not None
        },
    }
    gain = GainSet(name, res.K, f"LMI synthesis over the box ({route})", provenance)
    say(f"checking '{name}' over the box")
    check = run_check(case, [gain, *(compare_with or [])], progress=progress)
    return DesignResult(polytope=poly, synthesis=res, gain=gain, check=check)
