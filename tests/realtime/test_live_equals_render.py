"""The live pool against the offline renderer: the same events give the same samples.

A scripted MIDI stream (strikes at two velocities, note-offs, a key struck
again while held, pedal down, half pedal, up) goes through a live player and
its audio callback in blocks of 32 to 1024 samples; the player records what it
was given as a standard MIDI file, which the offline reader
(:func:`synth.settings.score.read_midi`), the voice plan and
:func:`synth.engine.render` turn into samples independently.  Both at one gain,
before any normalisation and with no voice retired, they agree to the rounding
bound of the recursions (``rt_helpers.rounding_bound``, about 1.3e-9 here) and
within 1e-9 of full scale, whichever is smaller.  Measured: 1.1e-14 (motor
stopped) and 3.6e-14 (motor at 3 rev/s).
"""

from __future__ import annotations

import mido
import numpy as np
import pytest
from rt_helpers import rounding_bound, run_pool, set_gain_now

from synth.engine import render
from synth.live import recorded_midi
from synth.settings.score import read_midi

N_SAMPLES = 70_000
PEAK = 0.5   # the live output's peak, full scale: well under the -1 dBFS ceiling


def script():
    """(sample, message): four strikes, releases, a repeat while held, pedal moves."""
    m = mido.Message
    return [
        (10, m("control_change", control=64, value=0)),       # dampers down
        (100, m("note_on", note=53, velocity=127)),           # F3
        (2000, m("note_on", note=69, velocity=64)),           # A4, soft layer
        (7000, m("note_on", note=57, velocity=127)),          # A3
        (9000, m("note_off", note=53)),                        # F3 damped at once
        (12000, m("control_change", control=64, value=64)),   # half pedal
        (15000, m("note_off", note=69)),
        (20000, m("note_on", note=69, velocity=127)),         # A4 again
        (30000, m("control_change", control=64, value=127)),  # dampers lifted
        (33000, m("note_off", note=57)),
        (35000, m("note_on", note=69, velocity=0)),           # note-on at 0 releases
        (50000, m("control_change", control=64, value=20)),
    ]


def compare(player, tmp_path, scheme):
    """Play the script live and offline; return the difference, its bound, the player."""
    player.reset(gain_db=0.0)
    player.start_recording()
    for sample, msg in script():
        player.handle(msg, sample)
    path = tmp_path / "played.mid"
    recorded_midi(player.recording, player.sample_rate).save(path)
    voicer = player.voicers[0]
    voices = voicer.score_voices(read_midi(path), default_pedal=1.0)
    ref = render(voices, N_SAMPLES, sample_rate=player.sample_rate, channels=2,
                 retire_db=None)
    gain = PEAK / float(np.max(np.abs(ref)))
    set_gain_now(player.pool, gain)
    live = run_pool(player.pool, N_SAMPLES, scheme)
    struck = [player.template(msg.note, msg.velocity) for _, msg in script()
              if msg.type == "note_on" and msg.velocity > 0]
    bound = rounding_bound(player.pool, N_SAMPLES, gain, struck)
    return float(np.max(np.abs(live - ref * gain))), bound, player


@pytest.mark.parametrize("scheme", [32, 64, 1024, "random"])
def test_motor_running_matches_render(motor_player, tmp_path, scheme):
    """Motor at 3 rev/s from sample 0 with the preset's spin-up: discs modulate every tube."""
    diff, bound, player = compare(motor_player, tmp_path, scheme)
    assert diff <= min(bound, 1e-9), f"{diff:.3g} > {min(bound, 1e-9):.3g}"
    assert player.pool.fault is None and player.pool.limited_blocks == 0


@pytest.mark.parametrize("scheme", [64, "random"])
def test_motor_stopped_matches_render(still_player, tmp_path, scheme):
    """Motor stopped (discs edge-on): the offline pair is constant, the live law at rest."""
    diff, bound, _ = compare(still_player, tmp_path, scheme)
    assert diff <= min(bound, 1e-9), f"{diff:.3g} > {min(bound, 1e-9):.3g}"


def test_pedal_at_time_zero(motor_player, tmp_path):
    """A pedal change at sample 0 acts from the first sample, live and offline alike."""
    motor_player.reset(gain_db=0.0)
    motor_player.start_recording()
    events = [(0, mido.Message("control_change", control=64, value=0))] + script()[1:]
    for sample, msg in events:
        motor_player.handle(msg, sample)
    path = tmp_path / "played.mid"
    recorded_midi(motor_player.recording, motor_player.sample_rate).save(path)
    voices = motor_player.voicers[0].score_voices(read_midi(path), default_pedal=1.0)
    ref = render(voices, N_SAMPLES, sample_rate=motor_player.sample_rate, channels=2,
                 retire_db=None)
    gain = PEAK / float(np.max(np.abs(ref)))
    set_gain_now(motor_player.pool, gain)
    live = run_pool(motor_player.pool, N_SAMPLES, 64)
    assert float(np.max(np.abs(live - ref * gain))) <= 1e-9
