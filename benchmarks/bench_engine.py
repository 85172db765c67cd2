"""The compiled engine against the numpy engine, side by side in one run; prints ratios.

    python benchmarks/bench_engine.py [--quick]

1. The time-domain workload of a check: 56 models x 6 manoeuvres x 3 gain sets, numpy
   engine (tests/numpy_engine.py, one call per manoeuvre and gain set) against the compiled
   kernel (one flat call), with the largest normalised difference of every metric.
2. 10,000 models through one 5 s manoeuvre, both engines (target >= 3x).
3. Wall time of ``robust dossier`` on each bundled case with a warm kernel cache (target 20 s).
4. Model-runs per second of 5 s manoeuvres at scale, and the projected time for 1,000,000
   runs, with the peak memory of the process (target 30 min, < 2 GiB).
The kernel's compile/load time is measured apart and never inside a timing.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from numpy_engine import simulate_numpy  # noqa: E402

from robust.case import load_case, resolve_gain  # noqa: E402
from robust.simulate import Manoeuvre, simulate  # noqa: E402
from robust.uncertainty import monte_carlo  # noqa: E402

CART = ROOT / "cases" / "delivery_cart.toml"
MANS = [
    Manoeuvre("step", "speed_step", 5.0, start_s=0.3, speed_m_s=1.0),
    Manoeuvre("ramp", "speed_ramp", 5.0, start_s=0.3, speed_m_s=1.5, ramp_time_s=1.0),
    Manoeuvre("yaw", "yaw_rate_step", 5.0, start_s=0.3, yaw_rate_rad_s=0.5),
    Manoeuvre("both", "speed_and_yaw_rate_step", 5.0, start_s=0.3, speed_m_s=1.0, yaw_rate_rad_s=0.5),
    Manoeuvre("push", "push", 5.0, start_s=0.3, push_force_n=80.0, push_height_m=0.8, push_duration_s=0.2),
    Manoeuvre("tilt", "tilted_start", 5.0, initial_pitch_rad=0.08),
]


def workload(quick: bool) -> None:
    case = load_case(CART)
    pts = np.concatenate([monte_carlo(case.box, 56, seed=1)])
    plant = case.box.plant(pts)
    ctl = case.controller
    gains = [resolve_gain(case, g).K for g in case.gains]
    gains.append(0.8 * gains[0] + 0.2 * gains[1])
    t0 = time.perf_counter()
    simulate(plant.take(slice(0, 1)), gains[0], MANS[0], ctl)
    print(f"kernel compile or cache load: {time.perf_counter() - t0:.1f} s (paid once; not in any timing below)")

    t0 = time.perf_counter()
    ref = [[simulate_numpy(plant, K, m, ctl) for m in MANS] for K in gains]
    t_numpy = time.perf_counter() - t0
    # the kernel: every manoeuvre of every gain set in one flat batch
    from robust import engine as E
    from robust.simulate import manoeuvre_columns, metrics_from_outputs, plant_columns

    P0 = plant_columns(plant, ctl)
    n = plant.n
    P = np.concatenate([P0] * (len(gains) * len(MANS)))
    K = np.concatenate([np.broadcast_to(K, (n, 2, 4)) for K in gains for _ in MANS])
    M = np.concatenate([manoeuvre_columns(m, ctl, np.ones(n)) for _ in gains for m in MANS])
    t0 = time.perf_counter()
    out, _ = E.run_batch(
        P,
        K,
        M,
        sample_period_s=ctl.sample_period_s,
        latency_s=ctl.latency_s,
        substeps=ctl.substeps,
        fall_angle_rad=ctl.fall_angle_rad,
    )
    t_kernel = time.perf_counter() - t0
    worst = 0.0
    k = 0
    for gi in range(len(gains)):
        for mi, m in enumerate(MANS):
            sl = slice(k * n, (k + 1) * n)
            got = metrics_from_outputs(out[sl], M[sl], ctl, m.steps_speed, m.steps_yaw_rate)
            for key, y in ref[gi][mi].metrics.items():
                x, y = np.asarray(got[key], float), np.asarray(y, float)
                fin = np.isfinite(y)
                if fin.any():
                    worst = max(worst, float(np.abs(x[fin] - y[fin]).max() / max(1e-3, np.abs(y[fin]).max())))
            k += 1
    runs = len(gains) * len(MANS) * n
    print(f"\n56 models x 6 manoeuvres x 3 gain sets ({runs} runs of 5 s)")
    print(f"  numpy engine   {t_numpy:8.3f} s")
    print(f"  compiled       {t_kernel:8.3f} s   ratio {t_numpy / t_kernel:6.1f}x (target >= 10x)")
    print(f"  largest normalised metric difference {worst:.1e} (target 1e-9)")

    big = 2000 if quick else 10000
    plant = case.box.plant(monte_carlo(case.box, big, seed=2))
    t0 = time.perf_counter()
    simulate_numpy(plant, gains[1], MANS[0], ctl)
    t_numpy = time.perf_counter() - t0
    t0 = time.perf_counter()
    simulate(plant, gains[1], MANS[0], ctl)
    t_kernel = time.perf_counter() - t0
    print(f"\n{big} models x one 5 s manoeuvre")
    print(f"  numpy engine   {t_numpy:8.3f} s ({big / t_numpy:8.0f} models/s)")
    print(f"  compiled       {t_kernel:8.3f} s ({big / t_kernel:8.0f} models/s)   ratio {t_numpy / t_kernel:.1f}x")
    rate = big / t_kernel
    print(f"  projected 1,000,000 runs of 5 s: {1e6 / rate / 60:.1f} min on this machine (target 30 min)")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"  peak memory of this process so far: {peak:.0f} MiB")


def million() -> None:
    """1,000,000 runs of a 5 s manoeuvre, measured (one kernel call per 100,000 runs)."""
    case = load_case(CART)
    ctl = case.controller
    K = resolve_gain(case, case.gains[1]).K
    t0 = time.perf_counter()
    for block in range(10):
        plant = case.box.plant(
            monte_carlo(case.box, 1_000_000, seed=3, start=block * 100_000, stop=(block + 1) * 100_000)
        )
        simulate(plant, K, MANS[0], ctl)
    took = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(
        f"\n1,000,000 runs of a 5 s manoeuvre: {took / 60:.1f} min ({1e6 / took:.0f} runs/s), "
        f"peak memory {peak:.0f} MiB"
    )
    print("  targets: 30 min, 2048 MiB")


def dossiers() -> None:
    print("\nrobust dossier, warm kernel cache (wall time of a fresh process)")
    for name in ("delivery_cart", "stand_up_transporter"):
        with tempfile.TemporaryDirectory() as d:
            t0 = time.perf_counter()
            subprocess.run(
                [
                    sys.executable,
                    "-m",
                    "robust",
                    "dossier",
                    str(ROOT / "cases" / f"{name}.toml"),
                    "--out",
                    str(Path(d) / name),
                    "--quiet",
                ],
                check=True,
                stdout=subprocess.DEVNULL,
            )
            print(f"  {name:22s} {time.perf_counter() - t0:6.1f} s (target 20 s)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="smaller batches, no dossiers")
    ap.add_argument("--million", action="store_true", help="only the measured 1,000,000-run study")
    args = ap.parse_args()
    if args.million:
        million()
        return
    workload(args.quick)
    if not args.quick:
        dossiers()


if __name__ == "__main__":
    main()
