"""WAV writing, reading, sidecars and playback errors (synth.io).

External reference: soundfile (libsndfile) reads every file back; PCM steps
are 2^-15 (16-bit) and 2^-23 (24-bit) of full scale (WAV PCM format).
"""

from __future__ import annotations

import json
import sys
import types

import numpy as np
import pytest
import soundfile as sf

from synth.engine import ModeBank, Voice, measure_peak, plan_gain, render_blocks
from synth.errors import AudioError
from synth.io import play, read_audio, sidecar_path, write_sidecar, write_wav

FS = 48000


def tone(n=4800, channels=1, peak=0.5):
    """Return a 441 Hz sine of ``peak`` amplitude, mono or stereo."""
    t = np.arange(n) / FS
    x = peak * np.sin(2 * np.pi * 441.0 * t)
    return np.column_stack([x, -0.5 * x])[:, :channels]


def _leftovers(folder):
    return [p.name for p in folder.iterdir() if ".partial" in p.name]


@pytest.mark.parametrize("fmt, subtype, step", [("pcm16", "PCM_16", 2.0 ** -15),
                                                ("pcm24", "PCM_24", 2.0 ** -23),
                                                ("float32", "FLOAT", 6e-8)])
@pytest.mark.parametrize("channels", [1, 2])
def test_formats_read_back_by_soundfile(tmp_path, fmt, subtype, step, channels):
    """Each format reads back within one quantisation step (float: float32 rounding)."""
    x = tone(channels=channels)
    path = write_wav(tmp_path / "t.wav", x, sample_rate=FS, sample_format=fmt)
    info = sf.info(path)
    assert (info.samplerate, info.channels, info.subtype, info.frames) == \
        (FS, channels, subtype, x.shape[0])
    back, rate = sf.read(path, always_2d=True)
    assert rate == FS
    assert np.max(np.abs(back - x)) <= step


@pytest.mark.parametrize("rate", [44100, 96000])
def test_other_sample_rates(tmp_path, rate):
    """44.1 and 96 kHz files carry their rate."""
    path = write_wav(tmp_path / "r.wav", tone(), sample_rate=rate)
    assert sf.info(path).samplerate == rate


def test_streamed_normalised_chord_never_clips(tmp_path):
    """A chord normalised to -1 dBFS: largest 16-bit sample 29205 = 0.891251 x 2^15."""
    voices = [Voice(s, ModeBank([f, 4 * f], [1.0, 3.0], [0.9, 0.4]))
              for s, f in ((0, 175.0), (30, 220.0), (60, 262.0))]
    n = FS
    plan = plan_gain(measure_peak(voices, n, sample_rate=FS))
    path = write_wav(tmp_path / "chord.wav",
                     render_blocks(voices, n, sample_rate=FS, gain=plan.gain, block_size=1000),
                     sample_rate=FS, sample_format="pcm16")
    ints, _ = sf.read(path, dtype="int16")
    assert ints.shape == (n,)
    biggest = int(np.max(np.abs(ints.astype(np.int32))))
    assert biggest < 32767
    # -1 dBFS = 0.891251 of full scale; libsndfile maps float 1.0 to 2^15 for 16-bit
    assert abs(biggest - 0.8912509381337456 * 2 ** 15) <= 0.5  # rounding to the nearest step


def test_beyond_full_scale_is_refused_and_nothing_written(tmp_path):
    """A sample above 1.0 is refused, not clipped, and no file appears."""
    target = tmp_path / "loud.wav"
    with pytest.raises(AudioError, match=r"sample 10 is beyond full scale .*would clip"):
        x = np.zeros(100)
        x[10] = 1.5
        write_wav(target, x)
    assert not target.exists() and _leftovers(tmp_path) == []


def test_existing_file_is_kept_without_force(tmp_path):
    """Without force an existing file stays byte for byte; with force it is replaced."""
    target = tmp_path / "take.wav"
    write_wav(target, tone(peak=0.5))
    first = target.read_bytes()
    with pytest.raises(AudioError, match="already exists; use --force"):
        write_wav(target, tone(peak=0.25))
    assert target.read_bytes() == first
    write_wav(target, tone(peak=0.25), force=True)
    assert target.read_bytes() != first
    back, _ = read_audio(target)
    assert np.max(np.abs(back)) == pytest.approx(0.25, abs=2.0 ** -23)
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("exc", [RuntimeError("render failed"), KeyboardInterrupt()])
def test_interrupted_write_leaves_no_file(tmp_path, exc):
    """The block generator fails midway: no file at the target, no temporary left."""

    def blocks():
        yield tone(n=1000)
        yield tone(n=1000)
        raise exc

    target = tmp_path / "cut.wav"
    with pytest.raises(type(exc)):
        write_wav(target, blocks())
    assert not target.exists()
    assert _leftovers(tmp_path) == []


def test_interrupted_overwrite_keeps_old_file(tmp_path):
    """An interrupt while replacing a file leaves the old file as it was."""
    target = tmp_path / "keep.wav"
    write_wav(target, tone())
    before = target.read_bytes()

    def blocks():
        yield tone(n=1000)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        write_wav(target, blocks(), force=True)
    assert target.read_bytes() == before
    assert _leftovers(tmp_path) == []


def test_bad_settings_are_refused(tmp_path):
    """Unsupported rate, format, channel change or folder: AudioError, no file."""
    with pytest.raises(AudioError, match="sample rate 22050 Hz: must be one of 44100, 48000"):
        write_wav(tmp_path / "a.wav", tone(), sample_rate=22050)
    with pytest.raises(AudioError, match="sample format 'pcm8'"):
        write_wav(tmp_path / "a.wav", tone(), sample_format="pcm8")
    with pytest.raises(AudioError, match="a block has 2 channels, expected 1"):
        write_wav(tmp_path / "a.wav", iter([tone(channels=1), tone(channels=2)]))
    with pytest.raises(AudioError, match="does not exist"):
        write_wav(tmp_path / "no" / "a.wav", tone())
    assert list(tmp_path.iterdir()) == []


def test_sidecar_records_settings_atomically(tmp_path):
    """The JSON sidecar holds plain values (numpy, paths, -inf as null) and refuses overwrite."""
    wav = tmp_path / "take.wav"
    settings = {"sample_rate": FS, "gain_db": np.float64(-3.5), "peak_dbfs": float("-inf"),
                "notes": ("F3", "A3"), "out": wav}
    path = write_sidecar(wav, settings)
    assert path == sidecar_path(wav) == tmp_path / "take.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data == {"sample_rate": FS, "gain_db": -3.5, "peak_dbfs": None,
                    "notes": ["F3", "A3"], "out": str(wav)}
    with pytest.raises(AudioError, match="already exists"):
        write_sidecar(wav, {"x": 1})
    write_sidecar(wav, {"x": 1}, force=True)
    assert json.loads(path.read_text(encoding="utf-8")) == {"x": 1}


def test_read_audio_errors(tmp_path):
    """Missing, non-audio and folder paths give one-line AudioErrors."""
    with pytest.raises(AudioError, match="file not found"):
        read_audio(tmp_path / "missing.wav")
    fake = tmp_path / "notes.wav"
    fake.write_text("not audio", encoding="utf-8")
    with pytest.raises(AudioError, match="notes.wav: not a readable audio file"):
        read_audio(fake)
    with pytest.raises(AudioError, match="is a folder"):
        read_audio(tmp_path)


def test_read_audio_returns_float64(tmp_path):
    """Samples come back as float64 (n, channels), or averaged to mono."""
    path = write_wav(tmp_path / "s.wav", tone(channels=2), sample_format="float32")
    data, rate = read_audio(path)
    assert data.dtype == np.float64 and data.shape == (4800, 2) and rate == FS
    mono, _ = read_audio(path, mono=True)
    assert mono.shape == (4800,)
    assert np.allclose(mono, data.mean(axis=1))


def test_playback_without_sounddevice_says_what_to_install(monkeypatch):
    """Without the sounddevice module the message names the extra and PortAudio."""
    monkeypatch.setitem(sys.modules, "sounddevice", None)  # import now raises ImportError
    with pytest.raises(AudioError, match=r'pip install "barwright\[play\]".*PortAudio'):
        play(tone(), FS)


def test_playback_without_output_device(monkeypatch):
    """Without an output device the message says so."""
    fake = types.ModuleType("sounddevice")

    def no_device(kind=None):
        raise ValueError("no output device")

    fake.query_devices = no_device
    monkeypatch.setitem(sys.modules, "sounddevice", fake)
    with pytest.raises(AudioError, match="no audio output device"):
        play(tone(), FS)


def test_playback_refuses_clipping_samples():
    """Playback refuses samples beyond full scale (hearing safety, physics.md section 14)."""
    with pytest.raises(AudioError, match="beyond full scale"):
        play(np.full(10, 1.2), FS)
