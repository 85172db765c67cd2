"""The check: one or more gain sets against the whole parameter box (linear analysis).

For each gain set: metrics at the nominal model, at every corner, on the
study's sampling plan and, when asked, a worst-case search inside the box;
then a verdict per requirement with its margin and, for Monte Carlo plans,
the failure probability with an exact (Clopper-Pearson) interval.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from robust.analysis.margins import loop_margins
from robust.analysis.metrics import METRICS, evaluate
from robust.analysis.stats import clopper_pearson, percentiles, samples_needed
from robust.analysis.worst import search_worst
from robust.case import Case, Study
from robust.gains import GainSet
from robust.linear import reduced_model
from robust.progress import bar
from robust.uncertainty import corners, plan_points

Progress = Callable[[str], None]
STABILITY = "closed_loop_stable"


@dataclass(frozen=True)
class Worst:
    """A worst value and where it is (parameter name -> value)."""

    value: float
    at: dict[str, float]
    source: str


@dataclass(frozen=True)
class MetricSummary:
    """One metric over the box for one gain set."""

    name: str
    unit: str
    kind: str
    text: str
    nominal: float
    worst_corner: Worst
    worst_sample: Worst | None
    worst_search: Worst | None
    worst: Worst
    percentiles: dict[str, float]
    varies: bool = True


@dataclass(frozen=True)
class Verdict:
    """One requirement on one metric.

    ``margin`` is ``worst - threshold`` for lower bounds and
    ``threshold - worst`` for upper bounds: negative means failed.
    ``failure_interval`` is the Clopper-Pearson interval (Monte Carlo plans only).
    """

    requirement: str
    metric: str
    unit: str
    threshold: float
    worst: float
    passed: bool
    margin: float
    failures: int
    samples: int
    failure_fraction: float
    failure_interval: tuple[float, float] | None


@dataclass(frozen=True)
class InputMargin:
    """Loop-at-a-time margins at one wheel input: nominal and worst over corners and samples."""

    wheel: str
    nominal: dict[str, float]
    worst: dict[str, float]


@dataclass(frozen=True)
class GainCheck:
    """The check of one gain set."""

    gain: GainSet
    summaries: tuple[MetricSummary, ...]
    verdicts: tuple[Verdict, ...]
    inputs: tuple[InputMargin, ...]
    passed: bool
    corner_points: np.ndarray
    corner_values: dict[str, np.ndarray]


@dataclass(frozen=True)
class CheckResult:
    """The check of several gain sets on one case."""

    title: str
    case_sha256: str
    study: Study
    parameter_names: tuple[str, ...]
    samples: int
    samples_for_1pct_at_confidence: int
    gains: tuple[GainCheck, ...]
    passed: bool


def _at(names, point) -> dict[str, float]:
    return {n: float(v) for n, v in zip(names, point)}


def _varies(corner_values: np.ndarray, sample_values: np.ndarray, searched: Worst | None) -> bool:
    """Whether a metric takes more than one value over the box (a location is meaningless otherwise)."""
    v = np.concatenate([corner_values, sample_values] + ([np.array([searched.value])] if searched else []))
    if np.all(np.isinf(v)) or v.size == 0:
        return False
    return bool(np.ptp(v[np.isfinite(v)]) > 1e-9 * max(1.0, float(np.abs(v[np.isfinite(v)]).max()))) or bool(
        np.any(np.isinf(v)) and np.any(np.isfinite(v))
    )


def _stability_verdict(case: Case, study: Study, decay: MetricSummary, at_samples: dict) -> Verdict:
    """Closed-loop stability of every model: always a requirement, whatever the case file asks."""
    vals = at_samples["decay_rate"]
    fails = int(np.sum(vals <= 0))
    n = len(vals)
    interval = clopper_pearson(fails, n, study.confidence) if study.plan == "monte_carlo" and n else None
    return Verdict(
        requirement=STABILITY,
        metric="decay_rate",
        unit="1/s",
        threshold=0.0,
        worst=decay.worst.value,
        passed=bool(decay.worst.value > 0),
        margin=float(decay.worst.value),
        failures=fails,
        samples=n,
        failure_fraction=fails / n if n else 0.0,
        failure_interval=interval,
    )


def _worst_index(metric: str, values: np.ndarray) -> int:
    return int(np.argmax(METRICS[metric].badness(values)))


def _input_margins(case: Case, K: np.ndarray, points: np.ndarray, chunk: int = 50_000) -> tuple[InputMargin, ...]:
    """Loop-at-a-time margins per wheel: nominal and worst over ``points``, in chunks (memory stays flat)."""

    def per_wheel(m, j: int) -> dict[str, np.ndarray]:
        return {
            "gain_margin_up_db": m.gain_margin_upper_db[:, j],
            "gain_margin_down_db": -m.gain_margin_lower_db[:, j],
            "phase_margin_deg": m.phase_margin_deg[:, j],
            "delay_margin_ms": 1e3 * m.delay_margin_s[:, j],
            "disk_margin": m.disk_margin[:, j],
            "disk_gain_high_db": 20 * np.log10(m.disk_gain_high[:, j]),
            "disk_phase_deg": m.disk_phase_deg[:, j],
        }

    nom = reduced_model(case.box.plant(case.box.nominal[None, :]))
    lm_nom = loop_margins(nom.A, nom.B, K)
    worst: list[dict[str, float]] = [{}, {}]
    for start in range(0, len(points), chunk):
        model = reduced_model(case.box.plant(points[start : start + chunk]))
        lm = loop_margins(model.A, model.B, K)
        for j in range(2):
            for k, v in per_wheel(lm, j).items():
                worst[j][k] = min(worst[j].get(k, np.inf), float(np.min(v)))
    return tuple(
        InputMargin(
            wheel=wheel,
            nominal={k: float(v[0]) for k, v in per_wheel(lm_nom, j).items()},
            worst=worst[j],
        )
        for j, wheel in enumerate(("left", "right"))
    )


def check_gain(
    case: Case,
    gain: GainSet,
    study: Study,
    points: np.ndarray,
    *,
    progress: Progress | None = None,
    advance: Callable[[int], None] | None = None,
) -> GainCheck:
    """Check one gain set on the corners, the given sample points and (optionally) by search."""
    box, names, K = case.box, case.box.names, gain.K
    say = progress or (lambda _msg: None)
    step = advance or (lambda _n=1: None)
    nominal = evaluate(box, box.nominal[None, :], K)
    cpts = corners(box)
    at_corners = evaluate(box, cpts, K)
    say(f"{gain.name}: {len(points)} samples")
    at_samples = evaluate(
        box, points, K, progress=lambda d, t: say(f"{gain.name}: samples {d}/{t}") if t > 20000 else None
    )
    step(1)
    summaries = []
    searched: dict[str, Worst] = {}
    for name, m in METRICS.items():
        ic = _worst_index(name, at_corners[name])
        wc = Worst(float(at_corners[name][ic]), _at(names, cpts[ic]), "corner")
        ws = None
        if len(points):
            i = _worst_index(name, at_samples[name])
            ws = Worst(float(at_samples[name][i]), _at(names, points[i]), "sample")
        wsearch = None
        if study.search and names:
            allv = np.concatenate([at_corners[name], at_samples[name]])
            allp = np.concatenate([cpts, points])
            order = np.argsort(-m.badness(allv), kind="stable")[:8]
            if np.all(np.isinf(allv)) and m.kind == "min" and np.all(allv > 0):
                wsearch = None  # unbounded everywhere sampled (e.g. no upper gain limit)
            else:
                say(f"{gain.name}: searching the box for the worst {name}")
                r = search_worst(box, K, name, allp[order], seed=study.seed)
                wsearch = Worst(r.value, _at(names, r.point), "search")
                searched[name] = wsearch
        step(1)
        cands = [w for w in (wc, ws, wsearch) if w is not None]
        worst = cands[0]
        for w in cands[1:]:
            if m.worse(np.array(w.value), np.array(worst.value)):
                worst = w
        summaries.append(
            MetricSummary(
                name=name,
                unit=m.unit,
                kind=m.kind,
                text=m.text,
                nominal=float(nominal[name][0]),
                worst_corner=wc,
                worst_sample=ws,
                worst_search=wsearch,
                worst=worst,
                percentiles=percentiles(at_samples[name]) if len(points) else {},
                varies=_varies(at_corners[name], at_samples[name], wsearch),
            )
        )
    verdicts = [_stability_verdict(case, study, {s.name: s for s in summaries}["decay_rate"], at_samples)]
    by_name = {s.name: s for s in summaries}
    for key, threshold in case.requirements.items():
        for name, m in METRICS.items():
            if m.requirement != key:
                continue
            s = by_name[name]
            vals = at_samples[name]
            if m.kind == "min":
                fails = int(np.sum(vals < threshold))
                margin = s.worst.value - threshold
            else:
                fails = int(np.sum(vals > threshold))
                margin = threshold - s.worst.value
            n = len(vals)
            interval = clopper_pearson(fails, n, study.confidence) if study.plan == "monte_carlo" and n else None
            verdicts.append(
                Verdict(
                    requirement=key,
                    metric=name,
                    unit=m.unit,
                    threshold=threshold,
                    worst=s.worst.value,
                    passed=bool(margin >= 0),
                    margin=float(margin),
                    failures=fails,
                    samples=n,
                    failure_fraction=fails / n if n else 0.0,
                    failure_interval=interval,
                )
            )
    inputs = _input_margins(case, K, np.concatenate([cpts, points]))
    return GainCheck(
        gain=gain,
        summaries=tuple(summaries),
        verdicts=tuple(verdicts),
        inputs=inputs,
        passed=all(v.passed for v in verdicts),
        corner_points=cpts,
        corner_values=at_corners,
    )


def run_check(
    case: Case,
    gains: list[GainSet],
    *,
    study: Study | None = None,
    progress: Progress | None = None,
) -> CheckResult:
    """Check every gain set over the case's box with the case's (or the given) study."""
    study = study or case.study
    if not gains:
        raise ValueError("no gain set to check: add [gains.NAME] to the case or pass a gain file")
    points = plan_points(case.box, study.plan, samples=study.samples, seed=study.seed, grid_points=study.grid_points)
    total = len(gains) * (1 + len(METRICS))
    with bar(progress, total, f"linear check of {len(gains)} gain sets on {len(points)} samples") as advance:
        checks = tuple(check_gain(case, g, study, points, progress=progress, advance=advance) for g in gains)
    return CheckResult(
        title=case.title,
        case_sha256=case.sha256,
        study=study,
        parameter_names=case.box.names,
        samples=int(points.shape[0]),
        samples_for_1pct_at_confidence=samples_needed(0.01, study.confidence),
        gains=checks,
        passed=all(c.passed for c in checks),
    )


def with_overrides(study: Study, **changes) -> Study:
    """The study with command-line overrides applied (``None`` values ignored)."""
    return replace(study, **{k: v for k, v in changes.items() if v is not None})
