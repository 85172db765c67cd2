"""Wall time of ``robust dossier`` on each bundled case, with and without the stages run beside.

    python benchmarks/bench_dossier.py [--repeats R] [--case NAME ...]

Each repeat runs every case twice in a fresh process, alternating the order, once with the
one-core stages run in forked processes beside the main one (the default, ``ROBUST_BESIDE=1``)
and once all in the main process (``ROBUST_BESIDE=0``), so both see the same machine load;
prints each wall time, the medians and their ratio, and checks that both variants wrote the
same ``results.json`` (the stamp aside).  The kernel cache is warmed first and never timed.
Target (from the engine issue): 20 s per dossier with a warm cache on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CASES = ("delivery_cart", "stand_up_transporter")


def run(case: str, out: Path, beside: bool) -> tuple[float, float]:
    """(wall s, CPU s of the process and its children) of one dossier run."""
    env = dict(os.environ, ROBUST_BESIDE="1" if beside else "0")
    before = os.times()
    t0 = time.perf_counter()
    subprocess.run(
        [sys.executable, "-m", "robust", "dossier", str(ROOT / "cases" / f"{case}.toml"), "--out", str(out), "--quiet"],
        check=True,
        stdout=subprocess.DEVNULL,
        env=env,
    )
    wall = time.perf_counter() - t0
    after = os.times()
    return wall, (after.children_user - before.children_user) + (after.children_system - before.children_system)


def results(folder: Path) -> dict:
    doc = json.loads((folder / "results.json").read_text(encoding="utf-8"))
    doc.pop("stamp", None)
    return doc


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--case", action="append", choices=CASES)
    args = ap.parse_args()
    cases = args.case or list(CASES)
    with tempfile.TemporaryDirectory() as tmp:
        warm = Path(tmp) / "warm"
        subprocess.run(  # compiles or loads the kernel cache; not timed
            [sys.executable, "-c", "import robust.engine as E, numpy as np; E._run_batch"], check=True
        )
        for case in cases:
            times: dict[bool, list[float]] = {True: [], False: []}
            cpu: dict[bool, list[float]] = {True: [], False: []}
            for r in range(args.repeats):
                for beside in (True, False) if r % 2 == 0 else (False, True):
                    out = Path(tmp) / f"{case}_{int(beside)}"
                    wall, c = run(case, out, beside)
                    times[beside].append(wall)
                    cpu[beside].append(c)
                    print(f"{case:22s} beside={'on ' if beside else 'off'} {wall:6.1f} s wall, {c:6.1f} s CPU")
            same = results(Path(tmp) / f"{case}_1") == results(Path(tmp) / f"{case}_0")
            on, off = statistics.median(times[True]), statistics.median(times[False])
            print(
                f"{case:22s} median: beside {on:.1f} s, all in one process {off:.1f} s, ratio {off / on:.2f}x; "
                f"results.json {'identical' if same else 'DIFFERENT'}; target 20 s: {'met' if on <= 20 else 'NOT met'}"
            )
        del warm


if __name__ == "__main__":
    main()
