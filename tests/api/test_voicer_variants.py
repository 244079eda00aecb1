"""Frozen voice plans: variants derived with ``dataclasses.replace`` are plans of their own.

The independent path is a plan built from scratch with the variant's settings: a
variant must give the same fundamental (frequency, Q, T60) and the same strike
(amplitudes and decays of every mode) as that plan, and must differ from the
original plan where the setting changes the physics.

Sources
-------
- A tube under the bar takes energy from its fundamental, so the bar with its
  tube rings shorter than the bare bar (common practice, no source; physics.md
  section on the coupled bar-tube pair gives the model).
- A harder mallet puts more energy into the upper partials (common practice, no
  source).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from synth.reports.demo import demo_preset_path
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer

DEMO = demo_preset_path()
FS = 48000.0


@pytest.fixture(scope="module")
def demo():
    """Load the demo preset once."""
    return load_instrument(DEMO)


def _strike(v: Voicer, note: str):
    voice = v.strike_voice(note)
    pairs = [(p.frequency_hz, p.decay_per_s, p.amplitude) for p in voice.pairs]
    return (np.asarray(voice.modes.frequency_hz), np.asarray(voice.modes.decay_per_s),
            np.asarray(voice.modes.amplitude), (pairs, voice.channel_gains))


def _same(a, b) -> None:
    for x, y in zip(a[:3], b[:3], strict=True):
        np.testing.assert_array_equal(x, y)
    assert a[3] == b[3]


def test_a_plan_is_frozen(demo) -> None:
    """Refuse to change a setting of a plan in place."""
    v = Voicer(demo, sample_rate=FS, channels=1)
    with pytest.raises(dataclasses.FrozenInstanceError):
        v.tubes = False


@pytest.mark.parametrize("change", [
    {"tubes": False},
    {"motor_rate_rev_per_s": 3.0},
    {"mallet": "hard"},
    {"channels": 2},
])
def test_replace_variant_equals_a_plan_built_from_scratch(demo, change) -> None:
    """Plan a replaced variant exactly as a plan built with its settings."""
    base = Voicer(demo, sample_rate=FS, channels=1)
    # fill the original's caches first: a variant must not see them
    base_fund = base.fundamental("A4")
    base_strike = _strike(base, "A4")
    variant = dataclasses.replace(base, **change)
    scratch = Voicer(demo, sample_rate=FS, **{"channels": 1, **change})
    assert variant.fundamental("A4") == scratch.fundamental("A4")
    _same(_strike(variant, "A4"), _strike(scratch, "A4"))
    # and the original is untouched by the variant's work
    assert base.fundamental("A4") == base_fund
    _same(_strike(base, "A4"), base_strike)


def test_tube_variant_rings_as_the_bare_bar(demo) -> None:
    """Give the bare bar's T60 once the tubes are replaced away."""
    with_tube = Voicer(demo, sample_rate=FS, channels=1)
    t60_tube = with_tube.fundamental("A4")[2]
    bare = dataclasses.replace(with_tube, tubes=False)
    t60_bare = bare.fundamental("A4")[2]
    # the bare bar's T60 is its loss budget, the independent path
    assert t60_bare == Voicer(demo, sample_rate=FS, channels=1, tubes=False).model(
        "A4").fundamental.t60_s
    assert with_tube.model("A4").coupling is not None
    assert bare.model("A4").coupling is None
    # the tube shortens the ring markedly (about 30 s against 52 s for the demo A4)
    assert t60_tube < 0.8 * t60_bare


def test_motor_and_mallet_variants_differ_where_they_should(demo) -> None:
    """Change the decay with the motor and the spectrum with the mallet."""
    base = Voicer(demo, sample_rate=FS, channels=1)
    spinning = dataclasses.replace(base, motor_rate_rev_per_s=3.0)
    assert spinning.motor.rate_rev_per_s == 3.0
    assert base.motor.rate_rev_per_s == 0.0
    assert spinning.fundamental("A4")[2] != base.fundamental("A4")[2]
    soft = dataclasses.replace(base, mallet="very-soft")
    hard = dataclasses.replace(base, mallet="very-hard")
    a_soft, a_hard = _strike(soft, "A4")[2], _strike(hard, "A4")[2]
    # vertical mode 5 against mode 2 (bank indices 3 and 0; the fundamental is in the
    # tube pair): the hard mallet excites the upper partial far more
    assert a_hard[3] / a_hard[0] > 5.0 * a_soft[3] / a_soft[0]
