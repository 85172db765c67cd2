"""The ``robust`` command line: thin wrappers around the orchestrators."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from robust import __version__
from robust.case import CaseError, load_case


def _model(args: argparse.Namespace) -> int:
    from robust.modelfacts import model_facts
    from robust.report.jsonout import dumps
    from robust.report.text import model_text

    case = load_case(args.case)
    facts = model_facts(case)
    sys.stdout.write(dumps(facts) if args.json else model_text(facts))
    return 0


def _progress(quiet: bool):
    if quiet:
        return None
    return lambda msg: print(f"robust: {msg}", file=sys.stderr, flush=True)


def _gain_sets(case, names, files):
    from robust.case import resolve_gain
    from robust.gains import read_gain_file

    specs = {s.name: s for s in case.gains}
    unknown = [n for n in names or [] if n not in specs]
    if unknown:
        raise CaseError(f"unknown gain set {unknown[0]!r}; the case defines: {', '.join(specs) or 'none'}")
    chosen = names if names else ([] if files else list(specs))
    gains = [resolve_gain(case, specs[n]) for n in chosen]
    gains += [read_gain_file(f) for f in files or []]
    return gains


def _check(args: argparse.Namespace) -> int:
    from robust.check import run_check, with_overrides
    from robust.report.jsonout import dumps
    from robust.report.text import check_text

    case = load_case(args.case)
    gains = _gain_sets(case, args.gain, args.gain_file)
    study = with_overrides(
        case.study,
        plan=args.plan,
        samples=args.samples,
        seed=args.seed,
        search=False if args.no_search else None,
    )
    result = run_check(case, gains, study=study, progress=_progress(args.quiet))
    if args.json:
        sys.stdout.write(dumps(result))
    elif args.compare:
        from robust.report.text import compare_text

        sys.stdout.write(compare_text(result))
    else:
        sys.stdout.write(check_text(result))
    return 0 if result.passed else 1


def _simulate(args: argparse.Namespace) -> int:
    from robust.report.jsonout import dumps
    from robust.report.text import time_text
    from robust.timecheck import run_time_check

    case = load_case(args.case)
    if not case.manoeuvres:
        raise CaseError(f"{args.case}: no [manoeuvres.NAME] tables: nothing to simulate")
    gains = _gain_sets(case, args.gain, args.gain_file)
    study = case.study
    if args.simulation_samples is not None:
        from dataclasses import replace

        study = replace(study, simulation_samples=args.simulation_samples)
    if args.seed is not None:
        from dataclasses import replace

        study = replace(study, seed=args.seed)
    result = run_time_check(case, gains, study=study, progress=_progress(args.quiet))
    sys.stdout.write(dumps(result) if args.json else time_text(result))
    return 0 if result.passed else 1


def _synthesize(args: argparse.Namespace) -> int:
    from pathlib import Path

    from robust.design import design
    from robust.gains import write_gain_file
    from robust.report.jsonout import dumps
    from robust.report.text import design_text
    from robust.synthesis.lmi import Infeasible

    case = load_case(args.case)
    if not case.box.ranges:
        raise CaseError(f"{args.case}: no [ranges]: nothing to make robust (use a nominal design)")
    others = _gain_sets(case, args.gain, None) if args.gain or case.gains else []
    overrides = {
        "route": args.route,
        "lyapunov": args.lyapunov,
        "objective": args.objective,
        "name": args.name,
    }
    try:
        d = design(case, overrides=overrides, progress=_progress(args.quiet), compare_with=others)
    except Infeasible as exc:
        raise CaseError(f"synthesis infeasible: {exc}") from None
    out = Path(args.out) if args.out else Path("gains") / f"{d.gain.name}.toml"
    write_gain_file(out, d.gain)
    print(f"robust: gain written to {out}", file=sys.stderr)
    sys.stdout.write(dumps(d) if args.json else design_text(d))
    return 0 if d.check.gains[0].passed else 1


def _dossier(args: argparse.Namespace) -> int:
    from pathlib import Path

    from robust.dossier import run_dossier, today
    from robust.gains import read_gain_file
    from robust.report.dossier import write_dossier
    from robust.report.text import compare_text

    case = load_case(args.case)
    files = [read_gain_file(f) for f in args.gain_file or []]
    data = run_dossier(case, gain_files=files, synthesize=not args.no_synthesis, progress=_progress(args.quiet))
    out = Path(args.out) if args.out else Path("reports") / Path(args.case).stem
    paths = write_dossier(data, out, today=today())
    sys.stdout.write(compare_text(data.check))
    if data.time is not None:
        verdicts = ", ".join(f"{g.gain.name}: {'PASS' if g.passed else 'FAIL'}" for g in data.time.gains)
        sys.stdout.write(f"\nTime-domain verdicts: {verdicts}\n")
    if data.design_error:
        sys.stdout.write(f"\nSynthesis: {data.design_error}\n")
    sys.stdout.write(
        f"\nDossier written to {paths['folder']}/ (dossier.html, dossier.pdf, dossier.md, "
        "results.json, tables/*.csv, figures/*.svg)\n"
    )
    if not args.strict:
        return 0
    both = [c.passed and (data.time is None or data.time.gains[i].passed) for i, c in enumerate(data.check.gains)]
    return 0 if any(both) else 1


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
    p.add_argument("--simulation-samples", type=_nonneg_int, help="Monte Carlo samples besides the corners")
    p.add_argument("--seed", type=_seed, help="seed of the Monte Carlo samples")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
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
    p.add_argument("--name", help="name of the new gain set (default: case or 'lmi')")
    p.add_argument("--out", metavar="PATH", help="gain file to write (default gains/NAME.toml)")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")
    p.set_defaults(func=_synthesize)

    p = sub.add_parser(
        "dossier",
        help="the design dossier of a case: every analysis, figures, verdicts, as HTML, PDF, Markdown, CSV and JSON",
    )
    p.add_argument("case", help="case file (TOML)")
    p.add_argument("--gain-file", action="append", metavar="PATH", help="gain file to include (repeatable)")
    p.add_argument("--out", metavar="DIR", help="output folder (default reports/<case name>)")
    p.add_argument("--no-synthesis", action="store_true", help="leave out the LMI synthesis the case asks for")
    p.add_argument("--strict", action="store_true", help="exit 1 unless at least one gain set meets every requirement")
    p.add_argument("--quiet", action="store_true", help="no progress messages")
    p.set_defaults(func=_dossier)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 1 a requirement failed, 2 bad input)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on usage errors, 0 on --help
        return int(exc.code or 0)
    try:
        return int(args.func(args))
    except (CaseError, ValueError) as exc:
        print(f"robust: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("robust: interrupted", file=sys.stderr)
        return 130


def main_entry() -> None:
    """Console-script entry point."""
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    main_entry()
