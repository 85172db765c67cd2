"""Speed of the batched nonlinear simulation, side by side in one run; prints ratios.

    python benchmarks/bench_simulate.py [--quick]

1. Throughput of ``robust.simulate.simulate`` on a batch vs a per-sample loop
   over scipy.integrate.solve_ivp (RK45, rtol 1e-8) with the same zero-order-
   hold controller and drive model, and the largest relative difference of
   peak torque and peak pitch (target 1e-3).
2. 10,000 models through a 5 s manoeuvre at a 200 Hz controller, with the
   peak resident memory of a fresh process (target < 2 GiB).
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.case import load_case, resolve_gain  # noqa: E402
from robust.dynamics import derivative, drive_output  # noqa: E402
from robust.linear import REDUCED_INDEX  # noqa: E402
from robust.simulate import Controller, Manoeuvre, simulate  # noqa: E402
from robust.uncertainty import monte_carlo  # noqa: E402

CASE = str(ROOT / "cases" / "stand_up_transporter.toml")
MAN = Manoeuvre("pull away", "speed_step", 5.0, start_s=0.5, speed_m_s=2.0)
CTL = Controller(sample_period_s=0.005, latency_s=0.0, trim=False)


def reference(plant1, K):
    T = CTL.sample_period_s
    x = np.zeros(7)
    peak_pitch = peak_torque = 0.0
    one = np.ones(1)

    def spin(y):
        return np.array(
            [
                [
                    (y[3] - plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                    (y[3] + plant1.d[0] * y[4]) / plant1.r[0] - y[6],
                ]
            ]
        )

    for k in range(int(round(MAN.duration_s / T))):
        v, w = MAN.reference(k * T, one)
        u = -(x[list(REDUCED_INDEX)] - np.array([v[0], w[0], 0, 0])) @ K.T

        def f(t, y, u=u):
            return derivative(plant1, y[None, :], drive_output(plant1, u[None, :], spin(y))["torque"])[0]

        sol = solve_ivp(f, (k * T, (k + 1) * T), x, method="RK45", rtol=1e-8, atol=1e-10, dense_output=True)
        for tt in np.linspace(k * T, (k + 1) * T, CTL.substeps + 1)[:-1]:
            y = sol.sol(tt)
            peak_torque = max(peak_torque, float(np.abs(drive_output(plant1, u[None, :], spin(y))["torque"]).max()))
            peak_pitch = max(peak_pitch, abs(float(y[5])))
        x = sol.y[:, -1]
    return peak_pitch, peak_torque


def big_child() -> None:
    case = load_case(CASE)
    K = resolve_gain(case, case.gains[0]).K
    plant = case.box.plant(monte_carlo(case.box, 10_000, seed=2))
    t = time.perf_counter()
    res = simulate(plant, K, MAN, CTL, envelope=True)
    dt = time.perf_counter() - t
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(
        f"  10,000 models x 5 s at 200 Hz: {dt:.1f} s ({10_000 / dt:,.0f} models/s); "
        f"{int(res.fell.sum())} fell; peak resident memory {peak:.0f} MiB (target < 2048 MiB)"
    )


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--big-child", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.big_child:
        big_child()
        return
    case = load_case(CASE)
    K = resolve_gain(case, case.gains[0]).K
    n_ref = 3 if args.quick else 8
    n_batch = 500 if args.quick else 2000
    pts = monte_carlo(case.box, n_batch, seed=1)
    plant = case.box.plant(pts)
    t = time.perf_counter()
    res = simulate(plant, K, MAN, CTL)
    t_ours = time.perf_counter() - t
    t = time.perf_counter()
    refs = [reference(plant.take(slice(i, i + 1)), K) for i in range(n_ref)]
    t_ref = time.perf_counter() - t
    d_pitch = max(abs(res.metrics["peak_pitch_rad"][i] - refs[i][0]) / refs[i][0] for i in range(n_ref))
    d_torque = max(abs(res.metrics["peak_torque_n_m"][i].max() - refs[i][1]) / refs[i][1] for i in range(n_ref))
    r_ours, r_ref = n_batch / t_ours, n_ref / t_ref
    print("1. Batched RK4 vs per-sample solve_ivp (RK45, rtol 1e-8), 5 s speed step at 200 Hz")
    print(f"  solve_ivp loop {r_ref:8.2f} models/s ({n_ref} models); ours {r_ours:8.1f} models/s ({n_batch} models)")
    print(
        f"  ratio {r_ours / r_ref:,.0f}x (target >= 50x); largest relative difference: "
        f"peak pitch {d_pitch:.1e}, peak torque {d_torque:.1e} (target 1e-3)"
    )
    if not args.quick:
        print("2. Memory")
        subprocess.run([sys.executable, __file__, "--big-child"], check=True)


if __name__ == "__main__":
    main()
