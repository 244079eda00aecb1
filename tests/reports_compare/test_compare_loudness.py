"""Loudness matching against ITU-R BS.1770-4 and against closed forms.

The standard's calibration point: a 0 dBFS sine at 997 Hz in one channel reads
-3.01 LKFS (ITU-R BS.1770-4 (10/2015), Annex 1; the figure as given in the
physics note, section 12). Loudness scales with level, so a sine at -20 dBFS
(peak amplitude 0.1) reads -23.01. pyloudnorm, the open-source BS.1770-4 meter
used here, reads -3.05 at 48 kHz for 1 kHz (physics note, section 12: its
K-weighting at 1 kHz differs from the standard's by about 0.04 dB).
"""

from __future__ import annotations

import math

import numpy as np
import pyloudnorm
import pytest

from synth.analysis import integrated_loudness, true_peak
from synth.reports.compare import band_levels, match_levels, octave_bands

RATE = 48000

# +-0.1 LU: the physics note's tolerance for this check (section 12 and 15); it covers the
# 0.04 LU between pyloudnorm's filter and the standard's published figure, and is the
# smallest tolerance a BS.1770 meter is held to in conformance tests (EBU Tech 3341,
# +-0.1 LU; from memory).
CAL_TOL_LU = 0.1


def sine(freq_hz: float, amplitude: float, seconds: float = 5.0, rate: int = RATE):
    """Return a sine of peak ``amplitude`` starting at phase 0."""
    t = np.arange(int(seconds * rate)) / rate
    return amplitude * np.sin(2 * np.pi * freq_hz * t)


def test_minus_20_dbfs_sine_reads_minus_23_lufs() -> None:
    """1 kHz at -20 dBFS, mono: about -23 LUFS (-3.01 LKFS calibration minus 20 dB)."""
    x = sine(1000.0, 0.1)
    ours = integrated_loudness(x, RATE).integrated_lufs
    direct = pyloudnorm.Meter(RATE).integrated_loudness(x)
    assert ours == pytest.approx(-23.01, abs=CAL_TOL_LU)
    assert direct == pytest.approx(-23.01, abs=CAL_TOL_LU)
    # The meter against the standard's definition in closed form, off the calibration
    # point: tests/analysis/test_analysis_loudness.py.


def test_full_scale_997_hz_calibration() -> None:
    """0 dBFS, 997 Hz, one channel: -3.01 LKFS by the standard (pyloudnorm -3.05)."""
    x = sine(997.0, 1.0)
    assert integrated_loudness(x, RATE).integrated_lufs == pytest.approx(-3.01, abs=CAL_TOL_LU)


def test_match_levels_two_sines() -> None:
    """B 6 dB below A: B gets +6.00 dB, both then read alike and peak at -1 dBTP.

    Loudness scales exactly with gain above the -70 LUFS gate (BS.1770-4 Annex 1),
    so the gain is the level ratio, 20 log10(0.1 / 0.05) = 6.0206 dB. Tolerances:
    1e-6 dB for the gain (gating and block sums are linear in power), 0.01 LU for the
    residual (what match_loudness itself promises), 0.01 dB for the ceiling (the
    true peak is measured on the same signal it is set from).
    """
    a = np.column_stack([sine(1000.0, 0.1), sine(1000.0, 0.1)])
    b = 0.5 * a
    a_out, b_out, plan = match_levels(a, b, RATE)
    assert plan.gain_b_db == pytest.approx(20 * math.log10(2.0), abs=1e-6)
    # Before matching both sit at one common gain, so their difference is the level ratio.
    la, lb = plan.loudness_before_lufs
    assert lb - la == pytest.approx(-20 * math.log10(2.0), abs=1e-6)
    assert plan.loudness_difference_after_lu == pytest.approx(0.0, abs=0.01)
    assert pyloudnorm.Meter(RATE).integrated_loudness(b_out) == pytest.approx(
        pyloudnorm.Meter(RATE).integrated_loudness(a_out), abs=0.01)
    peak = max(true_peak(a_out, RATE).true_peak_dbtp, true_peak(b_out, RATE).true_peak_dbtp)
    assert peak == pytest.approx(-1.0, abs=0.01)
    # A and B now hold the same signal: B was A at half the amplitude.
    np.testing.assert_allclose(b_out, a_out, rtol=1e-12, atol=1e-15)


def test_match_levels_keeps_the_louder_peak_at_the_ceiling() -> None:
    """B quieter but peakier: the matched B sets the ceiling and nothing passes -1 dBTP."""
    rng = np.random.default_rng(4)
    a = np.column_stack([sine(500.0, 0.2)] * 2)
    clicks = np.zeros_like(a)
    clicks[rng.integers(0, a.shape[0], 20)] = 0.9  # short clicks: high peak, little loudness
    b = 0.05 * a + clicks
    a_out, b_out, plan = match_levels(a, b, RATE)
    assert plan.true_peak_after_dbtp[1] == pytest.approx(-1.0, abs=0.01)
    assert plan.true_peak_after_dbtp[0] < -1.0
    assert max(np.max(np.abs(a_out)), np.max(np.abs(b_out))) < 10 ** (-1.0 / 20)
    assert abs(plan.loudness_difference_after_lu) <= 0.01


@pytest.mark.parametrize("freq_hz", [1000.0, 1000.5])
def test_band_level_of_a_sine(freq_hz: float) -> None:
    """A full-scale sine reads -3.01 dB in its octave band (mean square 1/2, Parseval).

    Bands per IEC 61260-1:2014 (base ten). 1000.5 Hz sits half a bin off the 1 Hz grid
    of the one-second window, the worst case for leakage. Tolerance 0.05 dB: the Hann
    window spreads the line over a few bins, all inside the band when the tone sits
    mid-band. The neighbouring bands hold only side-lobe leakage. The Hann window's
    highest side lobe is only about -31.5 dB (Harris 1978, "On the use of windows for
    harmonic analysis with the discrete Fourier transform", Proc. IEEE 66(1); from
    memory), but its side lobes fall 18 dB per octave of bin distance; the nearest
    neighbour band edge (707.9 Hz) is 292 bins away, so the roll-off puts each leaked
    bin near -31.5 - 18 log2(292 / 2.5) = -155 dB. Measured, summed over the band
    with numpy's symmetric Hann: -142 dB below the tone at the half-bin offset.
    Required: 120 dB down (margin 22 dB). A window without that roll-off fails: a
    rectangular window's side lobes (-13 dB, 6 dB per octave) leak about -35 dB.
    """
    x = sine(freq_hz, 1.0, seconds=1.0)
    levels = band_levels(x, RATE, 0.0, 1.0)
    labels = [b[0] for b in octave_bands(RATE)]
    k = labels.index("1k")
    assert levels[k] == pytest.approx(10 * math.log10(0.5), abs=0.05)
    others = np.delete(levels, k)
    assert np.all(others < levels[k] - 120.0), others
