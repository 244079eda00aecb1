"""Plans shared by the real-time pool tests (imported by name: a module of its own,
since every test folder's conftest is called ``conftest``).
"""

from __future__ import annotations

from pathlib import Path

DEMO = Path(__file__).resolve().parents[2] / "presets" / "instruments" / "lantern-street-bars.toml"
SAMPLE_RATE = 48000.0


def demo_voicer(motor_rate: float, *, tubes: bool = True, preset: Path = DEMO):
    """Return the demo preset's voice plan at 48 kHz in stereo, the motor at ``motor_rate``.

    Planned as the live player plans (no contact onset: the pool starts every mode in
    its free form), so offline references render what the pool renders.
    """
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    return Voicer(load_instrument(preset), sample_rate=SAMPLE_RATE, tubes=tubes,
                  motor_rate_rev_per_s=motor_rate, channels=2, attack=False)


def planned(voicers, scales):
    """Return a player of the given designs, two velocity layers (64 and 127), no level match."""
    from synth.live import LivePlayer

    return LivePlayer(voicers, n_layers=2, scales=scales, retire_dbfs=-300.0)
