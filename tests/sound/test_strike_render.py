"""A preset note, struck and rendered: partials, decays, strike point, chords, tube, motor.

Sources
-------
- Q = pi f tau, T60 = tau ln 1000 (exact relations; physics.md section 6).
- A strike at a node of a mode does not excite it (common practice, no source;
  exact here since the force enters through the mode shape).
- A flat disc opens the mouth twice per revolution, so the tube's envelope
  pulses at twice the rotation rate (geometry; common practice, no source).
- Adding a tube shortens the bar's sustain and raises the fundamental's level;
  tuned a few percent above the bar it shortens it less (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sound_fits import heterodyne_fit

from synth.engine.render import render
from synth.voicing import Voicer

FS = 48000


def test_rendered_partials_and_decays_match_the_plan(demo) -> None:
    v = Voicer(demo, sample_rate=FS, tubes=False, channels=1)
    model = v.model("A4")
    voice = v.strike_voice("A4", mallet="hard", position=0.4)
    x = render([voice], 4 * FS, sample_rate=FS)[:, 0]
    checked = 0
    for b in model.budget:
        if b.kind != "vertical" or b.order > 2:
            continue
        f, g = heterodyne_fit(x, FS, b.frequency_hz, 0.2, 3.0)
        # 0.1 cent (issue tolerance) and Q = pi f / slope within 1 %
        assert 1200 * math.log2(f / b.frequency_hz) == pytest.approx(0.0, abs=0.1)
        assert math.pi * f / g == pytest.approx(b.q, rel=0.01)
        checked += 1
    assert checked == 2


def test_strike_at_a_node_leaves_that_mode_silent(demo) -> None:
    v = Voicer(demo, sample_rate=FS, tubes=False, channels=1)
    model = v.model("C5")
    geo = model.modes.geometry
    # centre of a symmetric bar: node of vertical mode 2
    centre = v._excite(model, v_mallet(), 1.0, 0.5, 0.0)[0]
    assert centre[1] < 1e-9 * centre[0]
    # the cord position (node of mode 1)
    node = model.modes.vertical[0].nodes_m[0] / geo.length_m
    at_node = v._excite(model, v_mallet(), 1.0, node, 0.0)[0]
    assert at_node[0] < 1e-6 * at_node[1]
    # on the centre line torsion is silent; off it, excited
    kinds = [b.kind for _, b in model.sounding()]
    tors = kinds.index("torsional")
    assert centre[tors] == 0.0
    assert v._excite(model, v_mallet(), 1.0, 0.3, 0.4)[0][tors] > 0.0


def v_mallet():
    from synth.settings.mallet import load_mallet

    return load_mallet("medium")


def test_chord_is_the_sum_of_its_strikes(demo) -> None:
    v = Voicer(demo, sample_rate=FS, tubes=True, channels=2)
    voices = [v.strike_voice(n, time_s=t, velocity=0.7)
              for n, t in (("F3", 0.0), ("A4", 0.013), ("E6", 0.031))]
    n = FS
    chord = render(voices, n, sample_rate=FS)
    parts = sum(render([vv], n, sample_rate=FS) for vv in voices)
    assert np.max(np.abs(chord - parts)) <= 1e-12 * np.max(np.abs(chord))


def test_tube_shortens_and_lifts_the_fundamental(demo) -> None:
    from dataclasses import replace

    bare = Voicer(demo, sample_rate=FS, tubes=False).model("A4")
    base = Voicer(demo, sample_rate=FS, tubes=True)
    tuned = base.model("A4")
    t_bare = bare.fundamental.t60_s
    coupled = tuned.coupling.pair
    exact = replace(coupled, tube_frequency_hz=coupled.bar_frequency_hz)
    above = replace(coupled, tube_frequency_hz=coupled.bar_frequency_hz * 2 ** (50 / 1200))
    t_exact = exact.modes().t60_s[0]
    t_above = above.modes().t60_s[0]
    assert t_exact < t_above < t_bare
    assert exact.peak_gain_db() > above.peak_gain_db() > 0.0


def test_budget_t60_matches_rendered_decay_with_tube(demo) -> None:
    """Q = pi f tau and T60 = tau ln 1000 between budget (coupled pole) and render, 2 %."""
    v = Voicer(demo, sample_rate=FS, tubes=True, channels=1)
    model = v.model("D5")
    modes = model.coupling.pair.modes()
    x = render([v.strike_voice("D5")], 6 * FS, sample_rate=FS)[:, 0]
    f, g = heterodyne_fit(x, FS, modes.frequency_hz[0], 1.0, 5.5)
    assert math.log(1000) / g == pytest.approx(modes.t60_s[0], rel=0.02)
    assert math.pi * f / g == pytest.approx(modes.q[0], rel=0.02)


def _envelope_peak_hz(x: np.ndarray, f0: float, t0: float, t1: float) -> tuple[float, float]:
    n = np.arange(len(x))
    z = x * np.exp(-2j * np.pi * f0 * n / FS)
    m = FS // 50  # 20 ms blocks: envelope at 50 Hz; other partials average out
    k = len(z) // m
    env = np.abs(z[: k * m].reshape(k, m).mean(axis=1))
    t = np.arange(k) * m / FS
    seg = env[(t >= t0) & (t < t1)]
    seg = np.log(seg)
    seg = seg - np.polyval(np.polyfit(np.arange(len(seg)), seg, 1), np.arange(len(seg)))
    spec = np.abs(np.fft.rfft(seg * np.hanning(len(seg))))
    freqs = np.fft.rfftfreq(len(seg), 1 / 50)
    sel = freqs > 0.8
    return float(freqs[sel][np.argmax(spec[sel])]), float(np.max(spec[sel]) / len(seg))


def test_motor_modulates_the_fundamental_at_twice_the_rotation_rate(demo) -> None:
    rate = 2.5
    on = Voicer(demo, sample_rate=FS, tubes=True, channels=1, motor_rate_rev_per_s=rate)
    off = Voicer(demo, sample_rate=FS, tubes=True, channels=1, motor_rate_rev_per_s=0.0)
    f0 = on.model("A4").coupling.pair.modes().frequency_hz[0]
    x_on = render([on.strike_voice("A4")], 5 * FS, sample_rate=FS)[:, 0]
    x_off = render([off.strike_voice("A4")], 5 * FS, sample_rate=FS)[:, 0]
    peak_on, depth_on = _envelope_peak_hz(x_on, f0, 1.0, 5.0)
    _, depth_off = _envelope_peak_hz(x_off, f0, 1.0, 5.0)
    assert peak_on == pytest.approx(2 * rate, abs=0.3)  # FFT bin 0.25 Hz
    assert depth_off < 0.05 * depth_on


def test_released_note_is_damped_only_when_the_dampers_rest(demo) -> None:
    v = Voicer(demo, sample_rate=FS, tubes=False, channels=1)
    held = v.strike_voice("G4", release_s=0.5, pedal=((0.0, 1.0),))
    damped = v.strike_voice("G4", release_s=0.5, pedal=((0.0, 0.0),))
    half = v.strike_voice("G4", release_s=0.5, pedal=((0.0, 0.5),))
    rate = math.log(1000) / v.sound.damper_t60_s
    assert held.damping == ((int(0.5 * FS), 0.0),)
    assert damped.damping == ((int(0.5 * FS), pytest.approx(rate)),)
    assert half.damping[0][1] == pytest.approx(0.5 * rate)
    # pedal lifted later stops the damping from that sample
    later = v.strike_voice("G4", release_s=0.5, pedal=((0.0, 0.0), (1.0, 1.0)))
    assert later.damping == ((int(0.5 * FS), pytest.approx(rate)), (FS, 0.0))
