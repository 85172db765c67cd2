"""The per-sample metrics of the linear analysis: one registry, one evaluator.

Every metric is a number per model, oriented so that the requirement reads
``value >= threshold`` (kind ``"min"``) or ``value <= threshold`` (kind
``"max"``).  :func:`evaluate` computes all of them for a batch of parameter
points in chunks (memory stays bounded whatever the sample count).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from robust.analysis.eigen import closed_loop_metrics
from robust.analysis.margins import loop_margins, multiloop_disk_margin
from robust.linear import reduced_model
from robust.uncertainty import Box


@dataclass(frozen=True)
class Metric:
    """One scalar metric per model.

    Attributes
    ----------
    name
        Key used in tables, JSON and the case file's requirements.
    unit
        Display unit.
    kind
        ``"min"``: larger is better, requirement is a lower bound;
        ``"max"``: smaller is better, requirement is an upper bound.
    requirement
        Case-file key under ``[requirements]`` that bounds this metric.
    group
        Which computation produces it: ``"eigen"``, ``"loop"`` or ``"multiloop"``.
    text
        Plain description.
    """

    name: str
    unit: str
    kind: str
    requirement: str
    group: str
    text: str

    def worse(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """True where ``a`` is worse than ``b``."""
        return a < b if self.kind == "min" else a > b

    def badness(self, values: np.ndarray) -> np.ndarray:
        """A number that grows as the metric gets worse (for sorting and search)."""
        return -values if self.kind == "min" else values


METRICS: dict[str, Metric] = {
    m.name: m
    for m in (
        Metric(
            "decay_rate",
            "1/s",
            "min",
            "min_decay_rate_per_s",
            "eigen",
            "slowest closed-loop decay rate, -max Re(s)",
        ),
        Metric("damping", "-", "min", "min_damping_ratio", "eigen", "smallest closed-loop damping ratio"),
        Metric(
            "natural_frequency",
            "rad/s",
            "max",
            "max_natural_frequency_rad_s",
            "eigen",
            "largest closed-loop natural frequency |s|",
        ),
        Metric(
            "gain_margin_up",
            "dB",
            "min",
            "min_gain_margin_db",
            "loop",
            "gain increase margin, worst wheel input",
        ),
        Metric(
            "gain_margin_down",
            "dB",
            "min",
            "min_gain_margin_db",
            "loop",
            "gain reduction margin (as a positive dB figure), worst wheel input",
        ),
        Metric("phase_margin", "deg", "min", "min_phase_margin_deg", "loop", "phase margin, worst wheel input"),
        Metric("delay_margin", "ms", "min", "min_delay_margin_ms", "loop", "delay margin, worst wheel input"),
        Metric(
            "disk_margin",
            "-",
            "min",
            "min_disk_margin",
            "loop",
            "balanced disk margin, one wheel input at a time, worst input",
        ),
        Metric(
            "multiloop_disk_margin",
            "-",
            "min",
            "min_multiloop_disk_margin",
            "multiloop",
            "balanced disk margin, both wheel inputs perturbed at once",
        ),
    )
}
REQUIREMENT_KEYS = tuple(dict.fromkeys(m.requirement for m in METRICS.values()))


def _eigen(A, B, K) -> dict[str, np.ndarray]:
    em = closed_loop_metrics(A, B, K)
    return {
        "decay_rate": em.decay_rate,
        "damping": em.min_damping,
        "natural_frequency": em.max_natural_frequency,
    }


def _loop(A, B, K) -> dict[str, np.ndarray]:
    lm = loop_margins(A, B, K)
    return {
        "gain_margin_up": lm.gain_margin_upper_db.min(axis=1),
        "gain_margin_down": (-lm.gain_margin_lower_db).min(axis=1),
        "phase_margin": lm.phase_margin_deg.min(axis=1),
        "delay_margin": 1e3 * lm.delay_margin_s.min(axis=1),
        "disk_margin": lm.disk_margin.min(axis=1),
    }


def _multiloop(A, B, K) -> dict[str, np.ndarray]:
    return {"multiloop_disk_margin": multiloop_disk_margin(A, B, K)["disk_margin"]}


GROUPS: dict[str, Callable] = {"eigen": _eigen, "loop": _loop, "multiloop": _multiloop}


def evaluate(
    box: Box,
    points: np.ndarray,
    K: np.ndarray,
    *,
    names: tuple[str, ...] | None = None,
    chunk: int = 2000,
    progress: Callable[[int, int], None] | None = None,
) -> dict[str, np.ndarray]:
    """Metric values at parameter points ``(n, k)`` for gain ``K``; each ``(n,)``.

    ``K`` is one gain ``(2, 4)`` or one per point ``(n, 2, 4)`` (a scheduled gain at each model's
    measured value).

    ``names`` limits the metrics computed (default: all).  Work proceeds in
    chunks of ``chunk`` points (2,000 keeps the multi-loop frequency grid near 60 MiB and is the
    fastest measured); ``progress(done, total)`` is called after each.
    """
    names = tuple(METRICS) if names is None else names
    groups = sorted({METRICS[n].group for n in names})
    n = points.shape[0]
    out = {name: np.empty(n) for name in names}
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        model = reduced_model(box.plant(points[start:stop]))
        Kc = K[start:stop] if np.ndim(K) == 3 else K
        for g in groups:
            vals = GROUPS[g](model.A, model.B, Kc)
            for name, v in vals.items():
                if name in out:
                    out[name][start:stop] = v
        if progress is not None:
            progress(stop, n)
    for name, v in out.items():
        if np.any(np.isnan(v)):
            raise FloatingPointError(f"metric {name!r} produced NaN for {int(np.isnan(v).sum())} samples")
    return out
