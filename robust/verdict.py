"""The one overall verdict of a gain set: every command, report and results file shows this one.

A gain set's overall verdict covers closed-loop stability of every model in
the box (always), the no-fall check in every manoeuvre (always), and every
requirement of the case.  Each requirement's outcome says its evidence:

* ``certified``: an LMI certificate, re-checked with numpy in this run, holds
  for every model of a polytope that provably contains the box;
* ``statistical``: Monte Carlo samples with a Clopper-Pearson bound on the
  failure probability (the worst case is still sampled);
* ``sampled``: corners, a grid or quasi-random points and a search; no
  probability attached.

The overall status is ``FAIL`` when any outcome fails, ``INCOMPLETE`` when
none fails but some requirement was not evaluated, else ``PASS``.  A verdict
is never more favourable than its evidence: ``INCOMPLETE`` is not a pass.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from robust.case import Case
from robust.check import STABILITY, GainCheck
from robust.timecheck import GainTimeCheck

LINEAR_KEYS = (
    "min_decay_rate_per_s",
    "min_damping_ratio",
    "max_natural_frequency_rad_s",
    "min_gain_margin_db",
    "min_phase_margin_deg",
    "min_delay_margin_ms",
    "min_disk_margin",
    "min_multiloop_disk_margin",
)
TIME_KEYS = (
    "max_wheel_torque_n_m",
    "max_pitch_deg",
    "max_settling_time_s",
    "min_speed_step_within_limits_m_s",
    "min_yaw_rate_step_within_limits_rad_s",
)
NO_FALL = "no_fall_in_any_manoeuvre"

# plain words for every requirement key (the README's glossary uses the same)
LABELS = {
    STABILITY: "closed-loop stability",
    NO_FALL: "no fall in any manoeuvre",
    "min_decay_rate_per_s": "slowest decay rate",
    "min_damping_ratio": "smallest damping ratio",
    "max_natural_frequency_rad_s": "largest natural frequency",
    "min_gain_margin_db": "gain margin",
    "min_phase_margin_deg": "phase margin",
    "min_delay_margin_ms": "delay margin",
    "min_disk_margin": "disk margin, one wheel",
    "min_multiloop_disk_margin": "disk margin, both wheels",
    "max_wheel_torque_n_m": "peak wheel torque",
    "max_pitch_deg": "peak pitch",
    "max_settling_time_s": "settling time",
    "min_speed_step_within_limits_m_s": "speed step within limits",
    "min_yaw_rate_step_within_limits_rad_s": "yaw-rate step within limits",
}


@dataclass(frozen=True)
class Outcome:
    """One requirement's outcome for one gain set.

    ``status`` is ``"pass"``, ``"fail"`` or ``"not evaluated"``; ``margin``
    is negative when failed (``None`` when not evaluated); ``why`` says why
    a requirement was not evaluated.
    """

    key: str
    label: str
    domain: str
    status: str
    evidence: str
    bound: float | None
    worst: float | None
    margin: float | None
    unit: str
    failing: str
    why: str = ""


@dataclass(frozen=True)
class OverallVerdict:
    """The overall verdict of one gain set."""

    gain: str
    status: str
    outcomes: tuple[Outcome, ...]
    covered: tuple[str, ...]
    not_evaluated: tuple[str, ...]
    failing: tuple[str, ...]

    @property
    def passed(self) -> bool:
        return self.status == "PASS"

    def as_record(self) -> dict[str, str]:
        """The verdict as a gain file records it: status, what it covered, what fails, what was not evaluated."""
        return {
            "status": self.status,
            "covered": "; ".join(self.covered),
            "failing": ", ".join(self.failing) or "none",
            "not_evaluated": ", ".join(self.not_evaluated) or "none",
        }

    def line(self) -> str:
        """One line for a screen: status, what fails, what was not evaluated."""
        text = f"{self.gain}: {self.status}"
        if self.failing:
            text += " - fails " + ", ".join(LABELS.get(k, k) for k in self.failing)
        elif self.status == "PASS":
            text += f" - {len(self.outcomes)} requirements met, stability included"
        if self.not_evaluated:
            text += "; not evaluated: " + ", ".join(LABELS.get(k, k) for k in self.not_evaluated)
        return text


def _linear_evidence(check: GainCheck, key: str, certified: dict[str, float]) -> str:
    if key in certified:
        return "certified"
    return "statistical" if _is_monte_carlo(check) else "sampled"


def _is_monte_carlo(check: GainCheck) -> bool:
    return any(v.failure_interval is not None for v in check.verdicts)


def certified_requirements(case: Case, design) -> dict[str, dict[str, float]]:
    """Requirements an LMI certificate of this run proves, per gain name.

    Only a certificate re-checked in this run on a polytope that provably
    contains the box counts (a gain file's provenance is a claim, not proof).
    """
    if design is None:
        return {}
    cert = design.synthesis.certificate
    if not cert.passed or not design.polytope.rigorous:
        return {}
    out = {STABILITY: design.synthesis.decay_rate}
    if design.synthesis.decay_rate <= 0:
        out = {}
    want = case.requirements.get("min_decay_rate_per_s")
    if want is not None and design.synthesis.decay_rate >= want:
        out["min_decay_rate_per_s"] = design.synthesis.decay_rate
    return {design.gain.name: out}


def overall_verdict(
    case: Case,
    gain: str,
    linear: GainCheck | None,
    time: GainTimeCheck | None,
    *,
    certified: dict[str, float] | None = None,
    linear_why: str = "linear check not run",
    time_why: str = "time-domain check not run",
    search: bool = True,
    samples: int = 0,
) -> OverallVerdict:
    """The overall verdict of one gain set from its linear and time-domain checks (either may be missing)."""
    certified = certified or {}
    outcomes: list[Outcome] = []
    keys_linear = [STABILITY, *(k for k in LINEAR_KEYS if k in case.requirements)]
    if linear is None:
        for k in keys_linear:
            outcomes.append(Outcome(k, LABELS[k], "linear", "not evaluated", "-", None, None, None, "", "", linear_why))
    else:
        for k in keys_linear:
            vs = [v for v in linear.verdicts if v.requirement == k]
            if not vs:
                continue
            worst_v = min(vs, key=lambda v: v.margin)
            passed = all(v.passed for v in vs)
            fails = max(v.failures for v in vs)
            outcomes.append(
                Outcome(
                    key=k,
                    label=LABELS[k],
                    domain="linear",
                    status="pass" if passed else "fail",
                    evidence=_linear_evidence(linear, k, certified),
                    bound=worst_v.threshold,
                    worst=worst_v.worst,
                    margin=worst_v.margin,
                    unit=worst_v.unit,
                    failing=(
                        "worst at a corner/search"
                        if not passed and fails == 0
                        else f"{fails} of {worst_v.samples} samples"
                    ),
                )
            )
    keys_time = [NO_FALL, *(k for k in TIME_KEYS if k in case.requirements)]
    if time is None:
        for k in keys_time:
            outcomes.append(Outcome(k, LABELS[k], "time", "not evaluated", "-", None, None, None, "", "", time_why))
    else:
        by = {v.requirement: v for v in time.verdicts}
        for k in keys_time:
            v = by.get(k)
            if v is None:
                outcomes.append(
                    Outcome(
                        k,
                        LABELS[k],
                        "time",
                        "not evaluated",
                        "-",
                        None,
                        None,
                        None,
                        "",
                        "",
                        "no manoeuvre steps the speed or yaw rate",
                    )
                )
                continue
            outcomes.append(
                Outcome(
                    key=k,
                    label=LABELS[k],
                    domain="time",
                    status="pass" if v.passed else "fail",
                    evidence="sampled",
                    bound=None if k == NO_FALL else v.threshold,
                    worst=v.worst,
                    margin=None if k == NO_FALL else v.margin,
                    unit=v.unit,
                    failing=f"{v.failures} of {v.models} runs",
                )
            )
    failing = tuple(o.key for o in outcomes if o.status == "fail")
    missing = tuple(o.key for o in outcomes if o.status == "not evaluated")
    status = "FAIL" if failing else ("INCOMPLETE" if missing else "PASS")
    covered = []
    if linear is not None:
        covered.append(
            f"linear: corners, {samples} samples of the study" + (" and a worst-case search" if search else "")
        )
    if time is not None:
        n = int(np.asarray(time.largest_steps[0].points).shape[0]) if time.largest_steps else 0
        covered.append(
            f"time domain: {n} models (corners + Monte Carlo) through {len(time.manoeuvres)} manoeuvres"
            + (" (default manoeuvres)" if case.default_manoeuvres else "")
        )
    return OverallVerdict(
        gain=gain,
        status=status,
        outcomes=tuple(outcomes),
        covered=tuple(covered),
        not_evaluated=missing,
        failing=failing,
    )


def verdicts_for(
    case: Case, check, time, *, design=None, certificates=None, linear_why: str = "", time_why: str = ""
) -> tuple:
    """The overall verdict of every gain set of a run (``check``/``time`` results may be ``None``)."""
    names = [g.gain.name for g in (check.gains if check is not None else time.gains)]
    cert = certified_requirements(case, design)
    want = case.requirements.get("min_decay_rate_per_s")
    for name, c in (certificates or {}).items():
        if c.decay_rate is None or c.certificate is None or not c.certificate.passed:
            continue
        mine = dict(cert.get(name, {}))
        mine[STABILITY] = c.decay_rate
        if want is not None and c.decay_rate >= want:
            mine["min_decay_rate_per_s"] = c.decay_rate
        cert[name] = mine
    out = []
    for i, name in enumerate(names):
        out.append(
            overall_verdict(
                case,
                name,
                None if check is None else check.gains[i],
                None if time is None else time.gains[i],
                certified=cert.get(name),
                search=bool(check.study.search) if check is not None else False,
                samples=int(check.samples) if check is not None else 0,
                **({"linear_why": linear_why} if linear_why else {}),
                **({"time_why": time_why} if time_why else {}),
            )
        )
    return tuple(out)


# how much a margin counts, per unit of the requirement (a margin of one "scale" equals a
# normalised margin of 1; common practice: the bound itself, or a floor for bounds near zero)
MARGIN_FLOORS = {
    "1/s": 0.1,
    "-": 0.05,
    "rad/s": 1.0,
    "dB": 1.0,
    "deg": 5.0,
    "ms": 5.0,
    "N m": 1.0,
    "s": 0.5,
    "m/s": 0.1,
}


def margin_scale(bound: float, unit: str) -> float:
    """The size of one unit of normalised margin for a requirement: the bound, or a floor for small bounds."""
    return max(abs(bound), MARGIN_FLOORS.get(unit, 1.0))


def smallest_normalised_margin(v: OverallVerdict) -> float:
    """The smallest margin of the evaluated outcomes of ``v``, each divided by its :func:`margin_scale`
    (negative: some requirement fails; ``-inf`` when nothing was evaluated)."""
    vals = [
        o.margin / margin_scale(o.bound if o.bound is not None else 0.0, o.unit)
        for o in v.outcomes
        if o.margin is not None and o.status != "not evaluated"
    ]
    return min(vals) if vals else float("-inf")


def recommend(verdicts) -> tuple[OverallVerdict | None, str]:
    """The gain set to recommend and why.

    Among the gain sets whose overall verdict is PASS, the one with the
    largest smallest normalised margin (the most room on its tightest
    requirement).  When none passes: the closest one (fewest failing
    requirements, then the largest smallest normalised margin), named as
    *closest*, never as recommended.  ``(None, reason)`` when there is no
    verdict at all.
    """
    verdicts = list(verdicts)
    if not verdicts:
        return None, "no gain set was assessed"
    passing = [v for v in verdicts if v.passed]
    if passing:
        best = max(passing, key=smallest_normalised_margin)
        return best, (
            f"meets every requirement; of the {len(passing)} gain set(s) that do, it keeps the most room on its "
            f"tightest requirement (smallest normalised margin {smallest_normalised_margin(best):.3g})"
        )

    def fails(v):
        return sum(o.status == "fail" for o in v.outcomes)

    best = min(verdicts, key=lambda v: (fails(v), -smallest_normalised_margin(v)))
    return best, (
        f"NO gain set meets every requirement; the closest is shown: {fails(best)} requirement(s) fail "
        f"({', '.join(best.failing) if best.failing else 'see the matrix'})"
    )
