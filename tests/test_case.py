"""Case-file validation: every bad input names its key and what was expected."""

from __future__ import annotations

import re

import numpy as np
import pytest
from conftest import CASES

from robust.case import CaseError, parse_case
from robust.cli import main
from robust.vehicle import plant_batch

BASE = (CASES / "stand_up_transporter.toml").read_text()


def edit(old: str, new: str) -> str:
    assert old in BASE, old
    return BASE.replace(old, new, 1)


BAD = [
    (
        "unknown key",
        edit("radius_m = 0.24", "radius_m = 0.24\nradus_m = 0.3"),
        r"unknown key 'vehicle\.wheel\.radus_m'",
    ),
    ("unknown top key", "wheels = 2\n" + BASE, r"unknown key 'wheels'"),
    ("missing key", edit("half_track_m = 0.29\n", ""), r"missing key 'vehicle\.wheel\.half_track_m'.*\[m\]"),
    ("missing table", edit("[vehicle.drive]", "[vehicle.motor]"), r"unknown key 'vehicle\.motor'"),
    (
        "wrong type",
        edit("mass_kg = 35.0", 'mass_kg = "heavy"'),
        r"'vehicle\.chassis\.mass_kg': expected a number \[kg\], got text 'heavy'",
    ),
    (
        "bool is not a number",
        edit("supply_v = 72.0", "supply_v = true"),
        r"'vehicle\.drive\.supply_v': expected a number",
    ),
    (
        "negative mass",
        edit("mass_kg = 35.0", "mass_kg = -35.0"),
        r"vehicle\.chassis\.mass_kg: chassis mass must be > 0 \[kg\]",
    ),
    (
        "zero radius",
        edit("radius_m = 0.24", "radius_m = 0.0"),
        r"vehicle\.wheel\.radius_m: wheel radius must be > 0 \[m\]",
    ),
    (
        "negative inertia",
        edit("yaw_inertia_kg_m2 = 0.9", "yaw_inertia_kg_m2 = -0.9"),
        r"vehicle\.chassis\.yaw_inertia_kg_m2: .* must be > 0",
    ),
    (
        "triangle inequality",
        edit("yaw_inertia_kg_m2 = 0.9", "yaw_inertia_kg_m2 = 3.5"),
        r"chassis: principal inertias violate the triangle inequality",
    ),
    (
        "nan",
        edit("supply_v = 72.0", "supply_v = nan"),
        r"'vehicle\.drive\.supply_v': expected a finite number \[V\]",
    ),
    (
        "negative friction",
        edit("bearing_friction_n_m_s_per_rad = 0.0", "bearing_friction_n_m_s_per_rad = -0.1"),
        r"bearing_friction_n_m_s_per_rad: .* must be >= 0 \[N m s/rad\]",
    ),
    (
        "centre of mass below axle",
        edit("cg_height_m = 0.20", "cg_height_m = -2.0").replace("cg_height_m = 1.05", "cg_height_m = 0.0", 1),
        r"composite centre of mass must lie above the axle",
    ),
    (
        "range low above high",
        edit("low = 45.0\nhigh = 118.0", "low = 118.0\nhigh = 45.0"),
        r"'ranges\.payload\.mass_kg': expected low < high \[kg\]",
    ),
    (
        "nominal outside range",
        edit("low = 45.0\nhigh = 118.0", "low = 85.0\nhigh = 118.0"),
        r"nominal value 80 kg .* must lie within low=85 and high=118",
    ),
    (
        "unknown ranged parameter",
        BASE + "\n[ranges.payload.colour]\nlow = 1\nhigh = 2\n",
        r"unknown key 'ranges\.payload\.colour'",
    ),
    (
        "unknown distribution",
        edit('distribution = "triangular"', 'distribution = "bimodal"'),
        r"'ranges\.payload\.mass_kg\.distribution': expected one of uniform, triangular, normal",
    ),
    ("normal without std", edit("std = 0.08\n", ""), r"missing key 'ranges\.payload\.cg_height_m\.std'"),
    (
        "std on uniform",
        edit("low = 1.70\nhigh = 2.10", "low = 1.70\nhigh = 2.10\nstd = 0.1"),
        r"'ranges\.drive\.torque_constant_n_m_per_a\.std': only used with a normal distribution",
    ),
    (
        "non-physical range bound",
        edit("low = 1.70\nhigh = 2.10", "low = -1.0\nhigh = 2.10"),
        r"torque_constant_n_m_per_a: .* must be > 0",
    ),
    ("toml syntax", BASE + "\n[vehicle\n", r"not valid TOML"),
    (
        "title wrong type",
        edit('title = "Stand-up', 'title = 3\nx = "Stand-up'),
        r"unknown key 'x'|'title': expected text",
    ),
    # reproductions of reported hardening faults: each must be a one-line message naming the key
    (
        "complex poles not a list",
        edit("poles = [-1.0, -2.5, -6.0, -9.0]", "poles = [-1.0, -2.5]\ncomplex_poles = 5"),
        r"'gains\.placed\.complex_poles': expected a list",
    ),
    (
        "grid beyond budget",
        edit('plan = "monte_carlo"', 'plan = "grid"\ngrid_points = 1000000'),
        r"'study\.grid_points'.*beyond the budget",
    ),
    ("yaw rate beyond the drive", edit("yaw_rate_rad_s = 1.0", "yaw_rate_rad_s = 100.0"), r"yaw_rate_rad_s.*no-load"),
    ("absurd yaw rate", edit("yaw_rate_rad_s = 1.0", "yaw_rate_rad_s = 1e300"), r"yaw_rate_rad_s.*no-load"),
    ("wheel radius 1e300", edit("radius_m = 0.24", "radius_m = 1e300"), r"wheel\.radius_m.*plausible range"),
    (
        "tiny nominal payload with a mass range",
        edit("[vehicle.payload]          # the rider, standing\nmass_kg = 80.0", "[vehicle.payload]\nmass_kg = 1e-300"),
        r"payload mass.*at least 1/1000|nominal value",
    ),
]


@pytest.mark.parametrize(("label", "text", "pattern"), BAD, ids=[b[0] for b in BAD])
def test_bad_case_is_rejected_with_named_key(label, text, pattern):
    with pytest.raises(CaseError, match=pattern):
        parse_case(text)


@pytest.mark.parametrize(("label", "text", "pattern"), BAD[:6] + BAD[13:15], ids=[b[0] for b in BAD[:6] + BAD[13:15]])
def test_bad_case_exits_2_without_traceback(tmp_path, capsys, label, text, pattern):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    code = main(["model", str(path)])
    err = capsys.readouterr().err
    assert code == 2
    assert "Traceback" not in err
    assert re.search(pattern, err), err
    assert str(path) in err


def test_missing_file_exits_2(tmp_path, capsys):
    assert main(["model", str(tmp_path / "nope.toml")]) == 2
    assert "cannot read case file" in capsys.readouterr().err


def test_corner_triangle_inequality_checked():
    text = BASE + "\n[ranges.chassis.yaw_inertia_kg_m2]\nlow = 0.5\nhigh = 3.5\n"
    with pytest.raises(CaseError, match=r"at a corner of the box.*triangle inequality"):
        parse_case(text)


def test_bundled_cases_load_and_compose(transporter, cart):
    """Parallel-axis composition checked by hand for the transporter:
    l = (35*0.20 + 80*1.05)/115; I_pitch = 1.4 + 15 + 35 (0.2-l)^2 + 80 (1.05-l)^2."""
    p = plant_batch(transporter.vehicle)
    l = (35 * 0.20 + 80 * 1.05) / 115
    assert p.l[0] == pytest.approx(l, rel=1e-14)
    assert p.I2[0] == pytest.approx(1.4 + 15 + 35 * (0.2 - l) ** 2 + 80 * (1.05 - l) ** 2, rel=1e-14)
    assert p.I3[0] == pytest.approx(0.9 + 1.6, rel=1e-14)
    assert len(transporter.box.ranges) == 3 and len(cart.box.ranges) == 4
    # payload inertias scale with the payload mass (constant radii of gyration)
    q = plant_batch(transporter.vehicle, {"payload.mass_kg": np.array([40.0])})
    assert q.I3[0] == pytest.approx(0.9 + 0.8, rel=1e-14)


def test_renamed_requirement_key_names_the_new_key():
    text = edit("[requirements]", "[requirements]\nmin_survivable_speed_step_m_s = 1.0")
    with pytest.raises(CaseError, match="renamed 'min_speed_step_within_limits_m_s'"):
        parse_case(text)


def test_sample_count_beyond_budget_exits_2(capsys):
    assert main(["check", str(CASES / "delivery_cart.toml"), "--samples", "1000000000000", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "--samples" in err and "budget" in err and err.count("\n") == 1
