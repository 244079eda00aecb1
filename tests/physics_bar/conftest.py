"""Shared bars for the bar-model tests."""

from __future__ import annotations

import pytest

from synth.physics.materials import Material


@pytest.fixture(scope="session")
def al6061() -> Material:
    """6061-T6 with the values used by the design notes' check computations.

    E 68.9 GPa, rho 2700 kg/m3, nu 0.33 (ASM Handbook Vol. 2, typical values,
    from memory); thermal and loss values do not enter these tests.
    """
    return Material("al6061-check", 68.9e9, 2700.0, 0.33, 23.6e-6, 167.0, 896.0, -4e-4, 5e-5)

