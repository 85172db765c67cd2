"""The trade-off front: what one requirement's bound costs in another's best achievable value.

For a swept requirement (say the peak wheel torque) and an objective
requirement (say the slowest decay rate), each point of the front answers:
with the swept bound set to ``b`` and every other requirement of the case
kept, what is the best worst-case value of the objective that a
mirror-symmetric gain reaches?  The same question with the objective's
own bound dropped answers an infeasible request: :func:`best_achievable`
gives the nearest reachable value of a requirement that no gain met.

Method: exterior penalty (Fiacco and McCormick, *Nonlinear Programming:
Sequential Unconstrained Minimization Techniques*, Wiley 1968) on the
normalised margins of :class:`robust.synthesis.tuning._Scorer`: maximise
``objective + W * min(0, smallest other margin)`` with Nelder-Mead, warm
started from the previous point of the sweep (continuation).  The values
are worst cases over a finite scenario set (the box corners plus the worst
models the tuning found): an optimistic estimate of what holds over the
whole box, since the box holds more models than the scenarios.  A point is
marked feasible when every other requirement holds on the scenarios; its
gain has not been checked over the whole box unless a caller does so.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize

from robust.case import Case
from robust.synthesis.tuning import _Scorer, symmetric, symmetric_part
from robust.verdict import LABELS, STABILITY
from robust.verdict import margin_scale as _scale

PENALTY = 20.0  # weight of a violated other requirement, in normalised-margin units
DEFAULT_FACTORS = (0.6, 0.8, 1.0, 1.25, 1.5)


@dataclass(frozen=True)
class FrontPoint:
    """One point of a trade-off front."""

    bound: float  # the swept requirement's bound at this point, in its unit
    best: float  # best worst-case value of the objective on the scenarios, in its unit
    feasible: bool  # every other requirement met on the scenarios
    smallest_other_margin: float  # normalised; negative when some other requirement is not met
    limiting: str  # the other requirement with the smallest normalised margin
    K: np.ndarray  # the gain reaching ``best``
    evaluations: int


@dataclass(frozen=True)
class Front:
    """A trade-off front of one objective against one swept bound."""

    swept: str
    objective: str
    swept_unit: str
    objective_unit: str
    case_bound: float | None  # the case's own bound on the swept requirement
    objective_bound: float | None  # the case's own bound on the objective (None: not a requirement)
    points: tuple[FrontPoint, ...]
    scenarios: int
    method: str


def _keys_of(margins: dict[str, float], requirement: str) -> list[str]:
    return [k for k in margins if k == requirement or k.split(":", 1)[0] == requirement]


def _objective_value(scorer: _Scorer, keys: list[str], requirement: str) -> tuple[float, str]:
    """The objective's worst value on the scenarios and its unit; ``(nan, "")`` where the last gain scored was
    not simulated (unstable on a scenario: the scorer stops at the linear metrics)."""
    values = [scorer.worst[k] for k in keys if k in scorer.worst]
    if not values:
        return float("nan"), ""
    unit = values[0][1]
    nums = [v for v, _u in values]
    return (min(nums) if requirement.startswith("min_") or requirement == STABILITY else max(nums)), unit


def _maximise(
    case: Case, points: np.ndarray, objective: str, theta0: np.ndarray, evaluations: int
) -> tuple[FrontPoint, str]:
    """Best worst-case value of ``objective`` with every other requirement of ``case`` kept (penalty)."""
    scorer = _Scorer(case, points)
    probe = scorer.margins(symmetric(theta0))
    keys = _keys_of(probe, objective)
    if not keys:
        raise ValueError(
            f"objective {objective!r}: not a requirement the tuning can evaluate for this case "
            f"(expected one of: {', '.join(sorted({k.split(':', 1)[0] for k in probe}))})"
        )
    sign = 1.0 if objective.startswith("min_") or objective == STABILITY else -1.0
    v0, u0 = _objective_value(scorer, keys, objective)
    if not u0:
        raise ValueError(f"objective {objective!r}: no value on the scenarios")
    bound0 = case.requirements.get(objective)
    obj_scale = _scale(bound0 if bound0 else (abs(v0) if np.isfinite(v0) and v0 else 1.0), u0)
    scale = np.where(np.abs(theta0) > 1e-3, theta0, 1e-3)
    count = [0]

    def parts(z):
        m = scorer.margins(symmetric(z * scale))
        count[0] += 1
        others = {k: v for k, v in m.items() if k not in keys}
        value, unit = _objective_value(scorer, keys, objective)
        return m, others, value, unit

    def f(z):
        _m, others, value, unit = parts(z)
        low = min(others.values()) if others else 0.0
        if not np.isfinite(value):
            return 1e6
        return -(sign * value / obj_scale + PENALTY * min(0.0, low))

    r = optimize.minimize(f, np.ones(4), method="Nelder-Mead", options={"maxfev": evaluations, "xatol": 1e-3})
    theta = r.x * scale
    _m, others, value, unit = parts(r.x)
    unit = unit or u0
    low_key = min(others, key=others.get) if others else ""
    low = others[low_key] if others else 0.0
    point = FrontPoint(
        bound=float("nan"),
        best=float(value),
        feasible=bool(low >= 0.0),
        smallest_other_margin=float(low),
        limiting=LABELS.get(low_key.split(":", 1)[0], low_key),
        K=symmetric(theta),
        evaluations=count[0],
    )
    return point, unit


def _measured(case: Case, key: str) -> Case:
    """``case`` with requirement ``key`` present so the scorer measures it (its own margin is set aside by
    :func:`_maximise`: the objective is maximised, not bounded); a key the case lacks gets a bound that is
    always met."""
    if key in case.requirements or key == STABILITY:
        return case
    neutral = 0.0 if key.startswith("min_") else 1e9
    return replace(case, requirements={**case.requirements, key: neutral})


def trade_off(
    case: Case,
    start: np.ndarray,
    *,
    sweep: str,
    objective: str,
    bounds: list[float] | None = None,
    points: np.ndarray | None = None,
    evaluations: int = 60,
    progress: Callable[[str], None] | None = None,
) -> Front:
    """The front of ``objective`` against ``sweep``'s bound (defaults: the case bound times 0.6 ... 1.5).

    ``start`` is a gain (2 x 4; its mirror-symmetric part is used) from which the sweep starts; each
    point starts from the previous feasible one.  ``points`` is the scenario set (default: the corners).
    """
    from robust.uncertainty import corners

    say = progress or (lambda _m: None)
    if sweep == objective:
        raise ValueError("trade-off: the swept requirement and the objective must differ")
    if sweep not in LABELS or sweep == STABILITY:
        raise ValueError(f"trade-off sweep {sweep!r}: expected a requirement key ({', '.join(LABELS)})")
    if objective not in LABELS:
        raise ValueError(f"trade-off objective {objective!r}: expected a requirement key ({', '.join(LABELS)})")
    case_bound = case.requirements.get(sweep)
    if bounds is None:
        if case_bound is None:
            raise ValueError(f"trade-off sweep {sweep!r}: the case has no such requirement; give the bounds")
        bounds = [case_bound * f for f in DEFAULT_FACTORS]
    bounds = [float(b) for b in bounds]
    if not bounds or not all(np.isfinite(bounds)):
        raise ValueError(f"trade-off bounds: expected finite numbers, got {bounds}")
    pts = corners(case.box) if points is None else np.asarray(points, dtype=float)
    free = _measured(case, objective)
    # from the case bound outwards, so each side continues from a point that is likely feasible
    order = sorted(range(len(bounds)), key=lambda i: (abs(bounds[i] - (case_bound or bounds[0])), bounds[i]))
    theta_start = symmetric_part(start)
    found: dict[int, FrontPoint] = {}
    unit_obj = ""
    for i in order:
        b = bounds[i]
        near = [found[j] for j in found if found[j].feasible]
        near.sort(key=lambda p: abs(p.bound - b))
        theta0 = symmetric_part(near[0].K) if near else theta_start
        say(f"trade-off: {LABELS[objective]} with {LABELS[sweep]} bound {b:.4g}")
        point, unit_obj = _maximise(
            replace(free, requirements={**free.requirements, sweep: b}), pts, objective, theta0, evaluations
        )
        found[i] = replace(point, bound=b)
    unit_sweep = _unit_of(_measured(case, sweep), sweep, pts, start)
    return Front(
        swept=sweep,
        objective=objective,
        swept_unit=unit_sweep,
        objective_unit=unit_obj,
        case_bound=case_bound,
        objective_bound=case.requirements.get(objective),
        points=tuple(found[i] for i in range(len(bounds))),
        scenarios=int(len(pts)),
        method="exterior penalty on the normalised margins, Nelder-Mead with continuation along the sweep; "
        f"worst cases over {len(pts)} scenario models (optimistic for the whole box)",
    )


def _unit_of(case: Case, key: str, pts: np.ndarray, K: np.ndarray) -> str:
    scorer = _Scorer(case, pts[:1])
    scorer.margins(np.asarray(K, dtype=float))
    for k, (_v, u) in scorer.worst.items():
        if k == key or k.split(":", 1)[0] == key:
            return u
    return ""


def best_achievable(
    case: Case, key: str, start: np.ndarray, *, points: np.ndarray | None = None, evaluations: int = 120
) -> FrontPoint:
    """The best worst-case value of requirement ``key`` that a mirror-symmetric gain reaches on the scenarios
    with every other requirement of the case kept: the nearest point of the front to a request that failed."""
    from robust.uncertainty import corners

    pts = corners(case.box) if points is None else np.asarray(points, dtype=float)
    point, _unit = _maximise(_measured(case, key), pts, key, symmetric_part(start), evaluations)
    return replace(point, bound=float(case.requirements.get(key, np.nan)))
