"""The ``robust`` command line: thin wrappers around the orchestrators."""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence

from robust import __version__

# Heavy modules (numpy, scipy, cvxpy) are imported inside the commands, under the error boundary of
# main(), so that Ctrl-C or a broken install during start-up gives a message, not a traceback.


def _emit(text: str) -> None:
    """Write a result to standard output now (an unwritable output is reported at the boundary)."""
    sys.stdout.write(text)
    sys.stdout.flush()


def _model(args: argparse.Namespace, progress) -> int:
    from robust.case import load_case
    from robust.modelfacts import model_facts
    from robust.report.jsonout import dumps
    from robust.report.text import model_text

    case = load_case(args.case)
    progress("model facts of the nominal vehicle and the box corners")
    facts = model_facts(case)
    _emit(dumps(facts) if args.json else model_text(facts))
    return 0


def _gain_sets(case, names, files):
    from robust.case import CaseError, resolve_gain
    from robust.gains import read_gain_file

    specs = {s.name: s for s in case.gains}
    unknown = [n for n in names or [] if n not in specs]
    if unknown:
        raise CaseError(f"unknown gain set {unknown[0]!r}; the case defines: {', '.join(specs) or 'none'}")
    chosen = names if names else ([] if files else list(specs))
    gains = [resolve_gain(case, specs[n]) for n in chosen]
    gains += [read_gain_file(f) for f in files or []]
    seen: set[str] = set()
    for g in gains:
        if g.name in seen:
            raise CaseError(f"two gain sets are named {g.name!r}; gain set names must differ")
        seen.add(g.name)
    return gains


def _study(case, args):
    from robust.case import check_study_budget
    from robust.check import with_overrides

    study = with_overrides(
        case.study,
        plan=getattr(args, "plan", None),
        samples=getattr(args, "samples", None),
        seed=getattr(args, "seed", None),
        search=False if getattr(args, "no_search", False) else None,
        simulation_samples=getattr(args, "simulation_samples", None),
    )
    check_study_budget(study, len(case.box.ranges), where="--samples/--seed/[study]")
    return study


def _check(args: argparse.Namespace, progress) -> int:
    from robust.assess import assess
    from robust.case import load_case
    from robust.report.jsonout import dumps
    from robust.report.text import assessment_text

    case = load_case(args.case)
    gains = _gain_sets(case, args.gain, args.gain_file)
    study = _study(case, args)
    a = assess(case, gains, study=study, time=not args.linear_only, certify=args.certify, progress=progress)
    if args.json:
        _emit(dumps({"check": a.check, "time": a.time, "verdicts": a.verdicts, "certificates": a.certificates}))
    else:
        _emit(assessment_text(case, a, view="compare" if args.compare else "linear"))
    return 0 if a.passed else 1


def _simulate(args: argparse.Namespace, progress) -> int:
    from robust.assess import assess
    from robust.case import load_case
    from robust.report.jsonout import dumps
    from robust.report.text import assessment_text

    case = load_case(args.case)
    gains = _gain_sets(case, args.gain, args.gain_file)
    study = _study(case, args)
    a = assess(case, gains, study=study, progress=progress)
    if args.json:
        _emit(dumps({"check": a.check, "time": a.time, "verdicts": a.verdicts}))
    else:
        _emit(assessment_text(case, a, view="time"))
    return 0 if a.passed else 1


def _new_gain_target(args: argparse.Namespace, section, default: str):
    """The case (with ranges), the new gain's checked name and its checked gain-file target, before any work."""
    from pathlib import Path

    from robust.case import CaseError, load_case
    from robust.outputs import check_name, plan_gain_file

    case = load_case(args.case)
    if not case.box.ranges:
        raise CaseError(f"{args.case}: no [ranges]: nothing to make robust (use a nominal design)")
    name = check_name(args.name, "--name") if args.name else section(case).get("name", default)
    target = plan_gain_file(args.out or Path("gains") / f"{name}.toml", protect=[args.case])
    return case, name, target


def _refuse_name_clash(name: str, gains) -> None:
    from robust.case import CaseError

    if any(g.name == name for g in gains):
        raise CaseError(f"the new gain's name {name!r} is also a gain set in this run; choose another with --name")


def _synthesize(args: argparse.Namespace, progress) -> int:
    from robust.case import CaseError
    from robust.design import design
    from robust.gains import write_gain_file
    from robust.report.jsonout import dumps
    from robust.report.text import design_text
    from robust.synthesis.lmi import Infeasible

    case, name, target = _new_gain_target(args, lambda c: c.synthesis, "lmi")
    others = _gain_sets(case, args.gain, None) if args.gain or case.gains else []
    _refuse_name_clash(name, others)
    overrides = {"route": args.route, "lyapunov": args.lyapunov, "objective": args.objective, "name": args.name}
    try:
        d = design(case, overrides=overrides, progress=progress, compare_with=others)
    except Infeasible as exc:
        raise CaseError(f"synthesis infeasible: {exc}") from None
    write_gain_file(target.path, d.gain)
    progress(f"gain written to {target.path}")
    _emit(dumps(d) if args.json else design_text(case, d))
    return 0 if d.assessment.passed else 1


def _tune(args: argparse.Namespace, progress) -> int:
    from robust.assess import assess
    from robust.design import CAUTION
    from robust.gains import GainSet, write_gain_file
    from robust.report.jsonout import dumps
    from robust.report.text import assessment_text
    from robust.synthesis.tuning import tune

    case, name, target = _new_gain_target(args, lambda c: c.tuning, "tuned")
    starts = _gain_sets(case, args.gain or case.tuning.get("starts") or None, args.gain_file)
    _refuse_name_clash(name, starts)
    rounds = args.rounds or case.tuning.get("rounds", 3)
    evaluations = args.evaluations or case.tuning.get("evaluations", 150)
    r = tune(case, starts, name=name, outer_iterations=rounds, evaluations=evaluations, progress=progress)
    a = assess(case, [r.gain, *starts], progress=progress)
    v = a.verdicts[0]
    verdict = v.as_record()
    gain = GainSet(r.gain.name, r.gain.K, r.gain.origin, r.gain.provenance | {"caution": CAUTION, "verdict": verdict})
    write_gain_file(target.path, gain)
    progress(f"gain written to {target.path}")
    nearest = []
    if not v.passed:  # an infeasible request: answer with the nearest reachable value of what failed
        from robust.synthesis.front import best_achievable
        from robust.verdict import NO_FALL, STABILITY

        for key in v.failing:
            if key in (NO_FALL, STABILITY) or key not in case.requirements:
                continue
            progress(f"nearest reachable point: best worst-case value of {key} with the others kept")
            nearest.append((key, best_achievable(case, key, r.gain.K, evaluations=max(60, evaluations // 2))))
    if args.json:
        doc = {"tuning": r, "check": a.check, "time": a.time, "verdicts": a.verdicts}
        doc["nearest_reachable"] = [{"requirement": k, "point": p} for k, p in nearest]
        _emit(dumps(doc))
    else:
        from robust.report.text import nearest_text

        head = (
            f"Robust tuning: {r.iterations} rounds, {r.scenarios} scenario models, smallest normalised margin on "
            f"the scenarios {r.score:.3g}; gain written to {target.path}\n\n"
        )
        _emit(head + assessment_text(case, a, view="compare") + nearest_text(case, nearest))
    return 0 if v.passed else 1


def _campaign(args: argparse.Namespace, progress) -> int:
    from pathlib import Path

    from robust.campaign import make_spec, replay, run_campaign
    from robust.case import load_case
    from robust.report.jsonout import dumps
    from robust.report.text import campaign_text, replay_text

    case = load_case(args.case)
    if args.replay is not None:
        if not args.store:
            raise ValueError("--replay needs --store (the campaign's store folder)")
        r = replay(case, args.store, args.replay)
        if args.figure:
            from robust.outputs import atomic_write_text
            from robust.report import figures as F

            atomic_write_text(args.figure, F.svg(F.replay_trace(r)))
        _emit(dumps(r) if args.json else replay_text(r))
        return 0 if r.matches else 1
    if not args.gain or len(args.gain) != 1:
        raise ValueError("--gain: name exactly one gain set of the case (a campaign runs one gain set)")
    gain = _gain_sets(case, args.gain, None)[0]
    if args.subset:
        from robust.campaign import subset_simulation
        from robust.report.text import subset_text

        r = subset_simulation(
            case,
            gain.K,
            args.manoeuvre or "",
            metric=args.subset_metric,
            threshold=args.threshold,
            samples_per_level=args.level_samples,
            seed=case.study.seed if args.seed is None else args.seed,
            progress=progress,
        )
        _emit(dumps(r) if args.json else subset_text(r, gain.name, args.manoeuvre))
        return 0 if r.probability < args.target else 1
    spec = make_spec(
        case,
        gain,
        args.manoeuvre or "",
        runs=args.runs,
        chunk=args.chunk,
        seed=args.seed,
        failure=args.failure,
        target=args.target,
    )
    store = args.store or str(Path("campaigns") / f"{Path(args.case).stem}-{gain.name}-{spec.manoeuvre}")
    s = run_campaign(
        case,
        spec,
        store,
        scheduler=args.scheduler,
        workers=args.workers,
        in_process=args.in_process,
        stop_early=not args.no_early_stop,
        progress=progress,
    )
    _emit(dumps(s) if args.json else campaign_text(s))
    return 0 if s.demonstrated else 1


def _front(args: argparse.Namespace, progress) -> int:
    from robust.case import CaseError, load_case
    from robust.report.jsonout import dumps
    from robust.report.text import front_text
    from robust.synthesis.front import DEFAULT_FACTORS, trade_off

    case = load_case(args.case)
    if not case.box.ranges:
        raise CaseError(f"{args.case}: no [ranges]: with one nominal vehicle there is no robust trade-off")
    sweep = args.sweep or case.front.get("sweep")
    objective = args.objective or case.front.get("objective")
    if not sweep or not objective:
        raise CaseError(f"{args.case}: give --sweep and --objective (requirement keys) or a [front] table")
    starts = _gain_sets(case, args.gain, args.gain_file)
    start = starts[0]
    if args.bounds:
        bounds = list(args.bounds)
    else:
        if sweep not in case.requirements:
            raise CaseError(f"--sweep {sweep}: not under [requirements] of {args.case}; give --bounds")
        factors = case.front.get("factors", DEFAULT_FACTORS)
        bounds = [case.requirements[sweep] * f for f in factors]
    evaluations = args.evaluations or case.front.get("evaluations", 60)
    try:
        fr = trade_off(
            case,
            start.K,
            sweep=sweep,
            objective=objective,
            bounds=bounds,
            evaluations=evaluations,
            progress=progress,
        )
    except ValueError as exc:
        raise CaseError(str(exc)) from None
    _emit(dumps({"front": fr, "start": start.name}) if args.json else front_text(fr, start.name))
    return 0


def _schedule(args: argparse.Namespace, progress) -> int:
    from robust.case import CaseError, load_case
    from robust.report.dossier import schedule_record
    from robust.report.jsonout import dumps
    from robust.report.text import schedule_text
    from robust.scheduling import run_schedule_study

    case = load_case(args.case)
    if not case.schedule:
        raise CaseError(
            f"{args.case}: no [schedule] table: name the measured parameter and its measurement_error (README)"
        )
    tuned = None
    if args.gain or args.gain_file:
        given = _gain_sets(case, args.gain, args.gain_file)
        if len(given) != 1:
            raise CaseError(f"give one gain set to tune a scheduled gain from, got {len(given)}")
        tuned = given[0]
    elif case.tuning and not args.no_tuning:
        # as the dossier does: the case's tuned gain, then the scheduled gain tuned from it
        from robust.case import resolve_gain
        from robust.synthesis.tuning import tune_as_asked

        tuned = tune_as_asked(case, [resolve_gain(case, g) for g in case.gains], progress=progress).gain
    sc = run_schedule_study(case, tuned=tuned, evaluations=args.evaluations or 300, progress=progress)
    if args.json:
        _emit(dumps({"scheduling": schedule_record(sc, case.requirements)}))
    else:
        _emit(schedule_text(sc, case))
    return 0


def _sensitivity(args: argparse.Namespace, progress) -> int:
    from robust.analysis.metrics import METRICS
    from robust.analysis.sensitivity import sobol_indices
    from robust.case import CaseError, load_case
    from robust.report.jsonout import dumps
    from robust.report.text import sensitivity_text

    case = load_case(args.case)
    if not case.box.ranges:
        raise CaseError(f"{args.case}: no [ranges]: nothing varies, so no tolerance drives anything")
    gains = _gain_sets(case, args.gain, args.gain_file)
    if args.metric:
        metrics = list(args.metric)
    else:  # the metrics the case's requirements bound (gain margin up is often unbounded: left out)
        metrics = [n for n, m in METRICS.items() if m.requirement in case.requirements and n != "gain_margin_up"]
        metrics = metrics or ["decay_rate"]
    seed = case.study.seed if args.seed is None else args.seed
    results = []
    for g in gains:
        for name in metrics:
            progress(f"{g.name}: Sobol indices of {name} ({args.samples} base samples)")
            try:
                results.append((g.name, sobol_indices(case.box, g.K, name, base_samples=args.samples, seed=seed)))
            except ValueError as exc:
                progress(f"{g.name}: {name} skipped: {exc}")
    if args.json:
        _emit(dumps([{"gain": n, "indices": r} for n, r in results]))
    else:
        _emit(sensitivity_text(case, results))
    return 0


def _dossier(args: argparse.Namespace, progress) -> int:
    from pathlib import Path

    from robust.case import load_case
    from robust.dossier import run_dossier, today
    from robust.gains import read_gain_file
    from robust.outputs import plan_folder
    from robust.report.decision import load_previous
    from robust.report.dossier import write_dossier
    from robust.report.text import dossier_text

    case = load_case(args.case)
    files = [read_gain_file(f) for f in args.gain_file or []]
    previous = load_previous(args.previous) if args.previous else None
    out = Path(args.out) if args.out else Path("reports") / Path(args.case).stem
    target = plan_folder(out, protect=[args.case, *(args.gain_file or []), *(args.campaign or [])])
    campaigns = []
    if args.campaign:
        from robust.campaign import campaign_record

        campaigns = [campaign_record(case, c) for c in args.campaign]
    data = run_dossier(
        case,
        gain_files=files,
        gain_paths=list(args.gain_file or []),
        synthesize=not args.no_synthesis,
        previous=previous,
        campaigns=campaigns,
        progress=progress,
    )
    progress(f"writing the dossier to {target.path}")
    paths = write_dossier(data, target, today=today())
    _emit(dossier_text(data, paths["folder"]))
    if not args.strict:
        return 0
    return 0 if any(v.passed for v in data.verdicts) else 1


def _whole(low: int):
    """An argparse type: a whole number >= ``low``."""

    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if v < low:
            raise argparse.ArgumentTypeError(f"expected >= {low}, got {v}")
        return v

    return parse


_positive_int = _whole(1)
_seed = _nonneg_int = _whole(0)


def _study_options(p: argparse.ArgumentParser) -> None:
    from robust.uncertainty import PLANS

    p.add_argument("--plan", choices=PLANS, help="sampling plan (default: the case's [study])")
    p.add_argument("--samples", type=_positive_int, help="number of samples (random plans)")
    p.add_argument("--seed", type=_seed, help="seed for sampling and search")
    p.add_argument("--no-search", action="store_true", help="skip the worst-case search inside the box")
    p.add_argument("--simulation-samples", type=_nonneg_int, help="Monte Carlo samples simulated besides the corners")
    p.add_argument("--quiet", action="store_true", help="no progress messages")


def _gain_options(p: argparse.ArgumentParser, *, case_help: str, file_help: str | None) -> None:
    p.add_argument("case", help="case file (TOML)")
    p.add_argument("--gain", action="append", metavar="NAME", help=case_help)
    if file_help:
        p.add_argument("--gain-file", action="append", metavar="PATH", help=file_help)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (exposed for documentation and tests)."""
    parser = argparse.ArgumentParser(
        prog="robust",
        description="Robust-design assistant for balance controllers of two-wheeled vehicles.",
    )
    parser.add_argument("--version", action="version", version=f"robust {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    p = sub.add_parser("model", help="open-loop model facts of a case (nominal and box corners)")
    p.add_argument("case", help="case file (TOML)")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_model)

    p = sub.add_parser(
        "check",
        help="check gain sets against the whole parameter box (eigenvalues, margins, worst case)",
    )
    _gain_options(
        p,
        case_help="gain set from the case (repeatable; default all)",
        file_help="gain file to check as well (repeatable)",
    )
    _study_options(p)
    p.add_argument(
        "--linear-only",
        action="store_true",
        help="skip the time-domain check (the verdict is then INCOMPLETE, never PASS)",
    )
    p.add_argument(
        "--certify",
        action="store_true",
        help="also certify each gain's decay rate with LMIs on the rigorous polytope (slower)",
    )
    p.add_argument("--compare", action="store_true", help="one column per gain set instead of one block each")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_check)

    p = sub.add_parser(
        "simulate",
        help="simulate gain sets through the case's manoeuvres on the nonlinear model with drive limits",
    )
    _gain_options(
        p,
        case_help="gain set from the case (repeatable; default all)",
        file_help="gain file to simulate as well (repeatable)",
    )
    _study_options(p)
    p.add_argument("--json", action="store_true", help="print JSON instead of text (includes envelopes and traces)")
    p.set_defaults(func=_simulate)

    p = sub.add_parser(
        "synthesize",
        help="one LMI gain for the whole parameter box, with a certificate; writes a gain file and checks it",
    )
    _gain_options(p, case_help="case gain sets to compare with (default all)", file_help=None)
    p.add_argument(
        "--route", choices=("moment_box", "sampled_hull"), help="polytope route (default: case or moment_box)"
    )
    p.add_argument("--lyapunov", choices=("common", "parameter_dependent"), help="Lyapunov matrix (default common)")
    p.add_argument("--objective", choices=("gain", "decay", "cost"), help="what to optimise (default gain)")
    p.add_argument("--name", help="name of the new gain set: letters, digits, '-', '_' (default: case or 'lmi')")
    p.add_argument("--out", metavar="PATH", help="gain file to write (default gains/NAME.toml)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_synthesize)

    p = sub.add_parser(
        "sensitivity",
        help="which tolerance drives each metric: Sobol indices over the box (SALib)",
    )
    _gain_options(
        p,
        case_help="gain set from the case (repeatable; default all)",
        file_help="gain file as well (repeatable)",
    )
    p.add_argument("--metric", action="append", help="linear metric (repeatable; default: those the case bounds)")
    p.add_argument("--samples", type=_positive_int, default=1024, help="Saltelli base samples, a power of two")
    p.add_argument("--seed", type=_seed, help="seed (default: the case's [study] seed)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_sensitivity)

    p = sub.add_parser(
        "tune",
        help="robust tuning: a mirror-symmetric gain optimised against every requirement over the box",
    )
    _gain_options(
        p,
        case_help="case gain set to start from (repeatable; default [tuning] starts or all)",
        file_help="gain file to start from as well (repeatable)",
    )
    p.add_argument(
        "--name", help="name of the tuned gain set: letters, digits, '-', '_' (default: [tuning] or 'tuned')"
    )
    p.add_argument("--out", metavar="PATH", help="gain file to write (default gains/NAME.toml)")
    p.add_argument("--rounds", type=_positive_int, help="optimise-then-check rounds (default 3)")
    p.add_argument("--evaluations", type=_positive_int, help="optimiser evaluations per start and round (default 150)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_tune)

    p = sub.add_parser(
        "front",
        help="trade-off front: the best worst-case value of one requirement for each bound on another",
    )
    _gain_options(
        p,
        case_help="case gain set to start the sweep from (the first given; default the case's first)",
        file_help="gain file to start from (repeatable; the first gain set given is used)",
    )
    p.add_argument("--sweep", metavar="KEY", help="requirement whose bound is swept (default [front] sweep)")
    p.add_argument("--objective", metavar="KEY", help="requirement to maximise (default [front] objective)")
    p.add_argument(
        "--bounds", type=float, nargs="+", metavar="B", help="bounds to sweep (default: case bound x [front] factors)"
    )
    p.add_argument("--evaluations", type=_positive_int, help="optimiser evaluations per point (default 60)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_front)

    p = sub.add_parser(
        "schedule",
        help="what measuring the payload buys: fixed gains beside gains scheduled on the measurement ([schedule])",
    )
    _gain_options(
        p,
        case_help="case gain set to tune a scheduled gain from as well (at most one)",
        file_help="gain file to tune a scheduled gain from as well",
    )
    p.add_argument("--evaluations", type=_positive_int, help="scheduled tuning's optimiser evaluations (default 300)")
    p.add_argument(
        "--no-tuning", action="store_true", help="without --gain: leave out the tuned pair the case's [tuning] asks for"
    )
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_schedule)

    p = sub.add_parser(
        "campaign",
        help="fall-probability campaign: many nonlinear runs of one gain set through one manoeuvre, on Dask",
    )
    p.add_argument("case", help="case file (TOML)")
    p.add_argument("--gain", action="append", metavar="NAME", help="the case's gain set to run (exactly one)")
    p.add_argument("--manoeuvre", metavar="NAME", help="the case's manoeuvre to run")
    p.add_argument("--runs", type=_positive_int, default=30000, help="Monte Carlo runs (default 30000)")
    p.add_argument("--chunk", type=_positive_int, default=2000, help="runs per chunk / task (default 2000)")
    p.add_argument("--seed", type=_seed, help="seed (default: the case's [study] seed)")
    p.add_argument("--failure", default="fall", help="what counts as a failure: fall (default) or limit")
    p.add_argument("--target", type=float, default=1e-4, help="failure probability to demonstrate (default 1e-4)")
    p.add_argument("--store", metavar="DIR", help="results store (default campaigns/CASE-GAIN-MANOEUVRE)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="an existing Dask scheduler, e.g. tcp://host:8786")
    p.add_argument("--workers", type=_positive_int, help="LocalCluster worker processes (default: one per core)")
    p.add_argument("--in-process", action="store_true", help="run here, without Dask (same results)")
    p.add_argument("--no-early-stop", action="store_true", help="run every planned chunk")
    p.add_argument("--subset", action="store_true", help="estimate the probability by subset simulation instead")
    p.add_argument("--subset-metric", default="fall", help="with --subset: fall (default), peak_pitch_rad, ...")
    p.add_argument("--threshold", type=float, help="with --subset: failure when the metric reaches this value")
    p.add_argument("--level-samples", type=_positive_int, default=500, help="with --subset: samples per level")
    p.add_argument("--replay", type=int, metavar="SAMPLE", help="simulate one stored sample again, with its trace")
    p.add_argument("--figure", metavar="PATH", help="with --replay: write the trace as an SVG figure")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_campaign)

    p = sub.add_parser(
        "dossier",
        help="the design dossier of a case: every analysis, figures, verdicts, as HTML, PDF, Markdown, CSV and JSON",
    )
    p.add_argument("case", help="case file (TOML)")
    p.add_argument("--gain-file", action="append", metavar="PATH", help="gain file to include (repeatable)")
    p.add_argument(
        "--out",
        metavar="DIR",
        help="output folder (default reports/<case name>); an existing folder is replaced only if this tool wrote it",
    )
    p.add_argument("--no-synthesis", action="store_true", help="leave out the LMI synthesis the case asks for")
    p.add_argument(
        "--previous",
        metavar="DIR",
        help="a previous dossier of the same case: its verdicts and gains are compared on the decision page",
    )
    p.add_argument(
        "--campaign",
        action="append",
        metavar="STORE",
        help="a fall-probability campaign store of this case to report (repeatable)",
    )
    p.add_argument(
        "--strict", action="store_true", help="exit 1 unless at least one gain set's overall verdict is PASS"
    )
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.set_defaults(func=_dossier)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code.

    0 ok (every gain set's overall verdict PASS), 1 a verdict is FAIL or
    INCOMPLETE, 2 bad input or an output that cannot be written, 3 an
    internal error, 130 interrupted.  Never a traceback (set ROBUST_DEBUG=1
    to see one for an internal error).
    """
    progress = None
    try:
        parser = build_parser()
        try:
            args = parser.parse_args(argv)
        except SystemExit as exc:  # argparse exits 2 on usage errors, 0 on --help
            return int(exc.code or 0)
        from robust.progress import Progress

        progress = Progress(enabled=not getattr(args, "quiet", False))
        import warnings

        # numeric warnings from libraries are noise on a screen: every result is checked and errors are reported
        warnings.filterwarnings("ignore", category=RuntimeWarning)
        return int(args.func(args, progress))
    except KeyboardInterrupt:
        _quiet_stdout()
        print("robust: interrupted; nothing half-written was left behind", file=sys.stderr)
        return 130
    except ValueError as exc:  # CaseError, OutputError and every validation error
        print(f"robust: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        _quiet_stdout()
        where = f" '{exc.filename}'" if exc.filename else (" standard output" if _stdout_failed(exc) else "")
        stage = f" (while {progress.stage})" if progress is not None else ""
        print(f"robust: error: cannot read or write{where}: {exc.strerror or exc}{stage}", file=sys.stderr)
        return 2
    except MemoryError:
        print("robust: error: out of memory; use fewer samples or grid points", file=sys.stderr)
        return 2
    except Exception as exc:  # library failures: say what was being computed
        if os.environ.get("ROBUST_DEBUG"):
            raise
        stage = progress.stage if progress is not None else "starting"
        kind = type(exc).__name__
        numeric = kind in ("LinAlgError", "SolverError", "FloatingPointError", "ZeroDivisionError")
        print(
            f"robust: error while {stage}: {kind}: {exc}"
            + (
                "; the numbers of this case or gain set make the computation fail: check the gain and the ranges"
                if numeric
                else "; this is a fault of the tool, please report it with the case file"
            ),
            file=sys.stderr,
        )
        return 2 if numeric else 3


def _stdout_failed(exc: OSError) -> bool:
    import errno

    return exc.errno in (errno.ENOSPC, errno.EPIPE, errno.EBADF)


def _quiet_stdout() -> None:
    """After a failed write to standard output, point it at the null device so exit does not fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):
        pass


def main_entry() -> None:
    """Console-script entry point."""
    try:
        code = main()
    except KeyboardInterrupt:
        code = 130
        print("robust: interrupted", file=sys.stderr)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    main_entry()
