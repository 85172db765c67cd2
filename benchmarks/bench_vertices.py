"""Vertex count and synthesis time of the rigorous moment_box route for 3 to 9 ranged parameters.

    python benchmarks/bench_vertices.py [--max-ranges 9] [--solve-up-to 7]

Starting from the bundled transporter case (payload mass, payload CoM height and torque
constant ranged), one parameter is ranged at a time: bearing friction, chassis mass,
chassis CoM height, chassis pitch inertia, payload pitch inertia, chassis yaw inertia.
For each count the table gives the vertices of the product polytope (what the route built
before convex-hull reduction), the vertices kept after dropping the convex combinations of
others, the time to build the polytope, and the time of one smallest-gain LMI synthesis with
the case's decay and damping constraints (up to ``--solve-up-to`` ranges; the larger ones take
minutes).  The reduction is exact: E, A and B are affine in the moments.
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.case import load_case  # noqa: E402
from robust.design import make_spec  # noqa: E402
from robust.synthesis.lmi import Infeasible, synthesize  # noqa: E402
from robust.synthesis.polytope import moment_box  # noqa: E402
from robust.uncertainty import Box, Range  # noqa: E402
from robust.vehicle import get_parameter  # noqa: E402

EXTRA = (
    ("wheel.bearing_friction_n_m_s_per_rad", 0.0, 0.1),  # absolute [N m s/rad]; the others relative
    ("chassis.mass_kg", 0.9, 1.1),
    ("chassis.cg_height_m", 0.9, 1.1),
    ("chassis.pitch_inertia_kg_m2", 0.8, 1.2),
    ("payload.pitch_inertia_kg_m2", 0.8, 1.2),
    ("chassis.yaw_inertia_kg_m2", 0.8, 1.2),
)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--max-ranges", type=int, default=9)
    ap.add_argument("--solve-up-to", type=int, default=7)
    args = ap.parse_args()
    case = load_case(ROOT / "cases" / "stand_up_transporter.toml")
    spec = replace(make_spec(case)[0], objective="gain", max_frequency=None)
    v = case.box.vehicle
    ranges = list(case.box.ranges)
    print("ranges  product vertices  kept vertices  reduction  build s  synthesis s")
    for extra in (None, *EXTRA):
        if extra is not None:
            name, lo, hi = extra
            nominal = get_parameter(v, name) if name.startswith(("chassis", "payload")) else 1.0
            ranges.append(Range(name, lo * nominal, hi * nominal))
        if len(ranges) > args.max_ranges:
            break
        box = Box(v, tuple(ranges))
        t = time.perf_counter()
        poly = moment_box(box)
        build = time.perf_counter() - t
        product, kept = poly.facts["product_vertices"], poly.vertices
        solve = "-"
        if len(ranges) <= args.solve_up_to:
            t = time.perf_counter()
            try:
                r = synthesize(poly, spec)
                solve = f"{time.perf_counter() - t:.1f}" + ("" if r.certificate.passed else " (certificate failed)")
            except Infeasible as exc:
                solve = f"{time.perf_counter() - t:.1f} (infeasible: {str(exc)[:40]}...)"
        print(f"{len(ranges):6d}  {product:16d}  {kept:13d}  {product / kept:8.1f}x  {build:7.2f}  {solve}")


if __name__ == "__main__":
    main()
