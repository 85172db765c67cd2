"""Parameter ranges of the vehicle and the sampling plans over them.

A :class:`Box` is the nominal vehicle plus a range on some of its named
parameters (see :data:`robust.vehicle.PARAMETERS`).  Every plan returns the
sampled parameter values as a mapping ``name -> array (n,)`` with a leading
batch axis, which :func:`robust.vehicle.plant_batch` turns into a batch of
vehicles.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

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
