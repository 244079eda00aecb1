"""Shared plans for the real-time pool tests: the demo preset, planned once per run."""

from __future__ import annotations

import pytest
from realtime_common import demo_voicer, planned


@pytest.fixture(scope="session")
def motor_player():
    """Plan the demo preset with its motor at 3 rev/s (spin-up as in the preset)."""
    return planned([demo_voicer(3.0)], [1.0])


@pytest.fixture(scope="session")
def still_player():
    """Plan the demo preset with its motor stopped (the preset's default)."""
    return planned([demo_voicer(0.0)], [1.0])
