"""The dossier command's computation: every analysis of a case, gathered for the writer.

Model facts, the linear check of every gain set (the case's, gain files, and
the LMI gain when the case asks for synthesis), the time-domain check, and
the per-sample values the figures need.  Writes nothing.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import importlib.metadata as _md
import platform
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from robust import __version__
from robust.analysis.eigen import eigenvalues_4x4
from robust.analysis.margins import loop_shapes
from robust.analysis.metrics import evaluate
from robust.analysis.sampled import sampled_decay_rate
from robust.assess import assess, joined
from robust.case import Case, resolve_gain
from robust.check import CheckResult, run_check
from robust.gains import GainSet, gain_file_text
from robust.linear import reduced_model
from robust.modelfacts import ModelFacts, model_facts
from robust.outputs import file_stems
from robust.timecheck import TimeCheckResult
from robust.uncertainty import corners, plan_points

Progress = Callable[[str], None]
PACKAGES = ("numpy", "scipy", "control", "cvxpy", "clarabel", "scs", "matplotlib")


@dataclass(frozen=True)
class DossierData:
    """Everything a dossier shows."""

    case: Case
    stamp: dict
    facts: ModelFacts
    check: CheckResult
    time: TimeCheckResult | None
    verdicts: tuple
    design: object | None
    tuning: object | None
    design_error: str | None
    eigenvalues: dict[str, np.ndarray]
    sample_values: dict[str, dict[str, np.ndarray]]
    inputs: tuple[Input, ...] = ()
    previous: dict | None = None
    loop_frequencies: np.ndarray | None = None
    loop_shapes: dict[str, dict[str, np.ndarray]] | None = None
    sampled_decay: dict[str, np.ndarray] | None = None  # decay rate of the sampled loop per model [1/s]
    front: object | None = None  # robust.synthesis.front.Front, when the case asks for [front]
    sampled_margins: dict[str, dict[str, np.ndarray]] | None = None  # per gain set, arrays (models, 2 wheels)
    period_sweep: dict[str, list[dict]] | None = None  # per gain set, one row per sample period tried
    tolerances: dict[str, list[dict]] | None = None  # per gain set: which tolerance drives which requirement
    campaigns: tuple[dict, ...] = ()  # fall-probability campaigns given with --campaign (campaign_record)
    schedule: object | None = None  # robust.scheduling.ScheduleComparison, when the case has [schedule]


LOOP_SHAPE_MODELS = 400  # models (corners first) whose loop shapes are drawn as bands


@dataclass(frozen=True)
class Input:
    """A file the dossier rests on, kept verbatim: the case, or a gain set's file.

    ``name`` is the file name inside the dossier folder (``case.toml`` or
    ``gains/NAME.toml``); ``origin`` where it came from (a path, or "written by
    this dossier" for gain sets defined in the case, synthesized or tuned).
    """

    name: str
    origin: str
    content: bytes

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.content).hexdigest()


def stamp(case: Case) -> dict:
    """Reproducibility stamp (the date is kept apart so results files stay byte-identical)."""
    versions = {}
    for p in PACKAGES:
        try:
            versions[p] = _md.version(p)
        except _md.PackageNotFoundError:
            versions[p] = "not installed"
    return {
        "tool": "robust",
        "tool_version": __version__,
        "case_file": case.source,
        "case_sha256": case.sha256,
        "plan": case.study.plan,
        "samples": case.study.samples,
        "seed": case.study.seed,
        "simulation_samples": case.study.simulation_samples,
        "python": platform.python_version(),
        "packages": versions,
    }


def run_dossier(
    case: Case,
    *,
    gain_files: list[GainSet] | None = None,
    gain_paths: list[str] | None = None,
    synthesize: bool = True,
    previous: dict | None = None,
    campaigns: list[dict] | None = None,
    progress: Progress | None = None,
) -> DossierData:
    """Run every analysis the dossier reports.

    ``gain_paths`` are the files ``gain_files`` were read from (kept verbatim in
    the dossier); ``previous`` the results of a previous dossier of the case.
    """
    with contextlib.ExitStack() as beside:
        return _run(
            case,
            beside,
            gain_files=gain_files,
            gain_paths=gain_paths,
            synthesize=synthesize,
            previous=previous,
            campaigns=campaigns,
            say=progress or (lambda _m: None),
        )


def _run(
    case: Case, beside, *, gain_files, gain_paths, synthesize, previous, campaigns, say: Callable[[str], None]
) -> DossierData:
    """:func:`run_dossier`'s stages.  Those using one core (the schedule study's LMI pair and the given gain
    sets' linear check from the start, the LMI gain's linear check beside the tuning, the linear studies after
    it) run in forked processes (``beside``) while this process runs those that keep both cores busy (tuning,
    trade-off front, simulations); results are the same either way."""
    from robust.beside import Beside
    from robust.scheduling import pair_syntheses

    pair = beside.enter_context(Beside(pair_syntheses, case)) if case.schedule else None
    gains = [resolve_gain(case, s) for s in case.gains] + list(gain_files or [])
    tuned = bool(case.tuning and case.box.ranges)
    # with a tuning, the given gain sets' linear check runs beside everything up to the tuning's end
    given_check = beside.enter_context(Beside(run_check, case, list(gains))) if tuned and gains else None
    say("model facts")
    facts = model_facts(case)
    design = None
    design_error = None
    if synthesize and case.synthesis and case.box.ranges:
        from robust.design import design as run_design
        from robust.synthesis.lmi import Infeasible

        say("LMI synthesis")
        try:
            design = run_design(case, progress=say, assess_gains=False)
            # the dossier carries its date in its documents only, so results stay byte-identical
            undated = replace(design.gain, provenance={k: v for k, v in design.gain.provenance.items() if k != "date"})
            gains = [undated, *gains]
        except (Infeasible, ValueError) as exc:
            design_error = str(exc)
    tuning = None
    lmi_check = None
    if tuned:
        from robust.synthesis.tuning import tune_as_asked

        if design is not None:  # and the LMI gain's beside the tuning
            lmi_check = beside.enter_context(Beside(run_check, case, [gains[0]]))
        tuning = tune_as_asked(case, gains, progress=say)
        gains = [tuning.gain, *gains]
    if not gains:
        raise ValueError("the dossier needs at least one gain set: add [gains.NAME], [synthesis] or a gain file")
    studies = beside.enter_context(Beside(_linear_studies, case, list(gains)))
    front = None
    if tuning is not None and case.front:
        from robust.synthesis.front import trade_off

        fr = case.front
        bound = case.requirements[fr["sweep"]]
        front = trade_off(
            case,
            tuning.gain.K,
            sweep=fr["sweep"],
            objective=fr["objective"],
            bounds=[bound * f for f in fr["factors"]],
            evaluations=fr["evaluations"],
            progress=say,
        )
    schedule = None
    if case.schedule:
        from robust.scheduling import run_schedule_study

        say("what measuring the payload buys")
        schedule = run_schedule_study(
            case, tuned=None if tuning is None else tuning.gain, pair=pair.result(), progress=say
        )
    if tuning is not None and tuning.assessment is not None and len(gains) > 1:
        # the tuned gain was checked over the box with the case's study as the tuning's last step: reuse it
        from robust.assess import merge_assessments

        say(f"linear check of {len(gains) - 1} gain sets (run beside the tuning)")
        parts = [b.result() for b in (lmi_check, given_check) if b is not None]
        rest_check = parts[0] if len(parts) == 1 else joined(*parts)
        rest = assess(case, gains[1:], design=design, check=rest_check, progress=say)
        a = merge_assessments(tuning.assessment, rest, rename={tuning.gain.name: tuning.gain})
    else:
        a = assess(case, gains, design=design, progress=say)
    check, time = a.check, a.time
    if design is not None:  # with the time-domain check at hand, say whether the LMI gain saturates the drive
        from robust.design import actuator_warnings

        design = replace(design, warnings=actuator_warnings(case, design.synthesis.spec, design.gain, a))
    lin = studies.result()
    pts = lin["points"]
    tolerances = _tolerance_studies(case, gains, a.verdicts, pts[len(corners(case.box)) :]) if case.box.ranges else {}
    inputs = []
    if Path(case.source).is_file():
        content = Path(case.source).read_bytes()
        if hashlib.sha256(content).hexdigest() != case.sha256:
            raise ValueError(f"{case.source}: the case file changed while the dossier was being computed; run again")
        inputs.append(Input("case.toml", str(case.source), content))
    given = dict(zip((g.name for g in gain_files or []), gain_paths or []))
    stems = file_stems(g.name for g in gains)
    for g in gains:
        stem = stems[g.name]
        if g.name in given:
            inputs.append(Input(f"gains/{stem}.toml", str(given[g.name]), Path(given[g.name]).read_bytes()))
        else:
            inputs.append(Input(f"gains/{stem}.toml", "written by this dossier", gain_file_text(g).encode("utf-8")))
    if schedule is not None:
        from robust.gains import scheduled_gain_file_text

        more = [g for g in (schedule.scheduled, schedule.tuned_scheduled) if g is not None]
        extra = [g.name for g in more] + ([schedule.fixed.name] if schedule.fixed is not None else [])
        stems = file_stems([*(g.name for g in gains), *extra])
        for g in more:
            text = scheduled_gain_file_text(g)
            where = "written by this dossier (scheduled gain)"
            inputs.append(Input(f"gains/{stems[g.name]}.toml", where, text.encode("utf-8")))
        if schedule.fixed is not None:
            text = gain_file_text(schedule.fixed)
            where = "written by this dossier (best fixed gain of the schedule study)"
            inputs.append(Input(f"gains/{stems[schedule.fixed.name]}.toml", where, text.encode("utf-8")))
    return DossierData(
        case=case,
        inputs=tuple(inputs),
        previous=previous,
        loop_frequencies=lin["frequencies"],
        loop_shapes=lin["shapes"],
        sampled_decay=lin["sampled_decay"],
        sampled_margins=lin["sampled_margins"],
        period_sweep=lin["period_sweep"],
        tolerances=tolerances,
        campaigns=tuple(campaigns or ()),
        front=front,
        schedule=schedule,
        stamp=stamp(case),
        facts=facts,
        check=check,
        time=time,
        verdicts=a.verdicts,
        design=design,
        tuning=tuning,
        design_error=design_error,
        eigenvalues=lin["eigenvalues"],
        sample_values=lin["values"],
    )


def _linear_studies(case: Case, gains: list[GainSet]) -> dict:
    """The dossier's linear studies of every gain set on the corners and the study's samples: closed-loop
    eigenvalues, margin samples, loop shapes, the sampled-loop decay rate and margins, and the sample-period
    sweep.  No simulation, so the dossier runs it beside the trade-off front."""
    pts = np.concatenate(
        [
            corners(case.box),
            plan_points(
                case.box,
                case.study.plan,
                samples=case.study.samples,
                seed=case.study.seed,
                grid_points=case.study.grid_points,
            ),
        ]
    )
    model = reduced_model(case.box.plant(pts))
    # loop shapes at each wheel input on the corners and the first samples (bands for the figures, peaks)
    few = slice(0, min(len(pts), LOOP_SHAPE_MODELS))
    freqs = np.logspace(-2, 3, 160)
    ctl = case.controller
    sampled_margins, period_sweep = _sampled_studies(case, model, few, gains)
    return {
        "points": pts,
        "eigenvalues": {g.name: eigenvalues_4x4(model.A - model.B @ g.K) for g in gains},
        "values": {
            g.name: evaluate(case.box, pts, g.K, names=("disk_margin", "phase_margin", "delay_margin")) for g in gains
        },
        "frequencies": freqs,
        "shapes": {g.name: loop_shapes(model.A[few], model.B[few], g.K, freqs) for g in gains},
        "sampled_decay": {
            g.name: sampled_decay_rate(model.A, model.B, g.K, ctl.sample_period_s, ctl.latency_s) for g in gains
        },
        "sampled_margins": sampled_margins,
        "period_sweep": period_sweep,
    }


def _tolerance_studies(case: Case, gains, verdicts, samples: np.ndarray) -> dict[str, list[dict]]:
    """For each gain set, the linear requirements it fails (or, when it fails none, its tightest one): Sobol
    indices of the metric over the box and the failure fraction per sub-range of each parameter on the
    check's Monte Carlo samples.  Failing time-domain requirements are listed as not ranked."""
    from robust.analysis.metrics import METRICS
    from robust.analysis.sensitivity import SOBOL_BASE_SAMPLES, conditional_failure
    from robust.verdict import margin_scale

    out: dict[str, list[dict]] = {}
    by_gain = {v.gain: v for v in verdicts}
    for g in gains:
        v = by_gain.get(g.name)
        if v is None:
            continue
        evaluated = [o for o in v.outcomes if o.margin is not None and o.status != "not evaluated"]
        chosen = [o for o in evaluated if o.status == "fail"]
        if not chosen and evaluated:
            lin = [o for o in evaluated if o.domain == "linear" and o.key != "closed_loop_stable"]
            if lin:
                chosen = [min(lin, key=lambda o: o.margin / margin_scale(o.bound or 0.0, o.unit))]
        rows = []
        for o in chosen:
            metrics = [n for n, m in METRICS.items() if m.requirement == o.key]
            if o.key == "closed_loop_stable":
                metrics = ["decay_rate"]
            if o.domain != "linear" or not metrics:
                rows.append(_time_ranking(case, g.K, o))
                continue
            bound = case.requirements.get(o.key, 0.0)
            for name in metrics:
                kind = METRICS[name].kind
                y = evaluate(case.box, samples, g.K, names=(name,))[name]
                failed = (
                    (y <= bound) if o.key == "closed_loop_stable" else ((y < bound) if kind == "min" else (y > bound))
                )
                cond = conditional_failure(case.box, samples, failed, name, confidence=case.study.confidence)
                sob, why = _sobol_or_why(
                    case,
                    lambda X, K=g.K, name=name: evaluate(case.box, X, K, names=(name,))[name],
                    name,
                    SOBOL_BASE_SAMPLES,
                )
                rows.append(
                    {
                        "requirement": o.key,
                        "metric": name,
                        "sobol": sob,
                        "conditional": cond,
                        "why": why,
                        "status": o.status,
                        "cuts": _cuts(case, g.K, name, samples, y, kind),
                    }
                )
        out[g.name] = rows
    return out


# time-domain requirements the dossier ranks: (metric name, unit, per-run value from a simulation result)
TIME_RANKED = {
    "max_wheel_torque_n_m": ("peak_torque_n_m", "N m", lambda r: np.max(r.metrics["peak_torque_n_m"], axis=1)),
    "max_pitch_deg": ("peak_pitch_deg", "deg", lambda r: np.degrees(r.metrics["peak_pitch_rad"])),
}


def _time_ranking(case: Case, K: np.ndarray, o) -> dict:
    """Sobol indices of a simulated metric (its worst over the case's manoeuvres, per model) and the cuts
    through the worst Saltelli point; the conditional failure fractions need Monte Carlo runs (a campaign)."""
    from robust.analysis.sensitivity import SOBOL_TIME_BASE_SAMPLES
    from robust.simulate import simulate

    row = {"requirement": o.key, "metric": None, "sobol": None, "conditional": None, "status": o.status}
    if o.key not in TIME_RANKED or not case.manoeuvres:
        row["why"] = (
            "not ranked in the dossier: of the time-domain requirements only peak wheel torque and peak pitch are "
            "(a settling time can be unbounded, so its variance is undefined; a survivable step or a fall needs a "
            "search per model, too costly for N (k + 2) models); the worst-location figure shows where it fails"
        )
        return row
    name, unit, pick = TIME_RANKED[o.key]

    def f(X: np.ndarray) -> np.ndarray:
        plant = case.box.plant(X)
        return np.max([pick(simulate(plant, K, m, case.controller)) for m in case.manoeuvres], axis=0)

    seen: dict[str, np.ndarray] = {}

    def keep(X: np.ndarray) -> np.ndarray:
        y = f(X)
        seen["X"], seen["y"] = X, y
        return y

    sob, why = _sobol_or_why(case, keep, name, SOBOL_TIME_BASE_SAMPLES)
    row.update({"metric": name, "sobol": sob, "why": why})
    if "X" in seen and np.all(np.isfinite(seen["y"])):
        row["cuts"] = _cuts(case, K, name, seen["X"], seen["y"], "max", f=f, unit=unit)
    return row


def _sobol_or_why(case: Case, f, name: str, base_samples: int):
    """Sobol indices of ``f`` over the box with the study's seed and confidence, or ``None`` and the reason."""
    from robust.analysis.sensitivity import sobol_of

    try:
        return sobol_of(
            case.box, f, name, base_samples=base_samples, seed=case.study.seed, confidence=case.study.confidence
        ), ""
    except ValueError as exc:
        return None, str(exc)


def _metric_unit(metric: str) -> str:
    from robust.analysis.metrics import METRICS

    return METRICS[metric].unit


CUT_POINTS = 21  # points along each parameter in the one-at-a-time cuts through the worst sample


def _cuts(
    case: Case,
    K: np.ndarray,
    metric: str,
    samples: np.ndarray,
    values: np.ndarray,
    kind: str,
    *,
    f=None,
    unit: str | None = None,
) -> dict:
    """The metric along each parameter's range with the other parameters held at the worst sample's values:
    which tolerance, moved alone from the worst point, changes the worst case most."""
    worst = int(np.argmin(values) if kind == "min" else np.argmax(values))
    at = samples[worst]
    u = np.linspace(0.0, 1.0, CUT_POINTS)
    k = len(case.box.names)
    pts = np.repeat(at[None, :], k * CUT_POINTS, axis=0)
    for j in range(k):
        pts[j * CUT_POINTS : (j + 1) * CUT_POINTS, j] = case.box.low[j] + u * (case.box.high[j] - case.box.low[j])
    v = (evaluate(case.box, pts, K, names=(metric,))[metric] if f is None else f(pts)).reshape(k, CUT_POINTS)
    return {
        "position": u,
        "values": v,
        "unit": _metric_unit(metric) if unit is None else unit,
        "at": dict(zip(case.box.names, map(float, at))),
        "worst": float(values[worst]),
    }


PERIOD_FACTORS = (0.5, 1.0, 2.0, 4.0, 8.0)  # sample periods tried, times the case's (latency scaled alike)


def _sampled_studies(case: Case, model, few: slice, gains) -> tuple[dict, dict]:
    """Margins of the sampled loop at the case's period and latency (the loop-shape models), and the sweep of
    the sample period (latency the same fraction of the period; on the box corners, the case's own period on
    every loop-shape model) with the requirements each period loses."""
    from robust.analysis.sampled import sampled_decay_rate, sampled_loop_margins

    ctl, req = case.controller, case.requirements
    A, B = model.A[few], model.B[few]
    margins = {g.name: sampled_loop_margins(A, B, g.K, ctl.sample_period_s, ctl.latency_s) for g in gains}
    frac = ctl.latency_s / ctl.sample_period_s
    nc = len(corners(case.box))  # the sweep runs on the corners (the first models), the case's period on all
    Ac, Bc = model.A[:nc], model.B[:nc]
    sweep: dict[str, list[dict]] = {}
    for g in gains:
        rows = []
        for f in PERIOD_FACTORS:
            T = ctl.sample_period_s * f
            m = margins[g.name] if f == 1.0 else sampled_loop_margins(Ac, Bc, g.K, T, frac * T)
            row = {
                "period_s": T,
                "latency_s": frac * T,
                "models": int(len(A) if f == 1.0 else nc),
                "decay_rate_per_s": float(
                    sampled_decay_rate(A if f == 1.0 else Ac, B if f == 1.0 else Bc, g.K, T, frac * T).min()
                ),
                "phase_margin_deg": float(m["phase_margin_deg"].min()),
                "delay_margin_s": float(m["delay_margin_s"].min()),
                "disk_margin": float(m["disk_margin"].min()),
                "gain_margin_db": float(np.minimum(m["gain_margin_up_db"], m["gain_margin_down_db"]).min()),
            }
            checks = (
                ("closed_loop_stable", row["decay_rate_per_s"], 0.0),
                ("min_decay_rate_per_s", row["decay_rate_per_s"], req.get("min_decay_rate_per_s")),
                ("min_phase_margin_deg", row["phase_margin_deg"], req.get("min_phase_margin_deg")),
                ("min_delay_margin_ms", 1e3 * row["delay_margin_s"], req.get("min_delay_margin_ms")),
                ("min_disk_margin", row["disk_margin"], req.get("min_disk_margin")),
                ("min_gain_margin_db", row["gain_margin_db"], req.get("min_gain_margin_db")),
            )
            row["lost"] = [k for k, v, b in checks if b is not None and not v > b]
            rows.append(row)
        sweep[g.name] = rows
    return margins, sweep


def today() -> str:
    """The date shown in the dossier's documents (not in its results files)."""
    return _dt.date.today().isoformat()
