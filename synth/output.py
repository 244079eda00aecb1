"""Render engine voices into a WAV file: one pass, peak planning, sidecar.

The voices are rendered once.  To normalise, the unscaled float64 samples wait
while the peak is measured: the first :data:`SCRATCH_HELD_BYTES` (32 MiB, 43.7 s
of 48 kHz stereo) in memory, the rest in a temporary file on disk; the gain is
then chosen and the samples are scaled as they are copied into the
WAV: the file equals that of a second render scaled by the engine bit for bit.
While the render is kept, only its peak is measured, without temporaries; a
ring-out render also notes the peak of every 10 ms, where the file may stop.
Each block then goes to the file in one compiled pass
(:func:`synth.engine.render.scale_block`): the gain (the engine's float64
product), the peak and that of the last 10 ms, the refusal of a sample beyond
full scale or not finite (:func:`synth.io.range_error`, as
:func:`synth.io.write_wav` words it), and, for 16- and 24-bit files, the integers
libsndfile would derive from the float64 samples (``rint(v 2^31)``).  Their top
16 or 24 bits are packed as PCM bytes (:func:`synth.engine.render.pack_pcm`)
and written with the canonical WAV header (:func:`synth.io.write_pcm_wav`): the
file is the same byte for byte as libsndfile's from the float64 samples.  A
float32 file gets the float32 samples, written through libsndfile.
With a fixed gain whose advance peak bound (:func:`synth.engine.render.peak_bound`)
stays at or below full scale, nothing can clip and the samples are streamed
straight into the WAV; otherwise the temporary file decides whether the gain
must be lowered.  The default puts the peak at -1 dBFS; a fixed gain is kept
when asked for, lowered to the ceiling if it would clip, and reported.  Nothing
ever clips.  Voices, and single modes of voices, are retired once their tails,
summed, stay 100 dB below the output's peak (``retire_db``).  The file is
written atomically and never replaces an existing one unless ``force``; a JSON
sidecar beside it records the resolved settings.

Every file ends cleanly, in one of two ways, and says which (:class:`Ending`):

* **rung out**: given a longest length (``ring_out=True``), the file stops
  where its samples have stayed below the end level re its peak
  (:data:`RENDER_DEFAULTS` ``end_level_db``, -60 dB) for :data:`END_HOLD_S`
  (10 ms): the last 10 ms are then below the end level by construction;
* **faded**: at a length the caller set, or when the longest length comes
  first, the last :func:`fade_seconds` seconds get a raised-cosine fade
  ``sin^2(pi tau / (2 F))`` (tau: time to the end).  Since
  ``sin^2 x <= x^2``, the fade gain over the last 10 ms stays at or below
  ``(pi h / (2 F))^2``, and ``F`` is chosen so that this is the end level:
  whatever the signal, the last 10 ms are below it (F = 0.50 s at -60 dB).

The sidecar holds the ending, the end level, the fade length and the level of
the last 10 ms that the file really has.

.. note:: Struck metal bars are peaky. Start playback quietly, especially on
   headphones.
"""

from __future__ import annotations

import contextlib
import math
import tempfile
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

import numpy as np

from synth import io
from synth.defaults import RENDER_DEFAULTS
from synth.engine.render import (
    DEFAULT_BLOCK_SIZE,
    DEFAULT_RETIRE_DB,
    GainPlan,
    max_abs,
    pack_pcm,
    peak_bound,
    plan_gain,
    render_blocks,
    ring_out_sample,
    scale_block,
)
from synth.engine.voice import Voice
from synth.errors import AudioError, ConfigError

END_HOLD_S = 0.01
"""Length of the file's end that must stay below the end level, s (the last 10 ms)."""


def fade_seconds(end_level_db: float = RENDER_DEFAULTS.end_level_db,
                 hold_s: float = END_HOLD_S) -> float:
    """Length of the closing fade whose last ``hold_s`` stay below ``end_level_db``, s.

    The fade gain ``sin^2(pi tau / (2 F))`` is at most ``(pi tau / (2 F))^2``;
    setting that to ``10^(end_level_db / 20)`` at ``tau = hold_s`` gives
    ``F = pi hold_s / (2 10^(end_level_db / 40))``.
    """
    if not (math.isfinite(end_level_db) and end_level_db < 0):
        raise ConfigError(f"end level = {end_level_db!r} dB: must be a negative number of dB",
                          source="--end-level")
    return math.pi * hold_s / (2.0 * 10.0 ** (end_level_db / 40.0))


RING_MARGIN_DB = 20.0
"""How much further than the end level the voices' amplitude bound must fall before the
longest length of a ring-out, dB: the bound (the sum of the mode amplitudes) exceeds
the file's peak, by a factor below 10 for the strikes and chords of the demo preset."""


def ring_out_length(voices: Sequence[Voice], *, sample_rate: float,
                    end_level_db: float = RENDER_DEFAULTS.end_level_db,
                    longest_s: float = RENDER_DEFAULTS.longest_s) -> int:
    """Return the longest length of a ring-out render, samples.

    The first sample by which every voice's amplitude bound has fallen
    ``end_level_db - RING_MARGIN_DB`` below its start
    (:func:`synth.engine.render.ring_out_sample`), at most ``longest_s``
    after the last voice starts.  :func:`render_to_wav` with ``ring_out=True``
    then stops the file where its samples have fallen to the end level.
    """
    fade_seconds(end_level_db)  # checks the level
    last = max((v.start_sample for v in voices), default=0)
    cap = last + int(round(longest_s * sample_rate))
    ring = ring_out_sample(voices, sample_rate=sample_rate,
                           level_db=end_level_db - RING_MARGIN_DB) if voices else 1
    return max(1, cap if ring is None else min(ring, cap))


@dataclass(frozen=True)
class Ending:
    """How a file ends.

    Attributes
    ----------
    how : str
        ``"rang out"`` or ``"faded"``.
    end_level_db : float
        The stated end level re the peak, dB.
    fade_s : float
        Length of the closing fade, s (0 when the file rang out).
    last_10ms_db : float
        Largest magnitude of the file's last 10 ms re its peak, dB (``-inf``: silent).
    longest_reached : bool
        A ring-out that had not reached the end level by its longest length (then faded).
    """

    how: str
    end_level_db: float
    fade_s: float
    last_10ms_db: float
    longest_reached: bool = False

    def sentence(self, seconds: float) -> str:
        """One line for the command's summary."""
        silent = self.last_10ms_db == -math.inf
        if self.how == "rang out":
            return (f"rang out to {self.end_level_db:g} dB re peak at {seconds:.2f} s "
                    + ("(last 10 ms silent)" if silent
                       else f"(last 10 ms at {self.last_10ms_db:.1f} dB)"))
        why = (" (had not rung out by the longest length)" if self.longest_reached else "")
        return (f"cut at {seconds:.2f} s with a {self.fade_s * 1000:.0f} ms fade{why}; "
                + ("last 10 ms silent" if silent
                   else f"last 10 ms at {self.last_10ms_db:.1f} dB re peak") + ", below "
                f"{self.end_level_db:g} dB")

    def record(self) -> dict[str, Any]:
        """Return the sidecar's keys."""
        return {"ending": self.how, "end_level_db": self.end_level_db,
                "fade_s": self.fade_s, "last_10ms_db_re_peak": self.last_10ms_db}


HEARING_CAUTION = ("Caution: start playback at a low volume and raise it slowly; struck metal "
                   "bars are peaky, especially on headphones.")


@dataclass(frozen=True)
class RenderReport:
    """What a render did."""

    path: Path
    sidecar: Path
    seconds: float
    samples: int
    sample_rate: int
    channels: int
    plan: GainPlan
    wall_s: float
    streamed: bool = False
    """True when the samples went straight into the WAV (a fixed gain that cannot clip)."""
    ending: Ending | None = None
    """How the file ends (rang out or faded) and the level of its last 10 ms."""


def render_to_wav(path: str | Path, voices: Sequence[Voice], n_samples: int, *,
                  sample_rate: int = io.DEFAULT_SAMPLE_RATE_HZ, channels: int = 2,
                  sample_format: str = io.DEFAULT_SAMPLE_FORMAT, gain_db: float | None = None,
                  target_dbfs: float = -1.0, force: bool = False,
                  settings: Mapping[str, Any] | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  block_size: int = DEFAULT_BLOCK_SIZE,
                  retire_db: float | None = DEFAULT_RETIRE_DB,
                  scratch_dir: str | Path | None = None, ring_out: bool = False,
                  end_level_db: float = RENDER_DEFAULTS.end_level_db) -> RenderReport:
    """Render ``voices`` over ``n_samples`` into ``path`` (WAV) plus a JSON sidecar.

    ``progress(done, total)`` is called with the samples rendered (total
    ``n_samples``).  ``retire_db`` is the level re the output's peak below which
    the summed tails of retired voices and modes stay (default -100 dB; ``None``
    keeps every voice; see :mod:`synth.engine.render`).  A normalised render keeps its
    first :data:`SCRATCH_HELD_BYTES` of unscaled samples in memory; the rest go to
    a temporary file in ``scratch_dir`` (default: the WAV's folder), 8 bytes per
    sample and channel, while the render runs.

    ``ring_out=False``: the file is ``n_samples`` long and faded at its end so
    that its last 10 ms stay below ``end_level_db`` re its peak.  ``True``:
    ``n_samples`` is the longest length, and the file stops 10 ms after its
    samples last reached ``end_level_db`` re the peak (faded instead when they
    never fall that far within ``n_samples``).  See the module docstring.
    """
    t0 = time.perf_counter()
    target = io.check_writable(path, force=force)
    side = io.sidecar_path(target)
    io.check_writable(side, force=force)
    fade_n = min(int(n_samples), int(round(fade_seconds(end_level_db) * sample_rate)))
    hold = max(1, int(round(END_HOLD_S * sample_rate)))

    def blocks() -> Iterator[np.ndarray]:
        return render_blocks(voices, n_samples, sample_rate=sample_rate, channels=channels,
                             block_size=block_size, retire_db=retire_db, progress=progress)

    plan = None
    n_out, faded, longest = int(n_samples), True, False
    if gain_db is not None and not ring_out:
        bound = peak_bound(voices, n_samples, sample_rate=sample_rate, channels=channels)
        gain = plan_gain(0.0, target_dbfs=target_dbfs, gain_db=gain_db).gain
        if bound is not None and bound * gain <= 1.0:  # cannot clip: stream it
            meter = _ForFile(_faded(blocks(), n_out, fade_n), gain, sample_format,
                             n_out - hold, str(target))
            _write(target, meter, sample_rate, sample_format, channels, force)
            plan = plan_gain(meter.peak_in, target_dbfs=target_dbfs, gain_db=gain_db)
    streamed = plan is not None
    if plan is None:
        with _Scratch(target.parent if scratch_dir is None else Path(scratch_dir),
                      channels, hold if ring_out else None) as scratch:
            source = blocks() if ring_out else _faded(blocks(), n_out, fade_n)
            peak = scratch.fill(source)
            plan = plan_gain(peak, target_dbfs=target_dbfs, gain_db=gain_db)
            if ring_out:
                # half a step of the sample format below the level, so that rounding
                # the samples cannot lift the last 10 ms above it
                step = 0.5 * _LSB.get(sample_format, 0.0) / plan.gain
                end = scratch.rung_out_rows(peak * 10.0 ** (end_level_db / 20.0) - step)
                if end is not None:
                    n_out, faded = end, False
                else:
                    longest = True
            rows = scratch.blocks(block_size, n_out)
            if ring_out and faded:
                rows = _faded(rows, n_out, fade_n)
            meter = _ForFile(rows, plan.gain, sample_format, n_out - hold, str(target))
            _write(target, meter, sample_rate, sample_format, channels, force)
    tail_db = (20.0 * math.log10(meter.tail / meter.peak) if meter.tail > 0 and meter.peak > 0
               else -math.inf)
    ending = Ending("faded" if faded else "rang out", float(end_level_db),
                    fade_n / sample_rate if faded else 0.0, tail_db, longest)
    record = dict(settings or {})
    record.update({
        "file": target.name, "sample_rate_hz": sample_rate, "channels": channels,
        "sample_format": sample_format, "samples": n_out,
        "seconds": n_out / sample_rate, "voices": len(voices),
        "peak_unscaled": plan.peak, "gain_db": plan.gain_db, "peak_dbfs": plan.peak_dbfs,
        "gain_mode": plan.mode, "requested_gain_db": plan.requested_gain_db,
        "would_clip": plan.would_clip, "limited": plan.limited, "retire_db": retire_db,
        "longest_s": n_samples / sample_rate if ring_out else None, **ending.record(),
    })
    if not ring_out:
        record.pop("longest_s")
    io.write_sidecar(target, record, force=force)
    return RenderReport(target, side, n_out / sample_rate, n_out, sample_rate,
                        channels, plan, time.perf_counter() - t0, streamed, ending)


# --------------------------------------------------------------------------- one pass
_LSB = {"pcm16": 2.0 ** -15, "pcm24": 2.0 ** -23}
"""Step of the integer sample formats, full scale."""


def _write(target: Path, blocks: Iterable[np.ndarray], sample_rate: int, sample_format: str,
           channels: int, force: bool) -> None:
    """Write the blocks of :class:`_ForFile`: integers packed as PCM bytes, float32 as it is."""
    width = io.PCM_WIDTHS.get(sample_format)
    if width is None:
        io.write_wav(target, blocks, sample_rate=sample_rate, sample_format=sample_format,
                     channels=channels, force=force)
    else:
        io.write_pcm_wav(target, _packed(blocks, width), sample_rate=sample_rate,
                         sample_format=sample_format, channels=channels, force=force)


def _packed(blocks: Iterable[np.ndarray], width: int) -> Iterator[np.ndarray]:
    """Pack int32 blocks into PCM bytes of ``width``, one buffer refilled for each."""
    buf = np.empty(0, dtype=np.uint8)
    for block in blocks:
        if buf.size < block.size * width:
            buf = np.empty(block.size * width, dtype=np.uint8)
        yield pack_pcm(block, width, buf)


def _faded(blocks: Iterable[np.ndarray], n_rows: int, fade_rows: int) -> Iterator[np.ndarray]:
    """Apply the closing fade ``sin^2(pi tau / (2 F))`` to the last ``fade_rows`` of ``n_rows``.

    ``tau`` counts from the end: the last row (tau = 1 sample) gets a small
    positive gain, a row past the end would get 0.
    """
    first = n_rows - fade_rows
    row = 0
    for block in blocks:
        n = block.shape[0]
        if fade_rows > 0 and row + n > first:
            idx = np.arange(row, row + n)
            tau = np.clip(n_rows - idx, 0, fade_rows) / fade_rows
            ramp = np.where(idx >= first, np.sin(0.5 * np.pi * tau) ** 2, 1.0)
            block = block * ramp[:, None]
        row += n
        yield block


def _row_max_abs(block: np.ndarray) -> np.ndarray:
    """Largest magnitude of each row of a (rows, 1 or 2) block.

    Channel by channel: numpy's reduction along a 2-wide last axis is about 20
    times slower than one elementwise maximum of the two columns.
    """
    mag = np.abs(block)
    row = mag[:, 0]
    for ch in range(1, mag.shape[1]):
        row = np.maximum(row, mag[:, ch])
    return row


class _ForFile:
    """Scale float64 blocks into the file's sample type and measure them, one pass a block.

    Iterating yields each block times ``gain`` (the engine's float64 product) as
    the file holds it: int32 at full scale 2^31 for ``pcm16`` and ``pcm24``, whose
    top bits the file keeps (the integers libsndfile would derive from the
    float64 samples itself, so the file is the same byte for byte), float32 for
    ``float32`` (:func:`synth.engine.render.scale_block`).  One buffer is handed
    out again and again: the writer takes each block before it asks for the next.
    Kept on the way: the largest magnitude before the gain
    (``peak_in``), after it (``peak``) and over the rows from ``tail_from`` on
    (``tail``).  A sample beyond full scale or not finite stops the write with
    :func:`synth.io.range_error`'s refusal (``where``: the file).
    """

    def __init__(self, blocks: Iterable[np.ndarray], gain: float, sample_format: str,
                 tail_from: int, where: str):
        self._blocks = blocks
        self._gain = gain
        self._dtype = np.float32 if sample_format == "float32" else np.int32
        self._tail_from = tail_from
        self._where = where
        self.peak_in = 0.0
        self.peak = 0.0
        self.tail = 0.0

    def __iter__(self) -> Iterator[np.ndarray]:
        row = 0
        buf = np.empty((0, 0), dtype=self._dtype)
        for block in self._blocks:
            n = block.shape[0]
            if buf.shape[0] < n or buf.shape[1] != block.shape[1]:
                buf = np.empty(block.shape, dtype=self._dtype)
            out = buf[:n]
            got = scale_block(block, self._gain, out, tail_from=self._tail_from - row)
            if got.first_not_finite is not None:
                raise io.range_error(self._where, row + got.first_not_finite, math.nan)
            if got.first_beyond is not None:
                raise io.range_error(self._where, row + got.first_beyond, got.peak)
            self.peak_in = max(self.peak_in, got.peak_in)
            self.peak = max(self.peak, got.peak)
            self.tail = max(self.tail, got.tail)
            row += n
            yield out


SCRATCH_HELD_BYTES = 32 * 2 ** 20
"""Unscaled samples a normalised render keeps in memory before it spills the rest to its
temporary file (32 MiB: the first 43.7 s of a 48 kHz stereo render)."""


class _Scratch:
    """Unscaled float64 samples of a render, kept until its gain is known.

    The first :data:`SCRATCH_HELD_BYTES` stay in memory, the rest go to an unnamed
    temporary file (opened when first needed, removed on close).
    """

    def __init__(self, folder: Path, channels: int, chunk: int | None,
                 held_bytes: int | None = None):
        self.folder = folder
        self.channels = channels
        self.rows = 0
        self.chunk = chunk
        self._chunks: list[np.ndarray] = []  # largest magnitude per ``chunk`` rows, if asked
        self._room = SCRATCH_HELD_BYTES if held_bytes is None else held_bytes
        self._held: list[np.ndarray] = []
        self._file: IO[bytes] | None = None

    @property
    def _open(self) -> IO[bytes]:
        if self._file is None:
            try:
                self._file = tempfile.TemporaryFile(dir=self.folder, prefix=".render-")
            except OSError as exc:
                raise AudioError(f"{self.folder}: cannot hold the render's temporary file "
                                 f"({exc.strerror or exc})") from None
        return self._file

    def __enter__(self) -> _Scratch:
        return self

    def __exit__(self, *exc) -> None:
        self._held = []
        if self._file is not None:
            with contextlib.suppress(OSError):
                self._file.close()

    def fill(self, blocks: Iterable[np.ndarray]) -> float:
        """Keep every block; return their largest magnitude.

        With a ``chunk`` length, the largest magnitude of every ``chunk`` rows is
        noted too (for :meth:`rung_out_rows`).
        """
        peak = 0.0
        chunk = self.chunk
        for block in blocks:
            if not block.size:
                pass
            elif chunk is None:
                peak = max(peak, max_abs(block))
            else:
                row_max = _row_max_abs(block)
                peak = max(peak, float(row_max.max()))
                self._note_chunks(row_max, chunk)
            data = np.ascontiguousarray(block, dtype=np.float64)
            if self._file is None and data.nbytes <= self._room:
                self._held.append(data)  # the engine hands out a fresh array per block
                self._room -= data.nbytes
            else:
                try:
                    self._open.write(data.data)
                except OSError as exc:
                    raise AudioError(f"{self.folder}: cannot write the render's temporary file "
                                     f"({exc.strerror or exc})") from None
            self.rows += block.shape[0]
        return peak

    def _note_chunks(self, row_max: np.ndarray, chunk: int) -> None:
        ids = (self.rows + np.arange(row_max.size)) // chunk
        starts = np.flatnonzero(np.diff(ids)) + 1
        starts = np.concatenate([[0], starts])
        values = np.maximum.reduceat(row_max, starts)
        if self._chunks and self.rows % chunk:  # the first chunk goes on from the last
            last = self._chunks[-1]
            last[-1] = max(last[-1], values[0])
            values = values[1:]
        if values.size:
            self._chunks.append(np.array(values, dtype=np.float64))

    def rung_out_rows(self, threshold: float) -> int | None:
        """Rows up to one whole chunk after the last chunk reaching ``threshold`` (None: never)."""
        if self.chunk is None:
            raise ValueError("a render without a chunk length keeps no chunk maxima")
        chunks = np.concatenate(self._chunks) if self._chunks else np.zeros(0)
        if threshold <= 0:
            return None
        loud = np.flatnonzero(chunks >= threshold)
        end = (int(loud[-1]) + 2) * self.chunk if loud.size else self.chunk
        return end if end <= self.rows else None

    def blocks(self, block_size: int, rows: int | None = None) -> Iterator[np.ndarray]:
        """Give the first ``rows`` samples (default all) back.

        The held blocks come as they came, then the file in blocks of ``block_size``.
        """
        left = self.rows if rows is None else min(rows, self.rows)
        for block in self._held:
            if left <= 0:
                return
            part = block[:left]
            left -= part.shape[0]
            yield part
        if left <= 0:
            return
        self._open.seek(0)
        width = 8 * self.channels
        while left > 0:
            n = min(block_size, left)
            data = self._open.read(n * width)
            if len(data) != n * width:
                raise AudioError(f"{self.folder}: the render's temporary file came back short")
            yield np.frombuffer(data, dtype=np.float64).reshape(n, self.channels)
            left -= n
