"""Render engine voices into a WAV file: peak planning, streaming, sidecar.

Two passes over the same deterministic render: the first only measures the peak,
the second streams the samples, already scaled, into the file.  The default puts
the peak at -1 dBFS; a fixed gain is kept when asked for, lowered to the ceiling
if it would clip, and reported.  Nothing ever clips.  The file is written
atomically and never replaces an existing one unless ``force``; a JSON sidecar
beside it records the resolved settings.

.. note:: Struck metal bars are peaky. Start playback quietly, especially on
   headphones.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from synth import io
from synth.engine.render import DEFAULT_BLOCK_SIZE, GainPlan, measure_peak, plan_gain, render_blocks
from synth.engine.voice import Voice

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


def render_to_wav(path: str | Path, voices: Sequence[Voice], n_samples: int, *,
                  sample_rate: int = io.DEFAULT_SAMPLE_RATE_HZ, channels: int = 2,
                  sample_format: str = io.DEFAULT_SAMPLE_FORMAT, gain_db: float | None = None,
                  target_dbfs: float = -1.0, force: bool = False,
                  settings: Mapping[str, Any] | None = None,
                  progress: Callable[[int, int], None] | None = None,
                  block_size: int = DEFAULT_BLOCK_SIZE) -> RenderReport:
    """Render ``voices`` over ``n_samples`` into ``path`` (WAV) plus a JSON sidecar.

    ``progress(done, total)`` is called with samples over both passes (total
    ``2 n_samples``).
    """
    t0 = time.perf_counter()
    target = io.check_writable(path, force=force)
    side = io.sidecar_path(target)
    io.check_writable(side, force=force)

    def first(done, total):
        if progress is not None:
            progress(done, 2 * total)

    def second(done, total):
        if progress is not None:
            progress(total + done, 2 * total)

    peak = measure_peak(voices, n_samples, sample_rate=sample_rate, channels=channels,
                        block_size=block_size, progress=first)
    plan = plan_gain(peak, target_dbfs=target_dbfs, gain_db=gain_db)
    blocks = render_blocks(voices, n_samples, sample_rate=sample_rate, channels=channels,
                           gain=plan.gain, block_size=block_size, progress=second,
                           dtype=np.float32 if sample_format == "float32" else np.float64)
    io.write_wav(target, blocks, sample_rate=sample_rate, sample_format=sample_format,
                 channels=channels, force=force)
    record = dict(settings or {})
    record.update({
        "file": target.name, "sample_rate_hz": sample_rate, "channels": channels,
        "sample_format": sample_format, "samples": int(n_samples),
        "seconds": n_samples / sample_rate, "voices": len(voices),
        "peak_unscaled": plan.peak, "gain_db": plan.gain_db, "peak_dbfs": plan.peak_dbfs,
        "gain_mode": plan.mode, "requested_gain_db": plan.requested_gain_db,
        "would_clip": plan.would_clip, "limited": plan.limited,
    })
    io.write_sidecar(target, record, force=force)
    return RenderReport(target, side, n_samples / sample_rate, int(n_samples), sample_rate,
                        channels, plan, time.perf_counter() - t0)
