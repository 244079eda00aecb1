"""Render engine voices into a WAV file: one pass, peak planning, sidecar.

The voices are rendered once.  To normalise, the unscaled float64 samples go to
a temporary file (on disk, never held in memory) while the peak is measured;
the gain is then chosen and the samples are scaled as they are copied into the
WAV: the file equals that of a second render scaled by the engine bit for bit.
With a fixed gain whose advance peak bound (:func:`synth.engine.render.peak_bound`)
stays at or below full scale, nothing can clip and the samples are streamed
straight into the WAV; otherwise the temporary file decides whether the gain
must be lowered.  The default puts the peak at -1 dBFS; a fixed gain is kept
when asked for, lowered to the ceiling if it would clip, and reported.  Nothing
ever clips.  Voices are retired once their tails, summed, stay 100 dB below the
output's peak (``retire_db``).  The file is written atomically and never
replaces an existing one unless ``force``; a JSON sidecar beside it records the
resolved settings.

.. note:: Struck metal bars are peaky. Start playback quietly, especially on
   headphones.
"""

from __future__ import annotations

import contextlib
import tempfile
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

import numpy as np

from synth import io
from synth.engine.render import (
    DEFAULT_BLOCK_SIZE,
    DEFAULT_RETIRE_DB,
    GainPlan,
    peak_bound,
    plan_gain,
    render_blocks,
)
from synth.engine.voice import Voice
from synth.errors import AudioError

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


def render_to_wav(path: str | Path, voices: Sequence[Voice], n_samples: int, *,
                  sample_rate: int = io.DEFAULT_SAMPLE_RATE_HZ, channels: int = 2,
                  sample_format: str = io.DEFAULT_SAMPLE_FORMAT, gain_db: float | None = None,
                  target_dbfs: float = -1.0, force: bool = False,
                  settings: Mapping[str, Any] | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  block_size: int = DEFAULT_BLOCK_SIZE,
                  retire_db: float | None = DEFAULT_RETIRE_DB,
                  scratch_dir: str | Path | None = None) -> RenderReport:
    """Render ``voices`` over ``n_samples`` into ``path`` (WAV) plus a JSON sidecar.

    ``progress(done, total)`` is called with the samples rendered (total
    ``n_samples``).  ``retire_db`` is the level re the output's peak below which
    the summed tails of retired voices stay (default -100 dB; ``None`` keeps
    every voice; see :mod:`synth.engine.render`).  The temporary file of a
    normalised render goes to ``scratch_dir`` (default: the WAV's folder) and
    takes 8 bytes per sample and channel while the render runs.
    """
    t0 = time.perf_counter()
    target = io.check_writable(path, force=force)
    side = io.sidecar_path(target)
    io.check_writable(side, force=force)
    out_dtype = np.float32 if sample_format == "float32" else np.float64

    def blocks() -> Iterator[np.ndarray]:
        return render_blocks(voices, n_samples, sample_rate=sample_rate, channels=channels,
                             block_size=block_size, retire_db=retire_db, progress=progress)

    plan = None
    if gain_db is not None:
        bound = peak_bound(voices, n_samples, sample_rate=sample_rate, channels=channels)
        gain = plan_gain(0.0, target_dbfs=target_dbfs, gain_db=gain_db).gain
        if bound is not None and bound * gain <= 1.0:  # cannot clip: stream it
            meter = _PeakMeter(blocks())
            io.write_wav(target, _scaled(meter, gain, out_dtype), sample_rate=sample_rate,
                         sample_format=sample_format, channels=channels, force=force)
            plan = plan_gain(meter.peak, target_dbfs=target_dbfs, gain_db=gain_db)
    streamed = plan is not None
    if plan is None:
        with _Scratch(target.parent if scratch_dir is None else Path(scratch_dir),
                      channels) as scratch:
            peak = scratch.fill(blocks())
            plan = plan_gain(peak, target_dbfs=target_dbfs, gain_db=gain_db)
            io.write_wav(target, _scaled(scratch.blocks(block_size), plan.gain, out_dtype),
                         sample_rate=sample_rate, sample_format=sample_format,
                         channels=channels, force=force)
    record = dict(settings or {})
    record.update({
        "file": target.name, "sample_rate_hz": sample_rate, "channels": channels,
        "sample_format": sample_format, "samples": int(n_samples),
        "seconds": n_samples / sample_rate, "voices": len(voices),
        "peak_unscaled": plan.peak, "gain_db": plan.gain_db, "peak_dbfs": plan.peak_dbfs,
        "gain_mode": plan.mode, "requested_gain_db": plan.requested_gain_db,
        "would_clip": plan.would_clip, "limited": plan.limited, "retire_db": retire_db,
    })
    io.write_sidecar(target, record, force=force)
    return RenderReport(target, side, n_samples / sample_rate, int(n_samples), sample_rate,
                        channels, plan, time.perf_counter() - t0, streamed)


# --------------------------------------------------------------------------- one pass
def _scaled(blocks: Iterable[np.ndarray], gain: float, dtype) -> Iterator[np.ndarray]:
    """Apply the gain as the engine does (float64 product, then the output type)."""
    for block in blocks:
        if gain != 1.0:
            block = block * gain
        yield block if dtype == np.float64 else block.astype(dtype)


class _PeakMeter:
    """Pass blocks through and keep their largest magnitude."""

    def __init__(self, blocks: Iterable[np.ndarray]):
        self._blocks = blocks
        self.peak = 0.0

    def __iter__(self) -> Iterator[np.ndarray]:
        for block in self._blocks:
            if block.size:
                self.peak = max(self.peak, float(np.max(np.abs(block))))
            yield block


class _Scratch:
    """Unscaled float64 samples in an unnamed temporary file (removed on close)."""

    def __init__(self, folder: Path, channels: int):
        self.folder = folder
        self.channels = channels
        self.rows = 0
        self._file: IO[bytes] | None = None

    @property
    def _open(self) -> IO[bytes]:
        if self._file is None:
            raise AudioError(f"{self.folder}: the render's temporary file is not open")
        return self._file

    def __enter__(self) -> _Scratch:
        try:
            self._file = tempfile.TemporaryFile(dir=self.folder, prefix=".render-")
        except OSError as exc:
            raise AudioError(f"{self.folder}: cannot hold the render's temporary file "
                             f"({exc.strerror or exc})") from None
        return self

    def __exit__(self, *exc) -> None:
        with contextlib.suppress(OSError):
            self._open.close()

    def fill(self, blocks: Iterable[np.ndarray]) -> float:
        """Write every block; return their largest magnitude."""
        peak = 0.0
        for block in blocks:
            if block.size:
                peak = max(peak, float(np.max(np.abs(block))))
            try:
                self._open.write(np.ascontiguousarray(block, dtype=np.float64).data)
            except OSError as exc:
                raise AudioError(f"{self.folder}: cannot write the render's temporary file "
                                 f"({exc.strerror or exc})") from None
            self.rows += block.shape[0]
        return peak

    def blocks(self, block_size: int) -> Iterator[np.ndarray]:
        """Read the samples back in blocks of ``block_size`` rows."""
        self._open.seek(0)
        width = 8 * self.channels
        left = self.rows
        while left > 0:
            rows = min(block_size, left)
            data = self._open.read(rows * width)
            if len(data) != rows * width:
                raise AudioError(f"{self.folder}: the render's temporary file came back short")
            yield np.frombuffer(data, dtype=np.float64).reshape(rows, self.channels)
            left -= rows
