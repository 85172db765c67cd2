"""Dossier figures (matplotlib, Agg backend); each function returns a Figure.

One look for every figure, defined here only: the project's own palette
(:data:`PALETTE`, muted ink colours on white), thin grey grids, no top or
right spines.  Every series also has its own marker or line style and a
legend entry, so no figure relies on colour alone.
"""

from __future__ import annotations

import io

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

MARKERS = ("o", "s", "^", "D", "v", "P", "X")
STYLES = ("-", "--", ":", "-.")
# the project's palette: ink blue, brick, moss, plum, ochre, slate (distinct in greyscale too)
PALETTE = ("#1d3f5e", "#b4462b", "#5a7a1a", "#6b3f7a", "#b8860b", "#4f5d6b")
LIMIT_COLOUR = "#7a1f1f"  # requirement limits and forbidden zones
plt.rcParams.update(
    {
        "svg.hashsalt": "robust",
        "font.size": 9,
        "text.parse_math": False,  # names are text, never math
        "axes.prop_cycle": matplotlib.cycler(color=PALETTE),
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.edgecolor": "#55524a",
        "grid.color": "#c9c6bd",
        "grid.linewidth": 0.4,
        "legend.frameon": False,
        "hatch.color": LIMIT_COLOUR,
    }
)


def loop_shape_bands(w: np.ndarray, shapes: dict[str, np.ndarray], title: str) -> Figure:
    """Per wheel input: min-max bands and medians over the models of |L|, |S| and |T| against frequency,
    with the |S| = 2 (6 dB) line, a common limit on the sensitivity peak."""
    fig, axes = plt.subplots(1, 2, figsize=(10.0, 3.8), sharey=True)
    for j, (ax, side) in enumerate(zip(axes, ("left wheel input", "right wheel input"))):
        for k, (key, label, style) in enumerate(
            (("L", "loop gain |L|", "-"), ("S", "sensitivity |S|", "--"), ("T", "complementary |T|", ":"))
        ):
            v = shapes[key][:, j]
            ax.fill_between(w, v.min(axis=0), v.max(axis=0), color=PALETTE[k], alpha=0.18, lw=0)
            ax.plot(w, np.median(v, axis=0), style, color=PALETTE[k], lw=1.3, label=f"{label}, median; band min-max")
        ax.axhline(2.0, color=LIMIT_COLOUR, lw=0.8, ls="-.", label="|S| = 2 (6 dB)")
        ax.set_xscale("log")
        ax.set_yscale("log")
        for axis in (ax.xaxis, ax.yaxis):  # plain numbers: math text is off in this project's figures
            axis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda v, _p: f"{v:g}"))
            axis.set_minor_formatter(matplotlib.ticker.NullFormatter())
        ax.set_xlabel("frequency [rad/s]")
        ax.set_title(side, fontsize=9)
        ax.grid(True, which="both")
    axes[0].set_ylabel("magnitude [-]")
    axes[0].legend(fontsize=7, loc="lower left")
    fig.suptitle(title)
    _lay_out(fig)
    return fig


def _lay_out(fig: Figure) -> None:
    """Fit the axes, labels and legends inside the figure once (matplotlib's tight layout), and keep that
    layout: ``tight_layout`` leaves a placeholder layout engine behind, and with any engine set every
    ``savefig`` runs a whole extra layout pass first (about half the cost of writing a file)."""
    fig.tight_layout()
    fig.set_layout_engine(None)


def svg(fig: Figure, *, close: bool = True) -> str:
    """SVG text of a figure without the creation date (stable across runs).  Every figure here is laid out
    by :func:`_lay_out`, so the page is the figure as drawn (no cropping pass)."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": "robust"})
    if close:
        plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg") :]


def eigenvalue_map(eigs: dict[str, np.ndarray], requirements: dict[str, float]) -> Figure:
    """Closed-loop eigenvalues of all samples per gain set; what the requirements forbid is hatched.

    Left: the whole spectrum; right: a zoom on the slowest poles, where the
    decay-rate and damping requirements bite.
    """
    fig, axes = plt.subplots(1, 2, figsize=(10.0, 4.4))
    allre = np.concatenate([e.real.ravel() for e in eigs.values()])
    allim = np.concatenate([e.imag.ravel() for e in eigs.values()])
    a = requirements.get("min_decay_rate_per_s")
    z = requirements.get("min_damping_ratio")
    w = requirements.get("max_natural_frequency_rad_s")
    full = (
        min(float(allre.min()) * 1.05, -1.0),
        max(float(allre.max()) * 1.1, 0.5),
        max(float(np.abs(allim).max()) * 1.1, 1.0),
    )
    zx = max(4.0 * (a or 0.0), 3.0)
    zoom = (-zx, 0.3 * zx, zx)
    for ax, (lo, hi, ymax), title in zip(axes, (full, zoom), ("all poles", "slowest poles (zoom)")):
        xs = np.linspace(lo, hi, 400)
        ys = np.linspace(-ymax, ymax, 400)
        X, Y = np.meshgrid(xs, ys)
        ok = X < 0
        if a is not None:
            ok &= X <= -a
        if z is not None:
            ok &= -X >= z * np.hypot(X, Y)
        if w is not None:
            ok &= np.hypot(X, Y) <= w
        # the forbidden zone is hatched and named in words; the allowed region stays white
        cs = ax.contourf(X, Y, (~ok).astype(float), levels=[0.5, 1.5], colors="none", hatches=["////"])
        cs.set_rasterized(True)
        ax.fill([], [], facecolor="white", edgecolor=LIMIT_COLOUR, hatch="////", label="outside the requirements")
        if z is not None:
            r = np.hypot(lo, ymax)
            th = np.arccos(z)
            for sgn in (1, -1):
                ax.plot([0, -r * np.cos(th)], [0, sgn * r * np.sin(th)], color=LIMIT_COLOUR, lw=0.7)
        for k, (name, e) in enumerate(eigs.items()):
            ax.plot(
                e.real.ravel(),
                e.imag.ravel(),
                MARKERS[k % len(MARKERS)],
                ms=2.5,
                alpha=0.5,
                label=name,
                rasterized=True,  # thousands of markers: a picture inside the SVG keeps the file small
            )
        ax.axvline(0.0, color="k", lw=0.8)
        if a:
            ax.axvline(-a, color=LIMIT_COLOUR, ls="--", lw=0.8, label=f"required decay rate {a:g} 1/s")
        if w:
            t = np.linspace(0, 2 * np.pi, 300)
            ax.plot(w * np.cos(t), w * np.sin(t), color=LIMIT_COLOUR, ls=":", lw=0.8)
        ax.set_xlim(lo, hi)
        ax.set_ylim(-ymax, ymax)
        ax.set_xlabel("real part [1/s]")
        ax.set_ylabel("imaginary part [rad/s]")
        ax.set_title(title)
        ax.grid(True, lw=0.3)
    axes[0].legend(loc="upper left", fontsize=7, markerscale=3)
    fig.suptitle("Closed-loop eigenvalues over the box (corners and samples)")
    _lay_out(fig)
    return fig


def margin_distributions(values: dict[str, dict[str, np.ndarray]], requirements: dict[str, float]) -> Figure:
    """Histograms of disk, phase and delay margins per gain set, with the required bound."""
    keys = (
        ("disk_margin", "disk margin [-]", "min_disk_margin"),
        ("phase_margin", "phase margin [deg]", "min_phase_margin_deg"),
        ("delay_margin", "delay margin [ms]", "min_delay_margin_ms"),
    )
    fig, axes = plt.subplots(1, 3, figsize=(9.5, 3.2))
    for ax, (key, label, req) in zip(axes, keys):
        for k, (name, v) in enumerate(values.items()):
            x = np.asarray(v[key])
            x = x[np.isfinite(x)]
            if x.size:
                ax.hist(x, bins=40, histtype="step", lw=1.2, ls=STYLES[k % len(STYLES)], label=name)
        if req in requirements:
            ax.axvline(requirements[req], color="k", ls="--", lw=1.0, label="required")
        ax.set_xlabel(label)
        ax.set_ylabel("samples")
        ax.grid(True, lw=0.3)
    axes[0].legend(fontsize=7)
    fig.suptitle("Loop-at-a-time margins over the samples (worst wheel input)")
    _lay_out(fig)
    return fig


def _thin(t: np.ndarray, low: np.ndarray, mid: np.ndarray, high: np.ndarray, n: int = 500):
    """At most ``n`` points of a band for drawing: blocks of samples, keeping each block's lowest low and
    highest high (no peak is lost) and its first median value."""
    step = max(1, int(np.ceil(len(t) / n)))
    if step == 1:
        return t, low, mid, high
    m = len(t) // step * step
    tb = t[:m:step]
    lo = low[:m].reshape(-1, step).min(axis=1)
    hi = high[:m].reshape(-1, step).max(axis=1)
    md = mid[:m:step]
    if m < len(t):  # the tail block
        tb = np.append(tb, t[m])
        lo = np.append(lo, low[m:].min())
        hi = np.append(hi, high[m:].max())
        md = np.append(md, mid[m])
    return tb, lo, md, hi


def response_envelopes(
    env, trace, drive_envelope: dict[str, np.ndarray], title: str, limits: dict[str, float] | None = None
) -> Figure:
    """Min / median / max bands of speed, yaw rate, pitch and torque, the worst sample's
    trace, and the drive's torque-speed envelope with the worst sample's path; the
    requirement limits (``limits``: ``"pitch"`` in deg, ``"torque"`` in N m) drawn as lines."""
    limits = limits or {}
    k = slice(None, None, max(1, len(trace.t) // 1500))  # the worst sample's path, thinned for drawing only
    fig, axes = plt.subplots(2, 3, figsize=(10.0, 5.6))
    axes = axes.ravel()
    labels = {
        "speed": "speed [m/s]",
        "yaw_rate": "yaw rate [rad/s]",
        "pitch": "pitch [deg]",
        "torque_left": "left torque [N m]",
        "torque_right": "right torque [N m]",
    }
    idx = {"speed": 3, "yaw_rate": 4, "pitch": 5}
    for ax, q in zip(axes, env.quantities):
        j = env.quantities.index(q)
        scale = np.degrees(1.0) if q == "pitch" else 1.0
        tb, lo, md, hi = _thin(env.t, env.low[:, j] * scale, env.median[:, j] * scale, env.high[:, j] * scale)
        ax.fill_between(tb, lo, hi, alpha=0.3, label="min-max band")
        ax.plot(tb, md, "-", lw=1.2, label="median")
        if q in idx:
            ax.plot(trace.t[k], trace.state[0, k, idx[q]] * scale, "--", lw=1.0, label="worst sample")
        else:
            side = 0 if q == "torque_left" else 1
            ax.plot(trace.t[k], trace.torque[0, k, side], "--", lw=1.0, label="worst sample")
        lim = limits.get("pitch") if q == "pitch" else limits.get("torque") if q.startswith("torque") else None
        if lim is not None:
            for sgn in (1, -1):
                ax.axhline(sgn * lim, color=LIMIT_COLOUR, ls="-.", lw=0.8, label="requirement" if sgn > 0 else None)
            ax.legend(fontsize=6, loc="lower right")
        ax.set_xlabel("time [s]")
        ax.set_ylabel(labels[q])
        ax.grid(True, lw=0.3)
    axes[0].legend(fontsize=7)
    ax = axes[5]
    ax.plot(drive_envelope["speed"], drive_envelope["high"], "k-", lw=1.0, label="drive limit")
    ax.plot(drive_envelope["speed"], drive_envelope["low"], "k-", lw=1.0)
    spin = trace.spin[0]
    ax.plot(spin[k, 0], trace.torque[0, k, 0], "--", lw=1.0, label="worst sample, left")
    ax.plot(spin[k, 1], trace.torque[0, k, 1], ":", lw=1.0, label="worst sample, right")
    ax.set_xlabel("wheel speed relative to body [rad/s]")
    ax.set_ylabel("torque [N m]")
    ax.legend(fontsize=7)
    ax.grid(True, lw=0.3)
    fig.suptitle(title)
    _lay_out(fig)
    return fig


def step_map(names: tuple[str, ...], points: np.ndarray, survived: np.ndarray, unit: str, title: str) -> Figure:
    """Largest handled step over the first two ranged parameters (marker size and colour both encode it)."""
    fig, ax = plt.subplots(figsize=(6.0, 4.2))
    if points.shape[1] >= 2:
        x, y = points[:, 0], points[:, 1]
        ylab = names[1]
    else:
        x, y = points[:, 0], np.zeros(len(points))
        ylab = "-"
    s = 15 + 60 * (survived - survived.min()) / max(np.ptp(survived), 1e-12)
    sc = ax.scatter(x, y, c=survived, s=s, cmap="viridis", edgecolors="k", linewidths=0.3)
    i = int(np.argmin(survived))
    ax.annotate(
        f"worst {survived[i]:.3g} {unit}",
        (x[i], y[i]),
        xytext=(8, 8),
        textcoords="offset points",
        arrowprops={"arrowstyle": "->"},
    )
    fig.colorbar(sc, ax=ax, label=f"largest step [{unit}]")
    ax.set_xlabel(names[0] if names else "-")
    ax.set_ylabel(ylab)
    ax.set_title(title)
    ax.grid(True, lw=0.3)
    _lay_out(fig)
    return fig


def _wrapped(name: str, width: int = 12) -> str:
    """A parameter key over lines for a tick label: a line per dotted part, long parts broken after an
    underscore (the key stays readable as typed)."""
    lines = []
    for part in name.split("."):
        line = ""
        for word in part.split("_"):
            piece = word if not line else f"_{word}"
            if line and len(line) + len(piece) > width:
                lines.append(line)
                line = piece
            else:
                line += piece
        lines.append(line)
    return "\n".join(lines)


def worst_locations(
    names: tuple[str, ...], low: np.ndarray, high: np.ndarray, worst: dict[str, dict], gain: str = ""
) -> Figure:
    """Where each metric's worst case lies, in normalised box coordinates (one line per metric)."""
    fig, ax = plt.subplots(figsize=(7.0, 3.8))
    xs = np.arange(len(names))
    for k, (metric, at) in enumerate(worst.items()):
        u = [(at[n] - lo) / (hi - lo) if hi > lo else 0.5 for n, lo, hi in zip(names, low, high)]
        ax.plot(xs, u, MARKERS[k % len(MARKERS)] + STYLES[k % len(STYLES)], lw=0.8, ms=5, label=metric)
    ax.set_xticks(xs, [_wrapped(n) for n in names])
    ax.set_ylim(-0.05, 1.05)
    ax.set_ylabel("position in range (0 = low, 1 = high)")
    ax.set_title("Worst-case locations in the parameter box" + (f", {gain}" if gain else ""))
    ax.legend(fontsize=6, ncol=2, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    ax.grid(True, lw=0.3)
    _lay_out(fig)
    return fig


def trade_off_front(front, labels: dict[str, str]) -> Figure:
    """The best worst-case value of the objective against the swept bound: filled markers where every other
    requirement holds on the scenarios, open ones where some does not; the case's own bounds as limit lines."""
    fig, ax = plt.subplots(figsize=(6.4, 3.8))
    pts = sorted(front.points, key=lambda p: p.bound)
    b = np.array([p.bound for p in pts])
    v = np.array([p.best for p in pts])
    ok = np.array([p.feasible for p in pts])
    ax.plot(b, v, "-", color=PALETTE[0], lw=1.2)
    ax.plot(b[ok], v[ok], "o", color=PALETTE[0], label="every other requirement met (scenarios)")
    if (~ok).any():
        ax.plot(b[~ok], v[~ok], "o", mfc="white", color=PALETTE[1], label="some other requirement not met")
    if front.case_bound is not None:
        ax.axvline(front.case_bound, color=LIMIT_COLOUR, lw=0.8, ls="-.", label="the case's bound (swept)")
    if front.objective_bound is not None:
        ax.axhline(front.objective_bound, color=LIMIT_COLOUR, lw=0.8, ls=":", label="the case's bound (objective)")
    ax.set_xlabel(f"{labels.get(front.swept, front.swept)} bound [{front.swept_unit}]")
    ax.set_ylabel(f"best worst-case {labels.get(front.objective, front.objective)} [{front.objective_unit}]")
    ax.grid(True)
    ax.legend(fontsize=7, loc="best")
    ax.set_title("What the swept requirement costs", fontsize=9)
    _lay_out(fig)
    return fig


def replay_trace(r) -> Figure:
    """One replayed campaign run: pitch, and the wheel torques, against time."""
    from robust.dynamics import STATE_NAMES

    tr = r.trace
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(7.0, 4.6), sharex=True)
    a1.plot(tr.t, np.degrees(tr.state[0, :, STATE_NAMES.index("pitch")]), color=PALETTE[0])
    a1.set_ylabel("pitch [deg]")
    a1.grid(True)
    a2.plot(tr.t, tr.torque[0, :, 0], color=PALETTE[0], label="left")
    a2.plot(tr.t, tr.torque[0, :, 1], "--", color=PALETTE[1], label="right")
    a2.set_ylabel("wheel torque [N m]")
    a2.set_xlabel("time [s]")
    a2.grid(True)
    a2.legend(fontsize=7)
    fell = "fell" if r.again["fell"] else "no fall"
    fig.suptitle(f"Campaign sample {r.sample} replayed ({fell})")
    _lay_out(fig)
    return fig


def tolerance_cuts(rows: list[dict], names: tuple[str, ...], bounds: dict[str, float], gain: str) -> Figure:
    """One panel per requirement: its metric along each parameter's range (0 = low end, 1 = high end) with
    the other parameters at the worst sample; the requirement's bound as a limit line."""
    rows = [r for r in rows if r.get("cuts") is not None]
    fig, axes = plt.subplots(1, len(rows), figsize=(4.2 * len(rows) + 1.0, 3.4), squeeze=False)
    for ax, r in zip(axes[0], rows):
        c = r["cuts"]
        for j, name in enumerate(names):
            ax.plot(
                c["position"],
                c["values"][j],
                MARKERS[j % len(MARKERS)] + STYLES[j % len(STYLES)],
                ms=3,
                lw=1.0,
                label=name,
            )
        b = bounds.get(r["requirement"])
        if b is not None:
            ax.axhline(b, color=LIMIT_COLOUR, lw=0.8, ls="-.", label="requirement")
        ax.set_title(f"{r['metric']} ({r['requirement']})", fontsize=8)
        ax.set_xlabel("position in range (others at the worst sample)")
        ax.grid(True)
    axes[0][0].legend(fontsize=6, loc="best")
    fig.suptitle(f"Worst case along each tolerance, '{gain}'")
    _lay_out(fig)
    return fig
