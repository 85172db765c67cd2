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
    progress: Callable[[str], None] | None = None,
) -> Assessment:
    """Check gain sets over the box (linear and/or time domain) and give each its overall verdict."""
    if not gains:
        raise ValueError("no gain set to check: add [gains.NAME] to the case or pass a gain file")
    study = study or case.study
    chk = run_check(case, gains, study=study, progress=progress) if linear else None
    tm = run_time_check(case, gains, study=study, progress=progress) if time else None
    verdicts = verdicts_for(
        case,
        chk,
        tm,
        design=design,
        linear_why="linear check not run",
        time_why="skipped (--linear-only)",
    )
    return Assessment(check=chk, time=tm, verdicts=verdicts, default_manoeuvres=case.default_manoeuvres)
