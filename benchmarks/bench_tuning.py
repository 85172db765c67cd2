"""Robust tuning against the LMI route on each bundled case, side by side.

    python benchmarks/bench_tuning.py [--case NAME ...]

Per bundled case:
1. wall time of the tuning the case's ``[tuning]`` asks for (its final check over the box
   included) and of the certificate of the tuned gain (common Lyapunov matrix on the
   rigorous polytope), target < 60 s together on 2 cores;
2. the LMI gain the case's ``[synthesis]`` asks for, with its certified decay rate;
3. side by side, with ratios tuned / LMI: the worst decay rate found over the box (samples
   and search), the certified decay rate, and the worst peak wheel torque in the case's
   manoeuvres (full nonlinear model with the drive limits); and each gain's overall verdict.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.assess import assess, certify_gains  # noqa: E402
from robust.case import load_case, resolve_gain  # noqa: E402
from robust.design import design  # noqa: E402
from robust.synthesis.tuning import tune  # noqa: E402


def _worst(a, name: str, metric: str) -> float:
    g = next(g for g in a.check.gains if g.gain.name == name)
    return next(s.worst.value for s in g.summaries if s.name == metric)


def _peak_torque(a, name: str) -> float:
    g = next(g for g in a.time.gains if g.gain.name == name)
    return max(w.value for m in g.manoeuvres for w in m.worst if w.name == "peak_torque_n_m")


def run(case_name: str) -> None:
    case = load_case(ROOT / "cases" / f"{case_name}.toml")
    wanted = case.tuning.get("starts") or [s.name for s in case.gains]
    starts = [resolve_gain(case, s) for s in case.gains if s.name in wanted]
    t0 = time.perf_counter()
    tr = tune(
        case,
        starts,
        name=case.tuning.get("name", "tuned"),
        outer_iterations=case.tuning.get("rounds", 3),
        evaluations=case.tuning.get("evaluations", 160),
    )
    t_tune = time.perf_counter() - t0
    a_t = tr.assessment or assess(case, [tr.gain])
    t0 = time.perf_counter()
    cert_t = certify_gains(case, [tr.gain], a_t.check)
    t_cert = time.perf_counter() - t0
    t0 = time.perf_counter()
    d = design(case)
    t_lmi = time.perf_counter() - t0
    a_l = d.assessment
    lmi = d.gain.name
    c_t = cert_t.get(tr.gain.name)
    c_t = None if c_t is None else c_t.decay_rate
    c_l = d.synthesis.decay_rate
    rows = [
        (
            "worst decay rate over the box [1/s]",
            _worst(a_t, tr.gain.name, "decay_rate"),
            _worst(a_l, lmi, "decay_rate"),
        ),  # noqa: E501
        ("certified decay rate [1/s]", c_t, c_l),
        ("worst peak wheel torque [N m]", _peak_torque(a_t, tr.gain.name), _peak_torque(a_l, lmi)),
    ]
    print(f"\n{case.title}")
    print(f"  tuning {t_tune:.1f} s + certificate {t_cert:.1f} s = {t_tune + t_cert:.1f} s (target < 60 s)")
    print(f"  LMI synthesis with its assessment {t_lmi:.1f} s ({d.synthesis.solve_count} solves)")
    print(f"  {'':40s} {'tuned':>10s} {'LMI':>10s} {'tuned/LMI':>10s}")
    for label, x, y in rows:
        ratio = "-" if x is None or y is None or y == 0 else f"{x / y:.2f}"
        fx = "none" if x is None else f"{x:.4g}"
        fy = "none" if y is None else f"{y:.4g}"
        print(f"  {label:40s} {fx:>10s} {fy:>10s} {ratio:>10s}")
    print(f"  overall verdicts: tuned {a_t.verdicts[0].status}, LMI {a_l.verdicts[0].status}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--case", action="append", help="bundled case name (default both)")
    args = ap.parse_args()
    for name in args.case or ["delivery_cart", "stand_up_transporter"]:
        run(name)


if __name__ == "__main__":
    main()
