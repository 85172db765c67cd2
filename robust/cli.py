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
