"""Shared fixtures: the bundled cases and a random test vehicle."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
CASES = ROOT / "cases"
sys.path.insert(0, str(Path(__file__).resolve().parent))


@pytest.fixture(scope="session")
def transporter():
    from robust.case import load_case

    return load_case(CASES / "stand_up_transporter.toml")


@pytest.fixture(scope="session")
def cart():
    from robust.case import load_case

    return load_case(CASES / "delivery_cart.toml")


def random_plant(rng: np.random.Generator, n: int, *, friction: bool = True):
    """A batch of random but physical vehicles (test data, not a design)."""
    from robust.vehicle import Plant

    def u(lo, hi):
        return rng.uniform(lo, hi, n)

    I1 = u(2, 30)
    I2 = u(2, 30)
    return Plant(
        r=u(0.1, 0.3),
        m_w=u(1, 6),
        J_w=u(0.01, 0.2),
        K_w=u(0.01, 0.1),
        d=u(0.2, 0.4),
        c_b=u(0.0, 0.2) if friction else np.zeros(n),
        M=u(20, 150),
        l=u(0.2, 1.2),
        I1=I1,
        I2=I2,
        I3=u(0.1, 1.0) * np.minimum(I1, I2),
        g=np.full(n, 9.81),
        kt=u(0.5, 2.5),
        kt_nominal=u(0.5, 2.5),
        ke=u(0.5, 2.5),
        R=u(0.1, 1.0),
        V=u(24, 72),
        imax=u(10, 40),
    )
