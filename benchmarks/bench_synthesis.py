"""Time of the LMI synthesis with the certificate check, and its growth with the vertex count.

    python benchmarks/bench_synthesis.py

1. The bundled transporter case (3 uncertain parameters), rigorous moment_box route,
   decay-rate and damping constraints, smallest-gain objective: wall time of one
   synthesis including the numpy certificate check.
2. Sampled-hull polytopes thinned to 8, 16, 32 and 64 vertices: time per synthesis and the
   ratio to the 8-vertex time (linear growth would double with each step).
3. What each route and Lyapunov variant achieves: the largest certifiable decay rate
   (damping cone off), beside the true worst decay rate of that gain on 3,000 samples.
4. The case's own `[synthesis]` request with objective "decay" on each bundled case (rigorous route,
   damping kept): wall time and solves of the rate search against the 30 s target, and the fixed-gain
   certificate of the gain it returns.  `--decay` runs only this part.
"""

from __future__ import annotations

import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from robust.case import load_case  # noqa: E402
from robust.design import make_spec  # noqa: E402
from robust.synthesis.lmi import synthesize  # noqa: E402
from robust.synthesis.polytope import Polytope, moment_box, sampled_hull  # noqa: E402


def decay_objective() -> None:
    from robust.synthesis.lmi import certify_gain

    print("4. decay objective of each bundled case's [synthesis] request (rigorous route, damping kept)")
    for name in ("delivery_cart", "stand_up_transporter"):
        case = load_case(ROOT / "cases" / f"{name}.toml")
        spec = replace(make_spec(case)[0], objective="decay")
        poly = moment_box(case.box)
        t = time.perf_counter()
        r = synthesize(poly, spec)
        dt = time.perf_counter() - t
        t = time.perf_counter()
        c = certify_gain(poly, r.K, input_scale=spec.input_scale, upper=10.0 * r.decay_rate)
        dc = time.perf_counter() - t
        print(
            f"  {name:21s}: certified decay rate {r.decay_rate:.4g} 1/s in {dt:5.1f} s, {r.solve_count} solves "
            f"(target 30 s: {'met' if dt <= 30 else 'NOT met'}; ratio to target {dt / 30:.2f}); fixed-gain "
            f"certificate of that gain {c.decay_rate:.4g} 1/s in {dc:.1f} s ({c.solves} solves)"
        )


def main() -> None:
    if "--decay" in sys.argv[1:]:
        decay_objective()
        return
    case = load_case(ROOT / "cases" / "stand_up_transporter.toml")
    spec = replace(make_spec(case)[0], objective="gain", max_frequency=None)
    poly = moment_box(case.box)
    t = time.perf_counter()
    r = synthesize(poly, spec)
    dt = time.perf_counter() - t
    print(
        f"1. moment_box, {poly.vertices} vertices: {dt:.2f} s (target < 2 s); certificate "
        f"{'valid' if r.certificate.passed else 'NOT valid'}, largest LMI eigenvalue {r.certificate.smallest_slack:.2e}"
    )
    hull = sampled_hull(case.box)
    rng = np.random.default_rng(0)
    base = None
    print("2. growth with the number of vertices (sampled hull, subsets of its vertices)")
    for m in (8, 16, 32, 64):
        idx = rng.choice(hull.vertices, size=min(m, hull.vertices), replace=False)
        sub = Polytope("sampled_hull", hull.E[idx], hull.A[idx], hull.B[idx], "", {})
        t = time.perf_counter()
        synthesize(sub, spec)
        dt = time.perf_counter() - t
        base = base or dt
        print(f"  {m:3d} vertices: {dt:6.2f} s  ({dt / base:4.1f}x the 8-vertex time; linear would be {m / 8:.0f}x)")
    print("3. largest certifiable decay rate by route and Lyapunov variant (no damping or frequency constraint)")
    from robust.analysis.metrics import evaluate
    from robust.uncertainty import monte_carlo

    pts = monte_carlo(case.box, 3000, seed=11)
    for route, poly_, lyap in (
        ("moment_box", poly, "common"),
        ("sampled_hull", hull, "common"),
        ("sampled_hull", hull, "parameter_dependent"),
    ):
        s = replace(spec, objective="decay", damping=None, decay_rate=0.0, lyapunov=lyap)
        t = time.perf_counter()
        r = synthesize(poly_, s, bisection_steps=6)
        true = evaluate(case.box, pts, r.K, names=("decay_rate",))["decay_rate"].min()
        print(
            f"  {route:12s} {lyap:19s}: certified {r.decay_rate:6.3f} 1/s; true worst on samples {true:6.3f} 1/s "
            f"({time.perf_counter() - t:.0f} s)"
        )
    decay_objective()


if __name__ == "__main__":
    main()
