"""Work run beside the caller in a forked process: same value as in the caller, errors raised again,
the kernel refused after a fork, the process stopped when the caller leaves early."""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from robust import beside as B

linux = pytest.mark.skipif(sys.platform != "linux", reason="work is forked on Linux only")


def _eigen_work(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.linalg.eigvals(rng.normal(size=(50, 4, 4)))


def _fails() -> None:
    raise ValueError("the work's own error")


def _pid() -> int:
    return os.getpid()


def _kernel_once():
    from robust.case import load_case, resolve_gain
    from robust.simulate import Manoeuvre, simulate

    case = load_case(Path(__file__).resolve().parents[1] / "cases" / "delivery_cart.toml")
    plant = case.box.plant(case.box.nominal[None, :])
    tilt = Manoeuvre("tilt", "tilted_start", 0.5, initial_pitch_rad=0.05)
    return simulate(plant, resolve_gain(case, case.gains[0]).K, tilt, case.controller).metrics


@linux
def test_forked_value_equals_the_callers_and_runs_elsewhere(monkeypatch):
    with B.Beside(_eigen_work, 3) as w:
        assert w.forked
        got = w.result()
    assert np.array_equal(got, _eigen_work(3))
    with B.Beside(_pid) as w:
        assert w.result() != os.getpid()
    monkeypatch.setenv("ROBUST_BESIDE", "0")  # the switch: all in the caller, same value
    with B.Beside(_eigen_work, 3) as w:
        assert not w.forked
        assert np.array_equal(w.result(), got)
    with B.Beside(_pid) as w:
        assert w.result() == os.getpid()


def test_an_error_of_the_work_is_raised_by_result():
    with B.Beside(_fails) as w, pytest.raises(ValueError, match="the work's own error"):
        w.result()


@linux
def test_a_forked_process_that_dies_without_a_result_is_an_error_not_a_wait():
    with B.Beside(os._exit, 7) as w, pytest.raises(RuntimeError, match="exit code 7"):
        w.result(timeout=60)
    with pytest.raises(RuntimeError, match="collected already"):
        w.result()


@linux
def test_close_stops_the_forked_process_at_once():
    t0 = time.perf_counter()
    w = B.Beside(time.sleep, 60)
    assert w.forked and B.busy() == 1  # the kernel leaves this process a core
    w.close()
    assert B.busy() == 0
    w.close()  # idempotent
    assert time.perf_counter() - t0 < 10


@linux
def test_the_kernel_refuses_to_run_in_a_process_forked_after_it_started():
    """The OpenMP runtime is not fork-safe (numba's threading-layer documentation): after the kernel ran
    here, a forked process must get a clear error rather than hang."""
    _kernel_once()
    with B.Beside(_kernel_once) as w, pytest.raises(RuntimeError, match="cannot run in a process forked"):
        w.result()


def test_assess_uses_a_given_linear_check_and_refuses_one_of_other_gains(cart):
    """A linear check run beforehand (the dossier runs it beside the tuning) gives the assessment the
    check would give; one of other gain matrices is refused."""
    import pickle
    from dataclasses import replace

    from robust.assess import assess, joined
    from robust.case import Study, resolve_gain
    from robust.check import run_check

    study = Study(plan="monte_carlo", samples=200, seed=1, search=False, simulation_samples=0)
    gains = [resolve_gain(cart, g) for g in cart.gains]
    chk = run_check(cart, gains, study=study)
    a = assess(cart, gains, study=study, time=False, check=chk)
    b = assess(cart, gains, study=study, time=False)
    assert [v.status for v in a.verdicts] == [v.status for v in b.verdicts]
    for ga, gb in zip(a.check.gains, b.check.gains):
        for sa, sb in zip(ga.summaries, gb.summaries):
            assert sa.worst.value == sb.worst.value or (np.isnan(sa.worst.value) and np.isnan(sb.worst.value))
    # checks run apart (the dossier checks the LMI gain and the given ones in two processes) join into
    # the check of all of them at once
    both = joined(run_check(cart, gains[:1], study=study), run_check(cart, gains[1:], study=study))
    assert [pickle.dumps(g) for g in both.gains] == [pickle.dumps(g) for g in chk.gains]
    assert replace(both, gains=()) == replace(chk, gains=())
    with pytest.raises(ValueError, match="different cases or studies"):
        joined(chk, run_check(cart, gains, study=replace(study, seed=2)))
    other = [replace(gains[0], K=1.1 * gains[0].K), *gains[1:]]
    with pytest.raises(ValueError, match="other gain matrices"):
        assess(cart, other, study=study, time=False, check=chk)
    with pytest.raises(ValueError, match="other gain sets"):
        assess(cart, gains[:1], study=study, time=False, check=chk)


def _cart_synthesis():
    from robust.case import load_case
    from robust.design import make_spec
    from robust.synthesis.lmi import synthesize
    from robust.synthesis.polytope import moment_box

    case = load_case(Path(__file__).resolve().parents[1] / "cases" / "delivery_cart.toml")
    r = synthesize(moment_box(case.box), make_spec(case)[0])
    return r.K, r.decay_rate


@linux
def test_an_lmi_solve_in_a_forked_process_after_one_here_finishes_with_the_same_gain():
    """The LMI solver's thread pool would deadlock a process forked after it started; with the solver on
    one thread the forked solve finishes and gives the gain solved here."""
    K, rate = _cart_synthesis()
    with B.Beside(_cart_synthesis) as w:
        K2, rate2 = w.result(timeout=120)
    assert np.array_equal(K, K2) and rate == rate2
