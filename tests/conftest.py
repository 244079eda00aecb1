"""Shared fixtures: seeded random numbers and one BLAS thread for the whole test run."""

from __future__ import annotations

import numpy as np
import pytest
from threadpoolctl import threadpool_limits


@pytest.fixture(scope="session", autouse=True)
def _one_blas_thread():
    """Hold BLAS/OpenMP pools to one thread while the tests run.

    The eigenproblems here are small (a few hundred DOF): with two threads on a shared
    machine the same call has taken seconds instead of milliseconds (design outline,
    performance facts).  One thread also makes rounding repeatable between runs.
    """
    with threadpool_limits(limits=1):
        yield


@pytest.fixture
def rng() -> np.random.Generator:
    """Return a generator with a fixed seed so noisy checks are repeatable."""
    return np.random.default_rng(20261202)
