"""Whole user jobs, timed as users wait for them (``barwright bench --only userjobs``).

Kernel figures alone say little about what a user waits for (planning in Python,
per-voice calls, file writing).  This suite times the jobs users run on the demo
instrument (lantern-street-bars), in this process with one BLAS thread, by the CPU time
of this thread (steadier than wall time on a shared machine):

* ``strike``: A4 struck once, 10 s;
* ``chord``: six notes struck together (C4 E4 G4 C5 E5 G5), 10 s;
* ``scale``: the 37 notes of the range one after the other, 0.5 s apart, 20 s;
* ``passage``: one strike per second across the range (notes seven semitones
  apart in turn, strengths 0.3-0.84, dampers lifted), 600 s (60 s with ``--quick``).

Each job plans its voices (:class:`synth.voicing.Voicer`) and renders them to a
48 kHz stereo 24-bit WAV (:func:`synth.output.render_to_wav`), once with an
empty plan cache (``cold``, what a first render costs) and once with the cache
filled (``warm``, every later render of the same instrument).  Warm runs, the
kernel-only call and the new-process runs are medians of 5 repeats (single runs
with ``--quick``; the passage's warm run is always a single run).

Work is counted in delivered mode-samples: for every voice, its modes (a coupled
pair counts as two) times the samples from its strike to the end of the render,
whatever the engine skips (retired tails): the work a naive evaluation would do.
Much of that work lies in tails the engine retires 100 dB below the peak: in
the passage whole voices, so its delivered figure can exceed the kernel's; in
the scale, whose notes all ring to its end, the upper modes (three quarters of
its mode-samples), so the scale shows what retiring single modes gives.
The reference is that naive evaluation, measured in the same run: numpy computing
``a exp(-g t) sin(2 pi f t + phi)`` for the same modes over the same length, in
blocks of 8192 samples (a coupled pair as its two members with their own
frequencies and decays).  When the whole job would take numpy more than a few
seconds, numpy evaluates an evenly spaced subset of the blocks across the whole
length, and its rate is the mode-samples of those blocks over their time.

The speed-up of two workers over one (range render, sustain, tune) is the
``workers`` suite's (:mod:`synth.bench.workers`).

Figures
-------
userjobs.strike_mode_samples,
userjobs.chord_mode_samples,
userjobs.scale_mode_samples,
userjobs.passage_mode_samples
    Delivered mode-samples of each job.
userjobs.strike_cold_s,
userjobs.chord_cold_s,
userjobs.scale_cold_s,
userjobs.passage_cold_s
userjobs.strike_warm_s,
userjobs.chord_warm_s,
userjobs.scale_warm_s,
userjobs.passage_warm_s
    Thread CPU time of plan + render + WAV, s, with an empty and a filled plan cache.
userjobs.strike_plan_cold_s,
userjobs.chord_plan_cold_s,
userjobs.scale_plan_cold_s,
userjobs.passage_plan_cold_s
    The planning part of the cold run, s.
userjobs.strike_delivered_mode_samples_per_s,
userjobs.chord_delivered_mode_samples_per_s,
userjobs.scale_delivered_mode_samples_per_s,
userjobs.passage_delivered_mode_samples_per_s
    Delivered mode-samples over the warm time.
userjobs.strike_numpy_ratio,
userjobs.chord_numpy_ratio,
userjobs.scale_numpy_ratio,
userjobs.passage_numpy_ratio
    That figure over the numpy reference's rate on the same modes and length.
userjobs.strike_of_kernel,
userjobs.chord_of_kernel,
userjobs.scale_of_kernel,
userjobs.passage_of_kernel
    That figure over the kernel-only figure (target for scale and passage: >= 0.4).
userjobs.kernel_only_mode_samples_per_s
    Kernel-only: the bank kernel alone, one call over every mode of the scale job,
    1 s mono; no planning, no per-voice calls, no file.
userjobs.passage_realtime_factor_one_core
    Audio seconds of the passage per thread CPU second, warm (target >= 30).
userjobs.warm_strike_wall_s, userjobs.warm_strike_cpu_s
    ``barwright strike PRESET A4 --duration 10`` in a new process, plan cache
    filled, start to WAV: median wall time and the process's CPU time (target < 1 s).
userjobs.engine_floor_wall_s, userjobs.engine_floor_cpu_s
    The in-run reference of the warm strike: a new process that imports numpy and
    the compiled kernels (numba) and makes one call of the batch kernel from
    numba's cache, 8 samples; what any render in a new process costs before
    barwright reads a file.  Median wall time and CPU time.
userjobs.warm_strike_of_floor
    Warm strike wall time over that floor's (medians): what the command line, the
    settings, the plan, the render and the WAV add, as a ratio (1: nothing).
userjobs.help_wall_s
    ``barwright --help`` in a new process, median wall time (target < 0.3 s).
"""

from __future__ import annotations

import math
import os
import statistics
import subprocess
import sys
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from synth.bench import bank_kernel_call, median_time
from synth.config import presets_dir
from synth.engine.voice import Voice
from synth.output import render_to_wav
from synth.plan_cache import CACHE_ENV
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer

FS = 48000
BLOCK = 8192
NUMPY_BUDGET_MODE_SAMPLES = 3e8
"""Above this many mode-samples numpy evaluates an evenly spaced subset of blocks."""


def _preset() -> Path:
    return presets_dir() / "instruments" / "lantern-street-bars.toml"


@contextmanager
def _cache_in(folder: Path):
    old = os.environ.get(CACHE_ENV)
    os.environ[CACHE_ENV] = str(folder)
    try:
        yield
    finally:
        if old is None:
            os.environ.pop(CACHE_ENV, None)
        else:
            os.environ[CACHE_ENV] = old


def _strikes(job: str, notes: tuple[str, ...], quick: bool) -> tuple[list[tuple], float]:
    """(note, time_s, velocity) of each strike, and the job's length in s."""
    if job == "strike":
        return [("A4", 0.0, None)], 10.0
    if job == "chord":
        return [(n, 0.0, None) for n in ("C4", "E4", "G4", "C5", "E5", "G5")], 10.0
    if job == "scale":
        return [(n, 0.5 * k, None) for k, n in enumerate(notes)], 20.0
    length = 60 if quick else 600
    return [(notes[(7 * k) % len(notes)], float(k), 0.3 + 0.06 * ((13 * k) % 10))
            for k in range(length)], float(length)


def _plan(inst, strikes) -> list[Voice]:
    v = Voicer(inst, sample_rate=float(FS))
    return [v.strike_voice(n, time_s=t, velocity=vel, release_s=t) for n, t, vel in strikes]


def _run_job(inst, strikes, seconds: float, out: Path) -> tuple[float, float, list[Voice]]:
    """Plan and render; return (plan s, total s) in thread CPU time, and the voices."""
    t0 = time.thread_time()
    voices = _plan(inst, strikes)
    t1 = time.thread_time()
    render_to_wav(out, voices, int(round(seconds * FS)), sample_rate=FS, channels=2,
                  force=True)
    return t1 - t0, time.thread_time() - t0, voices


def _mode_samples(voices: list[Voice], n_samples: int) -> int:
    return sum((v.modes.n_modes + 2 * len(v.pairs)) * max(0, n_samples - v.start_sample)
               for v in voices)


def _plain_modes(
        voices: list[Voice]) -> list[tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """(start, f, g, a, phase) per voice, a coupled pair as its two members."""
    out = []
    for v in voices:
        m = v.modes
        f, g, a = list(m.frequency_hz), list(m.decay_per_s), list(m.amplitude)
        ph = list(m.phase_rad if m.phase_rad is not None else np.zeros(m.n_modes))
        for p in v.pairs:
            f += list(p.frequency_hz)
            g += list(p.decay_per_s)
            a += list(p.amplitude)
            ph += list(p.phase_rad)
        out.append((v.start_sample, np.array(f), np.array(g), np.array(a), np.array(ph)))
    return out


def _numpy_rate(voices: list[Voice], n_samples: int) -> float:
    """Mode-samples per thread CPU second of the numpy reference on these voices."""
    modes = _plain_modes(voices)
    n_blocks = math.ceil(n_samples / BLOCK)
    total = _mode_samples(voices, n_samples)
    stride = max(1, math.ceil(total / NUMPY_BUDGET_MODE_SAMPLES))
    out = np.zeros(BLOCK)
    done = 0
    t0 = time.thread_time()
    for b in range(0, n_blocks, stride):
        b0 = b * BLOCK
        n = min(BLOCK, n_samples - b0)
        out[:n] = 0.0
        for start, f, g, a, ph in modes:
            lo = max(b0, start)
            if lo >= b0 + n:
                continue
            t = (np.arange(lo, b0 + n) - start) / FS
            y = (a[:, None] * np.exp(-np.outer(g, t))
                 * np.sin(2 * np.pi * np.outer(f, t) + ph[:, None]))
            out[lo - b0:n] += y.sum(axis=0)
            done += f.size * (b0 + n - lo)
    return done / (time.thread_time() - t0)


def _kernel_only(voices: list[Voice], repeats: int) -> float:
    """Time the bank kernel alone on every mode of ``voices``, 1 s mono, one call."""
    modes = _plain_modes(voices)
    f, g, a, ph = (np.concatenate([m[i] for m in modes]) for i in range(1, 5))
    call = bank_kernel_call(f, g, a, ph, FS, FS)
    return f.size * FS / median_time(call, repeats, clock=time.thread_time)


_ENGINE_FLOOR = """
import numpy as np
from synth.engine import kernels
k = np.ones(2)
n = np.zeros(2, dtype=np.int64)
kernels._banks_add(np.zeros((8, 2)), 0, 0, 8, k, k, 0.01 * k, 0 * k, k, 0 * k, n, n,
                   0 * k, 0 * k, 1024)
"""
"""The engine floor's program (see the module docstring)."""


def _subprocess_s(args: list[str], env: dict[str, str]) -> tuple[float, float]:
    """Run ``python -m synth ARGS`` (or ``python ARGS``); return (wall s, CPU s of the process)."""
    t0 = time.perf_counter()
    command = list(args) if args[0] == "-c" else ["-m", "synth", *args]
    proc = subprocess.Popen([sys.executable, *command], env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    if proc.stderr is None:  # stderr=PIPE above
        raise RuntimeError("the child process has no stderr pipe")
    err = proc.stderr.read().decode(errors="replace").strip()
    proc.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"barwright {' '.join(args)} failed: {err}")
    return wall, usage.ru_utime + usage.ru_stime


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; return figures keyed by dotted name."""
    inst = load_instrument(_preset())
    figures: dict[str, float] = {}
    repeats = 1 if quick else 5
    with tempfile.TemporaryDirectory() as tmp, threadpool_limits(limits=1):
        d = Path(tmp)
        scale_voices = None
        for job in ("strike", "chord", "scale", "passage"):
            strikes, seconds = _strikes(job, inst.notes, quick)
            n = int(round(seconds * FS))
            with _cache_in(d / f"cache-{job}"):
                plan_cold, cold, voices = _run_job(inst, strikes, seconds, d / f"{job}.wav")
                warm_runs = 1 if job == "passage" else repeats
                warm = statistics.median(
                    _run_job(inst, strikes, seconds, d / f"{job}.wav")[1]
                    for _ in range(warm_runs))
            work = _mode_samples(voices, n)
            delivered = work / warm
            figures[f"userjobs.{job}_mode_samples"] = float(work)
            figures[f"userjobs.{job}_cold_s"] = cold
            figures[f"userjobs.{job}_plan_cold_s"] = plan_cold
            figures[f"userjobs.{job}_warm_s"] = warm
            figures[f"userjobs.{job}_delivered_mode_samples_per_s"] = delivered
            figures[f"userjobs.{job}_numpy_ratio"] = delivered / _numpy_rate(voices, n)
            if job == "scale":
                scale_voices = voices
            if job == "passage":
                figures["userjobs.passage_realtime_factor_one_core"] = seconds / warm
        if scale_voices is None:  # the loop above always runs the scale
            raise RuntimeError("the scale job did not run")
        kernel = _kernel_only(scale_voices, repeats)
        figures["userjobs.kernel_only_mode_samples_per_s"] = kernel
        for job in ("strike", "chord", "scale", "passage"):
            figures[f"userjobs.{job}_of_kernel"] = (
                figures[f"userjobs.{job}_delivered_mode_samples_per_s"] / kernel)

        env = {**os.environ, CACHE_ENV: str(d / "cache-cli")}
        strike = ["strike", str(_preset()), "A4", "--duration", "10", "--out",
                  str(d / "cli.wav"), "--force"]
        _subprocess_s(strike, env)  # fills the plan cache (and numba's)
        runs, floor = [], []
        for _ in range(repeats):  # interleaved, so both meet the same load
            runs.append(_subprocess_s(strike, env))
            floor.append(_subprocess_s(["-c", _ENGINE_FLOOR], env))
        figures["userjobs.warm_strike_wall_s"] = statistics.median(r[0] for r in runs)
        figures["userjobs.warm_strike_cpu_s"] = statistics.median(r[1] for r in runs)
        figures["userjobs.engine_floor_wall_s"] = statistics.median(r[0] for r in floor)
        figures["userjobs.engine_floor_cpu_s"] = statistics.median(r[1] for r in floor)
        figures["userjobs.warm_strike_of_floor"] = (
            figures["userjobs.warm_strike_wall_s"] / figures["userjobs.engine_floor_wall_s"])
        figures["userjobs.help_wall_s"] = statistics.median(
            _subprocess_s(["--help"], env)[0] for _ in range(repeats))
    return figures
