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
from robust.check import CheckResult
from robust.gains import GainSet
from robust.synthesis.lmi import Spec, SynthesisResult, synthesize
from robust.synthesis.nominal import bryson_from_keys
from robust.synthesis.polytope import Polytope, build_polytope

Progress = Callable[[str], None]


@dataclass(frozen=True)
class DesignResult:
    """Everything the synthesis command reports.

    ``not_imposed`` maps a requested constraint to why the LMIs could not
    carry it; the assessment reports those as sampled results only.
    ``assessment`` is ``None`` when only the synthesis was asked for.
    """

    polytope: Polytope
    synthesis: SynthesisResult
    gain: GainSet
    check: CheckResult | None
    not_imposed: dict[str, str]
    assessment: object | None = None
    warnings: tuple[str, ...] = ()


CAUTION = (
    "Model analysis only, not a safety case: validate on hardware with the vehicle restrained "
    "before anyone rides; defer to the applicable standards and licensed engineering practice."
)


def resolve_options(case: Case, overrides: dict | None = None) -> dict:
    """The synthesis options: ``[synthesis]``, then overrides; the parameter-dependent variant picks its route.

    Raises ``ValueError`` naming the option when the combination cannot work.
    """
    opts = dict(case.synthesis)
    given = {k: v for k, v in (overrides or {}).items() if v is not None}
    opts.update(given)
    if opts.get("lyapunov") == "parameter_dependent":
        if opts.get("route", "moment_box") == "moment_box" and ("route" in given or "route" in case.synthesis):
            raise ValueError(
                "the parameter-dependent Lyapunov variant needs the sampled-hull route: "
                "set route = 'sampled_hull' (or --route sampled_hull), or use lyapunov = 'common'"
            )
        opts["route"] = "sampled_hull"
    return opts


def _initial_states(opts: dict) -> np.ndarray | None:
    dv = opts.get("speed_step_m_s", 0.0)
    dw = opts.get("yaw_rate_step_rad_s", 0.0)
    dp = np.radians(opts.get("initial_pitch_deg", 0.0))
    pts = {(a * dv, b * dw, c * dp, 0.0) for a, b, c in itertools.product((-1, 1), repeat=3)}
    pts.discard((0.0, 0.0, 0.0, 0.0))
    return np.array(sorted(pts)) if pts else None


def make_spec(case: Case, overrides: dict | None = None) -> tuple[Spec, dict[str, str]]:
    """The synthesis request from ``[synthesis]`` (defaults from ``[requirements]``) and overrides.

    Returns the spec and the requested constraints it cannot impose, with the reason.
    """
    opts = resolve_options(case, overrides)
    req = case.requirements
    not_imposed: dict[str, str] = {}
    pdlf = opts.get("lyapunov", "common") == "parameter_dependent"
    damping = opts.get("min_damping_ratio", req.get("min_damping_ratio"))
    max_freq = opts.get("max_natural_frequency_rad_s", req.get("max_natural_frequency_rad_s"))
    if pdlf and opts.get("objective", "gain") == "cost":
        raise ValueError(
            "'synthesis.objective' = 'cost' is not available with the parameter-dependent Lyapunov variant; "
            "use --objective gain or decay, or lyapunov = 'common'"
        )
    if pdlf:
        for key, value in (("min_damping_ratio", damping), ("max_natural_frequency_rad_s", max_freq)):
            if value is None:
                continue
            not_imposed[key] = "the parameter-dependent Lyapunov variant imposes decay rate, gain size and torque only"
        damping = max_freq = None
    elif max_freq is not None and opts.get("route", "moment_box") == "moment_box":
        not_imposed["max_natural_frequency_rad_s"] = (
            "the rigorous route's descriptor form cannot carry the frequency disk (its diagonal blocks vanish)"
        )
        max_freq = None
    locked = locked_rotor_torque(case)
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
    spec = Spec(
        decay_rate=float(opts.get("min_decay_rate_per_s", req.get("min_decay_rate_per_s", 0.0))),
        damping=damping,
        max_frequency=max_freq,
        torque_limit=opts.get("torque_limit_n_m"),
        initial_states=_initial_states(opts),
        cost_Q=Q,
        cost_R=R,
        cost_states=xs,
        objective=objective,
        lyapunov=opts.get("lyapunov", "common"),
        input_scale=float(locked),
    )
    return spec, not_imposed


def locked_rotor_torque(case: Case) -> float:
    """Largest torque the nominal drive can give one wheel: torque constant x the smaller of the current
    limit and the stall current at the supply voltage. [N m]"""
    drive = case.vehicle.drive
    return drive.torque_constant_n_m_per_a * min(drive.current_limit_a, drive.supply_v / drive.resistance_ohm)


def actuator_warnings(case: Case, spec: Spec, gain: GainSet, assessment=None) -> tuple[str, ...]:
    """Plain warnings when a synthesized gain asks more of the drive than it can give.

    The LMIs see a linear model without the drive's limits, so a gain can be
    certified and still saturate the motors in every manoeuvre; the warnings
    say so with the numbers: the worst peak wheel torque of the time-domain
    check against the locked-rotor torque, and the objective ``decay`` without
    a torque bound (the largest decay rate is bought with gain size).
    """
    out = []
    locked = locked_rotor_torque(case)
    if spec.objective == "decay" and spec.torque_limit is None:
        out.append(
            f"objective 'decay' without a torque bound: the decay rate is bought with gain size (largest entry "
            f"{np.abs(gain.K).max():.4g} in SI units); the drive gives at most {locked:.4g} N m per wheel. Add "
            "'torque_limit_n_m' to [synthesis], or use the tuning route, which sees the drive"
        )
    t = getattr(assessment, "time", None)
    if t is not None:
        g = next((x for x in t.gains if x.gain.name == gain.name), None)
        peaks = [(w.value, m.name) for m in (g.manoeuvres if g else ()) for w in m.worst if w.name == "peak_torque_n_m"]
        if peaks:
            peak, where = max(peaks)
            if peak >= 0.98 * locked:
                out.append(
                    f"the drive saturates: the worst peak wheel torque {peak:.4g} N m (manoeuvre '{where}', full "
                    f"nonlinear model) reaches the locked-rotor torque {locked:.4g} N m; the LMI certificate covers "
                    "the linear model only, not saturated motion"
                )
    return tuple(out)


def design(
    case: Case,
    *,
    overrides: dict | None = None,
    progress: Progress | None = None,
    compare_with: list[GainSet] | None = None,
    assess_gains: bool = True,
) -> DesignResult:
    """Build the polytope, synthesize, and (unless ``assess_gains`` is False) assess the new gain.

    The assessment (linear and time domain, over the box) covers the new gain
    and ``compare_with``; its overall verdict for the new gain is recorded in
    the gain's provenance with what it covered and the case's SHA-256.
    """
    from robust.assess import assess
    from robust.synthesis.lmi import explain_status

    say = progress or (lambda _m: None)
    opts = resolve_options(case, overrides)
    route = opts.get("route", "moment_box")
    spec, not_imposed = make_spec(case, overrides)
    say(f"building the {route} polytope")
    kw = {"seed": case.study.seed}
    if "hull_margin" in opts:
        kw["margin"] = opts["hull_margin"]
    poly = build_polytope(case.box, route, **(kw if route == "sampled_hull" else {}))
    say(f"solving the LMIs on {poly.vertices} vertices ({spec.lyapunov} Lyapunov matrix, objective {spec.objective})")
    res = synthesize(poly, spec, progress=progress)
    name = opts.get("name", "lmi")
    cert = res.certificate
    imposed = {
        k: v
        for k, v in {
            "min_decay_rate_per_s": spec.decay_rate,
            "min_damping_ratio": spec.damping,
            "max_natural_frequency_rad_s": spec.max_frequency,
            "torque_limit_n_m": spec.torque_limit,
        }.items()
        if v is not None
    }
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
        "solver_status": explain_status(res.status),
        "certificate_largest_lmi_eigenvalue": cert.smallest_slack,
        "certificate_smallest_lyapunov_eigenvalue": cert.smallest_x_eig,
        "certificate_passed": cert.passed,
        "lyapunov_bound": res.spec.lyapunov_bound,
        "lyapunov_bound_active": cert.bound_active,
        "tool_version": __version__,
        "date": _dt.date.today().isoformat(),
        "caution": CAUTION,
        "constraints_imposed": imposed,
    }
    if not_imposed:
        provenance["constraints_not_imposed"] = dict(not_imposed)
    gain = GainSet(name, res.K, f"LMI synthesis over the box ({route})", provenance)
    warns = actuator_warnings(case, res.spec, gain)
    if warns:
        gain = GainSet(name, res.K, gain.origin, provenance | {"warnings": list(warns)})
    result = DesignResult(polytope=poly, synthesis=res, gain=gain, check=None, not_imposed=not_imposed, warnings=warns)
    if not assess_gains:
        return result
    say(f"assessing '{name}' over the box")
    a = assess(case, [gain, *(compare_with or [])], design=result, progress=progress)
    warns = actuator_warnings(case, res.spec, gain, a)
    v = a.verdicts[0]
    verdict = v.as_record()
    extra = {"verdict": verdict} | ({"warnings": list(warns)} if warns else {})
    gain = GainSet(name, res.K, gain.origin, provenance | extra)
    return DesignResult(
        polytope=poly,
        synthesis=res,
        gain=gain,
        check=a.check,
        not_imposed=not_imposed,
        assessment=a,
        warnings=warns,
    )
