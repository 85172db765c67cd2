"""Campaign throughput: runs per second in-process, on a LocalCluster of 1 and of 2 workers, side by side.

    python benchmarks/bench_campaign.py [RUNS]

The delivery cart's tuned-free placed gain set through its first manoeuvre, RUNS runs (default 20000) in
chunks of 2000, no early stop; each mode writes its own store in a temporary folder (removed after). Prints
runs/s and the ratio to the 1-worker cluster, and the wall time a P < 1e-6 demonstration would take (about
3.0e6 runs with no failure at 95 %) at the measured 2-worker rate on 1 machine and on 50 such machines.
"""

from __future__ import annotations

import math
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.campaign import make_spec, run_campaign  # noqa: E402
from robust.case import load_case, resolve_gain  # noqa: E402


def main() -> None:
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 20000
    case = load_case(ROOT / "cases" / "delivery_cart.toml")
    gain = resolve_gain(case, case.gains[0])
    man = case.manoeuvres[0].name
    spec = make_spec(case, gain, man, runs=runs, chunk=2000, target=1e-6)
    rates = {}
    with tempfile.TemporaryDirectory() as tmp:
        modes = (("in-process", {"in_process": True}), ("1 worker", {"workers": 1}), ("2 workers", {"workers": 2}))
        for label, kw in modes:
            t = time.perf_counter()
            s = run_campaign(case, spec, Path(tmp) / label.replace(" ", "_"), stop_early=False, **kw)
            dt = time.perf_counter() - t
            rates[label] = s.runs_done / dt
            print(f"{label:11s}: {s.runs_done} runs of '{man}' in {dt:.1f} s = {rates[label]:.0f} runs/s", flush=True)
    base = rates["1 worker"]
    print("ratios to 1 worker: " + ", ".join(f"{k} {v / base:.2f}" for k, v in rates.items()))
    need = math.ceil(math.log(0.05) / math.log1p(-1e-6))
    r2 = rates["2 workers"]
    print(
        f"P < 1e-6 at 95 % with no failure needs {need} runs: {need / r2 / 3600:.1f} h on one 2-core machine, "
        f"{need / (50 * r2) / 60:.0f} min on 50 (ideal scaling, scheduler overhead not included)"
    )


if __name__ == "__main__":
    main()
