"""Robust tuning: the gain's entries optimised against every requirement of the case over the box.

Outer approximation for semi-infinite optimisation (Polak, *Optimization:
Algorithms and Consistent Approximations*, Springer 1997, section 3.6): the
infinite set of models in the box is replaced by a finite scenario set
(the corners plus the worst models found so far); the gain is optimised on
the scenarios; the box is then searched for the new gain's worst model of
every requirement (the full check: samples and the worst-case search for
the linear metrics, the simulated models for the time domain), the worst
points are added to the scenarios, and the loop repeats until no
requirement fails or the budget is spent.

On the scenarios, the score of a gain is the smallest normalised margin of
every requirement (linear metrics by the closed-form analysis, time-domain
metrics on the full nonlinear model with the drive limits through the
compiled engine), stability and no-fall included.  The max-min objective is
nonsmooth; it is maximised with Nelder-Mead from several starts (the case's
gains made mirror-symmetric), which needs no gradient.  The gain is
mirror-symmetric: 4 free numbers, the right row equal to the left row with
the yaw-rate column negated.

The result is only as good as its final check: every verdict shown for a
tuned gain comes from the same assessment as any other gain set.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from robust.analysis.metrics import METRICS, evaluate
from robust.case import Case
from robust.gains import GainSet
from robust.uncertainty import corners
from robust.verdict import margin_scale as _scale

SYMMETRIC_NAMES = ("k_speed", "k_yaw_rate", "k_pitch", "k_pitch_rate")


def symmetric(theta: np.ndarray) -> np.ndarray:
    """The mirror-symmetric gain ``(2, 4)`` from ``(k_speed, k_yaw_rate, k_pitch, k_pitch_rate)``."""
    kv, kw, kp, kq = (float(t) for t in theta)
    return np.array([[kv, kw, kp, kq], [kv, -kw, kp, kq]])


def symmetric_part(K: np.ndarray) -> np.ndarray:
    """The 4 numbers of the mirror-symmetric gain nearest to ``K``."""
    K = np.asarray(K, dtype=float)
    return np.array(
        [
            0.5 * (K[0, 0] + K[1, 0]),
            0.5 * (K[0, 1] - K[1, 1]),
            0.5 * (K[0, 2] + K[1, 2]),
            0.5 * (K[0, 3] + K[1, 3]),
        ]
    )


@dataclass(frozen=True)
class TuningResult:
    """The tuned gain and how it was found."""

    gain: GainSet
    iterations: int
    scenarios: int
    score: float
    history: tuple[dict, ...]
    assessment: object | None = None  # the final check of the tuned gain over the box (reusable by callers)


class _Scorer:
    """Normalised requirement margins of a gain on a scenario set (linear and time domain)."""

    def __init__(self, case: Case, points: np.ndarray) -> None:
        from robust.simulate import manoeuvre_columns, plant_columns
        from robust.timecheck import step_probes

        self.case = case
        self.points = points
        self.n = len(points)
        ctl = case.controller
        plant = case.box.plant(points)
        self.P0 = plant_columns(plant, ctl)
        self.M_runs = [manoeuvre_columns(m, ctl, np.ones(self.n)) for m in case.manoeuvres]
        self.probes = [(manoeuvre_columns(m, ctl, np.ones(self.n), stop=True), up) for m, up in step_probes(case)]
        req = case.requirements
        self.linear = [(name, m, req[m.requirement]) for name, m in METRICS.items() if m.requirement in req]

    def margins(self, K: np.ndarray) -> dict[str, float]:
        """The worst normalised margin of every requirement (negative fails), stability and no-fall included."""
        from robust import engine as E
        from robust.simulate import bracket_rows, metrics_from_outputs

        case, ctl, req = self.case, self.case.controller, self.case.requirements
        out: dict[str, float] = {}
        worst_of: dict[str, tuple[float, str]] = {}
        self.worst = worst_of  # the worst value of each margin's metric, in the requirement's unit
        lin = evaluate(case.box, self.points, K, names=tuple({"decay_rate", *(n for n, _m, _b in self.linear)}))
        out["closed_loop_stable"] = float(np.min(lin["decay_rate"])) / 0.1
        worst_of["closed_loop_stable"] = (float(np.min(lin["decay_rate"])), "1/s")
        for name, m, bound in self.linear:
            v = lin[name]
            worst = float(np.min(v)) if m.kind == "min" else float(np.max(v))
            margin = worst - bound if m.kind == "min" else bound - worst
            worst_of[f"{m.requirement}:{name}"] = (worst, m.unit)
            out[f"{m.requirement}:{name}"] = margin / _scale(bound, m.unit) if np.isfinite(margin) else 1.0
        if out["closed_loop_stable"] <= 0:  # unstable somewhere: the time domain says nothing more useful
            return out
        Ks = np.broadcast_to(K, (self.n, 2, 4))
        rows_P = np.concatenate([self.P0] * len(self.M_runs))
        rows_K = np.concatenate([Ks] * len(self.M_runs))
        rows_M = np.concatenate(self.M_runs)
        res, _ = E.run_batch(
            rows_P,
            rows_K,
            rows_M,
            sample_period_s=ctl.sample_period_s,
            latency_s=ctl.latency_s,
            substeps=ctl.substeps,
            fall_angle_rad=ctl.fall_angle_rad,
        )
        peak_torque, peak_pitch, settle, falls = [], [], [], 0
        for i, man in enumerate(self.case.manoeuvres):
            sl = slice(i * self.n, (i + 1) * self.n)
            met = metrics_from_outputs(res[sl], rows_M[sl], ctl, man.steps_speed, man.steps_yaw_rate)
            peak_torque.append(met["peak_torque_n_m"].max())
            peak_pitch.append(np.degrees(met["peak_pitch_rad"]).max())
            falls += int((res[sl, E.O["fell"]] > 0).sum())
            for key, err, col, on in (
                ("speed_settling_time_s", "speed_final_error_m_s", E.M_V, man.steps_speed),
                ("yaw_rate_settling_time_s", "yaw_rate_final_error_rad_s", E.M_W, man.steps_yaw_rate),
            ):
                if on:
                    # graded beyond the run: a run still outside its band at the end counts its duration plus
                    # its final error in bands (1 s per band), so the optimiser sees which way is better
                    band = np.maximum(0.02 * np.abs(rows_M[sl, col]), 0.02)
                    graded = np.where(np.isfinite(met[key]), met[key], man.duration_s - man.start_s + met[err] / band)
                    settle.append(float(np.max(np.where(np.isfinite(graded), graded, 1e3))))
        out["no_fall_in_any_manoeuvre"] = 1.0 if falls == 0 else -float(falls)  # 1: met, never the limiting term
        for key, values, unit in (
            ("max_wheel_torque_n_m", peak_torque, "N m"),
            ("max_pitch_deg", peak_pitch, "deg"),
            ("max_settling_time_s", settle, "s"),
        ):
            if key in req and values:
                worst = float(max(values))
                worst_of[key] = (worst, unit)
                out[key] = (req[key] - worst) / _scale(req[key], unit) if np.isfinite(worst) else -10.0
        for key, (M, upper), unit in (
            ("min_speed_step_within_limits_m_s", self.probes[0], "m/s"),
            ("min_yaw_rate_step_within_limits_rad_s", self.probes[1], "rad/s"),
        ):
            if key in req:
                lo, _hi, _ok = bracket_rows(
                    self.P0, Ks, M, ctl, upper=np.full(self.n, upper), rounds=3, points_per_round=5
                )
                out[key] = (float(lo.min()) - req[key]) / _scale(req[key], unit)
                worst_of[key] = (float(lo.min()), unit)
        return out


def _score(margins: dict[str, float], temperature: float = 0.02) -> float:
    """Soft minimum of the normalised margins (never above the true minimum; within ``T log m`` of it)."""
    if not margins:
        return 0.0
    v = np.array(list(margins.values()), dtype=float)
    lo = float(v.min())
    return lo - temperature * float(np.log(np.sum(np.exp(-(v - lo) / temperature))))


def tune(
    case: Case,
    starts: list[GainSet],
    *,
    name: str = "tuned",
    outer_iterations: int = 3,
    evaluations: int = 160,
    free: tuple[int, ...] = (0, 1, 2, 3),
    progress: Callable[[str], None] | None = None,
) -> TuningResult:
    """Tune a mirror-symmetric gain against every requirement of the case over its box.

    Parameters
    ----------
    starts
        Gain sets to start from (made mirror-symmetric); at least one.
    outer_iterations
        Rounds of optimise-then-check (each adds the worst models found to the scenarios).
    evaluations
        Nelder-Mead evaluations per start and round.
    free
        Which of the 4 mirror-symmetric numbers ``(k_speed, k_yaw_rate, k_pitch, k_pitch_rate)`` are
        tuned; the others keep the first start's values.
    """
    from robust.assess import assess

    if not starts:
        raise ValueError("tuning needs at least one starting gain set (add [gains.NAME] to the case)")
    if not case.box.ranges:
        raise ValueError("tuning needs [ranges]: with one nominal vehicle there is nothing to make robust")
    free_idx = np.array(sorted(set(free)), dtype=int)
    if free_idx.size == 0 or free_idx.min() < 0 or free_idx.max() > 3:
        raise ValueError(f"free: expected indexes among 0..3 of {SYMMETRIC_NAMES}, got {free}")
    say = progress or (lambda _m: None)
    scen = corners(case.box)
    best_theta = None
    best_score = -np.inf
    history = []
    thetas = [symmetric_part(g.K) for g in starts]
    fixed = thetas[0].copy()
    thetas = [np.where(np.isin(np.arange(4), free_idx), th, fixed) for th in thetas]
    it = 0
    for it in range(1, outer_iterations + 1):
        scorer = _Scorer(case, scen)
        say(f"tuning round {it}: optimising on {len(scen)} scenario models from {len(thetas)} starts")
        # scores on a larger scenario set are not comparable with the last round's: start afresh
        best_score = -np.inf if best_theta is None else _score(scorer.margins(symmetric(best_theta)))
        for th0 in thetas:
            scale = np.where(np.abs(th0) > 1e-3, th0, 1e-3)  # signed: z = 1 is the start itself

            def theta_of(zf, scale=scale):
                z = np.ones(4)
                z[free_idx] = zf
                return z * scale

            def f(zf, scorer=scorer, theta_of=theta_of):
                return -_score(scorer.margins(symmetric(theta_of(zf))))

            r = optimize.minimize(
                f,
                np.ones(free_idx.size),
                method="Nelder-Mead",
                options={"maxfev": evaluations, "xatol": 1e-3, "fatol": 1e-4},
            )
            s = -float(r.fun)
            if s > best_score:
                best_score, best_theta = s, theta_of(r.x)
        K = symmetric(best_theta)
        gain = GainSet(name, K, "robust tuning over the box (mirror-symmetric)", {})
        say(f"tuning round {it}: scenario score {best_score:.3g}; checking the tuned gain over the whole box")
        a = assess(case, [gain], progress=None)
        final = (best_theta.copy(), a)
        v = a.verdicts[0]
        history.append({"round": it, "scenarios": len(scen), "scenario_score": best_score, "status": v.status})
        if v.status == "PASS":
            break
        # add the tuned gain's worst models of every requirement (linear and time domain) to the scenarios
        new = [list(s.worst.at.values()) for s in a.check.gains[0].summaries if s.worst.at]
        tg = a.time.gains[0]
        new += [list(m.worst_at.values()) for m in tg.manoeuvres if m.worst_at]
        new += [list(s.worst_at.values()) for s in tg.largest_steps if s.worst_at]
        if new:
            scen = np.unique(np.concatenate([scen, np.array(new, dtype=float)]), axis=0)
        thetas = [best_theta]
    provenance = {
        "case_sha256": case.sha256,
        "method": "robust tuning (outer approximation, Nelder-Mead on the smallest normalised margin)",
        "structure": "mirror-symmetric (4 free entries)"
        if free_idx.size == 4
        else f"mirror-symmetric, tuned entries {', '.join(SYMMETRIC_NAMES[i] for i in free_idx)}; others fixed",
        "rounds": it,
        "scenario_models": int(len(scen)),
        "scenario_score": float(best_score),
        "starts": ", ".join(g.name for g in starts),
    }
    gain = GainSet(name, symmetric(best_theta), "robust tuning over the box (mirror-symmetric)", provenance)
    return TuningResult(
        gain=gain,
        iterations=it,
        scenarios=int(len(scen)),
        score=float(best_score),
        history=tuple(history),
        assessment=final[1] if np.array_equal(final[0], best_theta) else None,
    )


def tune_as_asked(case: Case, gains: list[GainSet], *, progress: Callable[[str], None] | None = None) -> TuningResult:
    """The tuning the case's ``[tuning]`` asks for, from those of ``gains`` it names as starts (all when it
    names none): what the dossier and ``robust schedule`` run."""
    starts = [g for g in gains if not case.tuning["starts"] or g.name in case.tuning["starts"]]
    if progress is not None:
        progress("robust tuning")
    return tune(
        case,
        starts,
        name=case.tuning["name"],
        outer_iterations=case.tuning["rounds"],
        evaluations=case.tuning["evaluations"],
        progress=progress,
    )


def scheduled_scenarios(case: Case) -> tuple[np.ndarray, np.ndarray]:
    """The scheduled tuning's scenarios: the box corners at both extreme measurement errors
    ``(points, errors)``."""
    sched = case.schedule["schedule"]
    c = corners(case.box)
    return np.concatenate([c, c]), np.concatenate([np.full(len(c), -sched.error), np.full(len(c), sched.error)])


def tune_scheduled(
    case: Case,
    start: GainSet,
    *,
    name: str,
    evaluations: int = 300,
    progress: Callable[[str], None] | None = None,
) -> dict:
    """Tune a gain scheduled on the case's measured parameter, ``K0 + (p_measured - p0) K1``, both
    mirror-symmetric, on the corners of the box at both extreme measurement errors.

    The same score as :func:`tune` (soft minimum of every requirement's normalised margin, linear and time
    domain, per model with the gain at that model's measured value), Nelder-Mead over the 8 numbers from
    ``start`` with ``K1 = 0``, so the result scores at least as well as ``start`` on those scenarios.
    Returns ``{"gain": ScheduledGain, "score", "start_score", "scenarios", "evaluations"}``; the scores are on
    the scenarios only (no check over the box: the caller evaluates the gain on its own models).
    """
    from robust.gains import ScheduledGain

    sched = case.schedule["schedule"]
    pts, err = scheduled_scenarios(case)
    j = case.box.names.index(sched.parameter)
    dev = pts[:, j] + err - sched.nominal  # the measured deviation at each scenario
    rng = case.box.ranges[j]
    half = 0.5 * (rng.high - rng.low)
    scorer = _Scorer(case, pts)
    th0 = symmetric_part(start.K)
    scale0 = np.where(np.abs(th0) > 1e-3, th0, 1e-3)

    def gains(z):
        K0 = symmetric(z[:4] * scale0)
        K1 = symmetric(z[4:] * scale0) / half  # z[4:] = 0.1: the gain 10 % larger at the range's end
        return K0, K1

    def f(z):
        K0, K1 = gains(z)
        return -_score(scorer.margins(K0[None] + dev[:, None, None] * K1[None]))

    z0 = np.concatenate([np.ones(4), np.zeros(4)])
    simplex = np.vstack([z0] + [z0 + np.eye(8)[k] * (0.05 if k < 4 else 0.25) for k in range(8)])
    if progress is not None:
        progress(f"scheduled tuning: optimising 8 numbers on {len(pts)} scenario models from {start.name}")
    start_score = -f(z0)
    r = optimize.minimize(
        f,
        z0,
        method="Nelder-Mead",
        options={"maxfev": evaluations, "xatol": 1e-3, "fatol": 1e-4, "initial_simplex": simplex},
    )
    z = r.x if -float(r.fun) >= start_score else z0
    K0, K1 = gains(z)
    provenance = {
        "case_sha256": case.sha256,
        "method": "robust tuning of a scheduled gain (Nelder-Mead on the smallest normalised margin)",
        "structure": "K0 and K1 mirror-symmetric (8 free entries)",
        "scenario_models": int(len(pts)),
        "scenario_score": float(max(-float(r.fun), start_score)),
        "start": start.name,
        "scheduled_on": sched.parameter,
    }
    gain = ScheduledGain(name, K0, K1, sched, "robust tuning over the box (scheduled, mirror-symmetric)", provenance)
    return {
        "gain": gain,
        "score": float(max(-float(r.fun), start_score)),
        "start_score": float(start_score),
        "scenarios": int(len(pts)),
        "evaluations": int(r.nfev),
    }
