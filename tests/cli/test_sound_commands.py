"""Sound commands end to end: files, overwrite refusal, MIDI and bad input."""

from __future__ import annotations

import json
from pathlib import Path

import mido
import numpy as np
import pytest
import soundfile as sf
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir

DEMO = presets_dir() / "instruments" / "lantern-street-bars.toml"


def run(*args):
    """Invoke ``barwright`` in-process; stdout and stderr are kept apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


def test_strike_writes_wav_and_sidecar_and_refuses_to_overwrite(tmp_path: Path) -> None:
    """A strike writes WAV and sidecar at -1 dBFS; a second run needs --force."""
    out = tmp_path / "a4.wav"
    r = run("strike", DEMO, "A4", "--duration", "1.0", "--out", out)
    assert r.exit_code == 0, r.output
    data, fs = sf.read(out)
    assert fs == 48000 and data.shape == (48000, 2)
    assert np.max(np.abs(data)) <= 10 ** (-1 / 20) + 1e-6  # -1 dBFS, never clipped
    side = json.loads(out.with_suffix(".json").read_text())
    assert side["note"] == "A4" and side["gain_mode"] == "normalise"
    before = out.read_bytes()
    again = run("strike", DEMO, "A4", "--duration", "0.5", "--out", out)
    assert again.exit_code == 2 and "already exists" in again.stderr
    assert out.read_bytes() == before
    forced = run("strike", DEMO, "A4", "--duration", "0.5", "--out", out, "--force")
    assert forced.exit_code == 0 and sf.info(out).frames == 24000


@pytest.mark.parametrize(("fmt", "subtype"), [("pcm16", "PCM_16"), ("pcm24", "PCM_24"),
                                              ("float32", "FLOAT")])
def test_formats_and_rates(tmp_path: Path, fmt: str, subtype: str) -> None:
    """Each sample format and rate lands in the file header."""
    out = tmp_path / f"{fmt}.wav"
    r = run("strike", DEMO, "C5", "--duration", "0.3", "--format", fmt, "--sample-rate", "44100",
            "--channels", "1", "--out", out)
    assert r.exit_code == 0, r.output
    info = sf.info(out)
    assert info.subtype == subtype and info.samplerate == 44100 and info.channels == 1


def test_fixed_gain_that_would_clip_is_lowered_and_warned(tmp_path: Path) -> None:
    """A fixed gain that would clip is lowered, with a warning."""
    out = tmp_path / "loud.wav"
    r = run("strike", DEMO, "A4", "--duration", "0.5", "--gain-db", "60", "--out", out)
    assert r.exit_code == 0, r.output
    assert "would clip" in r.stderr
    assert np.max(np.abs(sf.read(out)[0])) < 1.0


def test_midi_file_renders_notes_at_their_times(tmp_path: Path) -> None:
    """MIDI notes start on their sample; the sustain pedal holds them, then damps them."""
    mid = mido.MidiFile(ticks_per_beat=480)
    track = mido.MidiTrack()
    mid.tracks.append(track)
    track.append(mido.MetaMessage("set_tempo", tempo=500000, time=0))  # 120 bpm
    track.append(mido.Message("control_change", control=64, value=127, time=0))
    track.append(mido.Message("note_on", note=69, velocity=90, time=0))  # A4 at 0 s
    track.append(mido.Message("note_off", note=69, velocity=0, time=240))
    track.append(mido.Message("note_on", note=72, velocity=90, time=240))  # C5 at 0.5 s
    track.append(mido.Message("note_off", note=72, velocity=0, time=240))
    track.append(mido.Message("control_change", control=64, value=0, time=480))  # 1.25 s
    path = tmp_path / "two.mid"
    mid.save(path)
    out = tmp_path / "two.wav"
    r = run("render", DEMO, path, "--out", out, "--channels", "1", "--format", "float32")
    assert r.exit_code == 0, r.output
    x, fs = sf.read(out)
    # silence before nothing; C5 starts exactly at sample 24000: the signal there
    # jumps from the A4 alone to A4 + C5
    from synth.engine.render import render
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    v = Voicer(load_instrument(DEMO), sample_rate=float(fs), channels=1)
    a4 = v.strike_voice("A4", time_s=0.0, velocity=90 / 127, release_s=0.25,
                        pedal=((0.0, 0.0), (0.0, 1.0), (1.25, 0.0)))
    alone = render([a4], 24000, sample_rate=fs)[:, 0]
    gain = x[1000] / alone[1000]
    assert np.allclose(x[:24000], gain * alone, atol=1e-6 * np.max(np.abs(x)))
    assert abs(x[24000 + 5] - gain * render([a4], 24006, sample_rate=fs)[24005, 0]) > 1e-4
    # the pedal goes down at 1.25 s: the sound dies (dampers T60 0.25 s) well before the end
    assert len(x) / fs < 1.25 + 0.5
    _assert_pedal_holds_then_dampers_fall(x, fs, pedal_down_s=1.25)


def _assert_pedal_holds_then_dampers_fall(x: np.ndarray, fs: int, *, pedal_down_s: float) -> None:
    """Both keys were released with the pedal up: the notes ring until it goes down.

    Just before the pedal goes down the level is within 10 dB of the peak (without
    the pedal the dampers would have fallen at the note-offs, 0.25 and 0.75 s, and
    taken 60 dB per 0.25 s). After it, the dampers decay the sound at 60 dB per damper
    T60 (the preset's damper_t60_s, by the definition of T60; physics.md section 6), so
    the peak of the last 50 ms must lie at least 60 (t - t_pedal) / T60 - 10 dB below
    the file's peak, t the start of that stretch: the 10 dB margin covers the level
    already below the peak at the pedal (measured 2.5 dB) and the dampers' onset.
    Measured: 35 dB required, 50 dB found.
    """
    import tomllib

    t60 = tomllib.loads(DEMO.read_text(encoding="utf-8"))["sound"]["damper_t60_s"]
    peak = float(np.max(np.abs(x)))
    before = x[int((pedal_down_s - 0.1) * fs):int((pedal_down_s - 0.05) * fs)]
    assert 20 * np.log10(np.max(np.abs(before)) / peak) >= -10.0
    start = len(x) / fs - 0.05
    required_db = 60.0 * (start - pedal_down_s) / t60 - 10.0
    assert required_db >= 30.0  # the file runs long enough past the pedal to tell
    tail = x[int(start * fs):]
    assert 20 * np.log10(np.max(np.abs(tail)) / peak) <= -required_db


def test_bad_inputs_exit_2_with_one_line(tmp_path: Path) -> None:
    """Bad notes, mallets, rates, formats and event files: exit 2, one line."""
    cases = [
        ("strike", DEMO, "H4"),
        ("strike", DEMO, "C8"),
        ("strike", DEMO, "A4", "--mallet", "anvil"),
        ("strike", DEMO, "A4", "--sample-rate", "22050"),
        ("strike", DEMO, "A4", "--format", "mp3"),
        ("chord", DEMO, "F3 X9"),
        ("render", DEMO, tmp_path / "missing.toml"),
    ]
    bad_events = tmp_path / "bad.toml"
    bad_events.write_text('[[strike]]\ntime_s = -1\nnote = "A4"\nvelocity = 0.5\n')
    cases.append(("render", DEMO, bad_events))
    for args in cases:
        r = run(*args, "--out", tmp_path / "x.wav")
        assert r.exit_code == 2, (args, r.output)
        lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
        assert len(lines) == 1 and "Traceback" not in r.output, (args, r.stderr)
    assert not (tmp_path / "x.wav").exists()
