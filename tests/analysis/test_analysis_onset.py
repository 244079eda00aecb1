"""Onsets and strikes in synthetic recordings whose strike sample is known.

Source: the signals are built with the strike at a chosen sample (analysis_signals),
so the true onset is exact; the spectral-flux method follows Bello et al. 2005.
"""

from __future__ import annotations

import numpy as np
import pytest
from analysis_signals import damped_sum

from synth.analysis import detect_onsets, find_strike

FS = 48000.0


def _strike(lead_s, noise_std, rng, dur=1.5):
    # Sine phase (-pi/2 for cosine), so the strike starts from zero like a real one.
    return damped_sum(FS, dur, [392.0, 1568.0, 3920.0], [1.2, 0.4, 0.1], [0.4, 0.2, 0.1],
                      [-np.pi / 2] * 3, lead_s=lead_s, noise_std=noise_std, rng=rng)


def test_onset_is_sample_accurate_out_of_noise(rng) -> None:
    """Strike at sample 15057 (0.3137 s) after a noise lead-in 60 dB down: within 2 samples.

    A 6-sigma threshold on a strike that rises from zero at 392 Hz is crossed
    within a sample of the start; 2 samples allow for the noise.
    """
    n0 = 15057
    x = _strike(n0 / FS, 1e-3 * 0.4, rng)
    ons = detect_onsets(x, FS)
    assert len(ons.times_s) == 1
    assert abs(ons.times_s[0] * FS - n0) <= 2
    strike = find_strike(x, FS)
    assert strike.found and not strike.starts_loud
    assert strike.onset_s == pytest.approx(n0 / FS, abs=2 / FS)
    assert strike.onset_s <= strike.peak_s < strike.attack_end_s
    assert strike.attack_end_s - strike.peak_s == pytest.approx(0.01)


def test_strike_in_strong_noise_found_by_energy(rng) -> None:
    """At 20 dB SNR the few partials barely move the mean flux; the energy rise finds them."""
    x = _strike(0.1, 0.4 / np.sqrt(2) * 0.1, rng)
    strike = find_strike(x, FS)
    assert strike.found
    assert strike.onset_s == pytest.approx(0.1, abs=0.001)


def test_second_strike_is_reported(rng) -> None:
    """A softer second strike 1 s later: both found; the decay must stop before it."""
    x = _strike(0.2, 1e-4, rng, dur=2.5)
    x[int(1.2 * FS):] += 0.3 * _strike(0.0, 0.0, rng, dur=2.5)[: x.size - int(1.2 * FS)]
    ons = detect_onsets(x, FS)
    assert len(ons.times_s) == 2
    assert ons.times_s[0] == pytest.approx(0.2, abs=2 / FS)
    # On a ringing bar the refined time is where the new strike exceeds the ringing.
    assert ons.times_s[1] == pytest.approx(1.2, abs=0.005)
    strike = find_strike(x, FS)
    assert strike.next_onset_s == pytest.approx(1.2, abs=0.005)
    assert any("another onset" in w for w in strike.warnings)


def test_loudest_of_several_strikes_is_used(rng) -> None:
    """When a later strike is louder, it is the strike; the earlier one is reported."""
    x = _strike(0.2, 1e-4, rng, dur=2.5)
    x[int(1.2 * FS):] += 1.1 * _strike(0.0, 0.0, rng, dur=2.5)[: x.size - int(1.2 * FS)]
    strike = find_strike(x, FS)
    assert strike.onset_s == pytest.approx(1.2, abs=0.005)
    assert any("before the loudest" in w for w in strike.warnings)


def test_file_starting_mid_ring_is_said(rng) -> None:
    """Cut mid-ring (cosine phase at sample 0): strike taken at t = 0 with a warning."""
    x = damped_sum(FS, 1.5, [392.0], [1.0], [0.5], [0.0])
    strike = find_strike(x, FS)
    assert strike.found and strike.starts_loud and strike.onset_s == 0.0
    assert any("starts at full level" in w for w in strike.warnings)


def test_steady_noise_has_no_strike(rng) -> None:
    """Stationary noise: no strike; the result says so instead of inventing one."""
    strike = find_strike(rng.standard_normal(int(2 * FS)) * 0.05, FS)
    assert not strike.found
    assert any("no strike found" in w for w in strike.warnings)


# --- fade-outs at a recording's end (find_fade_out) ---------------------------------

def _two_partial_decay(fs, seconds, noise_db=None, seed=3):
    """Partials at 220 Hz (T60 40 s) and 2.2 kHz (T60 2 s); optional white noise."""
    t = np.arange(int(seconds * fs)) / fs
    x = (np.exp(-6.9078 * t / 40) * np.sin(2 * np.pi * 220 * t)
         + 0.5 * np.exp(-6.9078 * t / 2) * np.sin(2 * np.pi * 2200 * t))
    if noise_db is not None:
        x += 10 ** (noise_db / 20) * np.random.default_rng(seed).standard_normal(t.size)
    return x


@pytest.mark.parametrize("fade_s", [0.1, 0.5, 1.0])
def test_fade_out_found_near_where_it_begins(fade_s):
    """A sin^2 fade over the last fade_s of a 6 s free decay is found within a quarter of
    its length of where it starts (the estimate assumes the -6 dB point at mid-fade).
    """
    from synth.analysis.onset import find_fade_out

    fs = 16000.0
    x = _two_partial_decay(fs, 6.0)
    n = int(fade_s * fs)
    x[-n:] *= np.cos(0.5 * np.pi * np.arange(1, n + 1) / n) ** 2
    start = find_fade_out(x, fs, 0.01)
    assert start is not None
    assert abs(start - (6.0 - fade_s)) <= 0.25 * fade_s + 0.02


@pytest.mark.parametrize("noise_db", [None, -60.0, -30.0])
def test_free_decay_or_noise_floor_is_no_fade(noise_db):
    """A free decay ends above its early straight line (the fast partial dies first) and a
    noise floor lifts it further: neither counts as a fade.
    """
    from synth.analysis.onset import find_fade_out

    fs = 16000.0
    assert find_fade_out(_two_partial_decay(fs, 6.0, noise_db), fs, 0.01) is None
