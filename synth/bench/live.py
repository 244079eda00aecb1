"""Live-playing benchmarks: the audio callback under full load, and the time to be ready.

With ``--quick``: 2000 timed callbacks instead of 6000, and start-to-ready with 2
velocity layers instead of 8, one timed run instead of the median of 3.

Figures
-------
live.callback_median_load, live.callback_p99_load
    Time of one audio callback (:meth:`synth.engine.realtime.VoicePool.process`)
    with all 37 notes of the demo preset sounding and the motor at 3 rev/s,
    64-sample blocks at 48 kHz, as a fraction of the block's duration (1.33 ms):
    median and 99th percentile over the timed calls.  Target < 0.25 on one core.
live.callback_cpu_median_load, live.callback_cpu_p99_load
    The same from the thread's CPU time: what the callback itself costs, without
    the time other processes take the core away (on a shared machine the wall
    figure's 99th percentile measures the neighbours; a live stream runs its
    callback at the audio thread's raised priority).
live.callback_median_us
    The median in microseconds.
live.blocks_timed
    Callbacks timed (every call of the run, after 200 untimed ones).
live.ready_s
    Start-to-ready of the demo preset in a new process (imports, planning
    every note at 8 velocity layers on every core, the level match, kernels
    loaded), second run, so numba's kernels, the voice plans and the level
    match come from their caches (target < 3 s).
live.ready_cpu_s
    CPU time of that process and its planning workers, s, median over the
    same runs: on a shared machine the wall figure also counts the time
    other processes hold the cores.
live.plan_strikes
    Strikes planned for that (notes x layers).
"""

from __future__ import annotations

import subprocess
import sys
import time

import numpy as np

from synth.config import presets_dir

_READY = """
import time
t0 = time.perf_counter()
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer
from synth.live import LivePlayer
v = Voicer(load_instrument({preset!r}), sample_rate=48000.0, channels=2)
s = LivePlayer([v], n_layers={layers}, workers=None)
s.pool.warm_up()
import resource
cpu = sum(getattr(resource.getrusage(w), f) for w in (resource.RUSAGE_SELF,
          resource.RUSAGE_CHILDREN) for f in ("ru_utime", "ru_stime"))
print(time.perf_counter() - t0, s.pool.n_templates, cpu)
"""


def _ready_once(layers: int) -> tuple[float, int, float]:
    preset = str(presets_dir() / "instruments" / "lantern-street-bars.toml")
    out = subprocess.run([sys.executable, "-c", _READY.format(preset=preset, layers=layers)],
                         check=True, capture_output=True, text=True)
    seconds, strikes, cpu = out.stdout.split()
    return float(seconds), int(strikes), float(cpu)


def _callback_loads(quick: bool) -> tuple[np.ndarray, np.ndarray]:
    import mido

    from synth.live import LivePlayer
    from synth.pitch import note_to_midi
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    fs, block = 48000.0, 64
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    v = Voicer(inst, sample_rate=fs, channels=2, motor_rate_rev_per_s=3.0)
    player = LivePlayer([v], n_layers=1, scales=[1.0], gain_db=-40.0)
    player.pool.warm_up()
    for k, note in enumerate(inst.notes):
        player.handle(mido.Message("note_on", note=note_to_midi(note), velocity=127), 10 * k)
    out = np.zeros((block, 2), dtype=np.float32)
    pool = player.pool
    for _ in range(200):
        pool.process(out)
    n = 2000 if quick else 6000   # 8 s: every note still above the retirement level
    wall = np.zeros(n)
    cpu = np.zeros(n)
    for i in range(n):
        c0 = time.thread_time()
        t0 = time.perf_counter()
        pool.process(out)
        wall[i] = time.perf_counter() - t0
        cpu[i] = time.thread_time() - c0
    if pool.sounding != len(inst.notes):
        raise RuntimeError(f"only {pool.sounding} of {len(inst.notes)} notes sounding")
    return wall / (block / fs), cpu / (block / fs)


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite."""
    loads, cpu = _callback_loads(quick)
    figures = {
        "live.callback_median_load": float(np.median(loads)),
        "live.callback_p99_load": float(np.percentile(loads, 99)),
        "live.callback_cpu_median_load": float(np.median(cpu)),
        "live.callback_cpu_p99_load": float(np.percentile(cpu, 99)),
        "live.callback_median_us": float(np.median(loads)) * 64 / 48000.0 * 1e6,
        "live.blocks_timed": float(loads.size),
    }
    layers = 2 if quick else 8
    _ready_once(layers)   # fills numba's cache if needed
    runs = [_ready_once(layers) for _ in range(1 if quick else 3)]
    figures["live.ready_s"] = sorted(r[0] for r in runs)[len(runs) // 2]
    figures["live.ready_cpu_s"] = sorted(r[2] for r in runs)[len(runs) // 2]
    figures["live.plan_strikes"] = float(runs[0][1])
    return figures
