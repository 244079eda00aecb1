"""Integer samples packed and written as WAV by barwright itself (pack_pcm, write_pcm_wav).

External reference: soundfile (libsndfile) writing the same int32 samples to a
16- or 24-bit WAV.  libsndfile keeps the top 16 or 24 bits of each int32 and
writes the canonical RIFF/WAVE layout (a 44-byte header with a 16-byte ``fmt ``
chunk of format 1, then the ``data`` chunk, a pad byte after odd data): the
files must agree byte for byte, for both widths, mono and stereo, odd and even
lengths and every sample rate barwright writes.  Reading the file back with
soundfile gives the integers' top bits.
"""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

from synth.engine.render import pack_pcm
from synth.errors import AudioError, ModelError
from synth.io import SAMPLE_RATES_HZ, write_pcm_wav

SUBTYPES = {"pcm16": ("PCM_16", 2), "pcm24": ("PCM_24", 3)}


def _samples(rng, rows: int, channels: int) -> np.ndarray:
    """int32 samples over the whole range, with the extremes and zero among them."""
    x = rng.integers(-2 ** 31, 2 ** 31, size=(rows, channels), dtype=np.int64)
    x.flat[:4] = [-2 ** 31, 2 ** 31 - 1, 0, -1][: min(4, x.size)]
    return x.astype(np.int32)


@pytest.mark.parametrize("fmt", sorted(SUBTYPES))
@pytest.mark.parametrize("channels", [1, 2])
@pytest.mark.parametrize("rows", [1, 3, 1000, 4097])
def test_file_equals_libsndfile_byte_for_byte(tmp_path, rng, fmt, channels, rows) -> None:
    """Same int32 samples, same file: barwright's writer against libsndfile's."""
    subtype, width = SUBTYPES[fmt]
    x = _samples(rng, rows, channels)
    for rate in SAMPLE_RATES_HZ:
        ours, theirs = tmp_path / f"ours-{rate}.wav", tmp_path / f"theirs-{rate}.wav"
        # two chunks, the second refilling nothing of the first (whole frames each)
        cut = rows // 2
        write_pcm_wav(ours, [pack_pcm(x[:cut], width), pack_pcm(x[cut:], width)]
                      if cut else [pack_pcm(x, width)],
                      sample_rate=rate, sample_format=fmt, channels=channels)
        sf.write(theirs, x, rate, subtype=subtype, format="WAV")
        assert ours.read_bytes() == theirs.read_bytes(), (fmt, channels, rows, rate)
        back, fs = sf.read(ours, dtype="int32", always_2d=True)
        assert fs == rate
        shift = 32 - 8 * width
        assert np.array_equal(back >> shift, x >> shift)


def test_packing_is_the_top_bytes(rng) -> None:
    """pack_pcm keeps bytes 1..3 (24-bit) or 2..3 (16-bit) of each little-endian int32."""
    x = _samples(rng, 777, 2)
    raw = x.astype("<i4").view(np.uint8).reshape(777, 2, 4)
    assert np.array_equal(pack_pcm(x, 3), raw[:, :, 1:].reshape(-1))
    assert np.array_equal(pack_pcm(x, 2), raw[:, :, 2:].reshape(-1))
    buf = np.full(777 * 2 * 3 + 5, 7, dtype=np.uint8)
    got = pack_pcm(x, 3, buf)
    assert got.base is buf or got.base is buf.base
    assert np.all(buf[-5:] == 7)  # nothing written past the samples


def test_packing_refuses_what_it_cannot_pack() -> None:
    with pytest.raises(ModelError, match="int32"):
        pack_pcm(np.zeros((4, 2)), 3)
    with pytest.raises(ModelError, match="width"):
        pack_pcm(np.zeros((4, 2), dtype=np.int32), 4)
    with pytest.raises(ModelError, match="at least 24 bytes"):
        pack_pcm(np.zeros((4, 2), dtype=np.int32), 3, np.empty(10, dtype=np.uint8))


def test_writer_refusals_leave_nothing(tmp_path) -> None:
    """Broken frames, no samples, bad settings or an existing file: one error, no file."""
    target = tmp_path / "x.wav"
    with pytest.raises(AudioError, match="not whole frames of 6 bytes"):
        write_pcm_wav(target, [np.zeros(7, dtype=np.uint8)], sample_format="pcm24")
    with pytest.raises(AudioError, match="no samples"):
        write_pcm_wav(target, [], sample_format="pcm16")
    with pytest.raises(AudioError, match="sample rate 22050"):
        write_pcm_wav(target, [np.zeros(6, dtype=np.uint8)], sample_rate=22050)
    with pytest.raises(AudioError, match="float32"):
        write_pcm_wav(target, [np.zeros(8, dtype=np.uint8)], sample_format="float32")
    assert not target.exists() and list(tmp_path.iterdir()) == []
    target.write_bytes(b"kept")
    with pytest.raises(AudioError):
        write_pcm_wav(target, [np.zeros(6, dtype=np.uint8)])
    assert target.read_bytes() == b"kept"
    write_pcm_wav(target, [np.zeros(6, dtype=np.uint8)], force=True)
    assert sf.info(target).frames == 1
