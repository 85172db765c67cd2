"""The dossier's first page: which gain, does it pass, what fails, what is open, who signs.

Built from the overall verdicts only (the same ones every other part of the
dossier shows), so page 1 can never say more than the evidence behind them.
With a previous dossier of the same case, the differences in verdicts and
gain matrices are listed too.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from robust.report.text import fmt
from robust.verdict import recommend, smallest_normalised_margin

SIGN_OFF_FIELDS = (
    "Author",
    "Reviewer",
    "Revision",
    "Decision (approved / approved with conditions / rejected)",
    "Date of approval",
    "Signature",
)


def _cell(o) -> str:
    if o is None:
        return "-"
    if o.status == "not evaluated":
        return "not evaluated"
    word = "pass" if o.status == "pass" else "FAIL"
    if o.margin is None:
        return f"{word} ({o.failing + '; ' if o.failing else ''}{o.evidence})"
    unit = f" {o.unit}" if o.unit and o.unit != "-" else ""
    return f"{word} ({fmt(o.margin, 3)}{unit}; {o.evidence})"


def decision_blocks(d, Table, h, p) -> list:
    """Blocks of the decision page (``Table``, ``h`` and ``p`` are the dossier's block makers)."""
    B = [h(2, "Decision page")]
    best, why = recommend(d.verdicts)
    K = {g.gain.name: g.gain.K for g in d.check.gains} if d.check is not None else {}
    if best is None:
        B.append(p(f"No recommendation: {why}."))
    else:
        word = "Recommended gain set" if best.passed else "Closest gain set (NOT recommended)"
        B.append(p(f"{word}: '{best.gain}' ({best.status}). {why[0].upper() + why[1:]}."))
        if best.gain in K:
            k = np.asarray(K[best.gain])
            B.append(
                Table(
                    f"Gain '{best.gain}' (u = -K (x - x_ref); full precision in gains/ and in the appendix)",
                    ["torque", "speed [N s]", "yaw rate [N m s/rad]", "pitch [N m/rad]", "pitch rate [N m s/rad]"],
                    [[side, *(f"{x:.6g}" for x in row)] for side, row in zip(("left", "right"), k)],
                    None,
                )
            )
    B.append(
        Table(
            "Sign-off (to be filled in by hand; this tool signs nothing)",
            ["field", "entry"],
            [[f, "." * 48] for f in SIGN_OFF_FIELDS],
            None,
        )
    )
    labels = list(dict.fromkeys(o.label for v in d.verdicts for o in v.outcomes))
    rows = []
    for label in labels:
        cells = [_cell(next((o for o in v.outcomes if o.label == label), None)) for v in d.verdicts]
        rows.append([label, *cells])
    rows.append(["overall verdict", *(v.status for v in d.verdicts)])
    rows.append(["smallest normalised margin", *(fmt(smallest_normalised_margin(v), 3) for v in d.verdicts)])
    B.append(
        Table(
            "Requirements x gain sets: pass or FAIL (margin; evidence: certified = LMI certificate, statistical = "
            "Monte Carlo with a Clopper-Pearson bound, sampled = corners, samples and search)",
            ["requirement", *(v.gain for v in d.verdicts)],
            rows,
            "decision_matrix",
        )
    )
    B.append(h(3, "Open items"))
    for item in open_items(d, best):
        B.append(p("- " + item))
    if getattr(d, "previous", None) is not None:
        B += previous_blocks(d, Table, h, p)
    return B


def open_items(d, best) -> list[str]:
    """What a reviewer must still settle, most important first."""
    out = []
    if best is not None:
        for o in best.outcomes:
            if o.status == "fail":
                worst = (
                    f": worst {fmt(o.worst)} {o.unit} against {fmt(o.bound)}"
                    if o.worst is not None and o.bound is not None
                    else ""
                )
                out.append(f"'{best.gain}' fails {o.label}{worst} ({o.failing or 'see the matrix'}).")
        for o in best.outcomes:
            if o.status == "not evaluated":
                out.append(f"'{best.gain}': {o.label} was not evaluated ({o.why or 'no data'}).")
        sampled = [o.label for o in best.outcomes if o.status == "pass" and o.evidence != "certified"]
        if sampled:
            out.append(
                f"'{best.gain}': {len(sampled)} passing requirement(s) rest on samples, not on a proof "
                f"({', '.join(sampled[:6])}{', ...' if len(sampled) > 6 else ''}); a model between the samples "
                "may do worse."
            )
    design = getattr(d, "design", None)
    for w in getattr(design, "warnings", ()) or ():
        out.append(f"LMI synthesis: {w}.")
    if getattr(d, "design_error", None):
        out.append(f"LMI synthesis not certified: {d.design_error}.")
    out.append(
        "Full-state feedback without sensor noise, bias, filters or encoder quantisation was assumed; confirm "
        "with the real estimator and sensors."
    )
    out.append("Validate on hardware with the vehicle restrained before anyone rides (see the safety cautions).")
    return out


def load_previous(folder: str | Path) -> dict:
    """The results of a previous dossier (its ``results.json``); ``ValueError`` names what is wrong."""
    path = Path(folder) / "results.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ValueError(f"--previous: no results.json in {folder} (expected a dossier folder)") from None
    except (OSError, json.JSONDecodeError) as exc:
        raise ValueError(f"--previous: {path} could not be read as JSON: {exc}") from None
    for key in ("stamp", "verdicts", "check"):
        if key not in data:
            raise ValueError(f"--previous: {path} has no {key!r} (expected the results of a robust dossier)")
    return data


def previous_blocks(d, Table, h, p) -> list:
    prev = d.previous
    B = [h(3, "Changes since the previous dossier")]
    old_sha = prev["stamp"].get("case_sha256")
    B.append(
        p(
            "Case file unchanged (same SHA-256)."
            if old_sha == d.stamp["case_sha256"]
            else f"Case file CHANGED: SHA-256 {old_sha} before, {d.stamp['case_sha256']} now."
        )
    )
    old_v = {v["gain"]: v for v in prev.get("verdicts", [])}
    old_k = {
        g["gain"]["name"]: np.asarray(g["gain"]["K"], dtype=float) for g in (prev.get("check") or {}).get("gains", [])
    }
    new_k = {g.gain.name: g.gain.K for g in d.check.gains} if d.check is not None else {}
    rows = []
    for v in d.verdicts:
        o = old_v.get(v.gain)
        if o is None:
            rows.append([v.gain, "(new)", v.status, "new gain set"])
            continue
        notes = []
        if v.gain in old_k and v.gain in new_k:
            a, b = old_k[v.gain], np.asarray(new_k[v.gain])
            if a.shape != b.shape or not np.array_equal(a, b):
                rel = float(np.abs(a - b).max() / max(np.abs(a).max(), 1e-300)) if a.shape == b.shape else np.inf
                notes.append(f"gain matrix changed (largest change {rel:.2g} of its largest entry)")
        fixed = sorted(set(o.get("failing", [])) - set(v.failing))
        broke = sorted(set(v.failing) - set(o.get("failing", [])))
        if fixed:
            notes.append("now passes: " + ", ".join(fixed))
        if broke:
            notes.append("now fails: " + ", ".join(broke))
        rows.append([v.gain, o.get("status", "?"), v.status, "; ".join(notes) or "no change"])
    for name in old_v:
        if name not in {v.gain for v in d.verdicts}:
            rows.append([name, old_v[name].get("status", "?"), "(removed)", "gain set no longer in the dossier"])
    B.append(Table("Verdicts then and now", ["gain set", "previous", "now", "what changed"], rows, "changes"))
    return B
