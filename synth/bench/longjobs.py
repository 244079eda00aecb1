"""Long jobs in bounded memory (``barwright bench --only longjobs``).

Each job runs as the user runs it, ``barwright`` in a new process, and its peak
resident memory is read from the operating system when the process ends
(``os.wait4``: ``ru_maxrss``), with its CPU time.  The figures are single runs:
a long job is its own repeat, and memory hardly varies between runs.

The passage is one strike per second for an hour (3600 strikes, one minute
with ``--quick``) across the demo range (lantern-street-bars), notes seven semitones
apart in turn, strengths 0.3-0.84, dampers lifted throughout so every note rings
its full decay (the most voices sounding at once), rendered at the defaults
(48 kHz stereo, 24-bit, normalised).  The recording is ten minutes (90 s with
``--quick``, still past the 60 s that ``measure`` reads) of stereo 24-bit noise
at -70 dBFS with one strike of three decaying partials 2 s in, measured with
``barwright measure``.

Figures
-------
longjobs.passage_strikes, longjobs.passage_audio_s
    Size of the passage.
longjobs.passage_rss_mb, longjobs.passage_rss_over_target
    Peak resident memory of the render, MB, and its ratio to the target of
    300 MB (below 1 meets it).
longjobs.passage_wall_s, longjobs.passage_cpu_s
    Wall and CPU (user + system) time of the render, s.
longjobs.passage_realtime_factor, longjobs.passage_realtime_factor_cpu
    Audio seconds per wall second and per CPU second (above 1 is faster than
    real time; on a shared machine the CPU figure is the steadier one).
longjobs.floor_rss_mb
    Peak memory of a 5 s render of 5 strikes, the in-run reference: what the
    process needs before any voice piles up.
longjobs.measure_audio_s, longjobs.measure_rss_mb, longjobs.measure_rss_over_target
    Length of the recording, peak memory of its measurement, MB, and the ratio
    to the target of 500 MB.
longjobs.measure_wall_s
    Wall time of the measurement, s.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from synth.config import presets_dir
from synth.io import write_wav
from synth.settings.instrument import load_instrument

PASSAGE_TARGET_MB = 300.0
MEASURE_TARGET_MB = 500.0
FS = 48000
_PARTIALS = ((440.0, 3.0, 0.3), (1760.0, 0.8, 0.2), (4435.0, 0.3, 0.1))


def _preset() -> Path:
    return presets_dir() / "instruments" / "lantern-street-bars.toml"


def _passage(path: Path, strikes: int) -> None:
    """Write a TOML event list: one strike per second across the demo range."""
    notes = load_instrument(_preset()).notes
    lines = ["# bench passage: one strike per second across the range\n",
             f"[score]\nlength_s = {float(strikes)}\n"]
    for k in range(strikes):
        note = notes[(7 * k) % len(notes)]
        velocity = 0.3 + 0.06 * ((13 * k) % 10)
        lines.append(f'[[strike]]\ntime_s = {float(k)}\nnote = "{note}"\n'
                     f"velocity = {velocity:.2f}\n")
    path.write_text("\n".join(lines), encoding="utf-8")


def _recording(path: Path, seconds: float) -> None:
    """Write noise at -70 dBFS with one strike 2 s in, block by block."""
    rng = np.random.default_rng(7)
    n = int(seconds * FS)
    i0 = 2 * FS
    step = 10 * FS

    def blocks():
        for first in range(0, n, step):
            t = (np.arange(first, min(n, first + step)) - i0) / FS
            x = 10 ** (-70 / 20) * rng.standard_normal(t.size)
            on = t >= 0
            for f, tau, a in _PARTIALS:
                x[on] += a * np.exp(-t[on] / tau) * np.sin(2 * math.pi * f * t[on])
            yield np.column_stack([x, 0.8 * x])

    write_wav(path, blocks(), sample_rate=FS, channels=2)


def _run(args: list[str]) -> tuple[float, float, float]:
    """Run ``barwright ARGS`` in a new process; return (peak RSS MB, wall s, CPU s)."""
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "synth", *args],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.stderr is None:  # stderr=PIPE above
        raise RuntimeError("the child process has no stderr pipe")
    err = proc.stderr.read().decode(errors="replace").strip()
    proc.stderr.close()
    if proc.returncode != 0:
        raise RuntimeError(f"barwright {' '.join(args)} failed ({proc.returncode}): {err}")
    # ru_maxrss is in kB on Linux
    return usage.ru_maxrss / 1024.0, wall, usage.ru_utime + usage.ru_stime


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite."""
    strikes = 60 if quick else 3600
    rec_s = 90.0 if quick else 600.0
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        _passage(d / "floor.toml", 5)
        _passage(d / "passage.toml", strikes)
        render = ["render", str(_preset())]
        floor, _, _ = _run([*render, str(d / "floor.toml"), "--pedal", "1",
                            "--out", str(d / "floor.wav")])
        rss, wall, cpu = _run([*render, str(d / "passage.toml"), "--pedal", "1",
                               "--out", str(d / "passage.wav")])
        figures["longjobs.passage_strikes"] = float(strikes)
        figures["longjobs.passage_audio_s"] = float(strikes)
        figures["longjobs.passage_rss_mb"] = rss
        figures["longjobs.passage_rss_over_target"] = rss / PASSAGE_TARGET_MB
        figures["longjobs.passage_wall_s"] = wall
        figures["longjobs.passage_cpu_s"] = cpu
        figures["longjobs.passage_realtime_factor"] = strikes / wall
        figures["longjobs.passage_realtime_factor_cpu"] = strikes / cpu
        figures["longjobs.floor_rss_mb"] = floor
        (d / "passage.wav").unlink()
        _recording(d / "take.wav", rec_s)
        rss, wall, _ = _run(["measure", str(d / "take.wav")])
        figures["longjobs.measure_audio_s"] = rec_s
        figures["longjobs.measure_rss_mb"] = rss
        figures["longjobs.measure_rss_over_target"] = rss / MEASURE_TARGET_MB
        figures["longjobs.measure_wall_s"] = wall
    return figures
