"""Rotor-modulated coupled pairs: the engine's own law against scipy and the curve path.

A pair with a ``PairModulation`` is stepped inside the compiled loop (m, mu, w2
and g2 per sample, the exact exponential of each frozen step).  Here it is held
to (1) scipy.linalg.expm of every frozen step, with m from the motor model's
closed-form shaft angle (numpy), and (2) the same pair given as per-sample
curves (``DiscModulation``'s streams), rendered by the curve path.
"""

from __future__ import annotations

import importlib
import math
from dataclasses import replace

import numpy as np
import pytest
import scipy.linalg

from synth.engine import ModeBank, ModePair, Voice, render
from synth.engine.voice import PairModulation, RotorLaw
from synth.errors import ModelError
from synth.physics.motor import DiscModulation, MotorSpec
from synth.voicing import pair_modulation

FS = 48000.0
render_module = importlib.import_module("synth.engine.render")
MOTOR = MotorSpec(rate_rev_per_s=4.0, block_fraction=0.85, resting="closed", spin_up_s=0.05,
                  spin_up_law="exponential", start_time_s=0.01)


def _modulation(motor=MOTOR, offset_deg=30.0, mu_open=9.0, w2=0.7, wall=6.0, rad=25.0):
    return DiscModulation(motor, FS, mu_open, tube_weight_open=w2, tube_wall_decay_per_s=wall,
                          tube_radiation_decay_per_s=rad, phase_offset_deg=offset_deg)


def _pair(mod: DiscModulation, *, declarative: bool, f=(440.0, 443.5), g1=0.5, w1=1.0,
          amplitude=(1.0, 0.2), phase=(0.3, 1.2)) -> ModePair:
    return ModePair(frequency_hz=f, decay_per_s=(g1, mod.tube_wall_decay_per_s
                                                 + mod.tube_radiation_decay_per_s * mod.floor),
                    amplitude=amplitude, phase_rad=phase, coupling_rad_s=mod.coupling_rate,
                    weight_1=w1, weight_2=mod.tube_weight, decay_2_curve=mod.tube_decay,
                    modulation=pair_modulation(mod) if declarative else None)


def _exact_frozen_steps(mod: DiscModulation, pair: ModePair, n: int) -> np.ndarray:
    """Output of the pair by scipy.linalg.expm of each frozen step (the engine's convention).

    mu at n + 1/2, g2 and w2 at n, all from the motor model in numpy.
    """
    s1 = complex(-pair.decay_per_s[0], 2 * math.pi * pair.frequency_hz[0])
    om2 = 2 * math.pi * pair.frequency_hz[1]
    mu = mod.coupling_rate(0, n)
    g2 = mod.tube_decay(0, n)
    w2 = mod.tube_weight(0, n)
    a = np.array([pair.amplitude[0] * np.exp(1j * pair.phase_rad[0]),
                  pair.amplitude[1] * np.exp(1j * pair.phase_rad[1])])
    out = np.empty(n)
    for j in range(n):
        out[j] = pair.weight_1 * a[0].imag + w2[j] * a[1].imag
        step = np.array([[s1, 1j * mu[j]], [1j * mu[j], complex(-g2[j], om2)]])
        a = scipy.linalg.expm(step / FS) @ a
    return out


@pytest.mark.parametrize("law", ["exponential", "linear"])
def test_rotor_pair_matches_expm_of_each_frozen_step(law):
    """Against scipy.linalg.expm per frozen step over 4000 samples (spin-up included).

    The engine's step is the same exponential summed to 1e-18; what remains is
    rounding: about 4000 steps x a few eps (~2e-12 of the amplitude).  Allowed
    1e-11 of the amplitude (the bench's target is 1e-9).
    """
    motor = replace(MOTOR, spin_up_law=law)
    mod = _modulation(motor)
    pair = _pair(mod, declarative=True)
    n = 4000
    got = render([Voice(0, ModeBank.empty(), pairs=(pair,))], n, sample_rate=FS,
                 retire_db=None, block_size=1536)[:, 0]
    ref = _exact_frozen_steps(mod, pair, n)
    amplitude = float(np.max(np.abs(ref)))
    assert np.max(np.abs(got - ref)) <= 1e-11 * amplitude


def _voices(declarative: bool) -> list[Voice]:
    voices = []
    for k in range(6):
        mod = _modulation(offset_deg=25.0 * k, mu_open=6.0 + k, rad=20.0 + 3 * k)
        pair = _pair(mod, declarative=declarative, f=(300.0 * 1.12 ** k, 300.0 * 1.12 ** k + 2.0),
                     phase=(0.4 * k, 0.0), amplitude=(1.0, 0.0))
        start = 3000 * k + 17
        damping = ((start + 20000, 3.0), (start + 50000, 0.0)) if k % 2 else ()
        gain_curve = (lambda first, n: 0.8 + 0.2 * np.cos(np.arange(first, first + n) / 900.0)) \
            if k == 4 else None
        bank = ModeBank([1000.0 + 100 * k], [2.0], [0.1])
        voices.append(Voice(start, bank, channel_gains=(0.6, 0.8) if k % 3 else (0.9, 0.3),
                            damping=damping, pairs=(pair,), gain_curve=gain_curve,
                            gain_curve_max=1.0 if k == 4 else None))
    return voices


def test_rotor_path_agrees_with_curve_path():
    """The engine's own law and the same law as numpy curves agree to 1e-12 of the peak.

    Both integrate the same frozen steps; they differ by the last bit of the
    sine and cosine (the kernel's own against numpy's) and by the order of the
    roundings in each step, which adds up along the render (measured 3.2e-13 of
    the peak over these 120000 steps; both paths are about 1e-11 from a
    long-double product of the exact steps after 480000).  Block sizes and the
    voice-by-voice route change rounding only.
    """
    n = 120000
    ref = render(_voices(False), n, sample_rate=FS, channels=2, retire_db=None)
    peak = float(np.max(np.abs(ref)))
    for block in (16384, 5000):
        got = render(_voices(True), n, sample_rate=FS, channels=2, retire_db=None,
                     block_size=block)
        assert np.max(np.abs(got - ref)) <= 1e-12 * peak


def test_rotor_pairs_together_equal_voice_by_voice(monkeypatch):
    """The batch of every voice's rotor pairs gives the per-voice route's samples to rounding."""
    n = 60000
    together = render(_voices(True), n, sample_rate=FS, channels=2)
    monkeypatch.setattr(render_module, "BATCH_ROTOR_PAIRS", False)
    alone = render(_voices(True), n, sample_rate=FS, channels=2)
    assert np.max(np.abs(together - alone)) <= 1e-13 * float(np.max(np.abs(alone)))


def test_rotor_pair_lower_bound_checked():
    """decay_per_s[1] above the rotor's lowest g2 is refused before any sample."""
    mod = _modulation()
    pair = replace(_pair(mod, declarative=True), decay_per_s=(0.5, 100.0))
    with pytest.raises(ModelError, match="must bound it"):
        render([Voice(0, ModeBank.empty(), pairs=(pair,))], 100, sample_rate=FS)


def test_pair_modulation_rejects_bad_values():
    law = RotorLaw(depth=0.5, floor=0.1, offset_rad=0.0, coupling_open_rad_s=1.0,
                   weight_2_open=1.0, decay_2_fixed_per_s=1.0, decay_2_per_factor=1.0)
    with pytest.raises(ModelError, match="spin_up_law"):
        PairModulation(law, rate_rev_per_s=1.0, spin_up_law="sudden")
    with pytest.raises(ModelError, match="rate_rev_per_s"):
        PairModulation(law, rate_rev_per_s=-1.0)


def test_kernel_sine_and_cosine_match_numpy():
    """The kernel's own sine and cosine against numpy's over |x| <= 2000 rad.

    Cody-Waite reduction with pi/2 in three parts is exact to rounding for
    these arguments and the series are truncated below 1e-19, so both agree to
    about one unit in the last place: allowed 4.5e-16 (two units at 1).
    """
    from synth.engine import kernels

    x = np.linspace(-2000.0, 2000.0, 40001)
    got = np.array([kernels._sin_cos(v) for v in x])
    assert np.max(np.abs(got[:, 0] - np.sin(x))) <= 4.5e-16
    assert np.max(np.abs(got[:, 1] - np.cos(x))) <= 4.5e-16


@pytest.mark.parametrize(("law", "spin_up_s"), [("exponential", 0.4), ("linear", 0.3),
                                                ("exponential", 0.0)])
def test_kernel_rotor_angle_matches_motor_model(law, spin_up_s):
    """The kernel's rotor angle (its cosine and sine) against the motor model's shaft_angle.

    Chunks before, across and after the start time and late in a long render
    (up to 3500 rad).  Both evaluate the same closed form; what differs is the
    sine and cosine, the exponential taken as a product per chunk and the
    rounding of the angle's last terms: about 1e-15 measured, allowed 1e-13.
    """
    from synth.engine import kernels
    from synth.physics.motor import shaft_angle

    motor = MotorSpec(rate_rev_per_s=3.0, spin_up_s=spin_up_s, spin_up_law=law,
                      resting="open", start_time_s=0.1)
    mod = pair_modulation(_modulation(motor))
    rotor = np.array([FS, mod.rate_rev_per_s, mod.resting_rad, mod.start_s, mod.spin_up_s,
                      mod.rotor_key[4]])
    chunk = kernels._ROTOR_CHUNK
    ptab = np.exp(-np.arange(chunk) / (FS * spin_up_s)) if spin_up_s else np.ones(chunk)
    c, s = np.empty(chunk), np.empty(chunk)
    for first in (0, 4800 - 50, 4801, 100000, 2_000_000, 9_000_000):
        for half in (False, True):
            kernels._rotor_sin_cos(rotor, first, chunk, half, ptab, c, s)
            theta = shaft_angle(motor, (np.arange(chunk) + (first + (0.5 if half else 0.0)))
                                / FS)
            assert np.max(np.abs(c - np.cos(theta))) <= 1e-13
            assert np.max(np.abs(s - np.sin(theta))) <= 1e-13
