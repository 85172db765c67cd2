"""Readable text tables for the terminal."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from robust.linear import REDUCED_STATES
from robust.modelfacts import ModelFacts


def fmt(x: float, digits: int = 4) -> str:
    """A number with ``digits`` significant figures; inf and nan spelled out."""
    if isinstance(x, (complex, np.complexfloating)):
        if abs(x.imag) < 1e-12 * max(1.0, abs(x.real)):
            return fmt(x.real, digits)
        sign = "+" if x.imag >= 0 else "-"
        return f"{fmt(x.real, digits)}{sign}{fmt(abs(x.imag), digits)}j"
    x = float(x)
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == 0:
        return "0"
    return f"{x:.{digits}g}"


def table(headers: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    """Left-aligned first column, right-aligned others, with a rule under the header."""
    cols = list(zip(*([list(headers)] + [list(r) for r in rows])))
    widths = [max(len(c) for c in col) for col in cols]

    def line(cells):
        out = [cells[0].ljust(widths[0])]
        out += [c.rjust(w) for c, w in zip(cells[1:], widths[1:])]
        return "  ".join(out).rstrip()

    rule = "  ".join("-" * w for w in widths)
    return "\n".join([line(headers), rule] + [line(r) for r in rows])


def matrix(rows_names: Sequence[str], col_names: Sequence[str], m: np.ndarray) -> str:
    """A small matrix as a table."""
    return table(["", *col_names], [[r, *(fmt(v) for v in row)] for r, row in zip(rows_names, m)])


def model_text(f: ModelFacts) -> str:
    """The model command's report."""
    out = [f"Model facts: {f.title}", f"case SHA-256 {f.case_sha256}", ""]
    out.append("Composite body (chassis + payload, nominal)")
    out.append(
        table(
            ["quantity", "value", "unit"],
            [
                ["mass", fmt(f.composite["mass_kg"]), "kg"],
                ["centre-of-mass height above axle", fmt(f.composite["cg_height_m"]), "m"],
                ["roll inertia about centre of mass", fmt(f.composite["roll_inertia_kg_m2"]), "kg m^2"],
                ["pitch inertia about centre of mass", fmt(f.composite["pitch_inertia_kg_m2"]), "kg m^2"],
                ["yaw inertia about centre of mass", fmt(f.composite["yaw_inertia_kg_m2"]), "kg m^2"],
            ],
        )
    )
    out += ["", "Open loop (reduced model, nominal)"]
    out.append(
        table(
            ["quantity", "value", "unit"],
            [
                ["poles", ", ".join(fmt(p) for p in f.poles), "1/s"],
                ["pitch divergence rate (unstable pole)", fmt(f.unstable_pole), "1/s"],
                ["time to double", fmt(f.time_to_double_s * 1e3), "ms"],
                ["drive torque, wheel locked", fmt(f.locked_torque_n_m), "N m"],
                ["no-load wheel speed", fmt(f.no_load_wheel_speed_rad_s), "rad/s"],
                ["no-load vehicle speed", fmt(f.no_load_vehicle_speed_m_s), "m/s"],
            ],
        )
    )
    out += [
        "",
        "Reduced model x' = A x + B u, x = (speed, yaw_rate, pitch, pitch_rate), u = (left, right) [N m]",
    ]
    out.append(matrix(REDUCED_STATES, REDUCED_STATES, f.reduced_A))
    out.append("")
    out.append(matrix(REDUCED_STATES, ["left", "right"], f.reduced_B))
    out += ["", "Controllability"]
    out.append(f"  full 7-state model: rank {f.full_rank} of 7")
    out.append(f"  reduced 4-state model: rank {f.reduced_rank} of 4")
    for mode, why in f.uncontrollable:
        out.append(f"  uncontrollable mode at s = {fmt(mode.eigenvalue)}: {why}")
    out.append(
        "  x and heading are controllable integrators of speed and yaw rate; the balance"
        " controller leaves them to an outer loop, so they are dropped with y."
    )
    out += ["", "Speed and yaw-rate commands by state shift (x - x_ref)"]
    if f.shift_exact:
        out.append("  exact: A x_ref = 0 for any speed and yaw-rate reference (no bearing friction)")
    else:
        out.append(
            "  not exact: bearing friction makes A x_ref nonzero, leaving a steady-state error"
            " unless a trim torque is added"
        )
        out.append(
            f"  trim torque per wheel: {fmt(f.trim_per_speed_n_m_s)} N m per m/s of speed;"
            f" +/-{fmt(f.trim_per_yaw_rate_n_m_s)} N m per rad/s of yaw rate (right +, left -)"
        )
    if f.corners is not None:
        c = f.corners
        out += ["", f"Corners of the parameter box ({len(c.points)})"]
        rows = []
        worst = int(np.argmax(c.unstable_pole))
        for i, pt in enumerate(c.points):
            mark = "<- fastest divergence" if i == worst else ""
            rows.append(
                [str(i + 1)]
                + [fmt(v) for v in pt]
                + [
                    fmt(c.unstable_pole[i]),
                    fmt(c.time_to_double_s[i] * 1e3),
                    f"{c.reduced_rank[i]}/4",
                    f"{c.full_rank[i]}/7",
                    mark,
                ]
            )
        out.append(table(["corner", *c.names, "divergence [1/s]", "double [ms]", "rank 4", "rank 7", "note"], rows))
    return "\n".join(out) + "\n"


def _loc(at: dict[str, float]) -> str:
    return ", ".join(f"{k}={fmt(v, 4)}" for k, v in at.items()) or "nominal"


def _pct(x: float) -> str:
    return f"{100 * x:.3g}%"


def gain_matrix_text(K: np.ndarray) -> str:
    """The 2 x 4 gain as a table with units."""
    units = ("N m s/m", "N m s/rad", "N m/rad", "N m s/rad")
    heads = [f"{s} [{u}]" for s, u in zip(REDUCED_STATES, units)]
    return table(["wheel", *heads], [[w, *(fmt(v, 5) for v in row)] for w, row in zip(("left", "right"), K)])


def check_text(result) -> str:
    """The check command's report: one block per gain set."""
    st = result.study
    out = [
        f"Robustness check: {result.title}",
        f"case SHA-256 {result.case_sha256}",
        f"plan {st.plan}, {result.samples} samples, seed {st.seed}, confidence {st.confidence:g}; "
        f"worst-case search {'on' if st.search else 'off'}",
        f"(zero failures in {result.samples_for_1pct_at_confidence} Monte Carlo samples shows P(fail) < 1% "
        f"at {st.confidence:g} confidence; Tempo, Bai and Dabbene 1997)",
    ]
    for g in result.gains:
        out += ["", "=" * 78, f"Gain set '{g.gain.name}' ({g.gain.origin}): {'PASS' if g.passed else 'FAIL'}"]
        out.append(gain_matrix_text(g.gain.K))
        out += ["", "Worst case over the box (* marks the worst of corner / sample / search)"]
        rows = []
        for s in g.summaries:
            cells = []
            for w in (s.worst_corner, s.worst_sample, s.worst_search):
                if w is None:
                    cells.append("-")
                else:
                    star = "*" if w is s.worst else " "
                    cells.append(fmt(w.value) + star)
            pct = s.percentiles
            spread = f"{fmt(pct['p5'])} / {fmt(pct['p50'])} / {fmt(pct['p95'])}" if pct else "-"
            rows.append([s.name, s.unit, fmt(s.nominal), *cells, spread])
        out.append(table(["metric", "unit", "nominal", "corner", "sample", "search", "p5 / p50 / p95"], rows))
        out += ["", "Where the worst cases are"]
        out.append(
            table(
                ["metric", "found by", "location"],
                [[s.name, s.worst.source, _loc(s.worst.at)] for s in g.summaries],
            )
        )
        out += ["", "Loop-at-a-time margins per wheel input (nominal | worst over corners and samples)"]
        keys = list(g.inputs[0].nominal)
        rows = [[k, *(f"{fmt(i.nominal[k])} | {fmt(i.worst[k])}" for i in g.inputs)] for k in keys]
        out.append(table(["margin", *(f"{i.wheel} wheel" for i in g.inputs)], rows))
        if g.verdicts:
            out += ["", "Requirements"]
            rows = []
            for v in g.verdicts:
                if v.failure_interval:
                    lo, hi = v.failure_interval
                    interval = f"{_pct(v.failure_fraction)} [{_pct(lo)}, {_pct(hi)}]"
                else:
                    interval = f"{_pct(v.failure_fraction)} of samples"
                rows.append(
                    [
                        v.requirement,
                        v.metric,
                        fmt(v.threshold),
                        fmt(v.worst),
                        fmt(v.margin),
                        "pass" if v.passed else "FAIL",
                        interval,
                    ]
                )
            out.append(
                table(
                    ["requirement", "metric", "bound", "worst", "margin", "verdict", "P(fail) [interval]"],
                    rows,
                )
            )
        else:
            out += ["", "No requirements in the case file: nothing to pass or fail."]
    verdict = "every requirement holds" if result.passed else "at least one requirement fails"
    out += ["", f"Overall: {verdict} for the gain sets checked."]
    return "\n".join(out) + "\n"


def time_verdict_row(v) -> list[str]:
    """One time-domain verdict as table cells."""
    verdict = "pass" if v.passed else "FAIL"
    return [
        v.requirement,
        fmt(v.threshold),
        fmt(v.worst),
        v.unit,
        fmt(v.margin),
        verdict,
        f"{v.failures} of {v.models}",
    ]


def time_text(result) -> str:
    """The simulate command's report."""
    st = result.study
    out = [
        f"Time-domain check: {result.title}",
        f"case SHA-256 {result.case_sha256}",
        f"{result.models} models (corners + {st.simulation_samples} Monte Carlo samples, seed {st.seed}); "
        f"controller {1 / result.sample_period_s:.4g} Hz, latency {result.latency_s * 1e3:.3g} ms, "
        f"fall beyond {result.fall_angle_deg:.3g} deg",
    ]
    for g in result.gains:
        out += ["", "=" * 78, f"Gain set '{g.gain.name}' ({g.gain.origin}): {'PASS' if g.passed else 'FAIL'}"]
        for m in g.manoeuvres:
            fall = f"{m.fell} of {m.models} fell (first at {fmt(m.first_fall_s)} s)" if m.fell else "none fell"
            out += ["", f"Manoeuvre '{m.name}' ({m.kind}): {fall}"]
            rows = [[w.name, w.unit, fmt(w.median), fmt(w.value), _loc(w.at)] for w in m.worst]
            out.append(table(["metric", "unit", "median", "worst", "worst at"], rows))
        out += ["", "Survivable steps (no fall, current limit never reached)"]
        rows = []
        for s in g.survivable:
            rows.append([s.kind, s.unit, fmt(float(np.median(s.survived))), fmt(s.worst), _loc(s.worst_at)])
        out.append(table(["step", "unit", "median", "worst", "worst at"], rows))
        if g.verdicts:
            out += ["", "Requirements"]
            rows = [time_verdict_row(v) for v in g.verdicts]
            out.append(table(["requirement", "bound", "worst", "unit", "margin", "verdict", "failing runs"], rows))
    verdict = "every requirement holds" if result.passed else "at least one requirement fails"
    out += ["", f"Overall: {verdict} for the gain sets simulated."]
    return "\n".join(out) + "\n"


def compare_text(result) -> str:
    """Gain sets side by side: one column per gain set, rows = metrics (worst case over the box)."""
    names = [g.gain.name for g in result.gains]
    rows = []
    first = result.gains[0]
    for k, s in enumerate(first.summaries):
        cells = []
        values = [g.summaries[k].worst.value for g in result.gains]
        best = max(values) if s.kind == "min" else min(values)
        worst = min(values) if s.kind == "min" else max(values)
        for v in values:
            mark = (
                " (worst)"
                if v == worst and len(set(values)) > 1
                else ("  (best)" if v == best and len(set(values)) > 1 else "")
            )
            cells.append(fmt(v) + mark)
        rows.append([f"{s.name} [{s.unit}]", *cells])
    by_req: dict[str, list[str]] = {}
    for g in result.gains:
        for v in g.verdicts:
            key = f"{v.requirement} ({v.metric})"
            by_req.setdefault(key, [])
    for key in by_req:
        for g in result.gains:
            v = next((v for v in g.verdicts if f"{v.requirement} ({v.metric})" == key), None)
            if v is None:
                by_req[key].append("-")
                continue
            pf = f", P(fail) <= {_pct(v.failure_interval[1])}" if v.failure_interval else ""
            by_req[key].append(("pass" if v.passed else "FAIL") + f" ({fmt(v.margin, 3)}{pf})")
    out = ["Worst case over the box, side by side ('worst'/'best' mark the extremes across gain sets)"]
    out.append(table(["metric", *names], rows))
    if by_req:
        out += ["", "Verdicts (margin; upper confidence bound of the failure probability)"]
        out.append(table(["requirement", *names], [[k, *v] for k, v in by_req.items()]))
        out.append(table(["overall", *("PASS" if g.passed else "FAIL" for g in result.gains)], []))
    return "\n".join(out) + "\n"


def design_text(d) -> str:
    """The synthesize command's report."""
    p, r, g = d.polytope, d.synthesis, d.gain
    cert = r.certificate
    out = [f"LMI synthesis: {d.check.title}", ""]
    out.append(f"Polytope: route {p.route}, {p.vertices} vertices")
    out.append(f"  guarantee: {p.guarantee}")
    for k, v in p.facts.items():
        if isinstance(v, dict):
            continue
        out.append(f"  {k}: {v if not isinstance(v, float) else fmt(v)}")
    if "moment_intervals" in p.facts:
        mi = p.facts["moment_intervals"]
        units = p.facts.get("moment_units", {})
        out.append(
            table(
                ["moment", "low", "high", "unit"],
                [[k, fmt(a), fmt(b), units.get(k, "")] for k, (a, b) in mi.items()],
            )
        )
    s = r.spec
    out += [
        "",
        f"Request: objective {s.objective}, {s.lyapunov} Lyapunov matrix, decay rate >= {fmt(s.decay_rate)} 1/s"
        + (f", damping >= {fmt(s.damping)}" if s.damping is not None else "")
        + (f", natural frequency <= {fmt(s.max_frequency)} rad/s" if s.max_frequency is not None else "")
        + (f", wheel torque <= {fmt(s.torque_limit)} N m" if s.torque_limit is not None else ""),
    ]
    out.append(
        f"Result: certified decay rate {fmt(r.decay_rate)} 1/s; solver {r.solver} ({r.status}); {r.solve_count} solves"
        + (f"; slack parameter eps = {fmt(r.epsilon)}" if r.epsilon is not None else "")
    )
    out.append(
        f"Certificate (re-checked with numpy at every vertex): largest LMI eigenvalue {cert.smallest_slack:.3e} "
        f"(must be < -{cert.tolerance:.1e}), smallest Lyapunov eigenvalue {cert.smallest_x_eig:.3e}: "
        + ("VALID" if cert.passed else "NOT VALID")
    )
    out += ["", f"Gain '{g.name}':", gain_matrix_text(g.K), ""]
    out.append(compare_text(d.check))
    return "\n".join(out)
