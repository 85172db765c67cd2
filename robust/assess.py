"""One assessment of gain sets: linear check, time-domain check and the overall verdicts.

Every command (``check``, ``simulate``, ``synthesize``, ``dossier``) gets its
verdicts from :func:`assess`, so a gain set's overall verdict is the same
wherever it is shown.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from robust.case import Case, Study
from robust.check import CheckResult, run_check
from robust.gains import GainSet
from robust.timecheck import TimeCheckResult, run_time_check
from robust.verdict import OverallVerdict, verdicts_for


@dataclass(frozen=True)
class Assessment:
    """The linear and time-domain checks of gain sets and their overall verdicts."""

    check: CheckResult | None
    time: TimeCheckResult | None
    verdicts: tuple[OverallVerdict, ...]
    default_manoeuvres: bool
    certificates: dict | None = None

    @property
    def passed(self) -> bool:
        """True only when every gain set's overall verdict is PASS."""
        return all(v.passed for v in self.verdicts)

    def verdict(self, name: str) -> OverallVerdict:
        return next(v for v in self.verdicts if v.gain == name)


def assess(
    case: Case,
    gains: list[GainSet],
    *,
    study: Study | None = None,
    linear: bool = True,
    time: bool = True,
    design=None,
    certify: bool = False,
    progress: Callable[[str], None] | None = None,
) -> Assessment:
    """Check gain sets over the box (linear and/or time domain) and give each its overall verdict.

    With ``certify``, each gain's decay rate is also certified on the rigorous polytope (a common
    Lyapunov matrix for the fixed gain); stability and the decay-rate requirement then carry the
    evidence "certified" where the certificate reaches them.
    """
    if not gains:
        raise ValueError("no gain set to check: add [gains.NAME] to the case or pass a gain file")
    study = study or case.study
    chk = run_check(case, gains, study=study, progress=progress) if linear else None
    tm = run_time_check(case, gains, study=study, progress=progress) if time else None
    certificates = certify_gains(case, gains, chk, progress=progress) if certify and chk is not None else None
    verdicts = verdicts_for(
        case,
        chk,
        tm,
        design=design,
        certificates=certificates,
        linear_why="linear check not run",
        time_why="skipped (--linear-only)",
    )
    return Assessment(
        check=chk, time=tm, verdicts=verdicts, default_manoeuvres=case.default_manoeuvres, certificates=certificates
    )


def certify_gains(case: Case, gains: list[GainSet], check: CheckResult, *, progress=None) -> dict:
    """The certified decay rate of every gain set on the rigorous (moment) polytope of the box."""
    if not case.box.ranges:
        return {}
    from robust.design import make_spec
    from robust.synthesis.lmi import certify_gain
    from robust.synthesis.polytope import moment_box

    poly = moment_box(case.box)
    spec, _ = make_spec(case)
    out = {}
    for g, gc in zip(gains, check.gains):
        worst = next(s.worst.value for s in gc.summaries if s.name == "decay_rate")
        if not worst > 0:
            continue  # unstable somewhere in the box: nothing to certify
        if progress is not None:
            progress(f"{g.name}: certifying its decay rate on {poly.vertices} polytope vertices")
        out[g.name] = certify_gain(poly, g.K, input_scale=spec.input_scale, upper=worst, steps=6)
    return out
