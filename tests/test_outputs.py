"""Output paths: no user file is ever deleted or replaced; crash-safe swaps; locks; names that cannot collide.

These are behaviour tests of our own rules (no outside reference applies); each reproduces a
reported way of losing a user's files and checks that it now exits 2 before any work.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from robust.cli import main
from robust.outputs import (
    FOLDER_MARKER,
    OutputError,
    file_stems,
    plan_folder,
    plan_gain_file,
    recover,
    staged_folder,
)

CASE = Path(__file__).resolve().parent / "data" / "small_cart.toml"


def _snapshot(folder: Path) -> dict:
    return {p.relative_to(folder): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_dossier_refuses_a_folder_it_did_not_write(tmp_path, capsys):
    mywork = tmp_path / "mywork"
    mywork.mkdir()
    (mywork / "thesis.tex").write_text("x")
    assert main(["dossier", str(CASE), "--out", str(mywork), "--quiet"]) == 2
    assert "not written by this tool" in capsys.readouterr().err
    assert (mywork / "thesis.tex").read_text() == "x"


def test_dossier_refuses_the_case_folder_a_file_and_dot(tmp_path, capsys):
    proj = tmp_path / "proj"
    proj.mkdir()
    case = proj / "case.toml"
    shutil.copy(CASE, case)
    notes = tmp_path / "notes.txt"
    notes.write_text("keep me")
    for out in (proj, notes, Path("."), Path(".."), case / "sub"):
        assert main(["dossier", str(case), "--out", str(out), "--quiet"]) == 2
        err = capsys.readouterr().err
        assert err.startswith("robust: error:") and "Traceback" not in err
    assert case.read_bytes() == CASE.read_bytes()
    assert notes.read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt", "proj"]


def test_plan_folder_refuses_the_input_inside(tmp_path):
    (tmp_path / "d").mkdir()
    (tmp_path / "d" / FOLDER_MARKER).write_text("")
    (tmp_path / "d" / "case.toml").write_text("")
    with pytest.raises(OutputError, match="holds this command's input"):
        plan_folder(tmp_path / "d", protect=[tmp_path / "d" / "case.toml"])


def test_unwritable_parent_is_refused_before_work(tmp_path):
    """A place that cannot be written is refused by a probe file, before any work (a file standing where a
    folder is needed is such a place for every user, root included)."""
    (tmp_path / "x.txt").write_text("")
    with pytest.raises(OutputError, match="is a file, not a folder"):
        plan_folder(tmp_path / "x.txt" / "dossier")
    ro = tmp_path / "ro"
    ro.mkdir()
    os.chmod(ro, 0o555)
    try:
        if os.access(ro, os.W_OK):
            pytest.skip("this user writes into read-only folders (root): the mode-bit case cannot be shown")
        with pytest.raises(OutputError, match="cannot write"):
            plan_folder(ro / "dossier")
    finally:
        os.chmod(ro, 0o755)


def test_gain_file_target_rules(tmp_path):
    (tmp_path / "gains").mkdir()
    with pytest.raises(OutputError, match="is a folder"):
        plan_gain_file(tmp_path / "gains")
    other = tmp_path / "other.toml"
    other.write_text('title = "not a gain file"\n')
    with pytest.raises(OutputError, match="not a gain file"):
        plan_gain_file(other)
    assert other.read_text() == 'title = "not a gain file"\n'
    t = plan_gain_file(tmp_path / "new" / "g.toml")
    assert t.path.name == "g.toml" and not t.replaces


def test_synthesize_refuses_bad_targets_and_names_before_work(tmp_path, capsys):
    (tmp_path / "gains").mkdir()
    for extra in (["--out", str(tmp_path / "gains")], ["--name", "../../../tmp/x"], ["--name", "a/b"]):
        assert main(["synthesize", str(CASE), "--quiet", *extra]) == 2
        err = capsys.readouterr().err
        assert "Traceback" not in err and err.count("\n") == 1
    assert list((tmp_path / "gains").iterdir()) == []


def test_file_stems_never_collide():
    names = ["placed/x", "placed.x", "placed_x", "Placed_X", "ok-name", "$\\frac{1}{2}$", ""]
    stems = file_stems(names)
    assert len(set(s.lower() for s in stems.values())) == len(set(names))
    assert stems["ok-name"] == "ok-name"
    for s in stems.values():
        assert s and all(c.isalnum() or c in "-_" for c in s)


def test_swap_replaces_only_a_marked_folder_and_cleans_up(tmp_path):
    target = tmp_path / "dossier"
    t = plan_folder(target)
    with staged_folder(t) as d:
        (d / "a.txt").write_text("one")
    assert (target / "a.txt").read_text() == "one" and (target / FOLDER_MARKER).is_file()
    with staged_folder(plan_folder(target)) as d:
        (d / "b.txt").write_text("two")
    assert sorted(p.name for p in target.iterdir()) == sorted([FOLDER_MARKER, "b.txt"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dossier"]  # no lock, no staging, no old copy
    mode = (target / "b.txt").stat().st_mode & 0o777
    umask = os.umask(0)
    os.umask(umask)
    assert mode == 0o666 & ~umask
    assert target.stat().st_mode & 0o777 == 0o777 & ~umask


def test_failure_inside_the_swap_keeps_the_old_folder(tmp_path):
    target = tmp_path / "dossier"
    with staged_folder(plan_folder(target)) as d:
        (d / "a.txt").write_text("one")
    before = _snapshot(target)
    with pytest.raises(KeyboardInterrupt), staged_folder(plan_folder(target)) as d:
        (d / "half.txt").write_text("half")
        raise KeyboardInterrupt
    assert _snapshot(target) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dossier"]


def test_recover_after_a_kill_between_renames(tmp_path):
    """A kill between the two renames of the fallback swap leaves only the old copy: the next run restores it."""
    target = tmp_path / "dossier"
    with staged_folder(plan_folder(target)) as d:
        (d / "a.txt").write_text("one")
    old = tmp_path / ".dossier.robust-old-abc"
    os.rename(target, old)
    stage = tmp_path / ".dossier.robust-new-xyz"
    stage.mkdir()
    (stage / FOLDER_MARKER).write_text("")
    done = recover(target)
    assert (target / "a.txt").read_text() == "one"
    assert len(done) == 2 and sorted(p.name for p in tmp_path.iterdir()) == ["dossier"]


def test_second_concurrent_run_fails_fast(tmp_path):
    target = tmp_path / "dossier"
    with staged_folder(plan_folder(target)) as d:
        (d / "a.txt").write_text("one")
        with pytest.raises(OutputError, match="another run is writing"), staged_folder(plan_folder(target)):
            pass
    assert (target / "a.txt").read_text() == "one"


def test_unwritable_standard_output_is_a_message(tmp_path):
    import subprocess
    import sys

    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this system")
    with open("/dev/full", "w") as full:
        r = subprocess.run(
            [sys.executable, "-m", "robust", "model", str(CASE), "--json"],
            stdout=full,
            stderr=subprocess.PIPE,
            text=True,
            check=False,
        )
    assert r.returncode == 2
    assert "Traceback" not in r.stderr and "standard output" in r.stderr


def test_names_and_titles_are_text_never_markup_or_math(tmp_path):
    """A gain name with mathtext and a title with HTML are shown as text: the dossier is written, the
    Markdown carries no raw tag, and the figure files get safe, distinct names."""
    text = CASE.read_text()
    text = text.replace('title = "Small test cart (test data)"', 'title = "Cart <script>alert(1)</script>"')
    text = text.replace("[gains.placed]", '[gains."$\\\\frac{1}{2}$ placed/x"]')
    text = text.replace("[synthesis]", "[unused_synthesis]").split("[unused_synthesis]")[0]
    case = tmp_path / "odd.toml"
    case.write_text(text)
    out = tmp_path / "d"
    assert main(["dossier", str(case), "--out", str(out), "--quiet"]) == 0
    md = (out / "dossier.md").read_text()
    # the appendix shows the case file verbatim inside a code fence (shown as text by every Markdown reader)
    import re

    fenced = re.findall(r"(`{3,})text\n(.*?)\n\1\n", md, flags=re.S)
    assert any("<script>" in body for _f, body in fenced)
    outside = re.sub(r"(`{3,})text\n.*?\n\1\n", "", md, flags=re.S)
    assert "<script>" not in outside and "&lt;script&gt;" in outside
    names = [p.name for p in (out / "figures").iterdir()]
    assert names and all(all(c.isalnum() or c in "-_." for c in n) for n in names)
