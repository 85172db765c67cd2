"""What measuring the payload buys, on the bundled transporter: the schedule study's parts timed, and the
certified decay rates of the fixed and scheduled gains side by side with their ratios.

    python benchmarks/bench_scheduling.py [--evaluations N]

Parts timed (2 cores, warm kernel cache): the two LMI syntheses (fixed and scheduled, largest certified
decay rate with the case's constraints), the scheduled tuning from the case's tuned gain (tuned here
first, not timed as part of the study), the two fixed-gain certificates of the tuned pair, and the
evaluation of all four gains on the same models.

Measured (session 14): 61 to 66 s in all; the fixed LMI synthesis with the torque ellipsoid about 28 s
(18 solves), the scheduled one about 10 s, the scheduled tuning about 22 s, the rest 4 s.  Running the LMI
pair in a forked second process beside the tuning did not help (63 s): the compiled kernel already uses
both cores.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.case import load_case, resolve_gain  # noqa: E402
from robust.scheduling import run_schedule_study  # noqa: E402
from robust.synthesis.tuning import tune  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--evaluations", type=int, default=300, help="scheduled tuning's evaluations (default 300)")
    args = ap.parse_args()
    case = load_case(ROOT / "cases" / "stand_up_transporter.toml")
    starts = [resolve_gain(case, s) for s in case.gains if s.name in case.tuning["starts"]]
    t0 = time.perf_counter()
    tuned = tune(case, starts, name=case.tuning["name"], evaluations=case.tuning["evaluations"]).gain
    t_tune = time.perf_counter() - t0
    stages: list[tuple[float, str]] = []
    t1 = time.perf_counter()
    sc = run_schedule_study(
        case, tuned=tuned, evaluations=args.evaluations, progress=lambda m: stages.append((time.perf_counter(), m))
    )
    total = time.perf_counter() - t1
    print(case.title)
    print(f"  the case's tuning (before the study): {t_tune:.1f} s")
    print(f"  schedule study: {total:.1f} s in all")
    marks = [(t, m) for t, m in stages if m.startswith("schedule study") or m.startswith("scheduled tuning")]
    for (t, m), nxt in zip(marks, [*marks[1:], (t1 + total, "end")]):
        print(f"    {nxt[0] - t:6.1f} s  {m}")
    names = sc.columns
    print(f"  {'':<44}" + "".join(f"{n:>16}" for n in names))
    print(f"  {'certified decay rate [1/s]':<44}" + "".join(f"{sc.certified.get(n) or 0:>16.4g}" for n in names))
    for fixed, sched in ((names[0], names[1]), (names[2], names[3]) if len(names) == 4 else (None, None)):
        if fixed is None:
            continue
        a, b = sc.certified.get(fixed), sc.certified.get(sched)
        if a and b:
            print(f"  scheduled / fixed certified decay rate ({sched} / {fixed}): {b / a:.3f}")
    if sc.scores:
        a, b = sc.scores.get(names[2]), sc.scores.get(names[3])
        print(f"  scheduled / fixed smallest margin on the tuning scenarios: {b:.3g} / {a:.3g} = {b / a:.3f}")


if __name__ == "__main__":
    main()
