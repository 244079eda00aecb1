"""Loudness (ITU-R BS.1770-4), true peak (Annex 2) and level matching.

Sources: BS.1770-4's calibration (a 0 dBFS 997 Hz or 1 kHz sine in one channel
reads -3.01 LKFS; channel powers add with weight 1 for left and right); pyloudnorm
0.2.0 as the reference implementation (physics note, section 12: it reads -3.052
at 997 Hz and -3.045 at 1 kHz, 48 kHz); the analytic peak of a band-limited sine
for true peak.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from synth.analysis import integrated_loudness, match_loudness, true_peak
from synth.errors import AudioError

FS = 48000.0


def _sine(f, level_dbfs, dur=5.0, phase=0.0, fs=FS):
    t = np.arange(int(dur * fs)) / fs
    return 10 ** (level_dbfs / 20) * np.sin(2 * math.pi * f * t + phase)


@pytest.mark.parametrize("freq", [997.0, 1000.0])
def test_calibration_sine(freq) -> None:
    """A -20 dBFS sine reads -23.01 LUFS, a 0 dBFS one -3.01, within 0.1 LU.

    BS.1770-4 calibration (-3.01 LKFS at 0 dBFS); 0.1 LU is the tolerance of the
    physics note (section 12): the K-weighting is not exactly 0 dB at 1 kHz and
    pyloudnorm's 48 kHz filter reads 0.04 LU low.
    """
    assert integrated_loudness(_sine(freq, -20.0), FS).integrated_lufs == pytest.approx(
        -23.01, abs=0.1)
    assert integrated_loudness(_sine(freq, 0.0), FS).integrated_lufs == pytest.approx(
        -3.01, abs=0.1)


def test_wraps_pyloudnorm_exactly() -> None:
    """The value is pyloudnorm's own (reference implementation of BS.1770-4)."""
    import pyloudnorm

    x = _sine(1000.0, -20.0) + 0.01 * np.random.default_rng(3).standard_normal(int(5 * FS))
    ref = pyloudnorm.Meter(FS).integrated_loudness(x)
    assert integrated_loudness(x, FS).integrated_lufs == pytest.approx(ref, abs=1e-9)


def test_two_channels_add_power() -> None:
    """The same sine in both channels reads 10 log10(2) = 3.01 LU above one channel.

    BS.1770-4 Eq. 2: channel powers summed with G = 1 for left and right.
    """
    mono = _sine(1000.0, -20.0)
    one = integrated_loudness(mono, FS).integrated_lufs
    two = integrated_loudness(np.stack([mono, mono], axis=1), FS)
    assert two.n_channels == 2
    assert two.integrated_lufs - one == pytest.approx(10 * math.log10(2.0), abs=1e-6)


def test_true_peak_above_sample_peak() -> None:
    """A sine at fs/4 with 45 degree phase: samples at +-0.707, true peak 1.0 (0 dBTP).

    The intersample overshoot BS.1770-4 Annex 2 exists to catch: the band-limited
    signal reaches its amplitude between samples.  Faded in and out over 50 ms so
    the file's ends do not ring.  0.01 dB: the interpolator is flat to 0.001 dB
    up to 0.45 fs.
    """
    n = np.arange(int(FS))
    x = np.sin(math.pi * n / 2 + math.pi / 4)
    fade = np.minimum(1.0, np.minimum(n, n[::-1]) / (0.05 * FS))
    tp = true_peak(x * fade, FS)
    assert tp.sample_peak_dbfs == pytest.approx(-3.0103, abs=1e-3)
    assert tp.true_peak_dbtp == pytest.approx(0.0, abs=0.01)
    assert tp.true_peak_dbtp > tp.sample_peak_dbfs + 2.9
    assert tp.oversampling == 4  # BS.1770-4 Annex 2: at least 4x at 48 kHz
    assert not any("flat tops" in w for w in tp.warnings)


def test_true_peak_of_slow_sine_equals_sample_peak() -> None:
    """At 100 Hz the samples sit within 0.0004 dB of the crest: true peak = sample peak."""
    tp = true_peak(_sine(100.0, -6.0, dur=1.0), FS)
    assert tp.true_peak_dbtp == pytest.approx(-6.0, abs=0.01)
    assert tp.true_peak_dbtp >= tp.sample_peak_dbfs - 1e-9


def test_level_matching_within_0_2_lu(rng) -> None:
    """B matched to A lands within 0.2 LU of A (physics note, section 12 [CP/M]).

    Loudness scales exactly with gain unless a block crosses the -70 LUFS gate, so
    the match is in fact exact to rounding (measured 1e-12 LU); 0.01 LU is asserted.
    """
    a = _sine(440.0, -12.0) * np.exp(-np.arange(int(5 * FS)) / FS / 2.0)
    b = 0.05 * rng.standard_normal(int(5 * FS)) * np.exp(-np.arange(int(5 * FS)) / FS)
    m = match_loudness(a, b, FS)
    after = integrated_loudness(b * 10 ** (m.gain_db / 20), FS).integrated_lufs
    assert abs(after - m.reference_lufs) < 0.01
    assert m.gain_db == pytest.approx(m.reference_lufs - m.other_lufs)


def test_level_matching_known_gain() -> None:
    """B = A at half amplitude needs +6.02 dB (20 log10 2)."""
    a = _sine(1000.0, -20.0)
    m = match_loudness(a, 0.5 * a, FS)
    assert m.gain_db == pytest.approx(20 * math.log10(2.0), abs=1e-9)
    assert m.warnings == ()


def test_level_matching_warns_on_length_and_peak() -> None:
    """Different lengths (loudness depends on the tail) and a gain that clips are said."""
    a = _sine(1000.0, -3.0, dur=5.0)
    b = _sine(1000.0, -30.0, dur=3.0)
    b[1000] = 0.5  # one loud click: after +27 dB it goes far over full scale
    m = match_loudness(a, b, FS)
    assert any("lengths differ" in w for w in m.warnings)
    assert m.matched_true_peak_dbtp > -1.0
    assert any("-1 dBTP" in w for w in m.warnings)


def test_short_file_cannot_be_measured() -> None:
    """BS.1770-4 gates 0.4 s blocks: a shorter file has no loudness."""
    with pytest.raises(AudioError, match=re.escape("needs at least one 0.4 s block")):
        integrated_loudness(np.ones(1000) * 0.1, FS)


def test_silence_reads_minus_infinity() -> None:
    """Digital silence: -inf LUFS with a warning, not a finite number."""
    res = integrated_loudness(np.zeros(int(FS)), FS)
    assert res.integrated_lufs == -math.inf
    assert any("silent" in w for w in res.warnings)
    with pytest.raises(AudioError, match="cannot match loudness"):
        match_loudness(_sine(1000.0, -20.0), np.zeros(int(5 * FS)), FS)
