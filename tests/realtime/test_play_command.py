"""``barwright play`` without devices: one clear line and exit 2; a MIDI file to WAV.

No sound card or MIDI port exists on a test machine, and the tests do not rely
on that: the missing module, device and port are simulated by monkeypatching.
The ``--to-wav`` output is checked against the offline render of the same file
at the player's gain (level match times ``--gain-db``), through a float WAV.
"""

from __future__ import annotations

import sys
import types

import mido
import numpy as np
import pytest
from realtime_common import DEMO
from typer.testing import CliRunner

from synth.cli import app
from synth.live import recorded_midi


def run(*args):
    """Invoke ``barwright`` in-process (planning here too); stdout and stderr apart."""
    if args[0] == "play" and "--list-ports" not in args:
        args = (*args, "--workers", 1)
    return CliRunner().invoke(app, [str(a) for a in args])


def one_line_error(result, *needles):
    """Exit 2, one stderr line holding every needle, no traceback."""
    assert result.exit_code == 2, (result.exit_code, result.stderr, result.exception)
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("barwright: error: ")
    assert "Traceback" not in result.stdout + result.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])


def fake_sounddevice(has_device: bool):
    """Return a stand-in for sounddevice whose output device exists or not."""
    mod = types.ModuleType("sounddevice")

    def query_devices(kind=None):
        if not has_device:
            raise RuntimeError("Error querying device -1")
        return {"name": "test output"}

    mod.query_devices = query_devices
    return mod


def test_no_sounddevice_module(monkeypatch):
    """Without the play extra: says to install it, exit 2."""
    monkeypatch.setitem(sys.modules, "sounddevice", None)
    one_line_error(run("play", DEMO), "sounddevice", "barwright[play]")


def test_no_portaudio_library(monkeypatch):
    """The sounddevice module is there but PortAudio is missing (its import raises OSError)."""
    class Finder:
        def find_spec(self, name, path=None, target=None):
            if name == "sounddevice":
                raise OSError("PortAudio library not found")
            return None

    monkeypatch.delitem(sys.modules, "sounddevice", raising=False)
    monkeypatch.setattr(sys, "meta_path", [Finder()] + sys.meta_path)
    one_line_error(run("play", DEMO), "PortAudio")


def test_no_output_device(monkeypatch):
    """The module loads but no output device exists."""
    monkeypatch.setitem(sys.modules, "sounddevice", fake_sounddevice(False))
    one_line_error(run("play", DEMO), "no audio output device", "--to-wav")


def test_no_midi_port(monkeypatch):
    """An output device but no MIDI input port: says how to list ports or play a file."""
    monkeypatch.setitem(sys.modules, "sounddevice", fake_sounddevice(True))
    monkeypatch.setattr(mido, "get_input_names", lambda: [])
    one_line_error(run("play", DEMO), "no MIDI input port", "--midi-file")


def test_unknown_port(monkeypatch):
    """A named port that does not exist: the ports found are listed."""
    monkeypatch.setitem(sys.modules, "sounddevice", fake_sounddevice(True))
    monkeypatch.setattr(mido, "get_input_names", lambda: ["Keys 1"])
    one_line_error(run("play", DEMO, "--port", "Drums"), "--port", "'Keys 1'")


def test_no_midi_backend(monkeypatch):
    """No backend for mido (its ImportError): says to install the play extra."""
    def missing():
        raise ImportError("No module named 'rtmidi'")

    monkeypatch.setattr(mido, "get_input_names", missing)
    one_line_error(run("play", DEMO, "--list-ports"), "mido backend", "barwright[play]")


def test_to_wav_needs_a_file():
    """--to-wav without --midi-file is a usage error."""
    one_line_error(run("play", DEMO, "--to-wav", "x.wav"), "--to-wav", "--midi-file")


@pytest.mark.parametrize("block", [32, 1024])
def test_midi_file_to_wav_equals_render(tmp_path, block):
    """The callback's blocks, written as a float WAV, against the offline render at one gain.

    Reference: :func:`synth.engine.render` of the file's voices (no voice
    retired) times the player's gain, the level match of
    :func:`synth.live.level_scales` (the same computation, run here) times
    ``--gain-db``.  Tolerance: float32 rounding of the WAV (2^-24 of each sample)
    plus the -150 dBFS below which the pool frees voices, plus rounding.
    """
    from synth.engine import render
    from synth.io import read_audio
    from synth.live import level_scales
    from synth.settings.instrument import load_instrument
    from synth.settings.score import read_midi
    from synth.voicing import Voicer

    m = mido.Message
    events = [(200, m("note_on", note=53, velocity=127)),
              (4000, m("note_on", note=72, velocity=64)),
              (20000, m("note_off", note=53)),
              (26000, m("note_off", note=72)),
              (30000, m("control_change", control=64, value=0))]
    midi = tmp_path / "phrase.mid"
    recorded_midi(events, 48000.0).save(midi)
    wav = tmp_path / "phrase.wav"
    rec = tmp_path / "played.mid"
    result = run("play", DEMO, "--midi-file", midi, "--to-wav", wav, "--format", "float32",
                 "--layers", 2, "--block", block, "--gain-db", -6, "--record", rec)
    assert result.exit_code == 0, result.stderr
    from synth.settings.score import midi_file_events
    played = [(t, str(x.copy(time=0))) for t, x in midi_file_events(rec, 48000.0)]
    assert played == [(t, str(x.copy(time=0))) for t, x in events]
    got, fs = read_audio(wav)
    # the live pool starts every mode in its free form: no contact onset (Voicer.attack)
    voicer = Voicer(load_instrument(DEMO), sample_rate=48000.0, channels=2, attack=False)
    gain = level_scales([voicer])[0] * 10 ** (-6 / 20)
    voices = voicer.score_voices(read_midi(midi), default_pedal=1.0)
    ref = gain * render(voices, got.shape[0], sample_rate=48000.0, channels=2, retire_db=None)
    assert got.shape[0] > 30000
    tol = 2.0 ** -24 * float(np.max(np.abs(ref))) + 10 ** (-150 / 20) * len(voices) + 1e-12
    assert float(np.max(np.abs(got - ref))) <= tol
    assert float(np.max(np.abs(got))) <= 10 ** (-1 / 20)


class _FakeStream:
    """An output device that runs the callback in a thread, as PortAudio would."""

    played: list = []

    def __init__(self, *, samplerate, blocksize, channels, dtype, callback):
        self.block = blocksize
        self.channels = channels
        self.callback = callback
        self.stop = False

    def _run(self):
        import time as _time

        status = types.SimpleNamespace(output_underflow=False)
        while not self.stop:
            out = np.zeros((self.block, self.channels), dtype=np.float32)
            self.callback(out, self.block, None, status)
            _FakeStream.played.append(out)
            _time.sleep(self.block / 48000.0)   # paced like a device at 48 kHz

    def __enter__(self):
        import threading

        self.thread = threading.Thread(target=self._run, daemon=True)
        self.thread.start()
        return self

    def __exit__(self, *exc):
        self.stop = True
        self.thread.join()


def test_midi_file_through_a_device_equals_to_wav(monkeypatch, tmp_path):
    """Played on a (simulated) device, a file gives the blocks --to-wav writes; one status line.

    The device callback runs in its own thread while the command feeds the
    file's events ahead of the stream; the blocks it hands the device must be
    the blocks ``--to-wav`` writes (same events at the same samples), to
    float32 rounding of the WAV.
    """
    from synth.io import read_audio

    sd = fake_sounddevice(True)
    sd.OutputStream = _FakeStream
    _FakeStream.played = []
    monkeypatch.setitem(sys.modules, "sounddevice", sd)
    m = mido.Message
    events = [(300, m("note_on", note=65, velocity=127)),
              (6000, m("note_off", note=65)),
              (6100, m("control_change", control=64, value=0))]
    midi = tmp_path / "short.mid"
    recorded_midi(events, 48000.0).save(midi)
    live = run("play", DEMO, "--midi-file", midi, "--layers", 1, "--block", 256)
    assert live.exit_code == 0, live.stderr
    assert "volume low" in live.stderr and "sounding" in live.stderr
    wav = tmp_path / "short.wav"
    offline = run("play", DEMO, "--midi-file", midi, "--layers", 1, "--block", 256,
                  "--to-wav", wav, "--format", "float32")
    assert offline.exit_code == 0, offline.stderr
    got, _ = read_audio(wav)
    played = np.concatenate(_FakeStream.played)[:got.shape[0]].astype(np.float64)
    assert played.shape == got.shape
    assert float(np.max(np.abs(played - got))) <= 2.0 ** -24 * float(np.max(np.abs(got)))


def test_port_input_is_played_and_recorded(monkeypatch, tmp_path):
    """Messages from a (simulated) port sound, and --record keeps them in order.

    The port delivers a strike, the pedal and its release from its own thread
    once the stream runs; Ctrl-C (simulated in the feeding loop's sleep) ends
    the run with exit 0 and the recording written, its events one block apart
    as stamped (each lands one block after the block being played).
    """
    import threading

    import synth.cli.cmd_play as cmd_play

    sd = fake_sounddevice(True)
    sd.OutputStream = _FakeStream
    _FakeStream.played = []
    monkeypatch.setitem(sys.modules, "sounddevice", sd)
    monkeypatch.setattr(mido, "get_input_names", lambda: ["Keys 1"])
    m = mido.Message
    sent = [m("note_on", note=65, velocity=127), m("control_change", control=64, value=0),
            m("note_off", note=65)]

    class FakePort:
        def __init__(self, name, callback):
            def feed():
                for msg in sent:
                    while len(_FakeStream.played) < 20:
                        threading.Event().wait(0.002)
                    callback(msg)
                    n = len(_FakeStream.played)
                    while len(_FakeStream.played) < n + 10:
                        threading.Event().wait(0.002)
            self.thread = threading.Thread(target=feed, daemon=True)
            self.thread.start()

        def close(self):
            self.thread.join()

    monkeypatch.setattr(mido, "open_input", lambda name, callback: FakePort(name, callback))
    real_sleep = cmd_play.time.sleep

    def sleep(seconds):   # Ctrl-C in the command's own loop only
        if threading.current_thread() is threading.main_thread() \
                and len(_FakeStream.played) > 80:
            raise KeyboardInterrupt
        real_sleep(seconds)

    monkeypatch.setattr(cmd_play.time, "sleep", sleep)
    rec = tmp_path / "take.mid"
    result = run("play", DEMO, "--port", "Keys 1", "--layers", 1, "--block", 256,
                 "--record", rec)
    assert result.exit_code == 0, result.stderr
    from synth.settings.score import midi_file_events

    got = midi_file_events(rec, 48000.0)
    assert [str(x.copy(time=0)) for _, x in got] == [str(x) for x in sent]
    assert [t % 256 for t, _ in got] == [0, 0, 0]          # stamped at block starts
    assert all(b > a for (a, _), (b, _) in zip(got, got[1:], strict=False))
    played = np.concatenate(_FakeStream.played)
    assert np.any(played[got[0][0]:])                     # the strike sounds
    assert not np.any(played[:got[0][0]])                  # and nothing before it


def test_controllers_must_differ():
    """The motor and design controllers may not share a number or take the pedal's (64)."""
    one_line_error(run("play", DEMO, "--motor-cc", 64), "--motor-cc 64", "64")
    one_line_error(run("play", DEMO, "--motor-cc", 5, "--switch-cc", 5), "--switch-cc 5")
