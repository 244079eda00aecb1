"""The voice pool's rules on synthetic voices, against closed forms and offline renders.

Each template here is one decaying mode (or one coupled pair), so what the pool
must output is known in closed form: ``a exp(-g t - E(t)) sin(2 pi f t + phase)``
with ``E`` the extra decay the damper rules add (engine module docstring).
Tolerances are rounding bounds: the pool re-anchors a mode every 1024 samples,
so its error stays below ``1024 * 8 eps`` times the amplitude (8 roundings per
step, see ``rt_helpers.rounding_bound``); the measured errors are near 1e-15.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from rt_helpers import EPS, run_pool

from synth.engine import ModeBank, Voice, render
from synth.engine.realtime import LiveVoice, Rotor, RotorLaw, VoicePool
from synth.engine.voice import ModePair

FS = 48000.0
RELEASE = math.log(1000.0) / 0.25   # dampers down: T60 of 0.25 s, 1/s
ANCHORED = 1024 * 8 * EPS            # rounding bound per unit amplitude (module docstring)


def one_mode(amplitude=0.5, freq=1000.0, decay=2.0, phase=0.3):
    """Return a template of one mode."""
    return LiveVoice(Voice(0, ModeBank([freq], [decay], [amplitude], [phase])),
                     release_decay_per_s=RELEASE)


def closed_form(n, start, amplitude, freq, decay, phase, extra):
    """One mode struck at ``start``; ``extra[(sample)] = rate`` changes of its extra decay."""
    t_idx = np.arange(n)
    out = np.zeros(n)
    m = t_idx[start:] - start
    nep = np.zeros(m.size)
    changes = sorted(extra.items())
    for k, (s, rate) in enumerate(changes):
        end = changes[k + 1][0] if k + 1 < len(changes) else n
        lo, hi = max(s - start, 0), max(end - start, 0)
        seg = np.arange(m.size)
        inside = (seg > lo) & (seg <= hi)
        after = seg > hi
        nep[inside] += rate / FS * (seg[inside] - lo)
        nep[after] += rate / FS * (hi - lo)
    t = m / FS
    out[start:] = amplitude * np.exp(-decay * t - nep) * np.sin(2 * np.pi * freq * t + phase)
    return out


def test_damper_follows_the_pedal_exactly():
    """Key up with the pedal lifted rings on; pedal down damps at the damper rate; half pedal half.

    Reference: the closed form with ``E`` growing at ``RELEASE (1 - lift)`` from each
    change that acts on the released key (physics of the voice plan's pedal rule).
    """
    pool = VoicePool([one_mode()], sample_rate=FS, channels=1, lift=1.0, retire_dbfs=-300)
    pool.start(0, 5, 100)
    pool.release(5, 4000)           # dampers lifted: no extra decay yet
    pool.lift(0.0, 10000)           # dampers down
    pool.lift(0.5, 20000)           # half pedal
    got = run_pool(pool, 30000, "random")[:, 0]
    want = closed_form(30000, 100, 0.5, 1000.0, 2.0, 0.3,
                       {10000: RELEASE, 20000: 0.5 * RELEASE})
    assert np.max(np.abs(got - want)) <= ANCHORED * 0.5


def test_held_key_ignores_the_pedal():
    """A key not yet released rings at its own rate whatever the pedal does."""
    pool = VoicePool([one_mode()], sample_rate=FS, channels=1, lift=1.0, retire_dbfs=-300)
    pool.start(0, 9, 0)
    pool.lift(0.0, 2000)
    got = run_pool(pool, 8000, 64)[:, 0]
    want = closed_form(8000, 0, 0.5, 1000.0, 2.0, 0.3, {})
    assert np.max(np.abs(got - want)) <= ANCHORED * 0.5


def test_stealing_takes_the_quietest():
    """With every voice sounding, a new strike takes the voice that can add least.

    Voice C starts loudest but decays at 200 /s; at the steal it is below 1e-9,
    so it, not the soft voice B, is taken over.  The samples equal an offline
    render in which C stops at the steal sample.
    """
    bank = [(1.0, 500.0, 1.0), (0.01, 700.0, 1.0), (0.5, 900.0, 200.0), (0.3, 1100.0, 3.0)]
    templates = [LiveVoice(Voice(0, ModeBank([f], [g], [a]))) for a, f, g in bank]
    pool = VoicePool(templates, sample_rate=FS, channels=1, n_voices=3, gain=0.5,
                     retire_dbfs=-300)
    for k, start in enumerate((0, 10, 20)):
        pool.start(k, k, start)
    run_pool(pool, 5000, 64)
    before = pool.voice_templates().copy()
    bounds = pool.voice_bounds()
    quietest = int(np.argmin(bounds))
    assert before[quietest] == 2
    pool.start(3, 3, 5000)
    tail = run_pool(pool, 5000, 32)[:, 0]
    after = pool.voice_templates()
    assert after[quietest] == 3 and pool.steals == 1
    assert all(after[i] == before[i] for i in range(3) if i != quietest)
    voices = [Voice(s, ModeBank([f], [g], [a]), stop_sample=stop)
              for (a, f, g), s, stop in zip(bank, (0, 10, 20, 5000), (None, None, 5000, None),
                                             strict=True)]
    ref = render(voices, 10000, sample_rate=FS, channels=1, retire_db=None)[5000:, 0]
    assert pool.limited_blocks == 0
    assert np.max(np.abs(tail - 0.5 * ref)) <= ANCHORED * sum(a for a, _, _ in bank)


def rotor_angle(t, segments, resting):
    """Angle of a rotor whose rate approaches each segment's target exponentially.

    ``segments``: (t0, f_to) in time order, spin-up time constant ``TAU``; the
    rate and angle are continuous at every change (independent numpy form).
    """
    theta = np.full_like(t, resting)
    f_from, th0 = 0.0, resting
    for k, (t0, f_to) in enumerate(segments):
        t1 = segments[k + 1][0] if k + 1 < len(segments) else np.inf
        u = np.clip(t - t0, 0.0, None)
        ang = th0 + 2 * np.pi * (f_to * u + (f_from - f_to) * TAU * (1 - np.exp(-u / TAU)))
        sel = (t >= t0) & (t < t1)
        theta[sel] = ang[sel]
        if np.isfinite(t1):
            u1 = t1 - t0
            th0 = th0 + 2 * np.pi * (f_to * u1 + (f_from - f_to) * TAU * (1 - np.exp(-u1 / TAU)))
            f_from = f_to + (f_from - f_to) * np.exp(-u1 / TAU)
    return theta


TAU = 0.05
LAW = RotorLaw(depth=0.85, floor=0.02, offset_rad=0.4, coupling_open_rad_s=40.0,
               weight_2_open=3.0, decay_2_fixed_per_s=8.0, decay_2_per_factor=18.0)


def test_motor_controller_changes_rate_without_a_jump():
    """A rate change mid-note: the discs keep their angle and approach the new rate.

    Reference: the offline renderer given the law as per-sample curves built
    from :func:`rotor_angle` (its own closed form).  The pair's error is bounded
    like a mode's, over the whole run (it is never re-anchored): 8 n eps |a|.
    """
    change = 6000
    segments = [(0.0, 2.0), (change / FS, 5.0)]

    def factor(first, n, off):
        t = (np.arange(n) + first + off) / FS
        th = rotor_angle(t, segments, resting=0.5 * np.pi)
        return np.maximum(1.0 - LAW.depth * np.abs(np.cos(th + LAW.offset_rad)), LAW.floor)

    pair = ModePair((440.0, 446.0), (0.5, LAW.decay_2_fixed_per_s), (0.2, 0.0), (0.3, 0.0),
                       weight_1=0.7)
    offline = ModePair(
        pair.frequency_hz, pair.decay_per_s, pair.amplitude, pair.phase_rad,
        coupling_rad_s=lambda f, n: LAW.coupling_open_rad_s * factor(f, n, 0.5),
        weight_1=0.7, weight_2=lambda f, n: LAW.weight_2_open * np.sqrt(factor(f, n, 0.0)),
        decay_2_curve=lambda f, n: LAW.decay_2_fixed_per_s
        + LAW.decay_2_per_factor * factor(f, n, 0.0))
    n = 24000
    ref = render([Voice(0, ModeBank.empty(), pairs=(offline,))], n, sample_rate=FS,
                 channels=1, retire_db=None)[:, 0]
    pool = VoicePool([LiveVoice(Voice(0, ModeBank.empty(), pairs=(pair,)), (LAW,))],
                     sample_rate=FS, channels=1, retire_dbfs=-300,
                     rotor=Rotor(resting_rad=0.5 * np.pi, rate_rev_per_s=2.0, spin_up_s=TAU))
    pool.start(0, 1, 0)
    pool.rotor_rate(5.0, change)
    got = run_pool(pool, n, "random")[:, 0]
    scale = 0.2 * (0.7 + LAW.weight_2_open)
    assert np.max(np.abs(got - ref)) <= 8 * n * EPS * scale
    assert pool.rotor_target == 5.0


def test_gain_ramps_linearly():
    """A gain change moves by at most 1/(ramp_s fs) per sample, straight to its target."""
    ramp_s = 0.01
    pool = VoicePool([one_mode(amplitude=0.2)], sample_rate=FS, channels=1, gain=1.0,
                     ramp_s=ramp_s, retire_dbfs=-300)
    pool.start(0, 1, 0)
    pool.set_gain(0.25, 1000)
    got = run_pool(pool, 3000, 64)[:, 0]
    step = 1.0 / (ramp_s * FS)
    k = np.arange(3000)
    gain = np.where(k < 1000, 1.0, np.maximum(0.25, 1.0 - (k - 999) * step))
    want = closed_form(3000, 0, 0.2, 1000.0, 2.0, 0.3, {}) * gain
    assert np.max(np.abs(got - want)) <= ANCHORED * 0.2 * 2


def test_ceiling_holds_whatever_the_gain():
    """At +40 dB the limiter keeps every sample at or below -1 dBFS (and says so)."""
    ceiling = 10 ** (-1 / 20)
    pool = VoicePool([one_mode(amplitude=0.5)], sample_rate=FS, channels=2, gain=100.0)
    for k in range(5):
        pool.start(0, k, 300 * k)
    out = run_pool(pool, 20000, "random", dtype=np.float32)
    assert float(np.max(np.abs(out))) <= ceiling
    assert pool.limited_blocks > 0 and pool.fault is None


@pytest.mark.parametrize("poison", [np.nan, 1e6])
def test_runaway_mutes_and_reports(poison):
    """A NaN or a state above the voices' bound mutes the block and every later one."""
    pool = VoicePool([one_mode()], sample_rate=FS, channels=1)
    pool.start(0, 1, 0)
    run_pool(pool, 2048 + 64, 64)    # between two anchors of the mode's clock
    pool.v_re[0, 0] = poison
    pool.v_flt[0, 2] = 0.0
    out = run_pool(pool, 512, 64)
    assert pool.fault is not None and not np.any(out) and pool.sounding == 0
