"""Writing a dossier: Markdown, self-contained HTML, PDF, CSV tables and one JSON file.

The content is built once as a list of blocks (headings, paragraphs, tables,
figures) and rendered to every format.  All files are written into a
temporary folder beside the target and moved into place at the end, so a
failed run never leaves a half-written dossier that looks complete.
"""

from __future__ import annotations

import csv
import html
import io
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from robust.analysis.metrics import METRICS
from robust.dynamics import torque_envelope
from robust.outputs import FolderTarget, file_stems, staged_folder
from robust.report import figures as F
from robust.report.jsonout import dumps
from robust.report.text import METRIC_LABELS, plain_value, time_verdict_row
from robust.report.text import fmt as _fmt_text
from robust.synthesis.lmi import explain_status
from robust.vehicle import PARAMETERS, get_parameter, plant_batch


class Shown(str):
    """A number as the documents show it (rounded text) that remembers its full value and an optional flag,
    so the CSV tables can carry full precision with the flag in a column of its own."""

    value: float
    flag: str

    def __new__(cls, text: str, value, flag: str = ""):
        obj = super().__new__(cls, text)
        obj.value = value
        obj.flag = flag
        return obj


def fmt(x, digits: int = 4) -> str:
    """:func:`robust.report.text.fmt` that keeps the full value for the CSV files (real numbers only)."""
    text = _fmt_text(x, digits)
    if isinstance(x, (complex, np.complexfloating)):
        return text
    return Shown(text, float(x))


def is_flagged(cell) -> bool:
    """A cell the documents highlight: a failed requirement, or a value flagged worst (HTML and PDF alike)."""
    return str(cell).startswith("FAIL") or (isinstance(cell, Shown) and bool(cell.flag))


def _csv_cell(c) -> str:
    if isinstance(c, Shown):
        return repr(float(c.value)) if np.isfinite(c.value) else _fmt_text(c.value)
    return str(c)


RESULTS_SCHEMA_VERSION = "4"  # results.json follows robust/report/results.schema.json

SAFETY = [
    "These vehicles carry people and goods among people. This dossier analyses a model; "
    "analysis of a model is not a safety case.",
    "Validate every gain on hardware, first with the vehicle restrained (tethers or stands, a spotter, "
    "no rider), then over stepwise wider operating ranges, before any rider uses it.",
    "Defer to the applicable standards for personal transporters and mobile robots, to local codes, "
    "and to licensed engineering practice; a design reviewed by a qualified engineer takes precedence "
    "over any number in this dossier.",
]
ASSUMPTIONS = [
    "flat, level ground; no slip (rigid wheels rolling); no wheel lift",
    "rigid bodies; chassis and payload composed into one body whose centre of mass lies on the vertical "
    "through the axle midpoint; principal axes aligned with the vehicle",
    "payload inertias scale with the payload mass (constant radii of gyration)",
    "drive: torque = actual torque constant x current; current clipped by the current limit and by the "
    "voltage left after back-EMF; no current-loop dynamics, no gear backlash or compliance",
    "linear analysis at upright, zero speed; sampled-data effects (period, latency) appear only in the "
    "time-domain simulation",
    "parameters constant during a run except where a common-Lyapunov certificate says otherwise",
]


@dataclass
class Table:
    title: str
    headers: list[str]
    rows: list[list[str]]
    csv_name: str | None = None
    note: str = ""


@dataclass
class Figure:
    """A drawn figure: its SVG text (files, HTML, Markdown) and its raster for the PDF (PNG bytes)."""

    name: str
    svg: str
    caption: str
    png: bytes | None = None
    size_in: tuple[float, float] = (10.0, 4.0)


def _h(level, text):
    return ("h", level, text)


def _p(text):
    return ("p", text)


def _vehicle_table(case) -> Table:
    rows = []
    for name, info in PARAMETERS.items():
        rows.append([name, fmt(get_parameter(case.vehicle, name), 5), info.unit, info.text])
    return Table("Nominal vehicle", ["parameter", "value", "unit", "meaning"], rows, "vehicle")


def _ranges_table(case) -> Table:
    rows = []
    for r in case.box.ranges:
        info = PARAMETERS[r.name]
        shape = r.distribution
        if r.distribution == "triangular":
            shape += f" (mode {fmt(r.mode)})"
        if r.distribution == "normal":
            shape += f" (mean {fmt(r.mode)}, std {fmt(r.std)}, truncated)"
        rows.append([r.name, fmt(r.low), fmt(get_parameter(case.vehicle, r.name)), fmt(r.high), info.unit, shape])
    return Table("Uncertainty ranges", ["parameter", "low", "nominal", "high", "unit", "distribution"], rows, "ranges")


def _blocks(d, today: str) -> tuple[list, list[Figure]]:
    case, chk, tm = d.case, d.check, d.time
    B: list = []
    st = d.stamp
    B.append(_h(1, f"Design dossier: {case.title}"))
    B.append(
        _p(f"Generated {today} by robust {st['tool_version']} from {st['case_file']} (SHA-256 {st['case_sha256']}).")
    )
    from robust.report.decision import decision_blocks

    B += decision_blocks(d, Table, _h, _p)
    B.append(_h(2, "Safety cautions"))
    B += [_p(s) for s in SAFETY]
    B.append(_h(2, "Model assumptions and limits"))
    B += [_p("- " + a) for a in ASSUMPTIONS]
    B.append(_h(2, "Reproducibility stamp"))
    rows = [[k.replace("_", " "), plain_value(v, 6, words=True)] for k, v in st.items() if k != "packages"]
    rows += [[f"package {k}", v] for k, v in st["packages"].items()]
    B.append(Table("Stamp", ["item", "value"], rows, "stamp"))
    # case summary
    B.append(_h(2, "Case summary"))
    B.append(_vehicle_table(case))
    if case.box.ranges:
        B.append(_ranges_table(case))
    if case.requirements:
        units = {m.requirement: m.unit for m in METRICS.values()}
        B.append(
            Table(
                "Requirements",
                ["requirement", "bound", "unit"],
                [[k, fmt(v), units.get(k, "")] for k, v in case.requirements.items()],
                "requirements",
            )
        )
    s = case.study
    B.append(
        Table(
            "Study",
            ["item", "value"],
            [
                ["plan", s.plan],
                ["samples", str(s.samples)],
                ["seed", str(s.seed)],
                ["confidence", fmt(s.confidence)],
                ["worst-case search", "on" if s.search else "off"],
                ["simulation samples (besides corners)", str(s.simulation_samples)],
                ["controller period [ms]", fmt(case.controller.sample_period_s * 1e3)],
                ["controller latency [ms]", fmt(case.controller.latency_s * 1e3)],
                ["fall angle [deg]", fmt(np.degrees(case.controller.fall_angle_rad))],
                ["friction trim", "on" if case.controller.trim else "off"],
            ],
            "study",
        )
    )
    if case.manoeuvres:
        rows = []
        for m in case.manoeuvres:
            rows.append(
                [
                    m.name,
                    m.kind,
                    fmt(m.duration_s),
                    fmt(m.start_s),
                    fmt(m.speed_m_s),
                    fmt(m.yaw_rate_rad_s),
                    fmt(m.push_force_n),
                    fmt(np.degrees(m.initial_pitch_rad)),
                ]
            )
        B.append(
            Table(
                "Manoeuvres",
                [
                    "name",
                    "kind",
                    "duration [s]",
                    "start [s]",
                    "speed [m/s]",
                    "yaw rate [rad/s]",
                    "push [N]",
                    "initial pitch [deg]",
                ],
                rows,
                "manoeuvres",
            )
        )
    # model facts
    f = d.facts
    B.append(_h(2, "Model facts"))
    B.append(
        Table(
            "Open loop (nominal)",
            ["quantity", "value", "unit"],
            [
                ["composite mass", fmt(f.composite["mass_kg"]), "kg"],
                ["composite centre-of-mass height", fmt(f.composite["cg_height_m"]), "m"],
                ["open-loop poles", ", ".join(fmt(p) for p in f.poles), "1/s"],
                ["pitch divergence rate", fmt(f.unstable_pole), "1/s"],
                ["time to double", fmt(f.time_to_double_s * 1e3), "ms"],
                ["controllability rank, full 7-state model", f"{f.full_rank} of 7", ""],
                ["controllability rank, reduced 4-state model", f"{f.reduced_rank} of 4", ""],
                ["state shift for commands", "exact" if f.shift_exact else "not exact (trim torque needed)", ""],
                ["trim torque per wheel per m/s", fmt(f.trim_per_speed_n_m_s), "N m s/m"],
            ],
            "model_facts",
        )
    )
    for mode, why in f.uncontrollable:
        B.append(
            _p(
                f"Uncontrollable mode at s = {fmt(mode.eigenvalue)}: {why}. Position x and heading are "
                "controllable integrators of speed and yaw rate; the balance controller leaves them to an outer "
                "loop, so they are dropped with y and the reduced model keeps speed, yaw rate, pitch and pitch rate."
            )
        )
    if f.corners is not None:
        c = f.corners
        worst = int(np.argmax(c.unstable_pole))
        rows = [
            [
                str(i + 1),
                *(fmt(v) for v in pt),
                fmt(c.unstable_pole[i]),
                fmt(c.time_to_double_s[i] * 1e3),
                f"{c.reduced_rank[i]}/4",
                "<- fastest" if i == worst else "",
            ]
            for i, pt in enumerate(c.points)
        ]
        B.append(
            Table(
                "Open-loop divergence at the box corners",
                ["corner", *c.names, "divergence [1/s]", "time to double [ms]", "rank", "note"],
                rows,
                "open_loop_corners",
            )
        )
    # comparison
    stems_all = file_stems(g.gain.name for g in chk.gains)
    B.append(_h(2, "Gain sets side by side"))
    names = [g.gain.name for g in chk.gains]
    rows = []
    for k, s0 in enumerate(chk.gains[0].summaries):
        vals = [g.summaries[k].worst.value for g in chk.gains]
        worst = min(vals) if s0.kind == "min" else max(vals)
        rows.append(
            [
                f"{s0.name} [{s0.unit}]",
                *(
                    Shown(fmt(v) + " (worst)", v, "worst") if v == worst and len(set(vals)) > 1 else fmt(v)
                    for v in vals
                ),
            ]
        )
    reqs = list(dict.fromkeys((v.requirement, v.metric) for g in chk.gains for v in g.verdicts))
    for key in reqs:
        cells = []
        for g in chk.gains:
            v = next((v for v in g.verdicts if (v.requirement, v.metric) == key), None)
            cells.append("-" if v is None else ("pass" if v.passed else "FAIL") + f" ({fmt(v.margin, 3)})")
        rows.append([f"{key[0]} ({key[1]})", *cells])
    if tm is not None:
        for key in list(dict.fromkeys(v.requirement for g in tm.gains for v in g.verdicts)):
            cells = []
            for g in tm.gains:
                v = next((v for v in g.verdicts if v.requirement == key), None)
                cells.append("-" if v is None else ("pass" if v.passed else "FAIL") + f" ({fmt(v.margin, 3)})")
            rows.append([f"{key} (time domain)", *cells])
    overall = [v.status for v in d.verdicts]
    rows.append(["overall verdict", *overall])
    B.append(
        Table(
            "Worst case over the box and verdicts (margin in brackets; negative fails)",
            ["metric", *names],
            rows,
            "comparison",
            note="'(worst)' marks the worst gain set for each metric.",
        )
    )
    shapes = getattr(d, "loop_shapes", None)
    if shapes:
        B.append(_h(2, "Loop shapes at each wheel input"))
        n = next(iter(shapes.values()))["S"].shape[0]
        B.append(
            _p(
                f"Loop broken at one wheel input with the other loop closed, on {n} models (the corners first, then "
                "the samples): loop gain |L|, sensitivity |S| = |1/(1+L)| and complementary sensitivity "
                "|T| = |L/(1+L)| over frequency. A sensitivity peak above 2 (6 dB) is commonly taken as too little "
                "robustness; the disk margin in the tables above is the exact counterpart."
            )
        )
        rows = []
        for name, sh in shapes.items():
            for j, side in enumerate(("left", "right")):
                sp, tp = sh["S_peak"][:, j], sh["T_peak"][:, j]
                rows.append(
                    [
                        name,
                        side,
                        fmt(float(sp.max())),
                        fmt(20 * np.log10(float(sp.max()))),
                        fmt(float(np.median(sp))),
                        fmt(float(tp.max())),
                        fmt(20 * np.log10(float(tp.max()))),
                    ]
                )
        B.append(
            Table(
                "Sensitivity and complementary sensitivity peaks over the models",
                ["gain set", "input", "worst |S| peak", "in dB", "median |S| peak", "worst |T| peak", "in dB"],
                rows,
                "loop_shape_peaks",
            )
        )
    sampled = getattr(d, "sampled_decay", None)
    if sampled:
        ctl = case.controller
        T, tau = ctl.sample_period_s, ctl.latency_s
        B.append(_h(2, "The sampled loop"))
        B.append(
            _p(
                f"The controller runs every {fmt(1e3 * T)} ms and its torque reaches the wheels {fmt(1e3 * tau)} ms "
                "later, held until the next value (zero-order hold). The reduced model discretised exactly with that "
                "period, hold and latency (augmented with the held input) gives the sampled loop's decay rate, "
                "-ln(largest |eigenvalue|) / period, on the same models as the linear check; it is set beside the "
                "continuous-time worst case. The delay margin is compared with the latency plus half a period, the "
                "delay a zero-order hold adds on average (common practice)."
            )
        )
        rows = []
        for g in chk.gains:
            name = g.gain.name
            v = sampled[name]
            cont = float((-d.eigenvalues[name].real.max(axis=-1)).min())  # same models as the sampled loop
            dm = next((s_.worst.value for s_ in g.summaries if s_.name == "delay_margin"), None)
            need = 1e3 * (tau + 0.5 * T)
            rows.append(
                [
                    name,
                    fmt(cont),
                    fmt(float(v.min())),
                    f"{int((v > 0).sum())} of {v.size}",
                    "-" if dm is None else fmt(dm),
                    fmt(need),
                    "-" if dm is None else ("yes" if dm > need else "NO"),
                ]
            )
        B.append(
            Table(
                "Sampled loop against the continuous-time analysis (worst over the corners and samples)",
                [
                    "gain set",
                    "continuous decay rate [1/s]",
                    "sampled decay rate [1/s]",
                    "sampled loop stable",
                    "worst delay margin [ms]",
                    "latency + half period [ms]",
                    "margin covers it",
                ],
                rows,
                "sampled_loop",
            )
        )
        B += sampled_margin_blocks(d)
    B.append(_h(2, "Overall verdict of each gain set"))
    B.append(
        _p(
            "One verdict per gain set covers closed-loop stability of every model (always), no fall in any "
            "manoeuvre (always) and every requirement of the case. Evidence: certified = an LMI certificate "
            "re-checked in this run on a polytope that provably contains the box; statistical = Monte Carlo "
            "samples with a Clopper-Pearson bound; sampled = corners, samples and a search, no probability."
        )
    )
    if case.default_manoeuvres:
        B.append(
            _p(
                "The case has no manoeuvres: the default manoeuvres were simulated ("
                + ", ".join(m.name for m in case.manoeuvres)
                + ")."
            )
        )
    for v in d.verdicts:
        B.append(_p(v.line()))
        B.append(
            Table(
                f"Verdict of '{v.gain}': {v.status}",
                ["requirement", "check", "outcome", "evidence", "bound", "worst", "margin", "failing", "note"],
                [
                    [
                        o.label,
                        o.domain,
                        o.status if o.status != "fail" else "FAIL",
                        o.evidence,
                        "-" if o.bound is None else fmt(o.bound),
                        "-" if o.worst is None else fmt(o.worst),
                        "-" if o.margin is None else fmt(o.margin),
                        o.failing or "-",
                        o.why or "-",
                    ]
                    for o in v.outcomes
                ],
                f"{stems_all[v.gain]}_overall_verdict",
            )
        )
        for c in v.covered:
            B.append(_p("Covered: " + c + "."))
    # synthesis
    if d.design is not None:
        ds = d.design
        p, r = ds.polytope, ds.synthesis
        B.append(_h(2, f"LMI synthesis of '{ds.gain.name}'"))
        B.append(_p(f"Polytope route {p.route} with {p.vertices} vertices. Guarantee: {p.guarantee}."))
        for w in ds.warnings:
            B.append(_p(f"WARNING: {w}."))
        rows = [
            [k.replace("_", " "), plain_value(v, 6, words=True)] for k, v in p.facts.items() if not isinstance(v, dict)
        ]
        rows += [
            ["objective", r.spec.objective],
            ["Lyapunov matrix", r.spec.lyapunov],
            ["certified decay rate [1/s]", fmt(r.decay_rate)],
            ["solver", f"{r.solver}: {explain_status(r.status)}"],
            ["largest LMI eigenvalue at the vertices (numpy)", f"{r.certificate.smallest_slack:.3e}"],
            ["smallest Lyapunov eigenvalue", f"{r.certificate.smallest_x_eig:.3e}"],
            ["certificate", "valid" if r.certificate.passed else "NOT VALID"],
        ]
        B.append(Table("Synthesis and certificate", ["item", "value"], rows, "synthesis"))
    elif d.design_error:
        B.append(_h(2, "LMI synthesis"))
        B.append(_p(f"The synthesis requested by the case could not be certified: {d.design_error}"))
    if getattr(d, "tuning", None) is not None:
        t = d.tuning
        B.append(_h(2, f"Robust tuning of '{t.gain.name}'"))
        B.append(
            _p(
                "The gain's four mirror-symmetric entries were optimised against every requirement of the case at "
                "once: on a scenario set (the box corners plus the worst models found so far) the smallest "
                "normalised requirement margin was maximised (Nelder-Mead from the case's gain sets), then the "
                "tuned gain was checked over the whole box and its worst models added to the scenarios "
                "(outer approximation, Polak 1997). Its verdict above comes from the same assessment as every "
                "other gain set; the tuning itself proves nothing."
            )
        )
        B.append(
            Table(
                "Tuning rounds",
                ["round", "scenario models", "smallest normalised margin on the scenarios", "verdict over the box"],
                [[str(h["round"]), str(h["scenarios"]), fmt(h["scenario_score"]), h["status"]] for h in t.history],
                "tuning_rounds",
            )
        )
    if getattr(d, "front", None) is not None:
        B += front_blocks(d.front)
    if getattr(d, "schedule", None) is not None:
        B += schedule_blocks(d)
    if getattr(d, "tolerances", None):
        B += tolerance_blocks(d)
    if getattr(d, "campaigns", ()):
        B += campaign_blocks(d)
    # per gain set
    stems = file_stems(g.gain.name for g in chk.gains)
    for gi, g in enumerate(chk.gains):
        stem = stems[g.gain.name]
        B.append(_h(2, f"Gain set '{g.gain.name}' ({g.gain.origin})"))
        units = ("N m s/m", "N m s/rad", "N m/rad", "N m s/rad")
        B.append(
            Table(
                "Gain K (u = -K (x - x_ref))",
                ["wheel", *(f"{s} [{u}]" for s, u in zip(("speed", "yaw_rate", "pitch", "pitch_rate"), units))],
                [[w, *(fmt(v, 5) for v in row)] for w, row in zip(("left", "right"), g.gain.K)],
                f"{stem}_gain",
            )
        )
        prov = [[k.replace("_", " "), plain_value(v, 6, words=True)] for k, v in sorted(g.gain.provenance.items())]
        if prov:
            B.append(Table("Provenance", ["item", "value"], prov, None))
        rows = []
        for s in g.summaries:
            pct = s.percentiles
            rows.append(
                [
                    s.name,
                    s.unit,
                    fmt(s.nominal),
                    fmt(s.worst_corner.value),
                    "-" if s.worst_sample is None else fmt(s.worst_sample.value),
                    "-" if s.worst_search is None else fmt(s.worst_search.value),
                    fmt(s.worst.value) + f" ({s.worst.source})",
                    *(fmt(pct.get(q, float("nan"))) if pct else "-" for q in ("p1", "p5", "p50", "p95", "p99")),
                    ", ".join(f"{k}={fmt(v, 4)}" for k, v in s.worst.at.items()),
                ]
            )
        B.append(
            Table(
                "Robustness summary (corners, Monte Carlo samples, search)",
                [
                    "metric",
                    "unit",
                    "nominal",
                    "worst corner",
                    "worst sample",
                    "search",
                    "worst",
                    "p1",
                    "p5",
                    "p50",
                    "p95",
                    "p99",
                    "worst at",
                ],
                rows,
                f"{stem}_summary",
            )
        )
        cv = g.corner_values
        mnames = list(cv)
        rows = []
        for i, pt in enumerate(g.corner_points):
            cells = []
            for mname in mnames:
                col = cv[mname]
                m = METRICS[mname]
                bad = int(np.argmin(col)) if m.kind == "min" else int(np.argmax(col))
                cells.append(Shown(fmt(col[i]) + " *", col[i], "worst corner") if i == bad else fmt(col[i]))
            rows.append([str(i + 1), *(fmt(v) for v in pt), *cells])
        B.append(
            Table(
                "Per corner (* = worst corner for that metric)",
                ["corner", *chk.parameter_names, *mnames],
                rows,
                f"{stem}_corners",
            )
        )
        keys = list(g.inputs[0].nominal)
        B.append(
            Table(
                "Margins per wheel input (nominal | worst over corners and samples)",
                ["margin", *(f"{i.wheel} wheel" for i in g.inputs)],
                [[k, *(f"{fmt(i.nominal[k])} | {fmt(i.worst[k])}" for i in g.inputs)] for k in keys],
                f"{stem}_margins",
            )
        )
        rows = []
        for v in g.verdicts:
            ci = (
                "-"
                if v.failure_interval is None
                else f"[{fmt(100 * v.failure_interval[0], 3)}%, {fmt(100 * v.failure_interval[1], 3)}%]"
            )
            rows.append(
                [
                    v.requirement,
                    v.metric,
                    fmt(v.threshold),
                    fmt(v.worst),
                    fmt(v.margin),
                    "pass" if v.passed else "FAIL",
                    f"{v.failures}/{v.samples}",
                    ci,
                ]
            )
        if rows:
            B.append(
                Table(
                    "Requirement verdicts (linear)",
                    [
                        "requirement",
                        "metric",
                        "bound",
                        "worst",
                        "margin",
                        "verdict",
                        "failing samples",
                        "P(fail) interval",
                    ],
                    rows,
                    f"{stem}_verdicts",
                )
            )
        if tm is not None:
            tg = tm.gains[gi]
            mstems = file_stems(m.name for m in tg.manoeuvres)
            for m in tg.manoeuvres:
                rows = [
                    [
                        w.name,
                        w.unit,
                        fmt(w.median),
                        fmt(w.value),
                        ", ".join(f"{k}={fmt(v, 4)}" for k, v in w.at.items()),
                    ]
                    for w in m.worst
                ]
                B.append(
                    Table(
                        f"Manoeuvre '{m.name}' ({m.kind}): {m.fell} of {m.models} models fell",
                        ["metric", "unit", "median", "worst", "worst at"],
                        rows,
                        f"{stem}_{mstems[m.name]}",
                    )
                )
            rows = [
                [
                    "speed step" if s.kind == "speed_step" else "yaw-rate step",
                    s.unit,
                    fmt(s.worst),
                    fmt(float(np.median(s.within_limits))),
                    fmt(s.worst_without_fall),
                    fmt(float(np.median(s.without_fall))),
                    ", ".join(f"{k}={fmt(v, 4)}" for k, v in s.worst_at.items()),
                ]
                for s in tg.largest_steps
            ]
            B.append(
                Table(
                    "Largest command step each model handles: within drive limits (no fall, current limit never "
                    "reached) and without a fall",
                    [
                        "step",
                        "unit",
                        "within limits, worst",
                        "within limits, median",
                        "without a fall, worst",
                        "without a fall, median",
                        "worst within limits at",
                    ],
                    rows,
                    f"{stem}_largest_steps",
                )
            )
            rows = [time_verdict_row(v) for v in tg.verdicts]
            if rows:
                B.append(
                    Table(
                        "Requirement verdicts (time domain)",
                        ["requirement", "bound", "worst", "unit", "margin", "verdict", "failing runs"],
                        rows,
                        f"{stem}_time_verdicts",
                    )
                )
    inputs = getattr(d, "inputs", ())
    if inputs:
        B.append(_h(2, "Appendix: the inputs, verbatim"))
        B.append(
            Table(
                "Files this dossier rests on (copies in the dossier folder; SHA-256 of their bytes)",
                ["file in the dossier folder", "from", "SHA-256"],
                [[i.name, i.origin, i.sha256] for i in inputs],
                "inputs",
            )
        )
        for i in inputs:
            B.append(_h(3, f"{i.name} (SHA-256 {i.sha256})"))
            B.append(("pre", i.content.decode("utf-8", errors="replace")))
    B.append(_h(2, "Figures"))
    return B, draw_figures(figure_plan(d))


_PLAN: list = []  # the figure plan a forked drawing process reads (set just before the processes start)


def _draw(i: int) -> tuple[str, bytes, tuple[float, float]]:
    """Draw figure ``i`` of :data:`_PLAN` once and render it twice: SVG text and the PDF's PNG."""
    import matplotlib.pyplot as plt

    from robust.report.pdf import FIGURE_DPI

    _name, _caption, make = _PLAN[i]
    fig = make()
    try:
        text = F.svg(fig, close=False)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=FIGURE_DPI)
        size = tuple(float(v) for v in fig.get_size_inches())
    finally:
        plt.close(fig)
    return text, buf.getvalue(), size


def figure_workers(count: int) -> int:
    """Processes that draw ``count`` figures: up to two on Linux (forked, so the figure data is shared, not
    copied through pickles), one elsewhere.  Drawing is independent per figure, so the files are the same."""
    import sys

    if sys.platform != "linux" or count < 4:
        return 1
    return max(1, min(2, os.cpu_count() or 1))


def draw_figures(plan: list, *, workers: int | None = None) -> list[Figure]:
    """Draw every figure of ``plan`` (``(name, caption, factory)``), in forked processes when that helps."""
    global _PLAN
    n = figure_workers(len(plan)) if workers is None else workers
    _PLAN = list(plan)
    try:
        if n <= 1:
            drawn = [_draw(i) for i in range(len(plan))]
        else:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            with ProcessPoolExecutor(max_workers=n, mp_context=multiprocessing.get_context("fork")) as pool:
                drawn = list(pool.map(_draw, range(len(plan))))
    finally:
        _PLAN = []
    return [
        Figure(name, text, caption, png=png, size_in=size)
        for (name, caption, _m), (text, png, size) in zip(plan, drawn)
    ]


def _db(v: float) -> str:
    return "unbounded" if v == np.inf else fmt(v)


def sampled_margin_blocks(d) -> list:
    """Margins of the sampled loop beside the continuous ones, and the sample-period sweep."""
    sm, sweep = getattr(d, "sampled_margins", None), getattr(d, "period_sweep", None)
    if not sm:
        return []
    from robust.verdict import LABELS

    B = []
    n = next(iter(sm.values()))["phase_margin_deg"].shape[0]
    rows = []
    for g in d.check.gains:
        m = sm.get(g.gain.name)
        if m is None:
            continue
        worst = {s_.name: s_.worst.value for s_ in g.summaries}
        gm = np.minimum(m["gain_margin_up_db"], m["gain_margin_down_db"]).min()
        cont_gm = min(worst.get("gain_margin_up", np.inf), worst.get("gain_margin_down", np.inf))
        rows.append(
            [
                g.gain.name,
                f"{fmt(worst.get('phase_margin', np.nan))} / {fmt(float(m['phase_margin_deg'].min()))}",
                f"{fmt(worst.get('delay_margin', np.nan))} / {fmt(1e3 * float(m['delay_margin_s'].min()))}",
                f"{_db(cont_gm)} / {_db(float(gm))}",
                f"{fmt(worst.get('disk_margin', np.nan))} / {fmt(float(m['disk_margin'].min()))}",
            ]
        )
    B.append(
        _p(
            "Loop-at-a-time margins of the sampled loop (one wheel input broken, the other loop closed; the "
            "frequency response on the unit circle up to the Nyquist frequency, with the hold and the latency "
            f"inside the loop), worst over the corners and the first {n} models, beside the continuous-time worst "
            "case over all models. The sampled delay margin is the extra delay beyond the latency the loop "
            "already has; sampling gives a finite upper gain margin where the continuous loop has none."
        )
    )
    B.append(
        Table(
            "Margins, continuous / sampled (worst)",
            ["gain set", "phase margin [deg]", "delay margin [ms]", "gain margin [dB]", "disk margin [-]"],
            rows,
            "sampled_margins",
        )
    )
    if sweep:
        rows = []
        for name, rs in sweep.items():
            for r in rs:
                rows.append(
                    [
                        name,
                        fmt(1e3 * r["period_s"]),
                        str(r["models"]),
                        fmt(1e3 * r["latency_s"]),
                        fmt(r["decay_rate_per_s"]),
                        fmt(r["phase_margin_deg"]),
                        fmt(1e3 * r["delay_margin_s"]),
                        _db(r["gain_margin_db"]),
                        fmt(r["disk_margin"]),
                        ", ".join(LABELS.get(k, k) for k in r["lost"]) or "none",
                    ]
                )
        B.append(
            Table(
                "Sample period sweep: the sampled loop's worst case for each period (latency the same fraction of "
                "the period as in the case; other periods on the box corners only); requirements lost against the "
                "case's bounds",
                [
                    "gain set",
                    "period [ms]",
                    "models",
                    "latency [ms]",
                    "decay rate [1/s]",
                    "phase margin [deg]",
                    "delay margin [ms]",
                    "gain margin [dB]",
                    "disk margin [-]",
                    "requirements lost",
                ],
                rows,
                "period_sweep",
            )
        )
    return B


def tolerance_blocks(d) -> list:
    """The section "Which tolerance drives each requirement" (Sobol indices and failure per sub-range)."""
    from robust.analysis.sensitivity import SOBOL_BASE_SAMPLES, SOBOL_TIME_BASE_SAMPLES
    from robust.verdict import LABELS

    case = d.case
    plan = case.study.plan
    B = [_h(2, "Which tolerance drives each requirement")]
    B.append(
        _p(
            "For each gain set, the requirements it fails (or, when it fails none, its tightest linear one). "
            f"Sobol indices (SALib, Saltelli sampling with N = {SOBOL_BASE_SAMPLES}, parameters uniform over the box; "
            "first order: the share of the metric's variance a tolerance explains alone; total: with its "
            "interactions; +- the bootstrap confidence half-width) rank the tolerances. The failure fraction "
            f"per quarter of each range comes from the study's {case.study.samples} samples"
            + (
                f", with the Clopper-Pearson upper bound at {case.study.confidence:g} confidence"
                if plan == "monte_carlo"
                else " (not Monte Carlo: fractions only, no probability)"
            )
            + ": where in a tolerance the failures come from. Peak wheel torque and peak pitch are ranked on the "
            f"nonlinear model (worst over the case's manoeuvres per model, N = {SOBOL_TIME_BASE_SAMPLES}, so "
            "N (k + 2) runs per manoeuvre); their failure fractions per range need Monte Carlo runs (a campaign), "
            "so those columns are empty."
        )
    )
    for name, rows in d.tolerances.items():
        for r in rows:
            label = LABELS.get(r["requirement"], r["requirement"])
            if r["metric"] is None:
                B.append(_p(f"'{name}', {label}: {r['why']}."))
                continue
            sob, cond = r["sobol"], r["conditional"]
            table = []
            for i, par in enumerate(case.box.names):
                cells = [par]
                if sob is not None:
                    cells += [
                        f"{fmt(float(sob.first_order[i]), 2)} +- {fmt(float(sob.first_order_conf[i]), 2)}",
                        f"{fmt(float(sob.total[i]), 2)} +- {fmt(float(sob.total_conf[i]), 2)}",
                    ]
                else:
                    cells += ["-", "-"]
                if cond is None:  # a simulated metric: Sobol indices only (failure fractions need a campaign)
                    cells += ["-"] * 4
                    table.append(cells)
                    continue
                for b in range(cond.samples.shape[1]):
                    n, f = int(cond.samples[i, b]), int(cond.failures[i, b])
                    bound = f", P at most {fmt(float(cond.upper[i, b]), 2)}" if plan == "monte_carlo" else ""
                    cells.append(f"{f} of {n}{bound}")
                table.append(cells)
            status = "fails" if r.get("status") == "fail" else "tightest, passes"
            note = f" Sobol indices not computed: {r['why']}." if sob is None else ""
            B.append(
                Table(
                    f"'{name}': {label} ({status}; metric {r['metric']}).{note}",
                    [
                        "parameter",
                        "first-order index",
                        "total index",
                        "failures, 1st quarter of range",
                        "2nd",
                        "3rd",
                        "4th quarter",
                    ],
                    table,
                    f"tolerance_{name}_{r['metric']}",
                )
            )
    return B


def campaign_blocks(d) -> list:
    """One table per fall-probability campaign given with --campaign."""
    B = [_h(2, "Fall-probability campaigns")]
    B.append(
        _p(
            "Each campaign ran one gain set through one manoeuvre on block-seeded Monte Carlo samples of the box "
            "(full nonlinear model, drive limits); the bound is the one-sided Clopper-Pearson upper bound of the "
            "failure probability at the campaign's confidence. A campaign that stopped early (optional stopping) "
            "has a slightly optimistic bound. A model campaign, not a safety case."
        )
    )
    for c in d.campaigns:
        what = "a fall" if c["failure"] == "fall" else "a fall or the current limit"
        rows = [
            ["gain set / manoeuvre", f"{c['gain']} / {c['manoeuvre']}"],
            ["failure counted", what],
            ["runs done / planned", f"{c['runs']} / {c['planned_runs']}" + ("" if c["complete"] else " (incomplete)")],
            ["failures", str(c["failures"])],
            [f"upper bound at {fmt(c['confidence'])}", fmt(c["upper_bound"])],
            ["target", fmt(c["target"])],
            ["target demonstrated", "yes" if c["demonstrated"] else "NO"],
            ["estimator", c["estimator"]],
            ["store", c["store"]],
        ]
        for fl in c["first_failures"][:5]:
            point = ", ".join(f"{k} = {fmt(v)}" for k, v in fl.items() if k != "sample")
            rows.append([f"failure, sample {fl['sample']} (replay with --replay)", point])
        B.append(Table(f"Campaign '{c['gain']}' / '{c['manoeuvre']}'", ["item", "value"], rows, None))
    return B


def front_blocks(fr) -> list:
    """The section "What each requirement costs": the trade-off front as a table."""
    from robust.verdict import LABELS

    sw, ob = LABELS.get(fr.swept, fr.swept), LABELS.get(fr.objective, fr.objective)
    B = [_h(2, "What each requirement costs (trade-off front)")]
    B.append(
        _p(
            f"For each bound on the {sw} (the case's bound times the factors of [front]), the best worst-case "
            f"{ob} a mirror-symmetric gain reaches while every other requirement of the case holds. Method: "
            f"{fr.method}. Two cautions: the values are worst cases over the scenario models, so the whole box "
            "can be worse; and they are what a local search reached, so a better gain can exist. A point's gain "
            "is not one of the dossier's gain sets and has no verdict of its own."
        )
    )
    rows = []
    for p in sorted(fr.points, key=lambda p: p.bound):
        rows.append(
            [
                fmt(p.bound),
                fmt(p.best),
                "yes" if p.feasible else "NO",
                p.limiting,
                fmt(p.smallest_other_margin),
                ", ".join(fmt(x, 5) for x in p.K[0]),
            ]
        )
    B.append(
        Table(
            f"Best worst-case {ob} [{fr.objective_unit}] against the {sw} bound [{fr.swept_unit}]",
            [
                f"{sw} bound [{fr.swept_unit}]",
                f"best {ob} [{fr.objective_unit}]",
                "others met",
                "limiting requirement",
                "its normalised margin",
                "gain (left row; right row mirrored)",
            ],
            rows,
            "trade_off_front",
        )
    )
    return B


def schedule_rows(sc, req: dict) -> list[dict]:
    """The comparison of the schedule study as records: one per quantity, with the requirement's bound,
    each compared gain's value (``sc.columns`` order) and whether it meets the bound (values in display
    units, ``unit`` says which; ``None`` where not evaluated)."""
    names = sc.columns
    rows = [
        {
            "quantity": "certified decay rate (LMI, every model of the box)",
            "unit": "1/s",
            "requirement": "min_decay_rate_per_s",
            "bound": req.get("min_decay_rate_per_s"),
            "kind": "min",
            "values": [sc.certified.get(n) for n in names],
        }
    ]
    if sc.scores:
        rows.append(
            {
                "quantity": f"smallest normalised requirement margin on the {sc.scenario_models} tuning scenarios",
                "unit": "-",
                "requirement": None,
                "bound": 0.0,
                "kind": "min",
                "values": [sc.scores.get(n) for n in names],
            }
        )
    for metric, m in METRICS.items():
        rows.append(
            {
                "quantity": f"{METRIC_LABELS.get(metric, m.text)} (worst sampled)",
                "unit": m.unit,
                "requirement": m.requirement,
                "bound": req.get(m.requirement),
                "kind": m.kind,
                "values": [sc.linear.get(n, {}).get(metric) for n in names],
            }
        )
    for key, text, unit, rkey, scale in (
        ("peak_torque_n_m", "peak wheel torque over the manoeuvres", "N m", "max_wheel_torque_n_m", 1.0),
        ("peak_pitch_rad", "peak pitch over the manoeuvres", "deg", "max_pitch_deg", 180.0 / np.pi),
        ("falls", "runs that fell", "-", None, 1.0),
    ):
        rows.append(
            {
                "quantity": text,
                "unit": unit,
                "requirement": rkey,
                "bound": 0.0 if key == "falls" else req.get(rkey),
                "kind": "max",
                "values": [None if n not in sc.time else sc.time[n][key] * scale for n in names],
            }
        )
    for r in rows:
        b = r["bound"]
        r["meets"] = [
            None if v is None or b is None else bool(v >= b if r["kind"] == "min" else v <= b) for v in r["values"]
        ]
    return rows


def schedule_blocks(d) -> list:
    """The section "What measuring the payload buys": fixed gains beside gains scheduled on the measurement."""
    from robust.case import FIXED_NAME

    sc = d.schedule
    s = sc.schedule
    unit = PARAMETERS[s.parameter].unit
    label = PARAMETERS[s.parameter].text
    sched_name = sc.scheduled.name if sc.scheduled is not None else d.case.schedule.get("name", "scheduled")
    B = [_h(2, f"What measuring the {label} buys")]
    imposed = ", ".join(sc.imposed) if sc.imposed else "no other constraint"
    B.append(
        _p(
            f"A gain scheduled on the measured {label} is K = K0 + (measured - {s.nominal:g} {unit}) K1, with "
            f"the measurement within +-{s.error:g} {unit} of the true value. Two gains come from the same LMIs on "
            "the rigorous polytope (route moment_box, common Lyapunov matrix, largest certified decay rate; also "
            f"imposed: {imposed}): the best fixed gain ({FIXED_NAME}, {sc.vertices.get(FIXED_NAME, 0)} vertices) "
            f"and the scheduled gain ({sched_name}, {sc.vertices.get(sched_name, 0)} vertices: the polytope also "
            "spans the measured value and its product with the torque-constant ratio, so the certificate covers "
            "every model at every measurement error within the bound)."
        )
    )
    if sc.tuned is not None and sc.tuned_scheduled is not None:
        B.append(
            _p(
                f"Two more come from the robust tuning: the tuned gain ({sc.tuned.name}, a gain set of this "
                f"dossier) and a scheduled gain tuned from it ({sc.tuned_scheduled.name}: K0 and K1 "
                "mirror-symmetric, Nelder-Mead on the smallest normalised margin of every requirement on the "
                f"{sc.scenario_models} scenario models, the box corners at both extreme measurement errors, "
                "starting from the tuned gain with K1 = 0). Their certified decay rates are fixed-gain LMI "
                "certificates on the same two polytopes."
            )
        )
    if sc.not_imposed:
        B.append(_p("Not imposed by the LMIs: " + "; ".join(f"{k}: {v}" for k, v in sc.not_imposed.items()) + "."))
    for name, why in sc.errors.items():
        B.append(_p(f"{name}: {why}"))
    B.append(
        _p(
            f"Evidence: the certified decay rates are LMI certificates re-checked with numpy. Every other row is "
            f"the worst value on {sc.linear_models} models (the box corners at both extreme measurement errors, "
            f"then Monte Carlo samples with the error uniform within its bound, seed {sc.seed}) for the linear "
            f"metrics, and on {sc.time_models} runs per gain (the corners at both extreme errors, every "
            "manoeuvre of the case) on the nonlinear model with the drive's limits: sampled, not certified, and "
            "without the largest-step and settling checks. Only the tuned gain is one of the dossier's gain sets "
            "with an overall verdict (see its section); the rows here say whether each worst value meets the "
            "case's bound."
        )
    )
    names = sc.columns
    rows = []
    for r in schedule_rows(sc, d.case.requirements):
        cells = [r["quantity"], r["unit"], "-" if r["bound"] is None else fmt(r["bound"])]
        for n, v, ok in zip(names, r["values"], r["meets"]):
            if v is None:
                cells.append("NOT certified" if n in sc.errors and "certified" in r["quantity"] else "-")
            else:
                cells.append(fmt(v) + ("" if ok is None else (" (meets)" if ok else " (FAILS)")))
        rows.append(cells)
    B.append(
        Table(
            f"Fixed gains against gains scheduled on the measured {label}",
            ["quantity", "unit", "case bound", *names],
            rows,
            "schedule_comparison",
        )
    )
    gains = []
    for g in (sc.fixed, sc.tuned):
        if g is not None:
            gains.append([g.name, "K", *(", ".join(fmt(x, 5) for x in row) for row in g.K)])
    for g in (sc.scheduled, sc.tuned_scheduled):
        if g is not None:
            gains.append([g.name, "K0", *(", ".join(fmt(x, 5) for x in row) for row in g.K0)])
            gains.append([g.name, f"K1 [per {unit}]", *(", ".join(fmt(x, 5) for x in row) for row in g.K1)])
    B.append(
        Table(
            "The compared gains (u = -K x; SI units)",
            ["gain", "matrix", "left row", "right row"],
            gains,
            "schedule_gains",
        )
    )
    return B


def figure_plan(d) -> list[tuple[str, str, object]]:
    """The dossier's figures as ``(name, caption, factory)``; each factory draws a new Figure.

    Each is drawn once (:func:`draw_figures`): SVG for the files and the HTML, PNG for the PDF.
    """
    case, chk, tm = d.case, d.check, d.time
    req = case.requirements
    plan: list[tuple[str, str, object]] = [
        (
            "eigenvalues",
            "Closed-loop eigenvalues of every corner and sample, one marker per gain set; the hatched area is "
            "what the requirements forbid (too slow a decay, too little damping, too high a natural frequency).",
            lambda: F.eigenvalue_map(d.eigenvalues, req),
        ),
        (
            "margins",
            "Distributions of the loop-at-a-time margins over the samples; dashed line: required bound.",
            lambda: F.margin_distributions(d.sample_values, req),
        ),
    ]
    if case.box.ranges:
        loc_stems = file_stems(g.gain.name for g in chk.gains)
        for k, g in enumerate(chk.gains):  # every gain set (the first keeps the short file name)
            worst = {s.name: s.worst.at for s in g.summaries}
            plan.append(
                (
                    "worst_locations" + ("" if k == 0 else f"_{loc_stems[g.gain.name]}"),
                    f"Where the worst case of each metric lies for '{g.gain.name}'.",
                    lambda worst=worst, name=g.gain.name: F.worst_locations(
                        case.box.names, case.box.low, case.box.high, worst, f"'{name}'"
                    ),
                )
            )
    shapes = getattr(d, "loop_shapes", None) or {}
    shape_stems = file_stems(shapes)
    for name, sh in shapes.items():
        stem = shape_stems[name]
        plan.append(
            (
                f"{stem}_loop_shapes",
                f"Loop shapes of '{name}' at each wheel input: |L|, |S| and |T| over frequency, median line and "
                "min-max band over the models; dash-dot line: |S| = 2 (6 dB).",
                lambda sh=sh, name=name: F.loop_shape_bands(d.loop_frequencies, sh, f"'{name}': loop shapes"),
            )
        )
    limits = {"pitch": req.get("max_pitch_deg"), "torque": req.get("max_wheel_torque_n_m")}
    if tm is not None:
        v = case.vehicle
        w = np.linspace(-1.2, 1.2, 200) * v.drive.supply_v / v.drive.back_emf_v_s_per_rad
        env = torque_envelope(plant_batch(v), w[None, :])
        drive_env = {"speed": w, "low": env["low"][0], "high": env["high"][0]}
        stems = file_stems(tg.gain.name for tg in tm.gains)
        for tg in tm.gains:
            name = tg.gain.name
            stem = stems[name]
            man_stems = file_stems(m.name for m in tg.manoeuvres)
            for k, m in enumerate(tg.manoeuvres):  # every manoeuvre (the first keeps the short file name)
                plan.append(
                    (
                        f"{stem}_envelope" + ("" if k == 0 else f"_{man_stems[m.name]}"),
                        f"Response envelopes of '{name}' in '{m.name}' (min / median / max over corners and "
                        "samples), the worst sample's trace, the requirement limits (dash-dot), and the drive's "
                        "torque-speed envelope with that sample's path.",
                        lambda m=m, name=name: F.response_envelopes(
                            m.envelope, m.worst_trace, drive_env, f"'{name}': {m.name} ({m.kind})", limits
                        ),
                    )
                )
            if case.box.ranges:
                s = tg.largest_steps[0]
                plan.append(
                    (
                        f"{stem}_largest_speed_step",
                        f"Largest speed step within drive limits of every simulated model for '{name}'.",
                        lambda s=s, name=name: F.step_map(
                            case.box.names,
                            s.points,
                            s.within_limits,
                            s.unit,
                            f"Largest speed step within drive limits, '{name}'",
                        ),
                    )
                )
    for gname, rows in (getattr(d, "tolerances", None) or {}).items():
        if any(r.get("cuts") is not None for r in rows):
            plan.append(
                (
                    f"tolerance_cuts_{file_stems([gname])[gname]}",
                    f"Worst case along each tolerance for '{gname}': each requirement's metric as one parameter moves "
                    "across its range, the others held at the worst sample of the study.",
                    lambda rows=rows, gname=gname: F.tolerance_cuts(rows, case.box.names, req, gname),
                )
            )
    if getattr(d, "front", None) is not None:
        from robust.verdict import LABELS

        plan.append(
            (
                "trade_off_front",
                "The trade-off front: best worst-case value of the objective against the swept bound (scenario "
                "models; filled markers where every other requirement holds).",
                lambda: F.trade_off_front(d.front, LABELS),
            )
        )
    return plan


def _md_text(x) -> str:
    """Text for Markdown: HTML special characters as entities (names and titles are user input)."""
    return html.escape(str(x), quote=False)


def _md_table(t: Table) -> str:
    def esc(x):
        return _md_text(x).replace("|", "\\|")

    lines = [
        f"**{_md_text(t.title)}**",
        "",
        "| " + " | ".join(esc(h) for h in t.headers) + " |",
        "|" + "|".join("---" for _ in t.headers) + "|",
    ]
    lines += ["| " + " | ".join(esc(c) for c in r) + " |" for r in t.rows]
    if t.note:
        lines += ["", t.note]
    return "\n".join(lines) + "\n"


def render_markdown(blocks, figs) -> str:
    out = []
    for b in blocks:
        if isinstance(b, Table):
            out.append(_md_table(b))
        elif b[0] == "h":
            out.append("#" * b[1] + " " + _md_text(b[2]) + "\n")
        elif b[0] == "pre":
            # a fence longer than any run of backticks inside, so verbatim text can never close it early
            runs = [len(r) for r in re.findall(r"`+", b[1])]
            fence = "`" * max(3, max(runs, default=0) + 1)
            out.append(f"{fence}text\n" + b[1].rstrip("\n") + f"\n{fence}\n")
        else:
            out.append(_md_text(b[1]) + "\n")
    for f in figs:
        out.append(f"![{_md_text(f.caption)}](figures/{_safe(f.name)}.svg)\n\n*{_md_text(f.caption)}*\n")
    return "\n".join(out)


CSS = """body{font-family:sans-serif;max-width:1200px;margin:2em auto;padding:0 1em;color:#111}
table{border-collapse:collapse;margin:0.5em 0 1.5em;font-size:0.85em}
th,td{border:1px solid #999;padding:2px 6px;text-align:right;max-width:40em;overflow-wrap:anywhere}th{background:#eee}
td:first-child,th:first-child{text-align:left}caption{font-weight:bold;text-align:left;padding:4px 0}
.fail{font-weight:bold;text-decoration:underline}.caution{border:2px solid #000;padding:0.5em 1em}
figure{margin:1em 0}figcaption{font-style:italic;font-size:0.9em}svg{max-width:100%;height:auto}
pre{font-size:0.8em;background:#f6f5f0;padding:0.5em;overflow-x:auto}td:empty{min-width:16em;height:1.6em}"""


def render_html(blocks, figs, title: str) -> str:
    out = [
        f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{html.escape(title)}</title>"
        f"<style>{CSS}</style></head><body>"
    ]
    in_caution = False
    for b in blocks:
        if isinstance(b, Table):
            rows = []
            for r in b.rows:
                cells = []
                for c in r:
                    cls = " class='fail'" if is_flagged(c) else ""
                    cells.append(f"<td{cls}>{html.escape(str(c))}</td>")
                rows.append("<tr>" + "".join(cells) + "</tr>")
            head = "".join(f"<th>{html.escape(h)}</th>" for h in b.headers)
            note = f"<p>{html.escape(b.note)}</p>" if b.note else ""
            out.append(f"<table><caption>{html.escape(b.title)}</caption><tr>{head}</tr>{''.join(rows)}</table>{note}")
        elif b[0] == "h":
            if in_caution:
                out.append("</div>")
                in_caution = False
            out.append(f"<h{b[1]}>{html.escape(b[2])}</h{b[1]}>")
            if b[2] == "Safety cautions":
                out.append("<div class='caution'>")
                in_caution = True
        elif b[0] == "pre":
            out.append(f"<pre>{html.escape(b[1])}</pre>")
        else:
            out.append(f"<p>{html.escape(b[1])}</p>")
    if in_caution:
        out.append("</div>")
    for f in figs:
        out.append(f"<figure>{f.svg}<figcaption>{html.escape(f.caption)}</figcaption></figure>")
    out.append("</body></html>")
    return "\n".join(out)


def render_pdf(blocks, figs, path: Path, title: str) -> None:
    """The typeset PDF (see :mod:`robust.report.pdf`)."""
    from robust.report.pdf import render_pdf as typeset

    typeset(blocks, figs, path, title)


def write_dossier(d, target: FolderTarget, *, today: str) -> dict[str, Path]:
    """Write every dossier file into the checked folder ``target`` crash-safely; returns the main paths."""
    out_dir = target.path
    blocks, figs = _blocks(d, today)
    _write_files(d, target, blocks, figs, today)
    return {
        "folder": out_dir,
        "html": out_dir / "dossier.html",
        "pdf": out_dir / "dossier.pdf",
        "markdown": out_dir / "dossier.md",
        "json": out_dir / "results.json",
    }


def _write_files(d, target: FolderTarget, blocks, figs, today: str) -> None:
    with staged_folder(target) as tmp:
        (tmp / "tables").mkdir()
        (tmp / "figures").mkdir()
        for b in blocks:
            if isinstance(b, Table) and b.csv_name:
                buf = io.StringIO()
                w = csv.writer(buf, lineterminator="\n")
                # full precision for numbers; a flag shown inside a cell gets a column of its own
                flagged = [any(isinstance(r[j], Shown) and r[j].flag for r in b.rows) for j in range(len(b.headers))]
                head = []
                for h, f in zip(b.headers, flagged):
                    head += [h, f"{h} flag"] if f else [h]
                w.writerow(head)
                for r in b.rows:
                    out = []
                    for c, f in zip(r, flagged):
                        out.append(_csv_cell(c))
                        if f:
                            out.append(c.flag if isinstance(c, Shown) else "")
                    w.writerow(out)
                (tmp / "tables" / f"{_safe(b.csv_name)}.csv").write_text(buf.getvalue(), encoding="utf-8")
        for f in figs:
            (tmp / "figures" / f"{_safe(f.name)}.svg").write_text(f.svg, encoding="utf-8")
        for i in getattr(d, "inputs", ()):
            (tmp / i.name).parent.mkdir(parents=True, exist_ok=True)
            (tmp / i.name).write_bytes(i.content)
        (tmp / "dossier.md").write_text(render_markdown(blocks, figs), encoding="utf-8")
        (tmp / "dossier.html").write_text(render_html(blocks, figs, d.case.title), encoding="utf-8")
        results = {
            "schema_version": RESULTS_SCHEMA_VERSION,
            "stamp": d.stamp,
            "model": d.facts,
            "check": d.check,
            "time": d.time,
            "synthesis": None if d.design is None else {"polytope": d.design.polytope, "result": d.design.synthesis},
            "synthesis_error": d.design_error,
            "verdicts": d.verdicts,
            "tuning": _tuning_for_json(getattr(d, "tuning", None)),
            "front": getattr(d, "front", None),
            "tolerances": getattr(d, "tolerances", None),
            "scheduling": None
            if getattr(d, "schedule", None) is None
            else schedule_record(d.schedule, d.case.requirements),
            "campaigns": list(getattr(d, "campaigns", ())),
            "sampled_loop": {
                "margins": getattr(d, "sampled_margins", None),
                "period_sweep": getattr(d, "period_sweep", None),
            },
            "inputs": [{"file": i.name, "origin": i.origin, "sha256": i.sha256} for i in getattr(d, "inputs", ())],
        }
        (tmp / "results.json").write_text(dumps(results), encoding="utf-8")
        render_pdf(blocks, figs, tmp / "dossier.pdf", d.case.title)
        (tmp / "COMPLETE").write_text(f"dossier complete; generated {today}\n", encoding="utf-8")


def schedule_record(sc, requirements: dict) -> dict:
    """The schedule study for results.json and ``robust schedule --json``: the gains, the schedule, and one
    record per compared quantity (``to_si`` turns the degree and millisecond records into radians and
    seconds)."""
    g = sc.scheduled
    return {
        "schedule": {
            "parameter": sc.schedule.parameter,
            "unit": PARAMETERS[sc.schedule.parameter].unit,
            "nominal": sc.schedule.nominal,
            "measurement_error": sc.schedule.error,
        },
        "fixed_gain": None if sc.fixed is None else sc.fixed.K,
        "scheduled_gain": None if g is None else {"K0": g.K0, "K1": g.K1},
        "tuned_gain": None if sc.tuned is None else sc.tuned.K,
        "tuned_scheduled_gain": None
        if sc.tuned_scheduled is None
        else {"K0": sc.tuned_scheduled.K0, "K1": sc.tuned_scheduled.K1},
        "tuning_scores": sc.scores,
        "certified_decay_rate_per_s": sc.certified,
        "vertices": sc.vertices,
        "solves": sc.solves,
        "errors": sc.errors,
        "linear_models": sc.linear_models,
        "time_runs": sc.time_models,
        "seed": sc.seed,
        "comparison": [
            {
                "quantity": r["quantity"],
                "unit": r["unit"],
                "requirement": r["requirement"],
                "bound": r["bound"],
                "values": r["values"],
                "meets": r["meets"],
            }
            for r in schedule_rows(sc, requirements)
        ],
        "gains_compared": list(sc.columns),
    }


def _tuning_for_json(tuning):
    """The tuning record without its assessment: that is the check and time-domain results of the gain set
    named in ``gain.name``, already under ``check``, ``time`` and ``verdicts`` (written once, not twice)."""
    if tuning is None or getattr(tuning, "assessment", None) is None:
        return tuning
    import dataclasses

    plain = {f.name: getattr(tuning, f.name) for f in dataclasses.fields(tuning) if f.name != "assessment"}
    plain["assessment"] = f"see check, time and verdicts under the gain set named {tuning.gain.name!r}"
    return plain


def _safe(name: str) -> str:
    """A fixed file name made safe (user-given names go through :func:`robust.outputs.file_stems` first)."""
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in name)
