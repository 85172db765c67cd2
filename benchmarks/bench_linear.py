"""Speed of the linear analysis, measured side by side in one run; prints ratios.

    python benchmarks/bench_linear.py [--quick]

1. Eigen metrics: our closed-form quartic path vs a per-sample loop that
   builds a python-control state-space model and asks for its poles, and vs
   a bare batched ``numpy.linalg.eigvals`` on the same closed-loop matrices.
2. Loop margins: ours vs a per-sample loop over python-control's
   stability_margins, with the values compared (0.01 dB, 0.01 deg).
3. One million Monte Carlo samples of the eigen metrics in chunks, with the
   peak resident memory of a fresh process.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import time
from pathlib import Path

import control
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.analysis.eigen import closed_loop_metrics, eigen_metrics, eigenvalues_4x4  # noqa: E402
from robust.analysis.margins import loop_margins  # noqa: E402
from robust.case import load_case, resolve_gain  # noqa: E402
from robust.linear import reduced_model  # noqa: E402
from robust.uncertainty import monte_carlo  # noqa: E402


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def million(case_path: str) -> None:
    case = load_case(case_path)
    K = resolve_gain(case, case.gains[0]).K
    n, chunk = 1_000_000, 50_000
    worst = np.inf
    t = time.perf_counter()
    for start in range(0, n, chunk):
        pts = monte_carlo(case.box, n, seed=1, start=start, stop=min(n, start + chunk))
        m = reduced_model(case.box.plant(pts))
        worst = min(worst, float(closed_loop_metrics(m.A, m.B, K).decay_rate.min()))
    dt = time.perf_counter() - t
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"  1,000,000 samples in {dt:.1f} s ({n / dt:,.0f} samples/s); worst decay rate {worst:.4f} 1/s")
    print(f"  peak resident memory of the process: {peak:.0f} MiB (target < 1024 MiB)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--million-child", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.million_child:
        million(args.million_child)
        return
    case_path = str(ROOT / "cases" / "stand_up_transporter.toml")
    case = load_case(case_path)
    K = resolve_gain(case, case.gains[0]).K
    n_big = 20_000 if args.quick else 200_000
    n_loop = 200 if args.quick else 1000
    m = reduced_model(case.box.plant(monte_carlo(case.box, n_big, seed=1)))
    Acl = m.A - m.B @ K

    print("1. Eigen metrics of A - B K")
    t_ctrl = best_of(lambda: [control.ss(Acl[i], m.B[i], np.eye(4), 0).poles() for i in range(n_loop)], 1)
    t_np = best_of(lambda: np.linalg.eigvals(Acl))
    t_np_metrics = best_of(lambda: eigen_metrics(np.linalg.eigvals(Acl)))
    t_ours = best_of(lambda: eigen_metrics(eigenvalues_4x4(Acl)))
    r_ctrl, r_np, r_ours = n_loop / t_ctrl, n_big / t_np, n_big / t_ours
    print(f"  python-control loop     {r_ctrl:>12,.0f} samples/s  ({n_loop} samples)")
    print(f"  numpy eigvals (bare)    {r_np:>12,.0f} samples/s  ({n_big} samples)")
    print(f"  numpy eigvals + metrics {n_big / t_np_metrics:>12,.0f} samples/s")
    print(f"  ours (metrics included) {r_ours:>12,.0f} samples/s")
    print(f"  ratio ours / python-control loop: {r_ours / r_ctrl:,.0f}x (target >= 30x)")
    print(f"  ratio ours / bare numpy eigvals:  {r_ours / r_np:.2f}x (target >= 1x)")

    print("2. Loop-at-a-time margins (both wheel inputs)")
    n_m = min(n_big, 20_000)
    t_ours = best_of(lambda: loop_margins(m.A[:n_m], m.B[:n_m], K))
    lm = loop_margins(m.A[:n_loop], m.B[:n_loop], K)
    t = time.perf_counter()
    worst_db = worst_deg = 0.0
    for i in range(n_loop):
        for j in range(2):
            o = 1 - j
            F = m.A[i] - m.B[i][:, o : o + 1] @ K[o : o + 1]
            gm, pm, *_ = control.stability_margins(control.ss(F, m.B[i][:, j : j + 1], K[j : j + 1], 0), returnall=True)
            gm = np.asarray(gm)
            below = gm[(gm < 1) & (gm > 1e-6)]
            if below.size:
                worst_db = max(worst_db, abs(20 * np.log10(below.max()) - lm.gain_margin_lower_db[i, j]))
            k = int(np.argmin(np.abs(pm)))
            worst_deg = max(worst_deg, abs(pm[k] - lm.phase_margin_deg[i, j]))
    t_ctrl = time.perf_counter() - t
    r_ours, r_ctrl = n_m / t_ours, n_loop / t_ctrl
    print(f"  python-control loop {r_ctrl:>10,.0f} samples/s; ours {r_ours:>10,.0f} samples/s")
    print(
        f"  ratio: {r_ours / r_ctrl:,.0f}x (target >= 30x); largest difference {worst_db:.2e} dB, "
        f"{worst_deg:.2e} deg (target 0.01)"
    )

    if not args.quick:
        print("3. One million Monte Carlo samples of eigen metrics, chunks of 50,000 (fresh process)")
        subprocess.run([sys.executable, __file__, "--million-child", case_path], check=True)


if __name__ == "__main__":
    main()
