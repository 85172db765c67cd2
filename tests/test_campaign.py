"""Fall-probability campaigns (robust/campaign.py): Dask against in-process, resume, replay, the bound."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from robust.campaign import (
    CampaignError,
    make_spec,
    read_store,
    replay,
    run_campaign,
    upper_bound,
)
from robust.case import load_case, resolve_gain
from robust.cli import main

SMALL = Path(__file__).resolve().parent / "data" / "small_cart.toml"


@pytest.fixture(scope="module")
def small():
    case = load_case(SMALL)
    return case, resolve_gain(case, case.gains[0])


def _same(a: dict, b: dict) -> bool:
    return set(a) == set(b) and all(a[k].dtype == b[k].dtype and a[k].tobytes() == b[k].tobytes() for k in a)


def test_two_dask_workers_give_byte_identical_results_to_the_in_process_run(small, tmp_path):
    """A 2-worker LocalCluster (Dask distributed) and the in-process run store the same bytes for every
    column; a different chunk size gives the same samples too (block seeding)."""
    case, gain = small
    spec = make_spec(case, gain, "go", runs=96, chunk=32, target=1e-2)
    here = run_campaign(case, spec, tmp_path / "here", in_process=True, stop_early=False)
    there = run_campaign(case, spec, tmp_path / "dask", workers=2, stop_early=False)
    assert here.runs_done == there.runs_done == 96 and here.failures == there.failures
    assert _same(read_store(tmp_path / "here"), read_store(tmp_path / "dask"))
    other = make_spec(case, gain, "go", runs=96, chunk=40, target=1e-2)
    run_campaign(case, other, tmp_path / "chunk40", in_process=True, stop_early=False)
    a, b = read_store(tmp_path / "here"), read_store(tmp_path / "chunk40")
    assert _same(a, b)
    assert np.array_equal(a["sample"], np.arange(96))


def test_an_interrupted_campaign_resumes_to_the_same_result(small, tmp_path):
    """Stopped after 2 of 4 chunks (as if killed), then resumed: the finished chunks are not recomputed and
    the store equals an uninterrupted run's; a store of another campaign is refused; a held lock is refused."""
    case, gain = small
    spec = make_spec(case, gain, "go", runs=80, chunk=20, target=1e-2)
    first = run_campaign(case, spec, tmp_path / "s", in_process=True, stop_early=False, max_chunks=2)
    assert first.chunks_done == 2 and first.runs_done == 40
    rest = run_campaign(case, spec, tmp_path / "s", in_process=True, stop_early=False)
    assert rest.chunks_computed_now == 2 and rest.chunks_done == 4 and rest.runs_done == 80
    whole = run_campaign(case, spec, tmp_path / "w", in_process=True, stop_early=False)
    assert _same(read_store(tmp_path / "s"), read_store(tmp_path / "w"))
    assert (rest.failures, rest.upper) == (whole.failures, whole.upper)
    other = make_spec(case, gain, "go", runs=81, chunk=20, target=1e-2)
    with pytest.raises(CampaignError, match="another campaign"):
        run_campaign(case, other, tmp_path / "s", in_process=True)
    (tmp_path / "s" / "LOCK").write_text("1")  # pid 1 is alive: another campaign holds the store
    with pytest.raises(CampaignError, match="writing to it"):
        run_campaign(case, spec, tmp_path / "s", in_process=True)
    (tmp_path / "s" / "LOCK").unlink()
    (tmp_path / "plain").mkdir()
    (tmp_path / "plain" / "notes.txt").write_text("mine")
    with pytest.raises(CampaignError, match="not a campaign store"):
        run_campaign(case, spec, tmp_path / "plain", in_process=True)
    assert (tmp_path / "plain" / "notes.txt").read_text() == "mine"


def test_a_failure_replays_exactly(tmp_path, capsys):
    """A drive too weak for the manoeuvre (current limit 1.5 A instead of the case's 15 A): most runs fall;
    every failure is kept with its parameter point, and a falling run and a surviving one each replay alone
    with exactly the stored numbers, to the bit."""
    weak = tmp_path / "weak.toml"
    weak.write_text(SMALL.read_text().replace("current_limit_a = 15.0", "current_limit_a = 1.5"))
    case = load_case(weak)
    gain = resolve_gain(case, case.gains[0])
    spec = make_spec(case, gain, "go", runs=64, chunk=32, failure="fall", target=1e-2)
    s = run_campaign(case, spec, tmp_path / "s", in_process=True, stop_early=False)
    data = read_store(tmp_path / "s")
    assert 0 < s.failures == int(data["fell"].sum()) and s.impossible and not s.demonstrated
    assert set(data) >= set(case.box.names)  # every run keeps its parameter point
    fell = data["sample"][data["fell"]]
    kept = data["sample"][~data["fell"]]
    for sample in [int(fell[0]), *(int(k) for k in kept[:1])]:
        r = replay(case, tmp_path / "s", sample)
        assert r.matches, (sample, r.stored, r.again)
        row = int(np.flatnonzero(data["sample"] == sample)[0])
        assert r.stored["peak_torque_n_m"] == data["peak_torque_n_m"][row]
        assert r.again["fell"] == float(data["fell"][row])
    args = ["campaign", str(weak), "--replay", str(int(fell[0])), "--store", str(tmp_path / "s")]
    assert main([*args, "--json", "--quiet", "--figure", str(tmp_path / "f.svg")]) == 0
    assert json.loads(capsys.readouterr().out)["matches"] is True
    assert (tmp_path / "f.svg").read_text().startswith("<svg")


def test_bound_and_early_stop(small, tmp_path):
    """The one-sided Clopper-Pearson upper bound with no failure is 1 - (1 - c)^(1/n) (closed form of the beta
    quantile; Clopper and Pearson 1934); the campaign stops at the first chunk where it is below the target."""
    for n in (10, 300, 30000):
        assert upper_bound(0, n, 0.95) == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-9)
    case, gain = small
    spec = make_spec(case, gain, "go", runs=2000, chunk=100, target=0.02)
    s = run_campaign(case, spec, tmp_path / "s", in_process=True)
    need = next(n for n in range(100, 2001, 100) if upper_bound(0, n, spec.confidence) < 0.02)
    if s.failures == 0:
        assert s.demonstrated and s.stopped_early and s.runs_done == need


def test_bad_campaign_requests_exit_2(tmp_path):
    base = ["campaign", str(SMALL), "--store", str(tmp_path / "s"), "--quiet", "--in-process"]
    assert main([*base, "--gain", "placed", "--manoeuvre", "nope", "--runs", "10"]) == 2
    assert main([*base, "--gain", "nope", "--manoeuvre", "go", "--runs", "10"]) == 2
    assert main([*base, "--gain", "placed", "--manoeuvre", "go", "--runs", "10", "--target", "2"]) == 2
    assert main([*base, "--gain", "placed", "--manoeuvre", "go", "--runs", "10", "--failure", "tip"]) == 2
    assert main([*base, "--replay", "3"]) == 2  # no store there yet
    assert not (tmp_path / "s").exists() or not any((tmp_path / "s" / "chunks").glob("*.parquet"))


def test_subset_simulation_agrees_with_plain_monte_carlo_near_one_percent(cart):
    """The delivery cart's pole-placed gain falls in a few percent of 'leave_the_dock' runs over the box: subset
    simulation (Au and Beck 2001; 4 seeds of about 950 runs each) agrees with plain Monte Carlo on 10,000 runs
    within three combined standard deviations (the estimator's own coefficient of variation and the binomial
    one of Monte Carlo)."""
    from robust.campaign import subset_simulation
    from robust.simulate import simulate
    from robust.uncertainty import monte_carlo

    K = resolve_gain(cart, cart.gains[0]).K
    man = cart.manoeuvres[0]
    pts = monte_carlo(cart.box, 10_000, 11)
    p_mc = float(simulate(cart.box.plant(pts), K, man, cart.controller).fell.mean())
    assert 0.005 < p_mc < 0.1  # the regime the check is about
    runs = [subset_simulation(cart, K, man.name, samples_per_level=500, seed=s) for s in range(4)]
    est = np.array([r.probability for r in runs])
    cov = float(np.mean([r.cov for r in runs]))
    sd = np.hypot(cov * est.mean() / 2.0, np.sqrt(p_mc * (1 - p_mc) / 10_000))
    assert abs(est.mean() - p_mc) <= 3 * sd, (est, p_mc, cov)
    assert all(r.evaluations < 1500 and len(r.levels) >= 2 for r in runs)  # fewer runs than Monte Carlo needs


def test_a_campaign_feeds_the_dossier(small, tmp_path):
    """The dossier's campaign record counts what the store holds and bounds it as the campaign did; a store
    made with another case file is refused (exit 2) before any work, and nothing is written."""
    from types import SimpleNamespace

    from robust.campaign import campaign_record
    from robust.report.dossier import campaign_blocks

    case, gain = small
    spec = make_spec(case, gain, "go", runs=60, chunk=30, target=0.2)
    s = run_campaign(case, spec, tmp_path / "s", in_process=True, stop_early=False)
    rec = campaign_record(case, tmp_path / "s")
    assert (rec["runs"], rec["failures"], rec["upper_bound"]) == (s.runs_done, s.failures, s.upper)
    assert rec["complete"] and rec["demonstrated"] == s.demonstrated
    blocks = campaign_blocks(SimpleNamespace(campaigns=(rec,)))
    assert any("Campaign 'placed' / 'go'" in str(getattr(b, "title", "")) for b in blocks)
    other = Path(__file__).resolve().parents[1] / "cases" / "delivery_cart.toml"
    out = tmp_path / "d"
    assert main(["dossier", str(other), "--campaign", str(tmp_path / "s"), "--out", str(out), "--quiet"]) == 2
    assert not out.exists()


def test_a_killed_campaign_resumes_to_the_same_result(small, tmp_path):
    """A campaign process killed (SIGKILL) after its first chunks leaves only whole chunk files and a stale
    lock; the next run takes the lock over, computes only the missing chunks and ends with the same store as
    an uninterrupted run."""
    import os
    import signal
    import subprocess
    import sys
    import time

    case, gain = small
    store = tmp_path / "killed"
    args = [sys.executable, "-m", "robust", "campaign", str(SMALL), "--gain", "placed", "--manoeuvre", "go"]
    runs, chunk = 4000, 20  # enough chunks that the kill lands mid-way however fast the kernel is
    chunks = runs // chunk
    args += ["--runs", str(runs), "--chunk", str(chunk), "--target", "1e-6", "--store", str(store), "--in-process"]
    args += ["--quiet"]
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.time() + 120
        while time.time() < deadline and len(list((store / "chunks").glob("chunk-*.parquet"))) < 2:
            time.sleep(0.05)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait()
    done_before = len(list((store / "chunks").glob("chunk-*.parquet")))
    assert 2 <= done_before < chunks and (store / "LOCK").exists()  # killed mid-way, its lock left behind
    spec = make_spec(case, gain, "go", runs=runs, chunk=chunk, target=1e-6)
    resumed = run_campaign(case, spec, store, in_process=True)
    assert resumed.chunks_computed_now == chunks - done_before and resumed.runs_done == runs
    run_campaign(case, spec, tmp_path / "whole", in_process=True)
    assert _same(read_store(store), read_store(tmp_path / "whole"))
    assert not list((store / "chunks").glob(".*.tmp")) and not (store / "LOCK").exists()
