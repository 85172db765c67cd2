"""Parameter ranges of the vehicle and the sampling plans over them.

A :class:`Box` is the nominal vehicle plus a range on some of its named
parameters (see :data:`robust.vehicle.PARAMETERS`).  Every plan returns the
sampled parameter values as a mapping ``name -> array (n,)`` with a leading
batch axis, which :func:`robust.vehicle.plant_batch` turns into a batch of
vehicles.
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.stats import qmc

from robust.vehicle import Plant, Vehicle, get_parameter, plant_batch

DISTRIBUTIONS = ("uniform", "triangular", "normal")


@dataclass(frozen=True)
class Range:
    """Range of one named vehicle parameter.

    Attributes
    ----------
    name
        Parameter name, e.g. ``"payload.mass_kg"``.
    low, high
        Bounds, in the parameter's unit; ``low <= nominal <= high``.
    distribution
        For Monte Carlo plans: ``"uniform"``, ``"triangular"`` (mode at
        ``mode``, default the nominal) or ``"normal"`` (mean ``mode``, default
        the nominal; standard deviation ``std``; truncated to the bounds).
    mode, std
        Shape values of the distribution (``None`` where unused).
    """

    name: str
    low: float
    high: float
    distribution: str = "uniform"
    mode: float | None = None
    std: float | None = None


@dataclass(frozen=True)
class Box:
    """The nominal vehicle and the ranges of its uncertain parameters."""

    vehicle: Vehicle
    ranges: tuple[Range, ...] = ()

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the ranged parameters, in case-file order."""
        return tuple(r.name for r in self.ranges)

    @property
    def low(self) -> np.ndarray:
        """Lower bounds, shape ``(k,)``."""
        return np.array([r.low for r in self.ranges], dtype=float)

    @property
    def high(self) -> np.ndarray:
        """Upper bounds, shape ``(k,)``."""
        return np.array([r.high for r in self.ranges], dtype=float)

    @property
    def nominal(self) -> np.ndarray:
        """Nominal values of the ranged parameters, shape ``(k,)``."""
        return np.array([get_parameter(self.vehicle, n) for n in self.names], dtype=float)

    def plant(self, points: np.ndarray) -> Plant:
        """Batch of vehicles at parameter points of shape ``(n, k)`` (columns as :attr:`names`)."""
        points = np.asarray(points, dtype=float)
        if points.ndim != 2 or points.shape[1] != len(self.ranges):
            raise ValueError(f"points must have shape (n, {len(self.ranges)}), got {points.shape}")
        if not self.ranges:
            return plant_batch(self.vehicle).take(np.zeros(points.shape[0], dtype=int))
        return plant_batch(self.vehicle, {n: points[:, j] for j, n in enumerate(self.names)})


def corners(box: Box) -> np.ndarray:
    """All ``2^k`` corners of the box, shape ``(2^k, k)``; ``(1, 0)`` with no ranges."""
    if not box.ranges:
        return np.zeros((1, 0))
    pts = itertools.product(*[(r.low, r.high) for r in box.ranges])
    return np.array(list(pts), dtype=float)


PLANS = ("corners", "grid", "monte_carlo", "sobol", "latin_hypercube")
BLOCK = 4096  # Monte Carlo samples drawn per independent random stream


def grid(box: Box, points_per_axis: int) -> np.ndarray:
    """Full-factorial grid with ``points_per_axis`` evenly spaced values per range, ``(m^k, k)``."""
    if points_per_axis < 2:
        raise ValueError(f"grid points per axis: expected >= 2, got {points_per_axis}")
    if not box.ranges:
        return np.zeros((1, 0))
    axes = [np.linspace(r.low, r.high, points_per_axis) for r in box.ranges]
    mesh = np.meshgrid(*axes, indexing="ij")
    return np.stack([m.reshape(-1) for m in mesh], axis=-1)


def from_unit(box: Box, u: np.ndarray) -> np.ndarray:
    """Map points of the unit cube ``(n, k)`` to parameter values by each range's inverse CDF.

    Uniform: ``low + u (high - low)``; triangular: scipy.stats.triang; normal:
    scipy.stats.truncnorm truncated to ``[low, high]``.
    """
    u = np.asarray(u, dtype=float)
    out = np.empty_like(u)
    for j, r in enumerate(box.ranges):
        width = r.high - r.low
        if r.distribution == "uniform":
            out[:, j] = r.low + u[:, j] * width
        elif r.distribution == "triangular":
            c = (r.mode - r.low) / width
            out[:, j] = stats.triang.ppf(u[:, j], c, loc=r.low, scale=width)
        else:
            a = (r.low - r.mode) / r.std
            b = (r.high - r.mode) / r.std
            out[:, j] = stats.truncnorm.ppf(u[:, j], a, b, loc=r.mode, scale=r.std)
    return np.clip(out, box.low, box.high)


def monte_carlo(box: Box, n: int, seed: int, *, start: int = 0, stop: int | None = None) -> np.ndarray:
    """Samples ``start:stop`` of a Monte Carlo plan of ``n`` samples, ``(stop - start, k)``.

    Sample ``i`` comes from random block ``i // BLOCK``, whose generator is
    spawned from ``numpy.random.SeedSequence(seed)``; so any chunking of
    ``0:n`` yields the same samples.
    """
    stop = n if stop is None else stop
    if not 0 <= start <= stop <= n:
        raise ValueError(f"sample slice {start}:{stop} outside 0:{n}")
    k = len(box.ranges)
    if stop == start:
        return np.zeros((0, k))
    first, last = start // BLOCK, (stop - 1) // BLOCK
    seqs = np.random.SeedSequence(seed).spawn(last + 1)[first:]
    blocks = [np.random.default_rng(s).random((BLOCK, k)) for s in seqs]
    u = np.concatenate(blocks)[start - first * BLOCK : stop - first * BLOCK]
    return from_unit(box, u)


def quasi_random(box: Box, n: int, seed: int, *, kind: str = "sobol") -> np.ndarray:
    """Low-discrepancy plan (scipy.stats.qmc): scrambled Sobol or Latin hypercube, ``(n, k)``."""
    k = len(box.ranges)
    if k == 0:
        return np.zeros((n, 0))
    if kind == "sobol":
        # the first n points of the scrambled sequence; a power of two keeps its balance properties
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)
            u = qmc.Sobol(d=k, scramble=True, seed=seed).random(n)
    elif kind == "latin_hypercube":
        u = qmc.LatinHypercube(d=k, seed=seed).random(n)
    else:
        raise ValueError(f"quasi-random plan: expected 'sobol' or 'latin_hypercube', got {kind!r}")
    return from_unit(box, u)


def plan_points(box: Box, plan: str, *, samples: int = 0, seed: int = 0, grid_points: int = 3) -> np.ndarray:
    """Parameter points of a named plan (see :data:`PLANS`), shape ``(n, k)``.

    With no ranges every plan is the nominal vehicle alone, ``(1, 0)``.
    """
    if not box.ranges:
        return np.zeros((1, 0))
    if plan == "corners":
        return corners(box)
    if plan == "grid":
        return grid(box, grid_points)
    if samples < 1:
        raise ValueError(f"plan {plan!r}: expected samples >= 1, got {samples}")
    if plan == "monte_carlo":
        return monte_carlo(box, samples, seed)
    if plan in ("sobol", "latin_hypercube"):
        return quasi_random(box, samples, seed, kind=plan)
    raise ValueError(f"unknown plan {plan!r}; expected one of {', '.join(PLANS)}")
