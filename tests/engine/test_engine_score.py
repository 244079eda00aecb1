"""Event input: our TOML event list and standard MIDI files written with mido.

MIDI timing reference: Standard MIDI Files 1.0 (MIDI Manufacturers
Association): seconds = ticks x tempo_us_per_quarter / (1e6 x ticks_per_quarter),
tempo meta-events change the rate from their tick on; note-on with velocity 0
is a note-off; controller 64 is the sustain (damper) pedal.
"""

from __future__ import annotations

import re

import mido
import numpy as np
import pytest

from synth.engine import ModeBank, Voice, render, seconds_to_sample
from synth.engine.score import PedalChange, Strike
from synth.errors import ConfigError
from synth.settings import score
from synth.settings.score import read_events, read_midi

FS = 48000


def docstring_example() -> str:
    """Return the TOML example printed in synth.settings.score's docstring."""
    doc = score.__doc__
    block = doc.split("in any order (events are sorted by time)::\n", 1)[1]
    block = block.split("Keys of ``[[strike]]``", 1)[0]
    return "\n".join(line[4:] for line in block.splitlines())


def test_docstring_example_parses(tmp_path):
    """The documented example reads back as documented."""
    path = tmp_path / "demo.toml"
    path.write_text(docstring_example(), encoding="utf-8")
    s = read_events(path)
    assert s.length_s == 12.0
    assert [x.note for x in s.strikes] == ["F3", "A3", "C5"]
    f3, a3, c5 = s.strikes
    assert f3 == Strike(0.0, "F3", velocity=0.8)
    assert a3 == Strike(0.03, "A3", mallet_speed_m_s=1.6, mallet="medium", position=0.5,
                        across=0.1)
    # beat 4 at 90 bpm = 4 x 60/90 s; one beat later the release
    assert c5.time_s == pytest.approx(8.0 / 3.0, rel=1e-15)
    assert c5.release_s == pytest.approx(10.0 / 3.0, rel=1e-15)
    assert s.pedal == (PedalChange(0.0, 1.0), PedalChange(4.0, 0.5))
    assert s.last_event_s == pytest.approx(4.0)


def test_events_are_sorted_and_notes_spelled_with_sharps(tmp_path):
    """Events come out sorted by time, notes in sharp spelling."""
    path = tmp_path / "e.toml"
    path.write_text('[[strike]]\ntime_s = 1.0\nnote = "Bb3"\nvelocity = 0.5\n'
                    '[[strike]]\ntime_s = 0.5\nnote = "C4"\nvelocity = 0.5\n'
                    '[[strike]]\ntime_s = 2.0\nnote = "E4"\nvelocity = 0.5\nduration_s = 0.25\n',
                    encoding="utf-8")
    s = read_events(path)
    assert [(x.time_s, x.note) for x in s.strikes] == [(0.5, "C4"), (1.0, "A#3"), (2.0, "E4")]
    assert s.strikes[2].release_s == 2.25
    assert s.pedal == () and s.length_s is None


@pytest.mark.parametrize("body, message", [
    ('[[strike]]\ntime_s = 0\nnote = "A4"\nvelocity = 1.5\n',
     "strike[0].velocity = 1.5: too large; allowed: 0 to 1"),
    ('[[strike]]\ntime_s = 0\nnote = "H4"\nvelocity = 0.5\n',
     "strike[0].note = 'H4': unknown note"),
    ('[[strike]]\ntime_s = 0\nnote = "A4"\nvelocty = 0.5\n',
     "strike[0].velocty = 0.5: unknown key"),
    ('[[strike]]\nbeat = 1\nnote = "A4"\nvelocity = 0.5\n',
     "strike[0].beat = 1: needs tempo_bpm in the [score] table"),
    ('[[strike]]\ntime_s = 0\nbeat = 1\nnote = "A4"\nvelocity = 0.5\n',
     "strike[0]: give exactly one of time_s (seconds) or beat"),
    ('[[strike]]\ntime_s = 0\nnote = "A4"\n',
     "strike[0]: give exactly one of velocity (0..1) or mallet_speed_m_s (m/s)"),
    ('[[strike]]\ntime_s = -1\nnote = "A4"\nvelocity = 0.5\n',
     "strike[0].time_s = -1: too small; allowed: 0 to 14400 s"),
    ('[[pedal]]\ntime_s = 0\nvalue = 2\n', "pedal[0].value = 2: too large; allowed: 0 to 1"),
    ('[score]\ntempo_bpm = 0\n', "score.tempo_bpm = 0: too small; allowed: 10 to 1000 bpm"),
    ('strike = 3\n', "strike = 3: must be an array of tables, written [[strike]]"),
])
def test_bad_event_files_name_file_key_value_rule(tmp_path, body, message):
    """Each error names the file, the key, the value and the rule."""
    path = tmp_path / "bad.toml"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(ConfigError, match=re.escape(f"{path}: {message}")):
        read_events(path)


def test_unknown_event_file_type(tmp_path):
    """Only .toml and MIDI suffixes are read."""
    with pytest.raises(ConfigError, match="unknown event file type '.txt'"):
        read_events(tmp_path / "events.txt")


# --------------------------------------------------------------------------- MIDI
def write_midi(path, tracks, ticks_per_beat=480, midi_type=1):
    """Write a MIDI file with mido from lists of messages per track."""
    mid = mido.MidiFile(type=midi_type, ticks_per_beat=ticks_per_beat)
    for messages in tracks:
        track = mido.MidiTrack()
        track.extend(messages)
        mid.tracks.append(track)
    mid.save(path)
    return path


@pytest.fixture
def passage(tmp_path):
    """Tempo 120 bpm, then 150 bpm from beat 2; three notes, sustain down and up."""
    tempo_track = [mido.MetaMessage("set_tempo", tempo=500_000, time=0),
                   mido.MetaMessage("set_tempo", tempo=400_000, time=960)]
    notes = [
        mido.Message("note_on", note=53, velocity=127, time=0),        # F3 at 0 s
        mido.Message("control_change", control=64, value=127, time=240),  # 0.25 s
        mido.Message("note_on", note=69, velocity=64, time=240),       # A4 at 0.5 s
        mido.Message("note_off", note=53, velocity=0, time=240),       # F3 off 0.75 s
        mido.Message("note_on", note=69, velocity=0, time=240),        # A4 off 1.0 s
        mido.Message("note_on", note=72, velocity=32, time=240),       # C5 1.0 + 0.2 s
        mido.Message("control_change", control=64, value=0, time=480),  # 1.6 s
        mido.Message("note_off", note=72, velocity=0, time=120),       # 1.7 s
    ]
    return write_midi(tmp_path / "passage.mid", [tempo_track, notes])


def test_midi_times_velocities_and_sustain(passage):
    """Times follow the tempo map exactly; velocities are v/127; CC64 is the pedal."""
    s = read_midi(passage)
    assert [(x.note, x.time_s, x.release_s) for x in s.strikes] == [
        ("F3", 0.0, 0.75), ("A4", 0.5, 1.0), ("C5", 1.2, 1.7)]
    assert [x.velocity for x in s.strikes] == [1.0, 64 / 127, 32 / 127]
    assert all(x.mallet is None and x.position is None for x in s.strikes)
    assert s.pedal == (PedalChange(0.25, 1.0), PedalChange(1.6, 0.0))
    # sample-exact: every event lands on the whole sample the tempo map gives
    assert [seconds_to_sample(x.time_s, FS) for x in s.strikes] == [0, 24000, 57600]
    assert [seconds_to_sample(p.time_s, FS) for p in s.pedal] == [12000, 76800]


def test_midi_strikes_start_voices_on_their_samples(passage):
    """Voices started from the MIDI events sound from exactly those samples."""
    s = read_midi(passage)
    voices = [Voice(seconds_to_sample(x.time_s, FS),
                    ModeBank([440.0], [2.0], [x.velocity], [np.pi / 2]))
              for x in s.strikes]
    y = render(voices, int(1.5 * FS), sample_rate=FS)[:, 0]
    first = int(np.flatnonzero(y)[0])
    assert first == 0 and y[0] == 1.0
    for v in voices[1:]:
        alone = render([w for w in voices if w.start_sample < v.start_sample], y.size,
                       sample_rate=FS)[:, 0]
        added = y - alone
        assert np.all(added[: v.start_sample] == 0.0)
        assert added[v.start_sample] != 0.0


def test_midi_restrike_while_held_releases_the_first(tmp_path):
    """A key struck again while held releases the first note at the new strike."""
    msgs = [mido.Message("note_on", note=60, velocity=90, time=0),
            mido.Message("note_on", note=60, velocity=80, time=480),
            mido.Message("note_off", note=60, velocity=0, time=480)]
    s = read_midi(write_midi(tmp_path / "r.mid", [msgs], midi_type=0))
    assert [(x.time_s, x.release_s) for x in s.strikes] == [(0.0, 0.5), (0.5, 1.0)]


def test_midi_half_pedal_values(tmp_path):
    """Controller 64 values in between are kept as half pedal."""
    msgs = [mido.Message("control_change", control=64, value=v, time=96) for v in (127, 64, 0)]
    s = read_midi(write_midi(tmp_path / "p.mid", [msgs], midi_type=0))
    assert [p.value for p in s.pedal] == [1.0, 64 / 127, 0.0]
    # integer ticks x microseconds, one division: the times are correctly rounded
    assert [p.time_s for p in s.pedal] == [0.1, 0.2, 0.3]


def test_unreadable_midi(tmp_path):
    """A file that is not MIDI, or is missing, gives a ConfigError naming it."""
    bad = tmp_path / "bad.mid"
    bad.write_bytes(b"this is not MIDI")
    with pytest.raises(ConfigError, match="bad.mid: not a readable standard MIDI file"):
        read_midi(bad)
    with pytest.raises(ConfigError, match="file not found"):
        read_midi(tmp_path / "none.mid")
