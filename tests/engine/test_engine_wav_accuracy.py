"""Partials measured from a written WAV file against the plan that made them.

Checks (issue "The sound"): each partial's frequency from an FFT peak with
interpolation within 0.1 cent; its decay fitted on log amplitude gives
Q = pi f / slope within 1 % (Q = pi f tau, physics.md section 6; fit recipe,
physics.md section 11).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from engine_fits import fft_peak_hz, log_envelope_decay

from synth.engine import ModeBank, Voice, measure_peak, plan_gain, render_blocks
from synth.io import read_audio, write_wav
from synth.pitch import cents

FS = 48000
# Plan: three partials in the 1:4:10 family (common practice, physics.md section 3),
# with decay times chosen so that each falls ~20 dB inside the 2 s window.
F_HZ = np.array([440.0, 1760.0, 4400.0])
TAU_S = np.array([1.5, 0.8, 0.4])
Q_PLAN = math.pi * F_HZ * TAU_S
AMP = np.array([0.5, 0.3, 0.2])


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """Render the plan, normalise, write a 24-bit WAV and read it back (mono)."""
    voice = Voice(0, ModeBank(F_HZ, 1.0 / TAU_S, AMP, [0.0, 0.4, 1.3]))
    n = 2 * FS
    plan = plan_gain(measure_peak([voice], n, sample_rate=FS))
    path = tmp_path_factory.mktemp("wav") / "plan.wav"
    write_wav(path, render_blocks([voice], n, sample_rate=FS, gain=plan.gain),
              sample_rate=FS, sample_format="pcm24")
    samples, rate = read_audio(path, mono=True)
    assert rate == FS
    return samples


@pytest.mark.parametrize("k", range(3))
def test_partial_frequency_from_fft_peak(recorded, k):
    """FFT peak (Hann, zero padding, parabolic interpolation) within 0.1 cent of the plan."""
    f = fft_peak_hz(recorded[: FS], FS, F_HZ[k])
    assert abs(float(cents(f, F_HZ[k]))) < 0.1


@pytest.mark.parametrize("k", range(3))
def test_partial_q_from_log_amplitude_fit(recorded, k):
    """Slope of ln(envelope) gives Q = pi f / |slope| within 1 % of the plan.

    The fit runs from 0.1 s (past the band-pass filter's start-up) to 1.5 s
    (before its end effects); 24-bit quantisation is 100 dB below the signal there.
    """
    slope = log_envelope_decay(recorded, FS, F_HZ[k], 0.1, 1.5)
    q = math.pi * F_HZ[k] / slope
    assert q == pytest.approx(Q_PLAN[k], rel=0.01)
