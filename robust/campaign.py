"""Fall-probability campaigns: many nonlinear runs of one gain set through one manoeuvre, in chunks, on Dask.

A campaign draws ``runs`` Monte Carlo samples of the box (the block-seeded
plan of :func:`robust.uncertainty.monte_carlo`, so sample ``i`` is the same
whatever the chunk size or the number of workers), simulates each through
the manoeuvre on the full nonlinear model with the drive limits, and counts
failures (a fall, or with ``failure = "limit"`` also reaching the current
limit).  Chunks run as Dask tasks: a ``LocalCluster`` on this machine by
default, an existing scheduler when given; the in-process mode is the same
code without Dask (the reference of the tests).

Results go to an append-only store folder, one Parquet file per chunk
(pyarrow), written atomically by the client only: an interrupted campaign
resumes without recomputing finished chunks; a lock file keeps two
campaigns out of one store, and ``campaign.json`` refuses a store made for
another campaign.

The probability bound is the one-sided Clopper-Pearson upper bound
(Clopper and Pearson 1934) at the campaign's confidence.  Stopping as soon
as it crosses the target is optional stopping: the bound reported is the
fixed-sample bound at the stop, checked once per chunk, which is slightly
optimistic; run to the planned count for a strict fixed-sample statement.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from scipy import stats

from robust.case import Case

FAILURES = ("fall", "limit")
STORE_MARKER = "campaign.json"
LOCK = "LOCK"


class CampaignError(ValueError):
    """A campaign request or store that cannot be used; the message says why."""


@dataclass(frozen=True)
class CampaignSpec:
    """What a campaign computes (the store's identity)."""

    case_sha256: str
    gain: str
    K: tuple[tuple[float, ...], ...]
    manoeuvre: str
    runs: int
    chunk: int
    seed: int
    failure: str  # "fall" or "limit" (a fall or reaching the current limit)
    target: float  # probability to demonstrate
    confidence: float

    @property
    def chunks(self) -> int:
        return -(-self.runs // self.chunk)


@dataclass(frozen=True)
class CampaignSummary:
    """Where a campaign stands."""

    spec: CampaignSpec
    runs_done: int
    failures: int
    upper: float  # one-sided Clopper-Pearson upper bound of the failure probability
    demonstrated: bool  # upper < target
    impossible: bool  # the lower bound already exceeds the target
    stopped_early: bool
    chunks_done: int
    chunks_computed_now: int
    seconds: float
    runs_per_s: float
    store: str
    first_failures: tuple[int, ...]  # sample indexes of the first failures (replay them)


def upper_bound(failures: int, n: int, confidence: float) -> float:
    """One-sided Clopper-Pearson upper bound: ``Beta(confidence; f + 1, n - f)`` (1 when ``f = n``)."""
    if n == 0:
        return 1.0
    return 1.0 if failures >= n else float(stats.beta.ppf(confidence, failures + 1, n - failures))


def lower_bound(failures: int, n: int, confidence: float) -> float:
    """One-sided Clopper-Pearson lower bound: ``Beta(1 - confidence; f, n - f + 1)`` (0 when ``f = 0``)."""
    return 0.0 if failures == 0 else float(stats.beta.ppf(1.0 - confidence, failures, n - failures + 1))


def make_spec(
    case: Case,
    gain,
    manoeuvre: str,
    *,
    runs: int,
    chunk: int = 2000,
    seed: int | None = None,
    failure: str = "fall",
    target: float = 1e-3,
    confidence: float | None = None,
) -> CampaignSpec:
    """Validate a request; ``CampaignError`` names what is wrong."""
    if not case.box.ranges:
        raise CampaignError("campaign: the case has no [ranges]; with one vehicle there is nothing to sample")
    names = [m.name for m in case.manoeuvres]
    if manoeuvre not in names:
        raise CampaignError(f"--manoeuvre {manoeuvre!r}: expected one of the case's manoeuvres: {', '.join(names)}")
    if runs < 1 or runs > 10**9:
        raise CampaignError(f"--runs: expected 1 to 1e9, got {runs}")
    if chunk < 1 or chunk > 10**6:
        raise CampaignError(f"--chunk: expected 1 to 1e6 runs per chunk, got {chunk}")
    if failure not in FAILURES:
        raise CampaignError(f"--failure: expected one of {', '.join(FAILURES)}, got {failure!r}")
    if not 0.0 < target < 1.0:
        raise CampaignError(f"--target: expected a probability in (0, 1), got {target}")
    conf = case.study.confidence if confidence is None else confidence
    if not 0.0 < conf < 1.0:
        raise CampaignError(f"--confidence: expected a number in (0, 1), got {conf}")
    return CampaignSpec(
        case_sha256=case.sha256,
        gain=gain.name,
        K=tuple(tuple(float(x) for x in row) for row in np.asarray(gain.K, dtype=float)),
        manoeuvre=manoeuvre,
        runs=int(runs),
        chunk=int(chunk),
        seed=int(case.study.seed if seed is None else seed),
        failure=failure,
        target=float(target),
        confidence=float(conf),
    )


def run_chunk(case: Case, spec: CampaignSpec, index: int) -> dict[str, np.ndarray]:
    """Simulate chunk ``index``: its samples' parameters and metrics as columns (runs on a worker)."""
    from robust.simulate import simulate
    from robust.uncertainty import monte_carlo

    start = index * spec.chunk
    stop = min(spec.runs, start + spec.chunk)
    pts = monte_carlo(case.box, spec.runs, spec.seed, start=start, stop=stop)
    man = next(m for m in case.manoeuvres if m.name == spec.manoeuvre)
    res = simulate(case.box.plant(pts), np.asarray(spec.K), man, case.controller)
    m = res.metrics
    cols: dict[str, np.ndarray] = {"sample": np.arange(start, stop, dtype=np.int64)}
    for j, name in enumerate(case.box.names):
        cols[name] = pts[:, j].astype(np.float64)
    cols["fell"] = np.asarray(res.fell, dtype=bool)
    cols["fall_time_s"] = np.asarray(res.fall_time_s, dtype=np.float64)
    cols["peak_torque_n_m"] = np.asarray(m["peak_torque_n_m"], dtype=np.float64).max(axis=1)
    cols["peak_current_a"] = np.asarray(m["peak_current_a"], dtype=np.float64).max(axis=1)
    cols["peak_pitch_rad"] = np.asarray(m["peak_pitch_rad"], dtype=np.float64)
    cols["reached_current_limit"] = np.asarray(m["reached_current_limit"], dtype=bool)
    cols["failed"] = cols["fell"] | (cols["reached_current_limit"] if spec.failure == "limit" else False)
    return cols


# ---------------------------------------------------------------------------
# the store


def _chunk_path(store: Path, index: int) -> Path:
    return store / "chunks" / f"chunk-{index:07d}.parquet"


def open_store(store: str | Path, spec: CampaignSpec) -> Path:
    """Create or reopen the store of ``spec``; refuse a folder that is something else or another campaign's."""
    from robust.outputs import atomic_write_text

    p = Path(store)
    if p.is_symlink() or (p.exists() and not p.is_dir()):
        raise CampaignError(f"--store '{p}': not a folder; name a new folder or this campaign's store")
    marker = p / STORE_MARKER
    text = json.dumps(asdict(spec), indent=2, sort_keys=True) + "\n"
    if p.exists() and any(p.iterdir()):
        if not marker.is_file():
            raise CampaignError(f"--store '{p}': exists and is not a campaign store; refusing to write into it")
        if json.loads(marker.read_text(encoding="utf-8")) != json.loads(text):
            raise CampaignError(
                f"--store '{p}': holds another campaign (different case, gain, manoeuvre, runs, chunk, seed, failure, "
                "target or confidence); name a new store"
            )
    else:
        p.mkdir(parents=True, exist_ok=True)
        atomic_write_text(marker, text)
    (p / "chunks").mkdir(exist_ok=True)
    if not os.access(p / "chunks", os.W_OK):
        raise CampaignError(f"--store '{p}': not writable")
    return p


class _Lock:
    """An exclusive lock file in the store (with the owner's pid); a lock whose process is gone is taken over."""

    def __init__(self, store: Path) -> None:
        self.path = store / LOCK

    def __enter__(self):
        for _ in range(2):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
            except FileExistsError:
                pid = self._owner()
                if pid is None or not _alive(pid):
                    self.path.unlink(missing_ok=True)  # stale: its campaign is gone
                    continue
                raise CampaignError(
                    f"store '{self.path.parent}': another campaign (pid {pid}) is writing to it"
                ) from None
            os.write(fd, str(os.getpid()).encode())
            os.close(fd)
            return self
        raise CampaignError(f"store '{self.path.parent}': could not take its lock")

    def _owner(self) -> int | None:
        try:
            return int(self.path.read_text().strip())
        except (OSError, ValueError):
            return None

    def __exit__(self, *exc) -> None:
        self.path.unlink(missing_ok=True)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _write_chunk(store: Path, index: int, cols: dict[str, np.ndarray]) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = _chunk_path(store, index)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        pq.write_table(pa.table(cols), tmp)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def read_store(store: str | Path) -> dict[str, np.ndarray]:
    """Every finished chunk of a store, concatenated in sample order, as numpy columns."""
    import pyarrow.parquet as pq

    files = sorted((Path(store) / "chunks").glob("chunk-*.parquet"))
    if not files:
        return {}
    tables = [pq.read_table(f) for f in files]
    out = {name: np.concatenate([t.column(name).to_numpy() for t in tables]) for name in tables[0].column_names}
    order = np.argsort(out["sample"], kind="stable")
    return {k: v[order] for k, v in out.items()}


def _done(store: Path, spec: CampaignSpec) -> list[int]:
    done = []
    for f in (store / "chunks").glob("chunk-*.parquet"):
        try:
            i = int(f.stem.split("-")[1])
        except (IndexError, ValueError):
            continue
        if 0 <= i < spec.chunks:
            done.append(i)
    return sorted(done)


# ---------------------------------------------------------------------------
# running


def run_campaign(
    case: Case,
    spec: CampaignSpec,
    store: str | Path,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    in_process: bool = False,
    stop_early: bool = True,
    max_chunks: int | None = None,
    progress: Callable[[str], None] | None = None,
) -> CampaignSummary:
    """Run (or resume) a campaign; ``max_chunks`` stops after that many new chunks (an interruption on purpose).

    ``in_process`` runs the chunks here, one after another (no Dask); otherwise on ``scheduler`` (an address
    such as ``tcp://host:8786``) or on a ``LocalCluster`` of ``workers`` processes (default: one per core).
    """
    say = progress or (lambda _m: None)
    if case.sha256 != spec.case_sha256:
        raise CampaignError("campaign: the case file is not the one this campaign was planned with")
    path = open_store(store, spec)
    t0 = time.perf_counter()
    with _Lock(path):
        for stale in (path / "chunks").glob(".chunk-*.tmp"):  # a killed run's half-written chunk: we hold the lock
            stale.unlink(missing_ok=True)
        done = set(_done(path, spec))
        failures = 0
        runs_done = 0
        first: list[int] = []
        if done:
            data = read_store(path)
            runs_done = int(data["sample"].size)
            failures = int(data["failed"].sum())
            first = [int(i) for i in data["sample"][data["failed"]][:20]]
            say(f"resuming: {len(done)} of {spec.chunks} chunks already in the store ({runs_done} runs)")
        runs_before = runs_done
        pending = [i for i in range(spec.chunks) if i not in done]
        if max_chunks is not None:
            pending = pending[:max_chunks]
        computed = 0
        stopped = False

        def account(i: int, cols: dict[str, np.ndarray]) -> bool:
            nonlocal failures, runs_done, computed
            _write_chunk(path, i, cols)
            computed += 1
            runs_done += int(cols["sample"].size)
            f = cols["failed"]
            failures += int(f.sum())
            first.extend(int(s) for s in cols["sample"][f][: max(0, 20 - len(first))])
            up = upper_bound(failures, runs_done, spec.confidence)
            rate = (runs_done - runs_before) / max(time.perf_counter() - t0, 1e-9)  # this run's rate, not the store's
            left = spec.runs - runs_done
            say(
                f"chunk {len(done) + computed}/{spec.chunks}: {runs_done} runs, {failures} failures, "
                f"upper bound {up:.3g} (target {spec.target:g}), {rate:.0f} runs/s, ETA {left / max(rate, 1e-9):.0f} s"
            )
            if not stop_early:
                return False
            return up < spec.target or lower_bound(failures, runs_done, spec.confidence) > spec.target

        if pending and not _finished(failures, runs_done, spec, stop_early):
            if in_process:
                for i in pending:
                    if account(i, run_chunk(case, spec, i)):
                        stopped = True
                        break
            else:
                stopped = _run_on_dask(case, spec, pending, account, scheduler, workers, say)
    seconds = time.perf_counter() - t0
    up = upper_bound(failures, runs_done, spec.confidence)
    return CampaignSummary(
        spec=spec,
        runs_done=runs_done,
        failures=failures,
        upper=up,
        demonstrated=bool(runs_done > 0 and up < spec.target),
        impossible=bool(lower_bound(failures, runs_done, spec.confidence) > spec.target),
        stopped_early=stopped,
        chunks_done=len(_done(path, spec)),
        chunks_computed_now=computed,
        seconds=seconds,
        runs_per_s=(runs_done - runs_before) / seconds if computed else 0.0,
        store=str(path),
        first_failures=tuple(sorted(first)[:20]),
    )


def _finished(failures: int, runs: int, spec: CampaignSpec, stop_early: bool) -> bool:
    if not stop_early or runs == 0:
        return False
    return upper_bound(failures, runs, spec.confidence) < spec.target or (
        lower_bound(failures, runs, spec.confidence) > spec.target
    )


def _run_on_dask(case, spec, pending, account, scheduler, workers, say) -> bool:
    """The chunks as Dask tasks, at most two per worker in flight (so an early stop wastes little)."""
    from distributed import Client, LocalCluster, as_completed

    cluster = None
    if scheduler:
        client = Client(scheduler)
    else:
        n = workers or os.cpu_count() or 1
        # the compiled kernel is itself parallel across samples: share the cores out, so that n workers with
        # cores / n kernel threads each do not oversubscribe the machine
        threads = str(max(1, (os.cpu_count() or 1) // n))
        cluster = LocalCluster(
            n_workers=n,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            env={"NUMBA_NUM_THREADS": threads, "OMP_NUM_THREADS": threads},
        )
        client = Client(cluster)
    try:
        nworkers = max(1, len(client.scheduler_info().get("workers", {})))
        say(f"Dask: {nworkers} workers at {client.scheduler.address}")
        case_f = client.scatter(case, broadcast=True)
        queue = list(pending)
        window = 2 * nworkers
        running = as_completed()
        index_of = {}
        for _ in range(min(window, len(queue))):
            i = queue.pop(0)
            fut = client.submit(run_chunk, case_f, spec, i, pure=False)
            index_of[fut.key] = i
            running.add(fut)
        for fut in running:
            i = index_of.pop(fut.key)
            if account(i, fut.result()):
                return True  # the chunks still in flight are cancelled when the client closes
            if queue:
                j = queue.pop(0)
                nxt = client.submit(run_chunk, case_f, spec, j, pure=False)
                index_of[nxt.key] = j
                running.add(nxt)
        return False
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


@dataclass(frozen=True)
class Replay:
    """One stored run simulated again alone, with its trace; ``matches`` says whether it reproduced the store."""

    sample: int
    point: dict[str, float]
    stored: dict[str, float]
    again: dict[str, float]
    matches: bool
    trace: object  # robust.simulate.Trace


def replay(case: Case, store: str | Path, sample: int) -> Replay:
    """Simulate sample ``sample`` of a stored campaign alone (with a trace) and compare with the stored row."""
    from robust.simulate import simulate
    from robust.uncertainty import monte_carlo

    p = Path(store)
    marker = p / STORE_MARKER
    if not marker.is_file():
        raise CampaignError(f"store '{p}': no {STORE_MARKER}; not a campaign store")
    raw = json.loads(marker.read_text(encoding="utf-8"))
    raw["K"] = tuple(tuple(r) for r in raw["K"])
    spec = CampaignSpec(**raw)
    if case.sha256 != spec.case_sha256:
        raise CampaignError(f"store '{p}': made with another case file (SHA-256 {spec.case_sha256})")
    if not 0 <= sample < spec.runs:
        raise CampaignError(f"sample {sample}: expected 0 to {spec.runs - 1}")
    chunk = sample // spec.chunk
    path = _chunk_path(p, chunk)
    if not path.is_file():
        raise CampaignError(f"sample {sample}: its chunk {chunk} is not in the store yet")
    import pyarrow.parquet as pq

    table = pq.read_table(path)
    row = int(np.flatnonzero(table.column("sample").to_numpy() == sample)[0])
    names = ("fell", "fall_time_s", "peak_torque_n_m", "peak_current_a", "peak_pitch_rad", "reached_current_limit")
    stored = {n: float(table.column(n).to_numpy()[row]) for n in names}
    pt = monte_carlo(case.box, spec.runs, spec.seed, start=sample, stop=sample + 1)
    man = next(m for m in case.manoeuvres if m.name == spec.manoeuvre)
    res = simulate(case.box.plant(pt), np.asarray(spec.K), man, case.controller, trace=True)
    m = res.metrics
    again = {
        "fell": float(res.fell[0]),
        "fall_time_s": float(res.fall_time_s[0]),
        "peak_torque_n_m": float(np.max(m["peak_torque_n_m"][0])),
        "peak_current_a": float(np.max(m["peak_current_a"][0])),
        "peak_pitch_rad": float(m["peak_pitch_rad"][0]),
        "reached_current_limit": float(m["reached_current_limit"][0]),
    }
    same = all((stored[k] == again[k]) or (np.isnan(stored[k]) and np.isnan(again[k])) for k in names)
    return Replay(sample, dict(zip(case.box.names, map(float, pt[0]))), stored, again, bool(same), res.trace)


# ---------------------------------------------------------------------------
# rare events: subset simulation

SUBSET_METRICS = {
    "fall": "peak pitch / fall angle, and 1 for a run that fell (by any of the engine's fall tests); threshold 1",
    "peak_pitch_rad": "peak pitch [rad] (a fall stops the run at the fall angle)",
    "peak_current_a": "peak motor current [A]",
    "peak_torque_n_m": "peak wheel torque [N m]",
}


@dataclass(frozen=True)
class SubsetResult:
    """Subset simulation estimate of ``P(metric >= threshold)``."""

    metric: str
    threshold: float
    probability: float
    cov: float  # coefficient of variation of the estimate (chain correlation included)
    levels: tuple[dict, ...]  # per level: its threshold, conditional probability, its own c.o.v.
    evaluations: int
    samples_per_level: int
    p0: float
    seed: int


def _performance(case: Case, K: np.ndarray, manoeuvre, metric: str, u: np.ndarray) -> np.ndarray:
    """The metric of each standard-normal point ``u`` (mapped to the box through the normal CDF)."""
    from robust.simulate import simulate
    from robust.uncertainty import from_unit

    pts = from_unit(case.box, stats.norm.cdf(u))
    res = simulate(case.box.plant(pts), K, manoeuvre, case.controller)
    if metric == "fall":
        ratio = np.asarray(res.metrics["peak_pitch_rad"], dtype=float) / case.controller.fall_angle_rad
        return np.where(res.fell, 1.0, np.minimum(ratio, 1.0 - 1e-12))
    v = np.asarray(res.metrics[metric], dtype=float)
    return v.max(axis=1) if v.ndim == 2 else v


def _gamma(chains: np.ndarray, p: float) -> float:
    """Correlation factor of the indicator along the Markov chains, ``2 sum (1 - k/Ns) rho(k)`` (Au and Beck
    2001, eq. 27-29); ``chains`` is ``(Nc, Ns)`` of 0/1."""
    nc, ns = chains.shape
    if ns < 2 or p <= 0.0 or p >= 1.0:
        return 0.0
    r0 = p * (1.0 - p)
    g = 0.0
    for k in range(1, ns):
        rk = float(np.mean(chains[:, : ns - k] * chains[:, k:])) - p * p
        g += 2.0 * (1.0 - k / ns) * rk / r0
    return max(g, 0.0)


def subset_simulation(
    case: Case,
    K: np.ndarray,
    manoeuvre: str,
    *,
    metric: str = "fall",
    threshold: float | None = None,
    samples_per_level: int = 500,
    p0: float = 0.1,
    seed: int = 0,
    max_levels: int = 10,
    progress: Callable[[str], None] | None = None,
) -> SubsetResult:
    """``P(metric >= threshold)`` over the box by subset simulation (Au and Beck, Probabilistic Engineering
    Mechanics 16(4), 2001): plain Monte Carlo at level 0, then nested conditional levels at the
    ``1 - p0`` quantiles, sampled by component-wise (modified) Metropolis chains in standard normal space
    started from the samples above each level; the parameters map to the box through the normal CDF and the
    case's distributions.  The default performance ``fall`` is the peak pitch over the fall angle, 1 for a run
    that fell, with threshold 1: its probability is the fall probability of the campaign."""
    say = progress or (lambda _m: None)
    if metric not in SUBSET_METRICS:
        raise CampaignError(f"subset metric {metric!r}: expected one of {', '.join(SUBSET_METRICS)}")
    if not case.box.ranges:
        raise CampaignError("subset simulation: the case has no [ranges]")
    if not 0.0 < p0 <= 0.5 or samples_per_level < 20:
        raise CampaignError("subset simulation: expected 0 < p0 <= 0.5 and at least 20 samples per level")
    names = [m.name for m in case.manoeuvres]
    if manoeuvre not in names:
        raise CampaignError(f"--manoeuvre {manoeuvre!r}: expected one of the case's manoeuvres: {', '.join(names)}")
    man = next(m for m in case.manoeuvres if m.name == manoeuvre)
    if threshold is None:
        if metric != "fall":
            raise CampaignError(f"subset simulation of {metric}: give the threshold")
        threshold = 1.0
    K = np.asarray(K, dtype=float)
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    k = len(case.box.ranges)
    n = samples_per_level
    nc = max(1, int(round(p0 * n)))
    ns = n // nc
    u = rng.standard_normal((n, k))
    g = _performance(case, K, man, metric, u)
    evals = n
    levels: list[dict] = []
    prob = 1.0
    cov2 = 0.0
    g_chains = np.zeros((0, 0))  # the last level's chains (level 0 has none: independent samples)
    for level in range(max_levels):
        order = np.argsort(-g, kind="stable")
        b = float(g[order[nc - 1]])  # the (1 - p0) quantile: nc samples at or above it
        if b >= threshold or level == max_levels - 1:
            p = float(np.mean(g >= threshold))
            d2 = (1 - p) / (p * n) if p > 0 else np.inf
            if level > 0:
                d2 *= 1.0 + _gamma(indicator_chains(g_chains, threshold), p) if p > 0 else 1.0
            levels.append({"threshold": threshold, "probability": p, "cov": float(np.sqrt(d2))})
            prob *= p
            cov2 += d2
            say(f"subset level {level}: final, P = {p:.3g} of the level ({evals} runs so far)")
            break
        p = nc / n
        d2 = (1 - p) / (p * n) * (1.0 + (_gamma(indicator_chains(g_chains, b), p) if level > 0 else 0.0))
        levels.append({"threshold": b, "probability": p, "cov": float(np.sqrt(d2))})
        prob *= p
        cov2 += d2
        say(f"subset level {level}: threshold {b:.4g} ({evals} runs so far)")
        # Markov chains from the nc seeds above b, ns states each (the seed is the first state)
        cu, cg = u[order[:nc]].copy(), g[order[:nc]].copy()
        states_u, states_g = [cu.copy()], [cg.copy()]
        for _step in range(1, ns):
            xi = cu + rng.standard_normal(cu.shape)
            ratio = np.exp(-0.5 * (xi**2 - cu**2))
            take = rng.random(cu.shape) < np.minimum(1.0, ratio)
            cand = np.where(take, xi, cu)
            moved = take.any(axis=1)
            gc = cg.copy()
            if moved.any():
                gc[moved] = _performance(case, K, man, metric, cand[moved])
                evals += int(moved.sum())
            ok = moved & (gc >= b)
            cu = np.where(ok[:, None], cand, cu)
            cg = np.where(ok, gc, cg)
            states_u.append(cu.copy())
            states_g.append(cg.copy())
        u = np.concatenate(states_u)  # (ns * nc, k), state-major
        g = np.concatenate(states_g)
        g_chains = np.stack(states_g, axis=1)  # (nc, ns)
        n = u.shape[0]
    return SubsetResult(
        metric=metric,
        threshold=float(threshold),
        probability=float(prob),
        cov=float(np.sqrt(cov2)),
        levels=tuple(levels),
        evaluations=int(evals),
        samples_per_level=samples_per_level,
        p0=p0,
        seed=seed,
    )


def indicator_chains(g_chains: np.ndarray, b: float) -> np.ndarray:
    """0/1 indicator of ``g >= b`` along each chain ``(Nc, Ns)``."""
    return (g_chains >= b).astype(float)


def campaign_record(case: Case, store: str | Path) -> dict:
    """What a stored campaign shows in a dossier: its plan, where it stands and its first failures."""
    p = Path(store)
    marker = p / STORE_MARKER
    if not marker.is_file():
        raise CampaignError(f"--campaign '{p}': no {STORE_MARKER}; not a campaign store")
    spec = json.loads(marker.read_text(encoding="utf-8"))
    if spec.get("case_sha256") != case.sha256:
        raise CampaignError(f"--campaign '{p}': made with another case file (SHA-256 {spec.get('case_sha256')})")
    data = read_store(p)
    n = int(data["sample"].size) if data else 0
    f = int(data["failed"].sum()) if data else 0
    conf = float(spec["confidence"])
    fails = []
    if f:
        idx = np.flatnonzero(data["failed"])[:10]
        for i in idx:
            fails.append({"sample": int(data["sample"][i]), **{k: float(data[k][i]) for k in case.box.names}})
    up = upper_bound(f, n, conf)
    return {
        "store": str(p),
        "gain": spec["gain"],
        "manoeuvre": spec["manoeuvre"],
        "failure": spec["failure"],
        "planned_runs": int(spec["runs"]),
        "runs": n,
        "failures": f,
        "target": float(spec["target"]),
        "confidence": conf,
        "upper_bound": up,
        "demonstrated": bool(n > 0 and up < float(spec["target"])),
        "complete": n >= int(spec["runs"]),
        "first_failures": fails,
        "estimator": "plain Monte Carlo, one-sided Clopper-Pearson upper bound",
    }
