"""What measuring a parameter buys: the best fixed gain beside a gain scheduled on the measurement.

Both gains come from the same LMIs on the rigorous polytope (route ``moment_box``, common Lyapunov
matrix, the case's ``[synthesis]`` constraints with ``[schedule]``'s torque ellipsoid when it gives one,
largest certified decay rate):

* the fixed gain ``K`` on the polytope of the box;
* the scheduled gain ``K(p) = K0 + (p_measured - p0) K1`` on the same polytope with the measured value
  and its product with the torque-constant ratio as further vertex coordinates (the measurement off
  by at most the case's error; see :func:`robust.synthesis.polytope.moment_box`).

With the dossier's tuned gain, a scheduled gain is also tuned from it (:func:`robust.synthesis.tuning.
tune_scheduled`), and both get a fixed-gain LMI certificate on the same two polytopes.

All are then evaluated on the same models: Monte Carlo samples of the box with a measurement error
drawn uniformly within its bound (the corners with both extreme errors first) for the linear metrics,
and the corners with both extreme errors for the case's manoeuvres on the nonlinear model.  A
computational module: it returns results, never prints or writes.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from robust.analysis.metrics import METRICS, evaluate
from robust.case import FIXED_NAME, Case
from robust.gains import GainSet, Schedule, ScheduledGain
from robust.synthesis.lmi import Infeasible, SynthesisResult, synthesize
from robust.synthesis.polytope import moment_box
from robust.uncertainty import corners, monte_carlo

SAMPLES = 2000  # Monte Carlo models of the linear comparison (plus the corners at both extreme errors)
# the largest certified decay rate from zero: the comparison is of what each gain reaches, not of a request
OVERRIDES = {"objective": "decay", "route": "moment_box", "lyapunov": "common", "min_decay_rate_per_s": 0.0}


@dataclass(frozen=True)
class ScheduleComparison:
    """The best fixed gain and the scheduled gain (and the tuned pair), side by side.

    Attributes
    ----------
    schedule
        The measured parameter, its nominal and the measurement's error bound.
    fixed, scheduled
        The two gains (``fixed`` is ``None`` when its synthesis failed; then ``errors`` says why).
    certified
        Certified decay rate per gain name (LMI certificate re-checked with numpy; ``None`` when not even
        stability could be certified). [1/s]
    vertices
        Vertices of each gain's polytope.
    imposed
        The constraints both LMIs impose beside the decay rate, in words.
    not_imposed
        Requested constraints the LMIs could not carry, with the reason.
    linear
        Per gain name, the worst value of every linear metric over the models (box x error), in the
        metric's display unit (``METRICS[name].unit``: dB, deg, ms where it says so).
    linear_models
        How many models the linear comparison covers.
    time
        Per gain name: the worst peak wheel torque [N m], peak pitch [rad] and number of falls over the
        manoeuvres of the case on the corners at both extreme errors.
    time_models
        How many rows (models x manoeuvres) the time-domain comparison covers.
    errors
        Per gain name, why it could not be synthesized (or certified, for the tuned pair).
    solves
        LMI solves of each synthesis.
    seed
        The case's study seed, which seeds the comparison's samples and errors.
    tuned, tuned_scheduled, scores, scenario_models
        With a tuned gain: it, the scheduled gain tuned from it, both scores (smallest normalised margin)
        on the tuning scenarios, and how many scenario models there are.
    seconds
        Wall time of the study in the process that ran it (without the LMI pair when that was computed
        beside the caller's other stages). [s]
    """

    schedule: Schedule
    fixed: GainSet | None
    scheduled: ScheduledGain | None
    certified: dict[str, float | None]
    vertices: dict[str, int]
    imposed: tuple[str, ...]
    not_imposed: dict[str, str]
    linear: dict[str, dict[str, float]]
    linear_models: int
    time: dict[str, dict[str, float]]
    time_models: int
    errors: dict[str, str]
    solves: dict[str, int]
    seconds: float
    seed: int
    tuned: GainSet | None = None  # the dossier's tuned (fixed) gain, when the case asks for [tuning]
    tuned_scheduled: ScheduledGain | None = None  # the scheduled gain tuned from it (tuning.tune_scheduled)
    scores: dict[str, float] = field(default_factory=dict)  # smallest normalised margin on the scenarios
    scenario_models: int = 0

    @property
    def columns(self) -> tuple[str, ...]:
        """The gains compared, in the order of the dossier's columns (LMI pair, then tuned pair)."""
        # the LMI pair always (a gain whose synthesis failed keeps its column: "not certified"), then the tuned pair
        out = list(self.vertices)
        if self.tuned is not None:
            out += [self.tuned.name, self.tuned_scheduled.name if self.tuned_scheduled is not None else None]
        return tuple(n for n in out if n is not None)


def comparison_points(case: Case, samples: int = SAMPLES) -> tuple[np.ndarray, np.ndarray]:
    """Models and their measurement errors: the corners at both extreme errors, then Monte Carlo
    samples of the box with an error drawn uniformly within its bound (seeded by the case's study)."""
    sched: Schedule = case.schedule["schedule"]
    c = corners(case.box)
    mc = monte_carlo(case.box, samples, seed=case.study.seed)
    rng = np.random.default_rng([case.study.seed, 1])
    e = sched.error
    pts = np.concatenate([c, c, mc])
    err = np.concatenate([np.full(len(c), -e), np.full(len(c), e), rng.uniform(-e, e, samples)])
    return pts, err


def measured_values(case: Case, points: np.ndarray, errors: np.ndarray) -> np.ndarray:
    """The measured value of the scheduling parameter at each model: its true value plus the error."""
    sched: Schedule = case.schedule["schedule"]
    j = case.box.names.index(sched.parameter)
    return points[:, j] + errors


def _imposed(spec) -> tuple[str, ...]:
    out = []
    if spec.damping is not None:
        out.append(f"damping ratio at least {spec.damping:g}")
    if spec.max_frequency is not None:
        out.append(f"natural frequency at most {spec.max_frequency:g} rad/s")
    if spec.torque_limit is not None:
        xs = np.abs(np.atleast_2d(spec.initial_states)).max(axis=0)
        motions = [
            f"{w} {v:g} {u}"
            for w, v, u in (
                ("a speed step of", xs[0], "m/s"),
                ("a yaw-rate step of", xs[1], "rad/s"),
                ("a lean of", np.degrees(xs[2]), "deg"),
            )
            if v > 0
        ]
        out.append(
            f"wheel torque at most {spec.torque_limit:g} N m after {' and '.join(motions)} (invariant ellipsoid)"
        )
    return tuple(out)


def _worst(values: dict[str, np.ndarray]) -> dict[str, float]:
    out = {}
    for name, v in values.items():
        out[name] = float(v.min() if METRICS[name].kind == "min" else v.max())
    return out


def pair_syntheses(case: Case, progress: Callable[[str], None] | None = None) -> tuple[dict, dict, dict]:
    """The study's LMI pair: the rigorous polytopes without and with the measured value, the best fixed and
    the scheduled gains synthesized on them (largest certified decay rate, same constraints), and the reason
    of each synthesis that failed: ``(polytopes, results, errors)`` by gain name.  Uses no simulation, so the
    dossier runs it beside its other stages (:class:`robust.beside.Beside`)."""
    if not case.schedule:
        raise ValueError("the case has no [schedule] table: name the measured parameter and its error")
    sched: Schedule = case.schedule["schedule"]
    name = case.schedule["name"]
    spec, _not_imposed = schedule_spec(case)
    say = progress
    if say is not None:
        say("schedule study: the rigorous polytope with and without the measured value")
    polys = {FIXED_NAME: moment_box(case.box), name: moment_box(case.box, schedule=sched)}
    results: dict[str, SynthesisResult] = {}
    errors: dict[str, str] = {}
    for key, poly in polys.items():
        if say is not None:
            say(f"schedule study: LMI synthesis of the {'scheduled' if key == name else 'best fixed'} gain")
        try:
            results[key] = synthesize(poly, replace(spec, scheduled=key == name), progress=say)
        except Infeasible as exc:
            errors[key] = str(exc)
    return polys, results, errors


def schedule_spec(case: Case):
    """The LMI request of the study's pair (the case's constraints with the decay-rate objective) and the
    requirements it cannot impose."""
    from robust.design import make_spec

    return make_spec(case, {**OVERRIDES, **case.schedule.get("constraints", {})})


def run_schedule_study(
    case: Case,
    *,
    tuned: GainSet | None = None,
    samples: int = SAMPLES,
    evaluations: int = 300,
    pair: tuple[dict, dict, dict] | None = None,
    progress: Callable[[str], None] | None = None,
) -> ScheduleComparison:
    """Synthesize the best fixed gain and the scheduled gain and compare them on the same models.

    With ``tuned`` (the dossier's tuned gain) a scheduled gain is also tuned from it
    (:func:`robust.synthesis.tuning.tune_scheduled`, ``evaluations`` Nelder-Mead evaluations) and both
    join the comparison, each with its fixed-gain LMI certificate.  ``pair`` is the value of
    :func:`pair_syntheses` for this case when the caller computed it already (the dossier, beside its
    other stages)."""
    from robust.simulate import simulate
    from robust.synthesis.lmi import certify_gain
    from robust.synthesis.tuning import tune_scheduled

    t0 = time.perf_counter()
    if not case.schedule:
        raise ValueError("the case has no [schedule] table: name the measured parameter and its error")
    sched: Schedule = case.schedule["schedule"]
    name = case.schedule["name"]
    fixed_name = FIXED_NAME
    spec, not_imposed = schedule_spec(case)
    say = progress
    polys, results, errors = pair_syntheses(case, progress) if pair is None else pair
    errors = dict(errors)
    prov = {"route": "moment_box", "lyapunov": "common", "objective": "decay"}
    fixed = scheduled = None
    if fixed_name in results:
        r = results[fixed_name]
        fixed = GainSet(fixed_name, r.K, "lmi", dict(prov, certified_decay_rate_per_s=r.decay_rate))
    if name in results:
        r = results[name]
        scheduled = ScheduledGain(
            name,
            r.K,
            r.K1,
            sched,
            "lmi",
            dict(prov, certified_decay_rate_per_s=r.decay_rate, scheduled_on=sched.parameter),
        )
    tuned_scheduled, scores, scenario_models = None, {}, 0
    if tuned is not None:
        t = tune_scheduled(case, tuned, name=f"{name}_tuned", evaluations=evaluations, progress=say)
        tuned_scheduled = t["gain"]
        scores = {tuned.name: t["start_score"], tuned_scheduled.name: t["score"]}
        scenario_models = t["scenarios"]
    pts, err = comparison_points(case, samples)
    measured = measured_values(case, pts, err)
    gains = {}
    if fixed is not None:
        gains[fixed_name] = np.broadcast_to(fixed.K, (len(pts), 2, 4))
    if scheduled is not None:
        gains[name] = scheduled.at(measured)
    if tuned is not None:
        gains[tuned.name] = np.broadcast_to(tuned.K, (len(pts), 2, 4))
        gains[tuned_scheduled.name] = tuned_scheduled.at(measured)
    linear = {}
    for key, K in gains.items():
        if say is not None:
            say(f"schedule study: linear metrics of {key} on {len(pts)} models")
        linear[key] = _worst(evaluate(case.box, pts, np.ascontiguousarray(K)))
    nc = 2 * len(corners(case.box))  # the corners at both extreme errors come first
    plant = case.box.plant(pts[:nc])
    time_worst: dict[str, dict[str, float]] = {}
    for key, K in gains.items():
        if say is not None:
            say(f"schedule study: manoeuvres of {key} on {nc} models")
        torque, pitch, falls = 0.0, 0.0, 0
        for m in case.manoeuvres:
            res = simulate(plant, np.ascontiguousarray(K[:nc]), m, case.controller)
            torque = max(torque, float(res.metrics["peak_torque_n_m"].max()))
            pitch = max(pitch, float(res.metrics["peak_pitch_rad"].max()))
            falls += int(res.fell.sum())
        time_worst[key] = {"peak_torque_n_m": torque, "peak_pitch_rad": pitch, "falls": float(falls)}
    certified = {k: float(r.decay_rate) for k, r in results.items()}
    if tuned is not None:
        for g, poly, slope in (
            (tuned, polys[fixed_name], None),
            (tuned_scheduled, polys[name], tuned_scheduled.K1),
        ):
            if say is not None:
                say(f"schedule study: LMI certificate of {g.name}")
            K = g.K if slope is None else g.K0
            upper = max(linear[g.name]["decay_rate"], 0.0)
            c = certify_gain(poly, K, input_scale=spec.input_scale, upper=upper, slope=slope, progress=say)
            certified[g.name] = None if c.decay_rate is None else float(c.decay_rate)
            if c.decay_rate is None:
                errors[g.name] = (
                    "stability could not be certified by a common Lyapunov matrix (not a proof of instability)"
                )
    return ScheduleComparison(
        schedule=sched,
        fixed=fixed,
        scheduled=scheduled,
        certified=certified,
        vertices={k: p.vertices for k, p in polys.items()},
        imposed=_imposed(spec),
        not_imposed=not_imposed,
        linear=linear,
        linear_models=len(pts),
        time=time_worst,
        time_models=nc * len(case.manoeuvres),
        errors=errors,
        solves={k: r.solve_count for k, r in results.items()},
        seconds=time.perf_counter() - t0,
        seed=case.study.seed,
        tuned=tuned,
        tuned_scheduled=tuned_scheduled,
        scores=scores,
        scenario_models=scenario_models,
    )
