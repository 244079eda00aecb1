"""Bad input to the tube, coupling and motor models: one clear line, the right class.

Rules of the project (style guide section 4): ConfigError for a value the user can
fix, ModelError for a request the model cannot satisfy; the message names the key,
the value and what is allowed.
"""

from __future__ import annotations

import re

import pytest

from synth.errors import ConfigError, ModelError
from synth.physics.coupling import BarMode, CoupledPair, couple, coupling_rate_from_t60
from synth.physics.motor import MotorSpec, block_fraction
from synth.physics.tube import TubeSpec, speed_of_sound, tube_length, tube_length_for_bar

BAR = BarMode(440.0, 3000.0, 0.3, -1.2, 1.9e-3, 1e-6)


def _one_line(exc: pytest.ExceptionInfo) -> str:
    text = str(exc.value)
    assert "\n" not in text and text
    return text


@pytest.mark.parametrize("kwargs, message", [
    ({"inner_radius_m": -0.01, "length_m": 0.2}, "tube.inner_radius_m = -0.01: must be > 0 m"),
    ({"inner_radius_m": 0.02, "length_m": 0.0}, "tube.length_m = 0.0: must be > 0 m"),
    ({"inner_radius_m": 0.02, "length_m": 0.2, "gap_to_bar_m": -0.003},
     "tube.gap_to_bar_m = -0.003: must be > 0 m (or leave unset: no bar)"),
    ({"inner_radius_m": 0.02, "length_m": 0.2, "bar_cover_fraction": 1.5},
     "tube.bar_cover_fraction = 1.5: must be in (0, 1]"),
])
def test_bad_tube_spec(kwargs, message):
    """Negative or zero sizes and an impossible cover fraction are refused."""
    with pytest.raises(ConfigError, match=re.escape(message)) as exc:
        TubeSpec(**kwargs)
    _one_line(exc)


def test_tube_too_short_for_its_end_correction():
    """A wide tube for a high note: the end corrections alone exceed lambda/4."""
    with pytest.raises(ModelError, match=r"end corrections \(\d+\.\d+ mm\) exceed") as exc:
        tube_length(4000.0, TubeSpec(0.05, 1.0, gap_to_bar_m=0.01))
    _one_line(exc)


def test_bad_offsets_and_temperature():
    """Offsets given twice, temperatures below absolute zero, negative pitches."""
    spec = TubeSpec(0.02, 1.0)
    with pytest.raises(ConfigError, match="not both") as exc:
        tube_length_for_bar(440.0, spec, offset_cents=10.0, offset_percent=1.0)
    _one_line(exc)
    with pytest.raises(ConfigError, match=re.escape("temperature_c = -300: must be")) as exc:
        speed_of_sound(-300)
    _one_line(exc)
    with pytest.raises(ConfigError, match=re.escape("frequency_hz = -440.0: must be > 0 Hz")):
        tube_length(-440.0, spec)


@pytest.mark.parametrize("kwargs, message", [
    ({"rate_rev_per_s": -1.0}, "motor.rate_rev_per_s = -1.0: must be >= 0 rev/s (0 = stopped)"),
    ({"block_fraction": 1.0}, "motor.block_fraction = 1.0: must be in [0, 1)"),
    ({"resting": "ajar"}, "motor.resting = 'ajar': must be 'open', 'closed' or an angle"),
    ({"spin_up_law": "cubic"}, "motor.spin_up_law = 'cubic': must be one of exponential, linear"),
    ({"spin_up_s": -0.1}, "motor.spin_up_s = -0.1: must be >= 0 s"),
])
def test_bad_motor(kwargs, message):
    """A negative rate, a disc that closes the mouth, unknown words."""
    with pytest.raises(ConfigError, match=re.escape(message)) as exc:
        MotorSpec(**kwargs)
    _one_line(exc)


def test_disc_larger_than_mouth():
    """A disc must leave a rim gap."""
    with pytest.raises(ConfigError, match="smaller than the mouth radius") as exc:
        block_fraction(0.03, 0.025)
    _one_line(exc)


def test_bad_bar_and_pair():
    """Bar and pair parameters out of range."""
    with pytest.raises(ConfigError, match=re.escape("bar.modal_mass_kg = -0.3: must be > 0 kg")):
        BarMode(440.0, 3000.0, -0.3, -1.2, 1.9e-3)
    with pytest.raises(ConfigError, match=re.escape("bar.radiation_loss_factor = 0.01: must be "
                                                    "in [0, 1/q = 0.000333333]")):
        BarMode(440.0, 3000.0, 0.3, -1.2, 1.9e-3, 0.01)
    with pytest.raises(ConfigError, match=re.escape("coupling_rate_rad_s = -5.0: must be")):
        CoupledPair(440.0, 0.5, 440.0, 26.0, -5.0)


def test_coupling_needs_a_bar_over_the_mouth():
    """Without a gap to a bar there is nothing to couple."""
    with pytest.raises(ModelError, match="gap_to_bar_m is not set") as exc:
        couple(BAR, TubeSpec(0.025, 0.18))
    _one_line(exc)


def test_gain_needs_bare_bar_radiation():
    """A gain over a silent bare bar is unbounded."""
    pair = CoupledPair.from_q(440.0, 3000.0, 440.0, 52.45, 5.0)
    with pytest.raises(ModelError, match="radiation loss factor is 0") as exc:
        pair.peak_gain_db()
    _one_line(exc)


def test_calibration_rejects_impossible_decays():
    """A longer T60 with tube, or one shorter than any coupling gives."""
    with pytest.raises(ModelError, match="must be shorter than the T60 without tube") as exc:
        coupling_rate_from_t60(bar_frequency_hz=440.0, bar_t60_bare_s=10.0,
                               bar_t60_with_tube_s=12.0, tube_frequency_hz=440.0, tube_q=50.0)
    _one_line(exc)
    with pytest.raises(ModelError, match="no coupling shortens") as exc:
        coupling_rate_from_t60(bar_frequency_hz=440.0, bar_t60_bare_s=10.0,
                               bar_t60_with_tube_s=0.1, tube_frequency_hz=440.0, tube_q=50.0)
    _one_line(exc)
