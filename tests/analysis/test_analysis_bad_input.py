"""Recordings that can mislead: each gives a clear warning or an AudioError.

Source: the brief's rule for this package (never a wrong number without a
warning); the thresholds are the documented constants of synth.analysis.checks
[common practice, no source].
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from analysis_signals import damped_sum

from synth.analysis import (
    check_signal,
    detect_onsets,
    find_partials,
    find_strike,
    fit_decay,
    schroeder_decay,
)
from synth.errors import AudioError

FS = 48000.0


def _strike(gain=1.0, lead_s=0.05, dur=1.0, fs=FS):
    return gain * damped_sum(fs, dur, [440.0, 1760.0], [1.0, 0.3], [0.5, 0.2], [-np.pi / 2] * 2,
                             lead_s=lead_s)


@pytest.mark.parametrize(
    "call",
    [
        lambda x: find_partials(x, FS),
        lambda x: fit_decay(x, FS, 440.0),
        lambda x: schroeder_decay(x, FS),
        lambda x: find_strike(x, FS),
        lambda x: detect_onsets(x, FS),
    ],
    ids=["partials", "decay", "schroeder", "strike", "onsets"],
)
def test_silence_raises(call) -> None:
    """Digital silence: every analysis refuses with the same one-line reason."""
    with pytest.raises(AudioError, match=re.escape("signal is silent (peak -inf dBFS)")):
        call(np.zeros(int(FS)))


def test_silence_is_reported_by_the_check() -> None:
    """check_signal reports silence as data rather than raising."""
    rep = check_signal(np.zeros(1000), FS)
    assert rep.silent and rep.peak_dbfs == -math.inf
    assert any("silent" in w for w in rep.warnings)


def test_clipping_is_warned() -> None:
    """A strike driven 6 dB into full scale: runs of samples at +-1 are counted and said."""
    x = np.clip(_strike(gain=2.0), -1.0, 1.0)
    rep = check_signal(x, FS)
    assert rep.clipped_runs > 10
    res = find_partials(x, FS)
    assert any(w.startswith("clipped:") for w in res.warnings)


def test_clipped_then_scaled_is_warned() -> None:
    """Clipped at 0.9 and scaled: flat tops at the signal's own peak are said."""
    x = 0.8 * np.clip(_strike(gain=2.0), -0.9, 0.9)
    rep = check_signal(x, FS)
    assert any(w.startswith("flat tops") for w in rep.warnings)


def test_clean_strike_has_no_clipping_warning() -> None:
    """A clean strike below full scale raises no warning at all."""
    rep = check_signal(_strike(), FS)
    assert rep.clipped_runs == 0 and rep.warnings == ()


def test_no_strike_in_noise(rng) -> None:
    """Stationary noise: no strike and no partials, both said; no partial invented."""
    res = find_partials(0.05 * rng.standard_normal(int(2 * FS)), FS)
    assert res.partials == ()
    assert any("no strike found" in w for w in res.warnings)
    assert any("no partials found" in w for w in res.warnings)


def test_too_short_raises() -> None:
    """Too little signal after the attack for the analysis or its band-pass."""
    with pytest.raises(AudioError, match=re.escape("partial analysis needs at least 0.05 s")):
        find_partials(_strike(dur=0.04, lead_s=0.0), FS)
    with pytest.raises(AudioError, match="too short for a"):
        fit_decay(_strike(dur=0.08), FS, 440.0, bandwidth_hz=10.0)


def test_nan_and_shape_errors() -> None:
    """NaN, channels-first arrays, a zero sample rate and empty input are refused."""
    x = _strike()
    x[100] = np.nan
    with pytest.raises(AudioError, match=re.escape("1 NaN or infinite samples")):
        find_partials(x, FS)
    with pytest.raises(AudioError, match=re.escape("(transpose it with .T)")):
        find_partials(np.zeros((2, 48000)), FS)
    with pytest.raises(AudioError, match=re.escape("sample_rate = 0: must be a finite number")):
        find_partials(_strike(), 0)
    with pytest.raises(AudioError, match="signal is empty"):
        check_signal([], FS)


def test_dc_offset_is_warned_and_removed() -> None:
    """A 0.05 DC offset: warned, removed, partials unchanged."""
    x = _strike() + 0.05
    res = find_partials(x, FS)
    assert any(w.startswith("DC offset +0.05") for w in res.warnings)
    assert min(abs(p.frequency_hz - 440.0) for p in res.partials) < 0.01


def test_band_above_the_sample_rate() -> None:
    """An fmax above 0.45 x rate is clamped with a warning; a band wholly above it raises."""
    x = _strike(fs=16000.0)
    res = find_partials(x, 16000.0, fmax_hz=15000.0)
    assert res.fmax_hz == pytest.approx(7200.0)
    assert any("carries only up to 7200 Hz" in w for w in res.warnings)
    with pytest.raises(AudioError, match=re.escape("lies above what a sample rate of 16000 Hz")):
        find_partials(x, 16000.0, fmin_hz=8000.0, fmax_hz=15000.0)


def test_integer_pcm_is_scaled() -> None:
    """int16 samples are read in units of full scale (32767 -> 1.0)."""
    x = np.round(_strike() * 32767).astype(np.int16)
    res = find_partials(x, FS)
    p = min(res.partials, key=lambda p: abs(p.frequency_hz - 440.0))
    assert p.amplitude == pytest.approx(0.5, rel=0.01)


def test_out_of_phase_stereo_is_warned() -> None:
    """Channels of opposite polarity cancel in the mean: said, and the mean is not used blind."""
    x = _strike()
    st = np.stack([x, -0.9 * x], axis=1)
    rep = check_signal(st, FS)
    assert any("analyse one channel instead" in w for w in rep.warnings)
