"""One assessment of gain sets: linear check, time-domain check and the overall verdicts.

Every command (``check``, ``simulate``, ``synthesize``, ``dossier``) gets its
verdicts from :func:`assess`, so a gain set's overall verdict is the same
wherever it is shown.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

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
    check: CheckResult | None = None,
    progress: Callable[[str], None] | None = None,
) -> Assessment:
    """Check gain sets over the box (linear and/or time domain) and give each its overall verdict.

    With ``certify``, each gain's decay rate is also certified on the rigorous polytope (a common
    Lyapunov matrix for the fixed gain); stability and the decay-rate requirement then carry the
    evidence "certified" where the certificate reaches them.  ``check`` is the linear check of exactly
    these gain sets with this study when the caller ran it already (the dossier, beside its other
    stages); it is used instead of running it again.
    """
    if not gains:
        raise ValueError("no gain set to check: add [gains.NAME] to the case or pass a gain file")
    study = study or case.study
    if check is not None and (
        [c.gain.name for c in check.gains] != [g.name for g in gains]
        or check.study != study
        or check.case_sha256 != case.sha256
    ):
        raise ValueError("assess: the given linear check is of other gain sets, another study or another case")
    if check is not None and not all(np.array_equal(c.gain.K, g.K) for c, g in zip(check.gains, gains)):
        raise ValueError("assess: the given linear check is of other gain matrices")
    if not linear:
        chk = None
    elif check is not None:
        chk = check
    else:
        chk = run_check(case, gains, study=study, progress=progress)
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
        out[g.name] = certify_gain(poly, g.K, input_scale=spec.input_scale, upper=worst)
    return out


def joined(a, b, swap=None):
    """One linear (or time-domain) check of the gain sets of ``a`` then ``b``, both of the same case and study;
    ``swap`` maps each per-gain record of ``a`` (default: kept as it is)."""
    from dataclasses import replace

    if a.study != b.study or a.case_sha256 != b.case_sha256:
        raise ValueError("the checks were made with different cases or studies")
    first = a.gains if swap is None else tuple(swap(g) for g in a.gains)
    return replace(a, gains=tuple(first) + tuple(b.gains), passed=a.passed and b.passed)


def merge_assessments(first: Assessment, second: Assessment, *, rename: dict | None = None) -> Assessment:
    """One assessment of the gain sets of ``first`` then ``second`` (same case and study).

    Lets a caller reuse an assessment already made (the tuned gain's final
    check) instead of repeating it; ``rename`` maps a gain name to the
    :class:`~robust.gains.GainSet` that replaces it inside ``first`` (same
    matrix, fuller provenance).  Raises ``ValueError`` if the studies differ,
    a gain name repeats, or a replacement changes the matrix.
    """
    from dataclasses import replace

    rename = rename or {}

    def swap(x):
        g = rename.get(x.gain.name)
        if g is None:
            return x
        if not np.array_equal(g.K, x.gain.K):
            raise ValueError(f"gain {g.name!r}: the replacement has a different matrix")
        return replace(x, gain=g)

    names = [v.gain for v in first.verdicts] + [v.gain for v in second.verdicts]
    if len(set(names)) != len(names):
        raise ValueError(f"gain set names repeat across the assessments: {names}")

    def join(a, b):
        if a is None or b is None:
            if a is not None or b is not None:
                raise ValueError("one assessment has a part the other lacks")
            return None
        return joined(a, b, swap)

    certs = None
    if first.certificates is not None or second.certificates is not None:
        certs = {**(first.certificates or {}), **(second.certificates or {})}
    return Assessment(
        check=join(first.check, second.check),
        time=join(first.time, second.time),
        verdicts=first.verdicts + second.verdicts,
        default_manoeuvres=first.default_manoeuvres,
        certificates=certs,
    )
