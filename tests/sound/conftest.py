"""A small preset for the sound tests: three bars solved by the tuner."""

from __future__ import annotations

import pytest

from synth.config import presets_dir
from synth.settings.instrument import load_instrument


@pytest.fixture(scope="session")
def demo():
    """The demo instrument (its bars are solved and committed in the preset)."""
    return load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
