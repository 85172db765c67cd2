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
        out += _wrap(f"uncontrollable mode at s = {fmt(mode.eigenvalue)}: {why}")
    out += _wrap(
        "x and heading are controllable integrators of speed and yaw rate; the balance"
        " controller leaves them to an outer loop, so they are dropped with y."
    )
    out += ["", "Speed and yaw-rate commands by state shift (x - x_ref)"]
    if f.shift_exact:
        out.append("  exact: A x_ref = 0 for any speed and yaw-rate reference (no bearing friction)")
    else:
        out += _wrap(
            "not exact: bearing friction makes A x_ref nonzero, leaving a steady-state error"
            " unless a trim torque is added"
        )
        out += _wrap(
            f"trim torque per wheel: {fmt(f.trim_per_speed_n_m_s)} N m per m/s of speed;"
            f" +/-{fmt(f.trim_per_yaw_rate_n_m_s)} N m per rad/s of yaw rate (right +, left -)"
        )
    if f.corners is not None:
        c = f.corners
        out += ["", f"Corners of the parameter box ({len(c.points)})"]
        rows = []
        worst = int(np.argmax(c.unstable_pole))
        for i, pt in enumerate(c.points):
            mark = "<- fastest" if i == worst else ""
            rows.append(
                [str(i + 1)]
                + [fmt(v, 4) for v in pt]
                + [
                    fmt(c.unstable_pole[i]),
                    fmt(c.time_to_double_s[i] * 1e3),
                    f"{c.reduced_rank[i]}/4",
                    f"{c.full_rank[i]}/7",
                    mark,
                ]
            )
        heads = [f"p{j + 1}" for j in range(len(c.names))]
        out.append(table(["corner", *heads, "divergence [1/s]", "double [ms]", "rank 4", "rank 7", ""], rows))
        for j, n in enumerate(c.names):
            out += _wrap(f"p{j + 1} = {parameter_label(n)}")
    return "\n".join(out) + "\n"


WIDTH = 100  # every screen fits this many columns

METRIC_LABELS = {
    "decay_rate": "slowest decay rate",
    "damping": "smallest damping ratio",
    "natural_frequency": "largest natural frequency",
    "gain_margin_up": "gain margin, increase",
    "gain_margin_down": "gain margin, reduction",
    "phase_margin": "phase margin",
    "delay_margin": "delay margin",
    "disk_margin": "disk margin, one wheel",
    "multiloop_disk_margin": "disk margin, both wheels",
    "peak_torque_n_m": "peak wheel torque",
    "peak_current_a": "peak motor current",
    "current_limit_fraction": "share of time at current limit",
    "voltage_limit_fraction": "share of time at voltage limit",
    "peak_pitch_deg": "peak pitch",
    "peak_pitch_rate_deg_s": "peak pitch rate",
    "speed_settling_time_s": "speed settling time",
    "speed_rise_time_s": "speed rise time",
    "speed_overshoot": "speed overshoot",
    "speed_final_error_m_s": "speed final error",
    "yaw_rate_settling_time_s": "yaw-rate settling time",
    "yaw_rate_rise_time_s": "yaw-rate rise time",
    "yaw_rate_overshoot": "yaw-rate overshoot",
    "yaw_rate_final_error_rad_s": "yaw-rate final error",
}
MARGIN_LABELS = {
    "gain_margin_up_db": ("gain margin, increase", "dB"),
    "gain_margin_down_db": ("gain margin, reduction", "dB"),
    "phase_margin_deg": ("phase margin", "deg"),
    "delay_margin_ms": ("delay margin", "ms"),
    "disk_margin": ("disk margin", "-"),
    "disk_gain_high_db": ("disk margin as gain", "dB"),
    "disk_phase_deg": ("disk margin as phase", "deg"),
}
CAUTION_LINE = (
    "Caution: a model analysis, not a safety case; validate on hardware with the vehicle restrained "
    "(README, Safety cautions)."
)


def value_text(x: float, *, metric: str = "") -> str:
    """A value for a screen: infinities in words (never 'inf')."""
    x = float(x)
    if math.isinf(x):
        if "settling" in metric or "rise" in metric:
            return "not settled" if "settling" in metric else "not reached"
        return "unbounded" if x > 0 else "-unbounded"
    return fmt(x)


def parameter_label(name: str) -> str:
    """A parameter's plain name with its unit: ``rider or cargo mass [kg]``."""
    from robust.vehicle import PARAMETERS

    info = PARAMETERS.get(name)
    return name if info is None else f"{info.text} [{info.unit}]"


def _wrap(text: str, indent: str = "  ") -> list[str]:
    import textwrap

    return textwrap.wrap(text, WIDTH, initial_indent=indent, subsequent_indent=indent + "  ") or [indent]


def locations_text(names: Sequence[str], rows: Sequence[tuple[str, str, dict[str, float]]]) -> list[str]:
    """Where worst cases lie: one column per ranged parameter (``p1``...), with a legend below."""
    if not names:
        return ["  every value is at the nominal vehicle (no ranges)"]
    out = []
    for start in range(0, len(names), 6):
        part = list(names)[start : start + 6]
        heads = [f"p{start + i + 1}" for i in range(len(part))]
        body = [[label, source, *(fmt(at[n], 4) for n in part)] for label, source, at in rows]
        out.append(table(["metric", "found by", *heads], body))
    lines = [ln for block in out for ln in block.split("\n")]
    for i, n in enumerate(names):
        lines += _wrap(f"p{i + 1} = {parameter_label(n)}")
    return lines


def gain_matrix_text(K: np.ndarray) -> str:
    """The 2 x 4 gain as a table with units."""
    units = ("N m s/m", "N m s/rad", "N m/rad", "N m s/rad")
    names = ("speed", "yaw rate", "pitch", "pitch rate")
    heads = [f"{s} [{u}]" for s, u in zip(names, units)]
    return table(["wheel", *heads], [[w, *(fmt(v, 5) for v in row)] for w, row in zip(("left", "right"), K)])


def _failing_text(v) -> str:
    return f"{v.failures} of {v.samples}"


def _pfail_text(v) -> str:
    return "-" if v.failure_interval is None else f"<= {_pct(v.failure_interval[1])}"


def _pct(x: float) -> str:
    return f"{100 * x:.3g}%"


def linear_block(g, result) -> list[str]:
    """One gain set's linear check: worst cases, where they are, margins per wheel, requirements."""
    from robust.verdict import LABELS

    st = result.study
    out = ["", "Worst case over the box (* marks the worst of corner / sample / search)"]
    rows = []
    for s in g.summaries:
        cells = []
        for w in (s.worst_corner, s.worst_sample, s.worst_search):
            cells.append("-" if w is None else value_text(w.value) + ("*" if w is s.worst else " "))
        rows.append([METRIC_LABELS.get(s.name, s.name), s.unit, value_text(s.nominal), *cells])
    out.append(table(["metric", "unit", "nominal", "corner", "sample", "search"], rows))
    if any(s.percentiles for s in g.summaries):
        out += ["", "Spread over the samples (percentiles)"]
        rows = [
            [METRIC_LABELS.get(s.name, s.name), s.unit, *(value_text(s.percentiles[q]) for q in ("p5", "p50", "p95"))]
            for s in g.summaries
            if s.percentiles
        ]
        out.append(table(["metric", "unit", "5%", "median", "95%"], rows))
    varying = [(METRIC_LABELS.get(s.name, s.name), s.worst.source, s.worst.at) for s in g.summaries if s.varies]
    same = [METRIC_LABELS.get(s.name, s.name) for s in g.summaries if not s.varies]
    if varying:
        out += ["", "Where the worst cases are"]
        out += locations_text(result.parameter_names, varying)
    if same:
        out += _wrap("the same everywhere in the box (no location): " + ", ".join(same))
    out += ["", "Loop-at-a-time margins per wheel input (nominal | worst over corners and samples)"]
    keys = list(g.inputs[0].nominal)
    rows = [
        [
            MARGIN_LABELS[k][0],
            MARGIN_LABELS[k][1],
            *(f"{value_text(i.nominal[k])} | {value_text(i.worst[k])}" for i in g.inputs),
        ]
        for k in keys
    ]
    out.append(table(["margin", "unit", *(f"{i.wheel} wheel" for i in g.inputs)], rows))
    what = {"corners": "corners", "grid": "grid points"}.get(st.plan, "samples")
    out += ["", f"Linear requirements (margin < 0 fails; failing {what}; for Monte Carlo the upper bound of"]
    out += [f"  the failure probability at {st.confidence:g} confidence, Clopper-Pearson)"]
    rows = []
    for v in g.verdicts:
        label = LABELS.get(v.requirement, v.requirement)
        if v.requirement == "min_gain_margin_db":
            label = "gain margin up" if v.metric == "gain_margin_up" else "gain margin down"
        rows.append(
            [
                label,
                ("> 0" if v.requirement == "closed_loop_stable" else fmt(v.threshold)) + f" {v.unit}",
                value_text(v.worst),
                value_text(v.margin),
                "pass" if v.passed else "FAIL",
                _failing_text(v),
                _pfail_text(v),
            ]
        )
    out.append(table(["requirement", "bound", "worst", "margin", "verdict", f"failing {what}", "P(fail)"], rows))
    return out


def _at_least(value: float, upper: float) -> str:
    """A step value; ``>= x`` when the search reached the drive's top speed (no larger step exists to try)."""
    return f">= {fmt(value)}" if value >= upper * (1 - 1e-9) else fmt(value)


def time_block(tg, result) -> list[str]:
    """One gain set's time-domain check: manoeuvres, largest steps, requirements."""
    names = result.parameter_names
    out = []
    for m in tg.manoeuvres:
        fall = f"{m.fell} of {m.models} models fell (first at {fmt(m.first_fall_s)} s)" if m.fell else "none fell"
        out += ["", f"Manoeuvre '{m.name}' ({m.kind.replace('_', ' ')}): {fall}"]
        rows = [
            [
                METRIC_LABELS.get(w.name, w.name),
                w.unit,
                value_text(w.median, metric=w.name),
                value_text(w.value, metric=w.name),
            ]
            for w in m.worst
        ]
        out.append(table(["metric", "unit", "median", "worst"], rows))
    if tg.largest_steps:
        out += ["", "Largest command step each model handles (smallest over the models; median)"]
        rows = []
        for s in tg.largest_steps:
            what = "speed step" if s.kind == "speed_step" else "yaw-rate step"
            rows.append(
                [
                    what,
                    s.unit,
                    f"{_at_least(s.worst, s.upper)} ({_at_least(float(np.median(s.within_limits)), s.upper)})",
                    f"{_at_least(s.worst_without_fall, s.upper)} "
                    f"({_at_least(float(np.median(s.without_fall)), s.upper)})",
                ]
            )
        out.append(table(["step", "unit", "within drive limits", "without a fall"], rows))
        out += _wrap(
            "within drive limits: no fall and the current limit never reached; without a fall: the current "
            "limit may be reached."
        )
        locs = [("worst step within limits", s.kind.replace("_", " "), s.worst_at) for s in tg.largest_steps]
        if names:
            out += locations_text(names, locs)
    out += ["", "Time-domain requirements (margin < 0 fails)"]
    out.append(
        table(
            ["requirement", "bound", "worst", "unit", "margin", "verdict", "failing"],
            [time_verdict_row(v) for v in tg.verdicts],
        )
    )
    return out


def time_verdict_row(v) -> list[str]:
    """One time-domain verdict as table cells."""
    from robust.verdict import LABELS, NO_FALL

    verdict = "pass" if v.passed else "FAIL"
    if v.requirement == NO_FALL:
        return [
            LABELS[NO_FALL],
            "0 falls",
            f"{int(v.worst)} falls",
            "runs",
            "-",
            verdict,
            f"{v.failures} of {v.models} runs",
        ]
    return [
        LABELS.get(v.requirement, v.requirement),
        fmt(v.threshold),
        value_text(v.worst, metric=v.requirement),
        v.unit,
        value_text(v.margin),
        verdict,
        f"{v.failures} of {v.models} runs",
    ]


def verdict_block(v) -> list[str]:
    """The overall verdict of one gain set, with what it covered and what it did not."""
    out = ["", f"Overall verdict for '{v.gain}': {v.status}"]
    rows = []
    for o in v.outcomes:
        if o.status == "not evaluated":
            rows.append([o.label, o.domain, "not evaluated", "-", o.why[:40]])
        else:
            rows.append([o.label, o.domain, o.status if o.status == "pass" else "FAIL", o.evidence, o.failing])
    out.append(table(["requirement", "check", "outcome", "evidence", "failing"], rows))
    for c in v.covered:
        out += _wrap("covered: " + c)
    if v.not_evaluated:
        out += _wrap("not evaluated: " + ", ".join(v.not_evaluated) + " (so the verdict cannot be PASS)")
    return out


def _header(case, a) -> list[str]:
    out = [f"Robustness check: {case.title}", f"case SHA-256 {case.sha256}"]
    if a.check is not None:
        st = a.check.study
        out += _wrap(
            f"linear check: plan {st.plan.replace('_', ' ')}, {a.check.samples} samples plus "
            f"{2 ** len(a.check.parameter_names)} corners, seed {st.seed}, confidence {st.confidence:g}, "
            f"worst-case search {'on' if st.search else 'off'}",
            "",
        )
    if a.time is not None:
        t = a.time
        out += _wrap(
            f"time domain: {t.models} models (corners + {t.study.simulation_samples} Monte Carlo samples), "
            f"{len(case.manoeuvres)} manoeuvres, controller {1 / t.sample_period_s:.4g} Hz, latency "
            f"{t.latency_s * 1e3:.3g} ms, fall beyond {t.fall_angle_deg:.3g} deg",
            "",
        )
    if case.default_manoeuvres:
        out += _wrap(
            "the case has no [manoeuvres]: the default manoeuvres were simulated ("
            + ", ".join(m.name for m in case.manoeuvres)
            + ")",
            "",
        )
    return out


def assessment_text(case, a, *, view: str = "linear") -> str:
    """The check / simulate screen: per gain set its details (``view``: linear, time or compare), then verdicts."""
    out = _header(case, a)
    if view == "compare" and a.check is not None:
        out += ["", compare_text(a.check).rstrip()]
    else:
        for i, v in enumerate(a.verdicts):
            g = a.check.gains[i] if a.check is not None else a.time.gains[i]
            out += ["", "=" * 78, f"Gain set '{g.gain.name}' ({g.gain.origin}): {v.status}", gain_matrix_text(g.gain.K)]
            if view in ("linear",) and a.check is not None:
                out += linear_block(a.check.gains[i], a.check)
            if view == "time" and a.time is not None:
                out += time_block(a.time.gains[i], a.time)
    if a.certificates is not None:
        out += ["", "Certified decay rate (rigorous polytope of the box, common Lyapunov matrix, fixed gain)"]
        rows = []
        for i, v in enumerate(a.verdicts):
            c = a.certificates.get(v.gain)
            sampled = next(s.worst.value for s in a.check.gains[i].summaries if s.name == "decay_rate")
            if c is None:
                rows.append([v.gain, "not attempted (unstable in the box)", value_text(sampled)])
            elif c.decay_rate is None:
                rows.append([v.gain, "stability not certified", value_text(sampled)])
            else:
                rows.append(
                    [v.gain, f"{fmt(c.decay_rate)} (last search step {fmt(c.resolution, 2)})", value_text(sampled)]
                )
        out.append(table(["gain set", "certified [1/s]", "sampled worst [1/s]"], rows))
    out += ["", "=" * 78]
    for v in a.verdicts:
        out += verdict_block(v)
    out += summary_lines(a.verdicts)
    return "\n".join(out) + "\n"


def summary_lines(verdicts) -> list[str]:
    """The overall verdict of every gain set, one line each, and the caution when one passes."""
    out = ["", "Overall verdicts"]
    for v in verdicts:
        out += _wrap(v.line())
    if any(v.passed for v in verdicts):
        out += ["", *_wrap(CAUTION_LINE, "")]
    return out


def _column_groups(headers: list[str], rows: list[list[str]], per: int = 3) -> list[str]:
    """A wide side-by-side table as several tables of at most ``per`` value columns (screens fit 100 columns)."""
    out = []
    for start in range(1, len(headers), per):
        cols = [0, *range(start, min(start + per, len(headers)))]
        out.append(table([headers[c] for c in cols], [[r[c] for c in cols] for r in rows]))
    return ["\n\n".join(out)]


def compare_text(result) -> str:
    """Gain sets side by side: one column per gain set, rows = metrics (worst case over the box)."""
    from robust.verdict import LABELS

    names = [g.gain.name for g in result.gains]
    rows = []
    first = result.gains[0]
    for k, s in enumerate(first.summaries):
        values = [g.summaries[k].worst.value for g in result.gains]
        worst = min(values) if s.kind == "min" else max(values)
        cells = [value_text(v) + (" (worst)" if v == worst and len(set(values)) > 1 else "") for v in values]
        rows.append([f"{METRIC_LABELS.get(s.name, s.name)} [{s.unit}]", *cells])
    out = ["Worst case over the box, side by side ('worst' marks the worst gain set)"]
    out += _column_groups(["metric", *names], rows)
    keys = list(dict.fromkeys((v.requirement, v.metric) for g in result.gains for v in g.verdicts))
    vrows = []
    for req, metric in keys:
        label = LABELS.get(req, req) + (
            (", up" if metric == "gain_margin_up" else ", down") if req == "min_gain_margin_db" else ""
        )
        cells = []
        for g in result.gains:
            v = next((v for v in g.verdicts if (v.requirement, v.metric) == (req, metric)), None)
            cells.append("-" if v is None else ("pass" if v.passed else "FAIL") + f" ({value_text(v.margin)})")
        vrows.append([label, *cells])
    out += ["", "Linear verdicts (margin in brackets; negative fails)"]
    out += _column_groups(["requirement", *names], vrows)
    return "\n".join(out) + "\n"


def dossier_text(data, folder) -> str:
    """The dossier command's screen: the side-by-side comparison and every overall verdict."""
    out = [compare_text(data.check).rstrip()]
    if data.design_error:
        out += ["", *_wrap(f"Synthesis: {data.design_error}", "")]
    for v in data.verdicts:
        out += verdict_block(v)
    out += summary_lines(data.verdicts)
    out += [
        "",
        *_wrap(
            f"Dossier written to {folder}/ (dossier.html, dossier.pdf, dossier.md, results.json, "
            "tables/*.csv, figures/*.svg)",
            "",
        ),
    ]
    return "\n".join(out) + "\n"


# plain words for the internal symbols of the polytope facts
SYMBOL_WORDS = {
    "m11": "effective mass (speed row)",
    "m22": "effective yaw inertia",
    "m33": "effective pitch inertia",
    "Ml": "mass x centre-of-mass height",
    "k": "torque-constant ratio",
    "c_b": "bearing friction",
    "chassis.m": "chassis mass",
    "chassis.mh": "chassis mass x height",
    "chassis.mh2": "chassis mass x height^2",
    "payload.m": "payload mass",
    "payload.mh": "payload mass x height",
    "payload.mh2": "payload mass x height^2",
    "chassis.pitch": "chassis pitch inertia",
    "chassis.yaw": "chassis yaw inertia",
    "payload.pitch:per_kg": "payload pitch inertia per kg",
    "payload.yaw:per_kg": "payload yaw inertia per kg",
    "payload.roll:per_kg": "payload roll inertia per kg",
    "chassis.roll": "chassis roll inertia",
}


def plain_symbol(name: str) -> str:
    """An internal symbol of the synthesis facts in plain words (unknown names pass through)."""
    return SYMBOL_WORDS.get(name, name.replace("_", " "))


def plain_value(v, digits: int = 4, *, words: bool = False) -> str:
    """A value in plain words for a screen or table cell: no Python lists, dicts or True/False.

    Strings that are internal symbols become words; with ``words`` every underscore name does.
    """
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return fmt(v, digits)
    if isinstance(v, dict):
        return "; ".join(f"{k.replace('_', ' ')}: {plain_value(x, digits, words=words)}" for k, x in v.items())
    if isinstance(v, (list, tuple)):
        return ", ".join(plain_value(x, digits, words=words) for x in v)
    if isinstance(v, str):
        return plain_symbol(v) if (words or v in SYMBOL_WORDS) else v
    return str(v)


def design_text(case, d) -> str:
    """The synthesize command's report."""
    from robust.synthesis.lmi import explain_status

    p, r, g = d.polytope, d.synthesis, d.gain
    cert = r.certificate
    out = [f"LMI synthesis: {case.title}", ""]
    out.append(f"Polytope: route {p.route.replace('_', ' ')}, {p.vertices} vertices")
    out += _wrap(f"guarantee: {p.guarantee}")
    for k, v in p.facts.items():
        if isinstance(v, dict):
            continue
        out += _wrap(f"{k.replace('_', ' ')}: {plain_value(v)}")
    if "moment_intervals" in p.facts:
        mi = p.facts["moment_intervals"]
        units = p.facts.get("moment_units", {})
        out.append(
            table(
                ["moment", "low", "high", "unit"],
                [[plain_symbol(k), fmt(a), fmt(b), units.get(k, "")] for k, (a, b) in mi.items()],
            )
        )
    s = r.spec
    out += [""] + _wrap(
        f"Request: objective {s.objective}, {s.lyapunov.replace('_', '-')} Lyapunov matrix, decay rate >= "
        f"{fmt(s.decay_rate)} 1/s"
        + (f", damping >= {fmt(s.damping)}" if s.damping is not None else "")
        + (f", natural frequency <= {fmt(s.max_frequency)} rad/s" if s.max_frequency is not None else "")
        + (f", wheel torque <= {fmt(s.torque_limit)} N m" if s.torque_limit is not None else ""),
        "",
    )
    for w in d.warnings:
        out += _wrap(f"WARNING: {w}", "")
    for key, why in d.not_imposed.items():
        out += _wrap(f"requested but NOT imposed by the LMIs: {key} ({why}); checked on samples only", "")
    out += _wrap(
        f"Result: certified decay rate {fmt(r.decay_rate)} 1/s; solver {r.solver}: {explain_status(r.status)}; "
        f"{r.solve_count} solves" + (f"; slack parameter eps = {fmt(r.epsilon)}" if r.epsilon is not None else ""),
        "",
    )
    out += _wrap(
        f"Certificate (re-checked with numpy at every vertex): largest LMI eigenvalue {cert.smallest_slack:.3e} "
        f"(must be < -{cert.tolerance:.1e}), smallest Lyapunov eigenvalue {cert.smallest_x_eig:.3e}: "
        + ("VALID" if cert.passed else "NOT VALID"),
        "",
    )
    bound = r.spec.lyapunov_bound
    if cert.bound_active:
        out += _wrap(
            f"note: the Lyapunov matrix touches its upper bound {bound:.0e} even after relaxing it (largest allowed, "
            "or a larger one gave no better answer within the conditioning limit); the certified decay rate may be "
            "capped by that bound rather than by the models",
            "",
        )
    elif bound > 1e3:
        out += _wrap(f"the Lyapunov bound was relaxed to {bound:.0e} because it limited the answer", "")
    out += ["", f"Gain '{g.name}':", gain_matrix_text(g.K), ""]
    a = d.assessment
    if a is not None:
        out.append(compare_text(a.check).rstrip())
        for v in a.verdicts:
            out += verdict_block(v)
        out += summary_lines(a.verdicts)
    return "\n".join(out) + "\n"


def sensitivity_text(case, results) -> str:
    """The sensitivity command's screen: per gain set and metric, the Sobol indices of every tolerance."""
    out = [f"Which tolerance drives each metric: {case.title}", f"case SHA-256 {case.sha256}"]
    out += _wrap(
        "Sobol indices over the box (parameters uniform over their ranges; SALib, Saltelli sampling): "
        "first order = the share of the metric's variance a tolerance explains alone; total = with all its "
        "interactions. Brackets: the bootstrap confidence half-width.",
        "",
    )
    for gain, r in results:
        out += ["", f"'{gain}': {METRIC_LABELS.get(r.metric, r.metric)} ({r.evaluations} evaluations)"]
        order = np.argsort(-r.total)
        rows = [
            [
                parameter_label(r.parameters[i]),
                f"{r.first_order[i]:.3f} ({r.first_order_conf[i]:.3f})",
                f"{r.total[i]:.3f} ({r.total_conf[i]:.3f})",
            ]
            for i in order
        ]
        out.append(table(["tolerance", "first order", "total"], rows))
    return "\n".join(out) + "\n"


def front_text(fr, start: str) -> str:
    """The trade-off front as a plain table, with what it means and does not mean."""
    from robust.verdict import LABELS

    sw, ob = LABELS.get(fr.swept, fr.swept), LABELS.get(fr.objective, fr.objective)
    lines = [
        f"Trade-off front: best worst-case {ob} [{fr.objective_unit}] for each {sw} bound [{fr.swept_unit}]",
        f"  started from '{start}'; {fr.method}",
        "",
        f"  {'bound':>10}  {'best':>10}  {'others met':>10}  limiting requirement (normalised margin)",
    ]
    for p in sorted(fr.points, key=lambda p: p.bound):
        lines.append(
            f"  {p.bound:>10.4g}  {p.best:>10.4g}  {'yes' if p.feasible else 'NO':>10}  "
            f"{p.limiting} ({p.smallest_other_margin:.3g})"
        )
    lines += [
        "",
        "  Values are worst cases over the scenario models (the whole box can be worse) reached by a local",
        "  search (a better gain can exist). No point is a checked gain set: check it before use.",
    ]
    return "\n".join(lines) + "\n"


def nearest_text(case, nearest: list) -> str:
    """For a tuning that failed: the nearest reachable value of each failing requirement."""
    if not nearest:
        return ""
    from robust.verdict import LABELS

    lines = [
        "",
        "Nearest reachable point (no tuned gain met every requirement): for each failing requirement, the best",
        "worst-case value a mirror-symmetric gain reached on the scenario models with every other requirement kept",
    ]
    for key, p in nearest:
        lines.append(
            f"  {LABELS.get(key, key)}: best {p.best:.4g} against the required {case.requirements[key]:.4g}; "
            f"others met: {'yes' if p.feasible else 'NO, ' + p.limiting + f' ({p.smallest_other_margin:.3g})'}"
        )
    return "\n".join(lines) + "\n"


def campaign_text(s) -> str:
    """Where a campaign stands, with what its bound means."""
    sp = s.spec
    what = "falls" if sp.failure == "fall" else "falls or current-limit hits"
    verdict = (
        f"DEMONSTRATED: P({what}) < {sp.target:g} at {sp.confidence:g} confidence"
        if s.demonstrated
        else (
            f"IMPOSSIBLE: P({what}) is above {sp.target:g} at {sp.confidence:g} confidence"
            if s.impossible
            else f"NOT demonstrated: the upper bound {s.upper:.3g} is not below {sp.target:g}"
        )
    )
    lines = [
        f"Campaign: gain set '{sp.gain}', manoeuvre '{sp.manoeuvre}', {sp.runs} planned runs in chunks of {sp.chunk}",
        f"  store {s.store}: {s.chunks_done} of {sp.chunks} chunks ({s.chunks_computed_now} computed now, "
        f"{s.runs_per_s:.0f} runs/s, {s.seconds:.1f} s)",
        f"  {s.runs_done} runs, {s.failures} {what}; one-sided Clopper-Pearson upper bound {s.upper:.3g}",
        f"  {verdict}"
        + (" (stopped early: optional stopping, the bound is slightly optimistic)" if s.stopped_early else ""),
    ]
    if s.first_failures:
        lines.append(f"  first failing samples (replay with --replay N): {', '.join(map(str, s.first_failures))}")
    lines.append("  A model campaign, not a safety case: validate on hardware with the vehicle restrained.")
    return "\n".join(lines) + "\n"


def replay_text(r) -> str:
    """One replayed run against its stored row."""
    lines = [f"Sample {r.sample}: " + ", ".join(f"{k} = {v:.6g}" for k, v in r.point.items())]
    for k in r.stored:
        lines.append(f"  {k:24s} stored {r.stored[k]:.9g}   again {r.again[k]:.9g}")
    lines.append("  reproduced exactly" if r.matches else "  NOT reproduced: the store and this run differ")
    return "\n".join(lines) + "\n"


def subset_text(r, gain: str, manoeuvre: str) -> str:
    """A subset-simulation estimate with its levels."""
    lines = [
        f"Subset simulation: P({r.metric} >= {r.threshold:.4g}) for gain set '{gain}', manoeuvre '{manoeuvre}'",
        f"  estimate {r.probability:.3g}, coefficient of variation {r.cov:.2f} ({r.evaluations} runs; "
        f"{r.samples_per_level} per level, p0 = {r.p0:g}, seed {r.seed})",
    ]
    for i, lv in enumerate(r.levels):
        lines.append(
            f"  level {i}: threshold {lv['threshold']:.4g}, conditional probability {lv['probability']:.3g} "
            f"(c.o.v. {lv['cov']:.2f})"
        )
    lines.append(
        "  An estimate with a coefficient of variation, not a confidence bound: for a demonstration, run the campaign."
    )
    return "\n".join(lines) + "\n"


SHORT_QUANTITIES = {
    "certified decay rate (LMI, every model of the box)": "certified decay rate (LMI)",
    "runs that fell": "runs that fell",
}


def schedule_text(sc, case) -> str:
    """The schedule study on a screen: the compared gains two at a time (at most 100 columns)."""
    from robust.report.dossier import schedule_rows
    from robust.vehicle import PARAMETERS

    s = sc.schedule
    unit = PARAMETERS[s.parameter].unit
    rows = schedule_rows(sc, case.requirements)
    names = list(sc.columns)
    import textwrap

    def wrap(text: str) -> list[str]:
        return textwrap.wrap(text, 98, initial_indent="  ", subsequent_indent="    ")

    lines = [
        f"What measuring the {PARAMETERS[s.parameter].text} buys: K = K0 + (measured - {s.nominal:g} {unit}) K1, "
        f"measured within +-{s.error:g} {unit}",
        *wrap(f"LMI pair: largest certified decay rate on the rigorous polytope ({', '.join(sc.imposed) or 'decay'})"),
    ]
    if sc.tuned is not None:
        lines += wrap(
            f"tuned pair: '{sc.tuned.name}' and a scheduled gain tuned from it ({sc.scenario_models} scenarios)"
        )
    for name, why in sc.errors.items():
        lines += wrap(f"{name}: {why}")
    for k in range(0, len(names), 2):
        pair = names[k : k + 2]
        body = []
        for r in rows:
            q = SHORT_QUANTITIES.get(r["quantity"], r["quantity"].replace(" (worst sampled)", ""))
            q = q.replace(" over the manoeuvres", " (manoeuvres)")
            if q.startswith("smallest normalised"):
                q = "smallest margin, tuning scenarios"
            cells = [f"{q} [{r['unit']}]", "-" if r["bound"] is None else fmt(r["bound"])]
            for j in range(k, k + len(pair)):
                v, ok = r["values"][j], r["meets"][j]
                if v is None:
                    cells.append("NOT certified" if names[j] in sc.errors and "certified" in q else "-")
                else:
                    cells.append(value_text(v) + ("" if ok is None else ("" if ok else " FAIL")))
            body.append(cells)
        lines += ["", table(["quantity", "bound", *pair], body).rstrip("\n")]
    lines.append("")
    lines += wrap(
        "The certified rates are LMI certificates re-checked with numpy; every other row is the worst on "
        f"{sc.linear_models} models (box x measurement error) or on {sc.time_models} runs per gain (corners at "
        "both extreme errors): sampled, not certified. No overall verdict: the dossier gives the tuned gain's."
    )
    for g in (sc.scheduled, sc.tuned_scheduled):
        if g is not None:
            lines.append(f"  {g.name}: K0 left row {', '.join(fmt(x, 5) for x in g.K0[0])}")
            lines.append(f"  {' ' * len(g.name)}  K1 left row {', '.join(fmt(x, 5) for x in g.K1[0])} per {unit}")
    return "\n".join(lines) + "\n"
