"""Samples scaled for the file in one pass (synth.engine.render.scale_block, synth.output).

External reference: soundfile (libsndfile) writing the same float64 samples
itself (passing with libsndfile 1.2.0 under soundfile 0.12.0, the oldest
supported, and 1.2.2 under soundfile 0.14.0).  libsndfile (with the clipping
conversion soundfile switches on)
turns a double ``v`` in [-1, 1] into the integer ``lrint(v 2^31)`` at full
scale 2^31, kept below 2^31, and writes its top 24 or 16 bits; an int32 sample
is written as its top bits too.  The integers :func:`scale_block` computes
must therefore give the same file byte for byte, on random samples and on the
edges of the rounding: full scale, exact half steps of the 2^31 grid (ties go
to the even integer), half steps of the file's own codes, tiny values and
-0.0.  A rule of the form ``lrint(v (2^23 - 1))`` for 24-bit, believed at first,
changes about half of the random samples' codes, so the comparison can fail.

The kernel is also checked against plain numpy on small blocks (peaks, tail,
first bad rows), and the writer's refusals against :func:`synth.io.write_wav`'s.
"""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

from synth import output
from synth.engine.render import scale_block
from synth.errors import AudioError
from synth.io import write_wav

FS = 48000
SUBTYPES = {"pcm24": "PCM_24", "pcm16": "PCM_16", "float32": "FLOAT"}
GAINS = [1.0, 0.7071067811865476, 0.999, 3.0]


def _edges() -> np.ndarray:
    """Values at the edges of libsndfile's rounding, each with its negative."""
    k = np.arange(-2 ** 23, 2 ** 23, 4099, dtype=np.float64)
    one_below = np.nextafter(1.0, 0.0)
    v = np.concatenate([
        [1.0, one_below, 1.0 - 2.0 ** -32, 1.0 - 2.0 ** -31, 1.0 - 1.5 * 2.0 ** -31,
         0.0, 5e-324, 1e-300, 2.0 ** -32, 3 * 2.0 ** -32, 2.0 ** -31, 2.0 ** -24,
         2.0 ** -17, 3 * 2.0 ** -17],
        (k + 0.5) / 2 ** 23,             # half steps of the 24-bit codes
        (k * 256 + 0.5) / 2 ** 31,       # ties of the 2^31 grid: to the even integer
        (k * 256 + 1.5) / 2 ** 31,
        (k * 256 + 127.5) / 2 ** 31,     # half a step below and above a code's edge
        (k * 256 + 128.5) / 2 ** 31,
        (k + 0.5) / 2 ** 15,             # half steps of the 16-bit codes
    ])
    v = v[np.abs(v) <= 1.0]
    return np.column_stack([v, -v])


def _blocks(seed: int) -> list[np.ndarray]:
    rng = np.random.default_rng(seed)
    return [rng.uniform(-1.0, 1.0, (5000, 2)), rng.uniform(-1e-5, 1e-5, (3000, 2)),
            _edges(), np.array([[-0.0, 0.0], [0.0, -0.0]])]


def _file_bytes(path, blocks, subtype) -> bytes:
    with sf.SoundFile(path, "w", FS, blocks[0].shape[1], subtype, format="WAV") as f:
        for b in blocks:
            f.write(b)
    data = path.read_bytes()
    if subtype == "FLOAT":  # libsndfile's PEAK chunk holds the time of writing: mask it
        at = data.index(b"PEAK") + 12
        data = data[:at] + b"\0\0\0\0" + data[at + 4:]
    return data


@pytest.mark.parametrize("fmt", ["pcm24", "pcm16", "float32"])
@pytest.mark.parametrize("gain", GAINS)
def test_file_from_scaled_samples_equals_libsndfile_conversion(tmp_path, fmt, gain):
    """The file from scale_block's int32 (or float32) samples equals, byte for byte, the
    file libsndfile writes from the float64 products ``x * gain`` (or their float32).

    External reference: soundfile/libsndfile converting float64 itself.
    """
    blocks = _blocks(1)
    if gain > 1.0:  # the same values at full scale after the gain (those that stay within)
        blocks = [np.where(np.abs((b / gain) * gain) <= 1.0, b / gain, 0.0) for b in blocks]
    want = [b * gain if gain != 1.0 else b for b in blocks]
    if fmt == "float32":
        want = [w.astype(np.float32) for w in want]
    dtype = np.float32 if fmt == "float32" else np.int32
    got = []
    for b in blocks:
        out = np.empty(b.shape, dtype=dtype)
        res = scale_block(b, gain, out)
        assert res.first_beyond is None and res.first_not_finite is None
        got.append(out)
    assert (_file_bytes(tmp_path / "ours.wav", got, SUBTYPES[fmt])
            == _file_bytes(tmp_path / "lib.wav", want, SUBTYPES[fmt]))


def test_integers_are_rint_of_the_product_at_full_scale_two_to_the_31():
    """int32 = rint(x gain 2^31), ties to even, at most 2^31 - 1.

    External reference: numpy's rint (round half to even, IEEE 754).
    """
    for b in _blocks(2):
        for gain in GAINS[:3]:
            out = np.empty(b.shape, dtype=np.int32)
            scale_block(b, gain, out)
            want = np.minimum(np.rint(b * gain * 2.0 ** 31), 2.0 ** 31 - 1).astype(np.int64)
            assert np.array_equal(out.astype(np.int64), want)
    out = np.empty((1, 2), dtype=np.int32)
    scale_block(np.array([[0.5 / 2 ** 31, 1.5 / 2 ** 31]]), 1.0, out)
    assert out.tolist() == [[0, 2]]  # ties to even


def _numpy_scan(x, gain, to_float32, tail_from):
    """The measures of scale_block in plain numpy (the reference of the kernel)."""
    v = x * gain
    if to_float32:
        with np.errstate(over="ignore"):
            v = v.astype(np.float32).astype(np.float64)
    a = np.abs(v)
    finite = np.isfinite(a)
    ok = finite & (a <= 1.0)
    bad_rows = np.flatnonzero((~finite).any(axis=1))
    over_rows = np.flatnonzero((finite & (a > 1.0)).any(axis=1))
    fin = np.where(finite, a, 0.0)
    tail = fin[tail_from:].max() if 0 <= tail_from < len(x) else 0.0
    return (float(np.abs(np.nan_to_num(x, nan=0.0, posinf=np.inf, neginf=-np.inf)).max()),
            float(fin.max()), float(tail),
            int(bad_rows[0]) if bad_rows.size else None,
            int(over_rows[0]) if over_rows.size else None, ok)


@pytest.mark.parametrize("to_float32", [False, True])
@pytest.mark.parametrize("channels", [1, 2])
def test_kernel_measures_equal_numpy(to_float32, channels):
    """Peaks, tail and the first bad rows, on blocks with and without bad samples.

    Blocks without bad samples take the kernel's vectorised loop (peaks from the
    largest input), the others its sample-by-sample loop; both must agree with numpy.
    """
    rng = np.random.default_rng(3)
    for case in range(40):
        x = rng.uniform(-1.0, 1.0, (int(rng.integers(1, 60)), channels))
        if case % 4 == 1:
            x[rng.integers(0, len(x)), rng.integers(0, channels)] = 1.7
        if case % 4 == 2:
            x[rng.integers(0, len(x)), rng.integers(0, channels)] = np.nan
        if case % 4 == 3:
            x[rng.integers(0, len(x)), rng.integers(0, channels)] = -np.inf
            x[rng.integers(0, len(x)), rng.integers(0, channels)] = 1.2
        if case % 5 == 4:  # another memory order: the same results
            x = np.asfortranarray(x)
        gain = 4e38 if (to_float32 and case == 5) else float(rng.uniform(0.3, 1.0))
        tail_from = int(rng.integers(0, len(x) + 3))
        out = np.full(x.shape, 99, dtype=np.float32 if to_float32 else np.int32)
        got = scale_block(x, gain, out, tail_from=tail_from)
        peak_in, peak, tail, bad, over, ok = _numpy_scan(x, gain, to_float32, tail_from)
        assert (got.peak_in, got.peak, got.tail, got.first_not_finite, got.first_beyond) == (
            peak_in, peak, tail, bad, over)
        assert np.all(out[~ok] == 0)  # a refused sample is written as 0


def _write_through_output(target, blocks, gain, fmt):
    meter = output._ForFile(iter(blocks), gain, fmt, 10 ** 9, str(target))
    write_wav(target, meter, sample_rate=FS, sample_format=fmt)


@pytest.mark.parametrize("fmt", ["pcm24", "pcm16", "float32"])
@pytest.mark.parametrize("bad", [1.5, np.nan, np.inf])
def test_refusals_are_write_wavs_own(tmp_path, fmt, bad):
    """A sample beyond full scale or not finite: the same message as write_wav gives for
    the scaled float samples (sample index, peak), and no file.
    """
    rng = np.random.default_rng(4)
    gain = 0.5
    blocks = [rng.uniform(-1.0, 1.0, (700, 2)) for _ in range(3)]
    blocks[1][123, 1] = bad / gain
    blocks[1][200, 0] = 1.9 / gain  # later and larger: the first row is named, the peak
    scaled = [b * gain for b in blocks]
    if fmt == "float32":
        scaled = [s.astype(np.float32) for s in scaled]
    with pytest.raises(AudioError) as theirs:
        write_wav(tmp_path / "a.wav", scaled, sample_rate=FS, sample_format=fmt)
    with pytest.raises(AudioError) as ours:
        _write_through_output(tmp_path / "b.wav", blocks, gain, fmt)
    assert str(ours.value).replace("b.wav", "a.wav") == str(theirs.value)
    assert "sample 823 " in str(ours.value)
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_refusal_leaves_the_old_file(tmp_path):
    """With force, a refused write leaves the existing file byte for byte."""
    target = tmp_path / "take.wav"
    target.write_bytes(b"old take")
    blocks = [np.full((100, 2), 0.25), np.full((100, 2), 2.0)]
    meter = output._ForFile(iter(blocks), 1.0, "pcm24", 10 ** 9, str(target))
    with pytest.raises(AudioError, match="sample 100 is beyond full scale"):
        write_wav(target, meter, sample_rate=FS, force=True)
    assert target.read_bytes() == b"old take"
    assert [p.name for p in tmp_path.iterdir()] == ["take.wav"]


def test_one_buffer_handed_out_again_is_written_block_by_block(tmp_path):
    """Blocks of changing sizes through the reused buffer: the file equals libsndfile's
    own conversion of the whole signal (external reference: soundfile/libsndfile).
    """
    rng = np.random.default_rng(5)
    blocks = [rng.uniform(-1.0, 1.0, (n, 2)) for n in (300, 1000, 7, 1000, 0, 450)]
    gain = 0.8
    _write_through_output(tmp_path / "ours.wav", blocks, gain, "pcm24")
    lib = _file_bytes(tmp_path / "lib.wav", [np.concatenate(blocks) * gain], "PCM_24")
    assert (tmp_path / "ours.wav").read_bytes() == lib


@pytest.mark.parametrize("fmt, dtype", [("float32", np.int32), ("pcm16", np.int16),
                                        ("pcm24", np.int64)])
def test_integer_blocks_only_int32_and_only_for_pcm(tmp_path, fmt, dtype):
    """write_wav takes int32 blocks for the 16- and 24-bit formats alone; nothing else."""
    with pytest.raises(AudioError, match="samples must be floats"):
        write_wav(tmp_path / "x.wav", np.zeros((10, 2), dtype=dtype), sample_rate=FS,
                  sample_format=fmt)
    assert list(tmp_path.iterdir()) == []
