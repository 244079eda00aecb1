"""The mode bank against closed forms: plain numpy, exact tails, damping changes.

Reference for every check here: the damped sinusoid
a exp(-t/tau) sin(2 pi f t + phi) itself, with Q = pi f tau and T60 = tau ln 1000
(physics.md, section 6; Fletcher & Rossing 1998, ch. 2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from engine_fits import prony_one_mode

from synth.engine import ModeBank, Voice, render, ring_out_sample
from synth.pitch import cents

FS = 48000.0


def numpy_modes(f, g, a, phi, n, start=0, fs=FS, extra_nepers=None):
    """Plain numpy evaluation of sum_k a_k exp(-g_k t - E(t)) sin(2 pi f_k t + phi_k)."""
    t = (np.arange(n) - start) / fs
    env = np.exp(-np.outer(g, t) - (0.0 if extra_nepers is None else extra_nepers))
    y = (np.asarray(a)[:, None] * env * np.sin(2 * np.pi * np.outer(f, t)
                                              + np.asarray(phi)[:, None])).sum(axis=0)
    y[: start] = 0.0
    return y


def test_bank_matches_numpy_small_case(rng):
    """Kernel vs plain numpy a exp(-t/tau) sin(2 pi f t + phi), 1e-9 relative.

    The tolerance is the brief's; rounding of float64 phases over 0.2 s is ~1e-13.
    """
    k = 7
    f = rng.uniform(50.0, 15000.0, k)
    tau = rng.uniform(0.05, 3.0, k)
    a = rng.uniform(-1.0, 1.0, k)
    phi = rng.uniform(-np.pi, np.pi, k)
    n = 9000
    y = render([Voice(0, ModeBank(f, 1.0 / tau, a, phi))], n, sample_rate=FS)[:, 0]
    ref = numpy_modes(f, 1.0 / tau, a, phi, n)
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_sixty_second_tail_keeps_frequency_and_decay():
    """A 60 s tail keeps f within 0.01 cent and the decay rate within 0.1 %.

    Measured from the output alone: Prony (linear prediction of order 2) on the
    last 0.25 s gives the pole exactly for a clean damped sinusoid.  The
    samples are also compared with the closed form: re-anchoring every 1024
    samples keeps them at rounding level (1e-9 of the envelope allows for
    the float64 phase of the numpy reference, 2 pi f t ~ 4e5 rad).
    """
    f, g, a, phi = 1000.3, 0.05, 1.0, 0.3
    n = int(60 * FS) + 1
    y = render([Voice(0, ModeBank([f], [g], [a], [phi]))], n, sample_rate=FS)[:, 0]
    tail = slice(n - int(0.25 * FS), n)
    f_meas, g_meas = prony_one_mode(y[tail], FS)
    assert abs(float(cents(f_meas, f))) < 0.01
    assert abs(g_meas - g) / g < 1e-3
    t = np.arange(n)[tail] / FS
    ref = a * np.exp(-g * t) * np.sin(2 * np.pi * f * t + phi)
    assert np.max(np.abs(y[tail] - ref)) <= 1e-9 * a * math.exp(-g * 60.0)


def test_start_and_stop_are_sample_exact():
    """A voice is silent before start_sample and from stop_sample on (definition)."""
    # phase pi/2: the first sample of the voice is its full amplitude
    v = Voice(1000, ModeBank([440.0], [1.0], [0.5], [np.pi / 2]), stop_sample=1500)
    y = render([v], 3000, sample_rate=FS)[:, 0]
    assert np.all(y[:1000] == 0.0)
    assert y[1000] == pytest.approx(0.5, rel=1e-15)
    assert y[1499] != 0.0
    assert np.all(y[1500:] == 0.0)


def test_damping_change_acts_from_its_exact_sample():
    """From the change on, every decay rate is its own plus the extra (closed form)."""
    f = np.array([440.0, 1320.0])
    g = np.array([1.0, 4.0])
    a = np.array([0.6, 0.4])
    phi = np.array([0.2, 1.0])
    start, change, extra = 300, 5003, 40.0
    n = 12000
    damped = render([Voice(start, ModeBank(f, g, a, phi), damping=[(change, extra)])], n,
                    sample_rate=FS)[:, 0]
    free = render([Voice(start, ModeBank(f, g, a, phi))], n, sample_rate=FS)[:, 0]
    # before the change the two renders are the same computation, sample for sample
    assert np.array_equal(damped[:change], free[:change])
    assert damped[change + 1] != free[change + 1]
    m = np.arange(n)
    nepers = np.where(m < change, 0.0, extra * (m - change) / FS)
    ref = numpy_modes(f, g, a, phi, n, start=start, extra_nepers=nepers)
    assert np.max(np.abs(damped - ref)) <= 1e-12 * np.max(np.abs(ref))


def test_damping_before_start_sets_initial_rate():
    """A change at or before the start applies from the first sample (definition)."""
    v = Voice(100, ModeBank([500.0], [2.0], [1.0], [0.4]), damping=[(0, 8.0), (50, 3.0)])
    y = render([v], 4000, sample_rate=FS)[:, 0]
    ref = numpy_modes([500.0], [5.0], [1.0], [0.4], 4000, start=100)
    assert np.max(np.abs(y - ref)) <= 1e-12


def test_quiet_voice_is_dropped_below_threshold():
    """Retiring a voice 100 dB below the output's peak changes no sample by more than that."""
    v = Voice(0, ModeBank([3000.0, 200.0], [300.0, 250.0], [1.0, 0.5]))
    n = int(1.0 * FS)
    kept = render([v], n, sample_rate=FS, retire_db=None)[:, 0]
    dropped = render([v], n, sample_rate=FS)[:, 0]
    assert np.max(np.abs(kept - dropped)) < np.max(np.abs(kept)) * 10 ** (-100 / 20)
    assert dropped[-1] == 0.0  # gone well before 1 s (ln(1e5)/250 = 46 ms plus the grid)


def test_ring_out_sample_follows_t60():
    """-60 dB is reached at T60 = tau ln 1000 (physics.md, section 6)."""
    g = 2.0
    s = ring_out_sample([Voice(250, ModeBank([440.0], [g], [1.0]))], sample_rate=FS,
                        level_db=-60.0)
    expected = 250 + math.log(1000.0) / g * FS
    assert abs(s - expected) <= 1.0  # first whole sample past the exact time
    assert ring_out_sample([Voice(0, ModeBank([440.0], [0.0], [1.0]))],
                           sample_rate=FS) is None
