"""One render per WAV: the file equals that of the former two-pass render.

Reference: the two-pass procedure (the whole render at unit gain, the closing
fade ``sin^2(pi tau / (2 F))`` over its last ``F`` samples written out here,
its peak, :func:`plan_gain`, the gain applied, :func:`synth.io.write_wav`, where
soundfile (libsndfile) converts the float64 samples to the file's integers).  The
one-pass writer fades and scales the same float64 samples by the same factors in
the same order and hands libsndfile the integers it would derive itself, so the
files must agree byte for byte (a float32 file but for the time of writing that
libsndfile stamps into its PEAK chunk), and the sidecar must carry the same peak
and gain.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf

from synth import output
from synth.engine import (
    ModeBank,
    ModePair,
    Voice,
    constant_power_pan,
    peak_bound,
    plan_gain,
    render_blocks,
)
from synth.io import write_wav
from synth.output import fade_seconds, render_to_wav

FS = 48000


def _opening(first, n):
    t = np.arange(first, first + n) / FS
    return 0.6 + 0.4 * np.cos(2 * np.pi * 6.0 * t)


def voices(curves: bool):
    """Six strikes with bar-tube pairs (constant or following the opening), panned."""
    out = []
    for k, f0 in enumerate((175.0, 262.0, 349.0, 440.0, 523.0, 698.0)):
        bank = ModeBank([f0 * 3.9, f0 * 9.8], [6.0, 20.0], [0.05, -0.02], [0.3, 1.0])
        if curves:
            pair = ModePair((f0, f0 * 1.017), (0.8, 8.0), (0.1, 0.0),
                               coupling_rad_s=lambda first, n: 3.0 * _opening(first, n),
                               weight_1=0.5, weight_2=lambda first, n: 12.0 * _opening(first, n),
                               decay_2_curve=lambda first, n: 8.0 + 20 * (1 - _opening(first, n)))
        else:
            pair = ModePair((f0, f0 * 1.017), (0.8, 8.0), (0.1, 0.0), coupling_rad_s=3.0,
                               weight_1=0.5, weight_2=12.0)
        out.append(Voice(k * 7001, bank, channel_gains=constant_power_pan(-0.8 + 0.3 * k),
                         pairs=(pair,), damping=[(k * 7001 + 30000, 4.0)]))
    return out


def two_pass(path, vs, n, fmt, gain_db=None):
    """Write the two-pass way: render, fade the end, measure the peak, scale, write."""
    x = np.concatenate(list(render_blocks(vs, n, sample_rate=FS, channels=2)))
    f = int(round(fade_seconds() * FS))
    tau = (n - np.arange(n - f, n)) / f
    x[n - f:] = x[n - f:] * (np.sin(0.5 * np.pi * tau) ** 2)[:, None]
    plan = plan_gain(float(np.max(np.abs(x))), gain_db=gain_db)
    y = x * plan.gain if plan.gain != 1.0 else x
    write_wav(path, y.astype(np.float32) if fmt == "float32" else y, sample_rate=FS,
              sample_format=fmt)
    return plan


def file_bytes(path):
    """The file's bytes, the time stamp of libsndfile's PEAK chunk (float files) zeroed."""
    data = path.read_bytes()
    at = data.find(b"PEAK")
    return data if at < 0 else data[:at + 12] + b"\0\0\0\0" + data[at + 16:]


@pytest.mark.parametrize("fmt", ["pcm24", "float32", "pcm16"])
@pytest.mark.parametrize("curves", [False, True])
@pytest.mark.parametrize("gain_db", [None, -30.0, 20.0])
@pytest.mark.parametrize("held", [None, 0, 300_000])
def test_one_pass_file_equals_two_pass_file(tmp_path, monkeypatch, fmt, curves, gain_db, held):
    """Normalised, fixed and limited gains: the same samples bit for bit, the same plan.

    ``held``: the bytes the render keeps in memory before it spills to its temporary
    file (default: all of these 0.96 MB; 0: all in the file; 300 kB: some of each).
    """
    if held is not None:
        monkeypatch.setattr(output, "SCRATCH_HELD_BYTES", held)
    vs = voices(curves)
    n = 60000
    ref = two_pass(tmp_path / "two.wav", vs, n, fmt, gain_db)
    rep = render_to_wav(tmp_path / "one.wav", vs, n, sample_rate=FS, channels=2,
                        sample_format=fmt, gain_db=gain_db)
    # external reference: libsndfile's own conversion of the float64 samples
    assert file_bytes(tmp_path / "one.wav") == file_bytes(tmp_path / "two.wav")
    assert rep.plan == ref
    side = json.loads(rep.sidecar.read_text())
    assert side["peak_unscaled"] == ref.peak and side["gain_db"] == ref.gain_db
    # only the hidden temporary is gone: the WAV and its sidecar remain
    assert sorted(p.name for p in tmp_path.iterdir()) == ["one.json", "one.wav", "two.wav"]


def test_fixed_gain_streams_only_when_it_cannot_clip(tmp_path):
    """-30 dB on constant voices: the advance bound says no clipping, the WAV is streamed.

    +20 dB would clip: the render goes through the temporary file and is limited.
    With curves (no declared bounds) there is no advance bound: temporary file.
    """
    vs = voices(False)
    n = 60000
    bound = peak_bound(vs, n, sample_rate=FS, channels=2)
    assert bound * 10 ** (-30 / 20) <= 1.0 < bound * 10 ** (20 / 20)
    quiet = render_to_wav(tmp_path / "q.wav", vs, n, sample_rate=FS, gain_db=-30.0)
    loud = render_to_wav(tmp_path / "l.wav", vs, n, sample_rate=FS, gain_db=20.0)
    curved = render_to_wav(tmp_path / "c.wav", voices(True), n, sample_rate=FS, gain_db=-30.0)
    assert quiet.streamed and not loud.streamed and not curved.streamed
    assert loud.plan.limited and loud.plan.peak_dbfs == pytest.approx(-1.0, abs=1e-12)


def test_render_error_leaves_no_file(tmp_path):
    """A voice that fails mid-render leaves neither WAV, sidecar nor temporary behind."""
    from synth.errors import ModelError

    def bad_curve(first, n):
        return np.full(n, np.nan if first >= 20000 else 1.0)

    vs = [Voice(0, ModeBank([440.0], [1.0], [0.5]), gain_curve=bad_curve)]
    with pytest.raises(ModelError, match="not finite"):
        render_to_wav(tmp_path / "x.wav", vs, 40000, sample_rate=FS)
    assert list(tmp_path.iterdir()) == []


def test_ring_out_file_is_the_same_held_or_spilled(tmp_path, monkeypatch):
    """A rung-out render ends at the same sample and holds the same samples whether its
    unscaled samples stayed in memory or went partly or wholly to the temporary file.

    Independent path: none outside the writer; the three ways of keeping the samples
    (memory, file, both) must agree bit for bit, and the length must be the same.
    """
    vs = voices(False)
    n = 200_000
    files = []
    for held in (None, 0, 700_000):
        monkeypatch.setattr(output, "SCRATCH_HELD_BYTES",
                            output.SCRATCH_HELD_BYTES if held is None else held)
        path = tmp_path / f"r{held}.wav"
        rep = render_to_wav(path, vs, n, sample_rate=FS, channels=2, ring_out=True,
                            end_level_db=-40.0)
        assert rep.ending is not None and rep.ending.how == "rang out"
        files.append(sf.read(path, dtype="float64")[0])
    assert 700_000 < files[0].size * 8 < n * 2 * 8  # it stopped inside the held part's reach
    for other in files[1:]:
        assert np.array_equal(files[0], other)
