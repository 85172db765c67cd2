"""Peak memory of `robust check` against the number of samples (fresh process each); prints the ratios.

    python benchmarks/bench_check_memory.py [--largest N]

Target (hardening): peak memory flat from 1e5 to 1e7 samples, below 1 GiB at 1e7. The check is run
with --linear-only --no-search on one gain set of the delivery cart, so the numbers measure the
sample loop itself. The 1e7 run takes several minutes on 2 cores.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CASE = ROOT / "cases" / "delivery_cart.toml"


def peak_of(samples: int) -> tuple[float, float]:
    code = (
        "import resource, sys\n"
        "from robust.cli import main\n"
        f"main(['check', {str(CASE)!r}, '--linear-only', '--no-search', '--quiet', '--gain', 'lqr', "
        f"'--samples', '{samples}'])\n"
        "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)\n"
    )
    t0 = time.perf_counter()
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    took = time.perf_counter() - t0
    kib = float(r.stderr.strip().splitlines()[-1])
    return kib / 1024, took


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--largest", type=float, default=1e7)
    args = ap.parse_args()
    sizes = [int(s) for s in (1e5, 1e6, 1e7) if s <= args.largest]
    base = None
    print(f"{'samples':>10}  {'peak MiB':>9}  {'ratio to 1e5':>12}  {'wall s':>7}")
    for n in sizes:
        mib, took = peak_of(n)
        base = base or mib
        print(f"{n:>10}  {mib:9.0f}  {mib / base:12.2f}  {took:7.1f}")
    print("target: below 1024 MiB at 1e7 samples")


if __name__ == "__main__":
    main()
