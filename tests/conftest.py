"""Shared fixtures: seeded random numbers and a scratch folder for outputs."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng() -> np.random.Generator:
    """A generator with a fixed seed so noisy checks are repeatable."""
    return np.random.default_rng(20261202)
