"""Render invariances, guards, gain planning and voice validation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from synth.engine import (
    ModeBank,
    ModePair,
    Voice,
    constant_power_pan,
    measure_peak,
    plan_gain,
    render,
    render_blocks,
    seconds_to_sample,
)
from synth.errors import ConfigError, ModelError

FS = 48000.0


def _gain_curve(first, n):
    t = np.arange(first, first + n) / FS
    return 0.5 + 0.4 * np.cos(2 * np.pi * 3.0 * t)


def _mu_curve(first, n):
    t = (np.arange(first, first + n) + 0.5) / FS
    return 6.0 * (1 + 0.5 * np.sin(2 * np.pi * 5.0 * t))


def mixed_voices(rng):
    """Return a bank with damping and a gain curve, a panned pair with curves, a plain bank.

    The pair has every curve (coupling, tube weight, tube decay) and is damped
    on its first member only.
    """
    bank = ModeBank(rng.uniform(100, 9000, 12), rng.uniform(0.5, 30, 12),
                    rng.uniform(-0.3, 0.3, 12), rng.uniform(-3, 3, 12))
    pair = ModePair((440.0, 442.0), (0.5, 26.0), (0.4, 0.0), coupling_rad_s=_mu_curve,
                       weight_2=lambda first, n: np.full(n, 2.0), damped=(True, False),
                       decay_2_curve=lambda first, n: 26.0 + _gain_curve(first, n))
    return [
        Voice(17, bank, channel_gains=constant_power_pan(-0.4), damping=[(3001, 20.0)],
              gain_curve=_gain_curve, label="A"),
        Voice(2500, ModeBank([660.0], [2.0], [0.3]), channel_gains=constant_power_pan(0.7),
              pairs=(pair,), damping=[(4000, 5.0), (5555, 0.0)], label="B"),
        Voice(4099, ModeBank([1234.5, 2469.0], [3.0, 9.0], [0.2, 0.1]), stop_sample=7000,
              label="C"),
    ]


EPS = float(np.finfo(np.float64).eps)
PAIR_WEIGHT_2 = 2.0  # weight_2 of the pair in mixed_voices


def _n_modes_and_amplitude_sum(voices) -> tuple[int, float]:
    """Count the modes of ``voices`` and bound the sum of their output magnitudes.

    A bank mode never exceeds its amplitude times the largest gain-curve value (0.9
    here, so 1 bounds it) and a channel gain (<= 1); a coupled pair exchanges energy
    between its members, so each member stays below the pair's total amplitude,
    seen through weight 1 and weight 2.
    """
    n_modes, total = 0, 0.0
    for v in voices:
        amps = np.abs(np.asarray(v.modes.amplitude, dtype=float))
        n_modes += len(amps)
        total += float(amps.sum())
        for pair in v.pairs:
            n_modes += 2
            total += float(np.sum(np.abs(pair.amplitude))) * (1.0 + PAIR_WEIGHT_2)
    return n_modes, total


def test_output_does_not_depend_on_block_size(rng):
    """Same samples for any block size (invariance test, style guide section 6).

    The design makes the arithmetic of every sample independent of the block edges
    (modes re-anchor on the voice's own clock), and the renders agree bit for bit on
    the machine this was written on. The kernels are compiled with ``fastmath``, so a
    block edge may send a sample through another copy of a loop that the compiler
    contracted (FMA) or reassociated differently. Rounding bound for that: each
    recursion step of a mode (one complex multiplication) rounds by about eps of the
    mode's magnitude, over at most n samples (pairs are never re-anchored; banks
    every 1024), and K modes add, so |difference| <= K n eps max|a_k|
    (Higham 2002, Accuracy and Stability of Numerical Algorithms, ch. 3-4, from
    memory; here 17 x 9000 x 2.2e-16 x 0.4 = 1.4e-11, 1.6e-11 of the peak). A block
    edge that drops or repeats a sample moves the output by about 1e-3 of the peak.
    """
    voices = mixed_voices(rng)
    n = 9000
    ref = render(voices, n, sample_rate=FS, block_size=n)
    n_modes = _n_modes_and_amplitude_sum(voices)[0]
    a_max = max([float(np.max(np.abs(v.modes.amplitude))) for v in voices]
                + [float(np.max(np.abs(p.amplitude))) for v in voices for p in v.pairs])
    bound = n_modes * n * EPS * a_max
    assert bound < 1e-10 * np.max(np.abs(ref))
    for block in (1, 3, 64, 1000, 1024, 4097):
        y = render(voices, n, sample_rate=FS, block_size=block)
        assert np.max(np.abs(y - ref)) <= bound, block


def test_chord_equals_sum_of_voices(rng):
    """A chord is the sum of its separate voices (invariance, style guide section 6).

    The chord adds every voice's modes into one buffer, the separate renders add
    each voice's modes on their own and the test then adds the voices: the same
    terms summed in a different order. Summation bound (Higham 2002, section 4.2,
    from memory): |difference| <= 2 (K - 1) u sum|x_k|, u = eps/2, with K the modes
    and sum|x_k| bounded by the amplitude sum (17 modes, 3.45: 1.3e-14; measured
    2.2e-16).  A voice dropped or added twice moves the output by about 0.1.
    """
    voices = mixed_voices(rng)
    n = 8000
    chord = render(voices, n, sample_rate=FS)
    parts = sum(render([v], n, sample_rate=FS, channels=2) for v in voices)
    n_modes, amp_sum = _n_modes_and_amplitude_sum(voices)
    bound = 2 * (n_modes - 1) * (EPS / 2) * amp_sum
    assert np.max(np.abs(chord - parts)) <= bound


def test_float32_output_is_the_rounded_float64_render(rng):
    """float32 output is the float64 render rounded once at the end."""
    voices = mixed_voices(rng)
    y64 = render(voices, 5000, sample_rate=FS)
    y32 = render(voices, 5000, sample_rate=FS, dtype=np.float32)
    assert y32.dtype == np.float32
    assert np.array_equal(y32, y64.astype(np.float32))


def test_constant_power_pan():
    """Sine-cosine pan law: left^2 + right^2 = 1, centre -3 dB (common practice, no source)."""
    for pan in (-1.0, -0.3, 0.0, 0.5, 1.0):
        left, right = constant_power_pan(pan)
        assert left ** 2 + right ** 2 == pytest.approx(1.0, abs=1e-15)
    assert constant_power_pan(0.0)[0] == pytest.approx(1 / math.sqrt(2), abs=1e-15)
    assert constant_power_pan(-1.0) == pytest.approx((1.0, 0.0), abs=1e-15)
    with pytest.raises(ModelError, match="pan"):
        constant_power_pan(1.5)


def test_mono_voice_in_stereo_render_goes_to_both_channels():
    """A mono voice in a stereo render feeds both channels equally."""
    v = Voice(0, ModeBank([300.0], [1.0], [0.5], [0.3]))
    y = render([v], 1000, sample_rate=FS, channels=2)
    assert np.array_equal(y[:, 0], y[:, 1])


def test_seconds_to_sample_rounds_to_nearest():
    """Event times go to the nearest sample, halves up."""
    assert seconds_to_sample(1.0, 48000) == 48000
    assert seconds_to_sample(0.1, 44100) == 4410
    assert seconds_to_sample(0.5 / 48000, 48000) == 1  # halves round up
    with pytest.raises(ModelError):
        seconds_to_sample(float("nan"), 48000)


def test_progress_reports_every_block():
    """The progress callback sees (samples done, total) after each block."""
    calls = []
    render([Voice(0, ModeBank([440.0], [1.0], [1.0]))], 10000, sample_rate=FS,
           block_size=4000, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(4000, 10000), (8000, 10000), (10000, 10000)]


# --------------------------------------------------------------------------- guards
def test_nan_from_a_curve_mutes_and_raises():
    """A NaN is caught before its block is handed out (physics.md section 14: mute, report)."""

    def bad_curve(first, n):
        values = np.ones(n)
        if first <= 5000 < first + n:
            values[5000 - first] = np.nan
        return values

    v = Voice(0, ModeBank([440.0], [1.0], [0.5]), gain_curve=bad_curve, label="F#5")
    got = []
    with pytest.raises(ModelError, match=r"voice F#5: gain curve is not finite at sample 5000"):
        for block in render_blocks([v], 20000, sample_rate=FS, block_size=1024):
            got.append(block)
    assert len(got) == 4  # blocks before the one holding sample 5000
    assert all(np.all(np.isfinite(b)) for b in got)


def test_runaway_output_is_muted_and_reported(monkeypatch):
    """Output above the voices' amplitude bound stops the render, bad block withheld."""
    from synth.engine import kernels

    def unstable(real):
        def kernel(out, o0, *args):
            real(out, o0, *args)
            out[o0:] *= 1e6  # what a numerically unstable integrator would do
        return kernel

    # one voice alone or voices rendered together: both kernels
    monkeypatch.setattr(kernels, "_bank_add", unstable(kernels._bank_add))
    monkeypatch.setattr(kernels, "_banks_add", unstable(kernels._banks_add))
    v = Voice(0, ModeBank([440.0], [1.0], [0.5]), label="C4")
    with pytest.raises(ModelError, match=r"ran away at samples 0\.\.1023 .*voice C4"):
        next(iter(render_blocks([v], 4096, sample_rate=FS, block_size=1024)))


def test_mode_at_nyquist_is_refused():
    """A mode at half the sample rate would alias: refused with the voice named."""
    v = Voice(0, ModeBank([24000.0], [1.0], [1.0]), label="C8")
    with pytest.raises(ModelError, match=r"voice C8: mode 0 at 24000 Hz .*half the sample rate"):
        render([v], 10, sample_rate=FS)


def test_bad_voices_are_refused():
    """Invalid voices and render settings raise one-line errors."""
    with pytest.raises(ModelError, match=r"decay_per_s\[1\] = -1: must be >= 0"):
        ModeBank([1.0, 2.0], [1.0, -1.0], [1.0, 1.0])
    with pytest.raises(ModelError, match="one value per mode"):
        ModeBank([1.0, 2.0], [1.0], [1.0, 1.0])
    with pytest.raises(ModelError, match="amplitude\\[0\\] = nan: must be finite"):
        ModeBank([1.0], [1.0], [np.nan])
    bank = ModeBank([440.0], [1.0], [1.0])
    with pytest.raises(ModelError, match="strictly increasing"):
        Voice(0, bank, damping=[(10, 1.0), (10, 2.0)])
    with pytest.raises(ModelError, match="must be >= start_sample"):
        Voice(100, bank, stop_sample=50)
    with pytest.raises(ModelError, match="whole number of samples"):
        Voice(1.5, bank)
    with pytest.raises(ModelError, match="has 2 channel gains, the render has 1"):
        render([Voice(0, bank, channel_gains=(0.5, 0.5))], 10, sample_rate=FS, channels=1)
    too_fast = ModePair((440.0, 440.0), (1.0, 1.0), (1.0, 0.0), coupling_rad_s=1000.0)
    with pytest.raises(ModelError, match="coupling 1000 rad/s exceeds"):
        render([Voice(0, ModeBank.empty(), pairs=(too_fast,))], 10, sample_rate=FS)
    with pytest.raises(ConfigError, match="block_size"):
        render([], 10, sample_rate=FS, block_size=0)


# --------------------------------------------------------------------------- gain and peak
def test_normalised_render_peaks_at_target(rng):
    """Two passes: the measured peak puts the second pass exactly at -1 dBFS."""
    voices = mixed_voices(rng)
    n = 9000
    plan = plan_gain(measure_peak(voices, n, sample_rate=FS), target_dbfs=-1.0)
    y = render(voices, n, sample_rate=FS, gain=plan.gain)
    assert plan.mode == "normalise"
    assert 20 * math.log10(np.max(np.abs(y))) == pytest.approx(-1.0, abs=1e-12)
    assert plan.peak_dbfs == pytest.approx(-1.0, abs=1e-12)


def test_fixed_gain_reports_and_limits_clipping():
    """A fixed gain that would clip is reported and, by default, lowered to the ceiling."""
    plan = plan_gain(0.5, gain_db=12.0)  # 0.5 x 3.98 = 2.0: would clip
    assert plan.would_clip and plan.limited
    assert plan.peak_dbfs == pytest.approx(-1.0, abs=1e-12)
    kept = plan_gain(0.5, gain_db=12.0, limit=False)
    assert kept.would_clip and not kept.limited
    assert kept.gain == pytest.approx(10 ** (12 / 20))
    safe = plan_gain(0.1, gain_db=6.0)
    assert not safe.would_clip and not safe.limited
    assert safe.gain_db == pytest.approx(6.0)
    silent = plan_gain(0.0)
    assert silent.gain == 1.0 and silent.peak_dbfs == -math.inf
    with pytest.raises(ConfigError, match="must be <= 0 dBFS"):
        plan_gain(0.5, target_dbfs=1.0)
