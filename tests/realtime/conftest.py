"""Shared plans for the real-time pool tests: the demo preset, planned once per run."""

from __future__ import annotations

from pathlib import Path

import pytest

DEMO = Path(__file__).resolve().parents[2] / "presets" / "instruments" / "lantern-street-bars.toml"
SAMPLE_RATE = 48000.0


def demo_voicer(motor_rate: float, *, tubes: bool = True, preset: Path = DEMO):
    """Return the demo preset's voice plan at 48 kHz in stereo, the motor at ``motor_rate``."""
    from synth.physics.instrument import load_instrument
    from synth.voicing import Voicer

    return Voicer(load_instrument(preset), sample_rate=SAMPLE_RATE, tubes=tubes,
                  motor_rate_rev_per_s=motor_rate, channels=2)


def planned(voicers, scales):
    """Return a player of the given designs, two velocity layers (64 and 127), no level match."""
    from synth.live import LivePlayer

    return LivePlayer(voicers, n_layers=2, scales=scales, retire_dbfs=-300.0)


@pytest.fixture(scope="session")
def motor_player():
    """Plan the demo preset with its motor at 3 rev/s (spin-up as in the preset)."""
    return planned([demo_voicer(3.0)], [1.0])


@pytest.fixture(scope="session")
def still_player():
    """Plan the demo preset with its motor stopped (the preset's default)."""
    return planned([demo_voicer(0.0)], [1.0])
