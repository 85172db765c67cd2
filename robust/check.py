"""The check: one or more gain sets against the whole parameter box (linear analysis).

For each gain set: metrics at the nominal model, at every corner, on the
study's sampling plan and, when asked, a worst-case search inside the box;
then a verdict per requirement with its margin and, for Monte Carlo plans,
the failure probability with an exact (Clopper-Pearson) interval.
"""

from __future__ import annotations

import functools
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
from robust.uncertainty import corners, monte_carlo, plan_points

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
    return bool(np.ptp(v[np.isfinite(v)]) > 1e-6 * max(1.0, float(np.abs(v[np.isfinite(v)]).max()))) or bool(
        np.any(np.isinf(v)) and np.any(np.isfinite(v))
    )


def _stability_verdict(study: Study, decay: MetricSummary, fails: int, n: int) -> Verdict:
    """Closed-loop stability of every model: always a requirement, whatever the case file asks."""
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


CHUNK = 50_000  # samples evaluated and accumulated at a time: memory does not grow with the study size


@dataclass(frozen=True)
class SampleStream:
    """The study's sample points, produced in chunks (Monte Carlo points are regenerated, never stored).

    Monte Carlo samples come from fixed random blocks, so every chunking gives
    the same points; other plans are built once (their sizes are budgeted).
    """

    case: Case
    study: Study

    @property
    def count(self) -> int:
        return int(self._points().shape[0]) if not self._streamed else int(self.study.samples)

    @functools.cached_property
    def _built(self) -> np.ndarray:
        st = self.study
        return plan_points(self.case.box, st.plan, samples=st.samples, seed=st.seed, grid_points=st.grid_points)

    @property
    def _streamed(self) -> bool:
        return self.study.plan == "monte_carlo" and bool(self.case.box.ranges)

    def _points(self) -> np.ndarray:
        return self._built  # built once per stream (grids and quasi-random plans are budgeted)

    def chunks(self, size: int = CHUNK):
        """Yield ``(start, points)`` over the whole plan."""
        if self._streamed:
            n = self.count
            for start in range(0, n, size):
                yield start, monte_carlo(self.case.box, n, self.study.seed, start=start, stop=min(n, start + size))
        else:
            pts = self._points()
            for start in range(0, pts.shape[0], size):
                yield start, pts[start : start + size]

    def points_at(self, index: np.ndarray) -> np.ndarray:
        """The sample points at the given indices ``(m, k)``."""
        index = np.asarray(index, dtype=int)
        if not self._streamed:
            return self._points()[index]
        n = self.count
        return np.array([monte_carlo(self.case.box, n, self.study.seed, start=i, stop=i + 1)[0] for i in index])


_WHEEL_KEYS = (
    "gain_margin_up_db",
    "gain_margin_down_db",
    "phase_margin_deg",
    "delay_margin_ms",
    "disk_margin",
    "disk_gain_high_db",
    "disk_phase_deg",
)


def _per_wheel(m, j: int) -> dict[str, np.ndarray]:
    return {
        "gain_margin_up_db": m.gain_margin_upper_db[:, j],
        "gain_margin_down_db": -m.gain_margin_lower_db[:, j],
        "phase_margin_deg": m.phase_margin_deg[:, j],
        "delay_margin_ms": 1e3 * m.delay_margin_s[:, j],
        "disk_margin": m.disk_margin[:, j],
        "disk_gain_high_db": 20 * np.log10(m.disk_gain_high[:, j]),
        "disk_phase_deg": m.disk_phase_deg[:, j],
    }


class _WheelMargins:
    """Running worst loop-at-a-time margins per wheel input over chunks of points."""

    def __init__(self) -> None:
        self.worst: list[dict[str, float]] = [{}, {}]

    def add(self, case: Case, K: np.ndarray, points: np.ndarray) -> None:
        for start in range(0, len(points), 20_000):
            model = reduced_model(case.box.plant(points[start : start + 20_000]))
            lm = loop_margins(model.A, model.B, K)
            for j in range(2):
                for k, v in _per_wheel(lm, j).items():
                    self.worst[j][k] = min(self.worst[j].get(k, np.inf), float(np.min(v)))

    def result(self, case: Case, K: np.ndarray) -> tuple[InputMargin, ...]:
        nom = reduced_model(case.box.plant(case.box.nominal[None, :]))
        lm_nom = loop_margins(nom.A, nom.B, K)
        return tuple(
            InputMargin(
                wheel=wheel,
                nominal={k: float(v[0]) for k, v in _per_wheel(lm_nom, j).items()},
                worst=self.worst[j],
            )
            for j, wheel in enumerate(("left", "right"))
        )


def _requirement_pairs(case: Case) -> list[tuple[str, str, float]]:
    """``(requirement key, metric, threshold)`` for every linear requirement of the case."""
    return [
        (key, name, threshold)
        for key, threshold in case.requirements.items()
        for name, m in METRICS.items()
        if m.requirement == key
    ]


def _count_fails(m, vals: np.ndarray, threshold: float) -> int:
    return int(np.sum(vals < threshold)) if m.kind == "min" else int(np.sum(vals > threshold))


def check_gain(
    case: Case,
    gain: GainSet,
    study: Study,
    stream: SampleStream,
    *,
    progress: Progress | None = None,
    advance: Callable[[int], None] | None = None,
) -> GainCheck:
    """Check one gain set on the corners, the study's samples (in chunks) and (optionally) by search.

    Worst values, their locations, failure counts and margins are exact
    (float64, accumulated chunk by chunk); the per-sample values kept for the
    percentiles are float32 (7 significant digits; percentiles are shown to 4).
    """
    box, names, K = case.box, case.box.names, gain.K
    say = progress or (lambda _msg: None)
    step = advance or (lambda _n=1: None)
    nominal = evaluate(box, box.nominal[None, :], K)
    cpts = corners(box)
    at_corners = evaluate(box, cpts, K)
    n = stream.count
    nc = len(cpts)
    say(f"{gain.name}: {n} samples")
    values = {name: np.empty(n, dtype=np.float32) for name in METRICS}
    worst_idx = dict.fromkeys(METRICS, -1)
    worst_val = dict.fromkeys(METRICS, np.nan)
    # the 8 worst of corners and samples per metric (seeds of the search): (badness, position)
    top = {}
    for name, m in METRICS.items():
        bad = m.badness(at_corners[name])
        top[name] = (bad, np.arange(nc))
    pairs = _requirement_pairs(case)
    fails = {(key, name): 0 for key, name, _ in pairs}
    unstable = 0
    wheels = _WheelMargins()
    wheels.add(case, K, cpts)
    for start, pts in stream.chunks():
        v = evaluate(box, pts, K)
        for name, m in METRICS.items():
            vals = v[name]
            values[name][start : start + len(vals)] = vals
            i = int(np.argmax(m.badness(vals)))
            if worst_idx[name] < 0 or m.worse(np.array(vals[i]), np.array(worst_val[name])):
                worst_idx[name], worst_val[name] = start + i, float(vals[i])
            b0, p0 = top[name]
            b = np.concatenate([b0, m.badness(vals)])
            p = np.concatenate([p0, nc + start + np.arange(len(vals))])
            keep = np.lexsort((p, -b))[:8]
            top[name] = (b[keep], p[keep])
        for key, name, threshold in pairs:
            fails[(key, name)] += _count_fails(METRICS[name], v[name], threshold)
        unstable += int(np.sum(v["decay_rate"] <= 0))
        wheels.add(case, K, pts)
        if n > CHUNK:
            say(f"{gain.name}: samples {min(n, start + len(pts))}/{n}")
    step(1)
    summaries = []
    for name, m in METRICS.items():
        ic = _worst_index(name, at_corners[name])
        wc = Worst(float(at_corners[name][ic]), _at(names, cpts[ic]), "corner")
        ws = None
        if n:
            ws = Worst(worst_val[name], _at(names, stream.points_at([worst_idx[name]])[0]), "sample")
        wsearch = None
        if study.search and names:
            b, pos = top[name]
            is_corner = pos < nc
            seeds = np.empty((len(pos), len(names)))
            seeds[is_corner] = cpts[pos[is_corner]]
            if (~is_corner).any():
                seeds[~is_corner] = stream.points_at(pos[~is_corner] - nc)
            everywhere_unbounded = (
                m.kind == "min"
                and np.all(np.isinf(at_corners[name]))
                and np.all(at_corners[name] > 0)
                and (n == 0 or bool(np.all(np.isposinf(values[name]))))
            )
            if not everywhere_unbounded:
                say(f"{gain.name}: searching the box for the worst {name}")
                r = search_worst(box, K, name, seeds, seed=study.seed)
                wsearch = Worst(r.value, _at(names, r.point), "search")
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
                percentiles=percentiles(values[name]) if n else {},
                varies=_varies(at_corners[name], values[name], wsearch),
            )
        )
    by_name = {s.name: s for s in summaries}
    verdicts = [_stability_verdict(study, by_name["decay_rate"], unstable, n)]
    for key, name, threshold in pairs:
        m = METRICS[name]
        s = by_name[name]
        margin = s.worst.value - threshold if m.kind == "min" else threshold - s.worst.value
        f = fails[(key, name)]
        interval = clopper_pearson(f, n, study.confidence) if study.plan == "monte_carlo" and n else None
        verdicts.append(
            Verdict(
                requirement=key,
                metric=name,
                unit=m.unit,
                threshold=threshold,
                worst=s.worst.value,
                passed=bool(margin >= 0),
                margin=float(margin),
                failures=f,
                samples=n,
                failure_fraction=f / n if n else 0.0,
                failure_interval=interval,
            )
        )
    return GainCheck(
        gain=gain,
        summaries=tuple(summaries),
        verdicts=tuple(verdicts),
        inputs=wheels.result(case, K),
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
    stream = SampleStream(case, study)
    n = stream.count
    total = len(gains) * (1 + len(METRICS))
    with bar(progress, total, f"linear check of {len(gains)} gain sets on {n} samples") as advance:
        checks = tuple(check_gain(case, g, study, stream, progress=progress, advance=advance) for g in gains)
    return CheckResult(
        title=case.title,
        case_sha256=case.sha256,
        study=study,
        parameter_names=case.box.names,
        samples=n,
        samples_for_1pct_at_confidence=samples_needed(0.01, study.confidence),
        gains=checks,
        passed=all(c.passed for c in checks),
    )


def with_overrides(study: Study, **changes) -> Study:
    """The study with command-line overrides applied (``None`` values ignored)."""
    return replace(study, **{k: v for k, v in changes.items() if v is not None})
