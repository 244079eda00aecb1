"""3-D solid model benchmark: one bar to a set accuracy, and a range's solves on 1 and 2 workers.

Figures
-------
solid.solve_s
    One bar of the demo (A4) solved in 3-D, level by level until the estimated error
    of vertical partials 1-3 is below 0.05 % (0.2 % with ``--quick``), in a fresh
    process without the disk cache: wall time.
solid.peak_mb
    Peak resident memory of that process, MB (ru_maxrss: includes the interpreter and
    the imported libraries, about 150 MB).
solid.level
    The finest mesh level that solve needed.
solid.anchors
    How many anchor notes the range solves below use.
solid.anchors_1_worker_s, solid.anchors_2_workers_s
    The 3-D solves of the demo's anchor notes (both ends and every 6 semitones, one
    solve each at level 4; with ``--quick`` three notes at level 2), no cache, on one
    and on two local worker processes (synth.executor.run_jobs).
solid.anchors_speedup
    Their ratio: 2 at best on two free cores; each worker first imports scipy and
    scikit-fem (about a second), and other work on the machine takes its share.
"""

from __future__ import annotations

import resource
import time
from concurrent.futures import ProcessPoolExecutor

from synth.config import presets_dir
from synth.executor import Job, run_jobs
from synth.physics.solid import solve_bar_3d, solve_level
from synth.settings.instrument import load_instrument

VERTICAL = (("vertical", 1), ("vertical", 2), ("vertical", 3))


def _demo():
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    return inst, inst.material.at_temperature(inst.temperature_c)


def _one_bar(accuracy: float) -> tuple[float, int, float]:
    from threadpoolctl import threadpool_limits

    inst, mat = _demo()
    with threadpool_limits(1):
        t0 = time.perf_counter()
        result = solve_bar_3d(inst.bar("A4"), mat, accuracy=accuracy, watched=VERTICAL,
                              cache=False)
        seconds = time.perf_counter() - t0
    peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return seconds, result.finest.level, peak_kb / 1024.0


def _anchor(note: str, level: int) -> float:
    inst, mat = _demo()
    return solve_level(inst.bar(note), mat, level).mode("vertical", 1).frequency_hz


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; see the module docstring for the figures."""
    with ProcessPoolExecutor(max_workers=1) as pool:
        seconds, level, peak_mb = pool.submit(_one_bar, 2e-3 if quick else 5e-4).result()
    inst, _ = _demo()
    notes = list(inst.notes)
    anchors = [notes[0], notes[len(notes) // 2], notes[-1]] if quick else notes[::6]
    if anchors[-1] != notes[-1]:
        anchors.append(notes[-1])
    mesh = 2 if quick else 4
    jobs = [Job(n, _anchor, (n, mesh)) for n in anchors]
    timings = {}
    for workers in (1, 2):
        t0 = time.perf_counter()
        done = run_jobs(jobs, workers=workers)
        timings[workers] = time.perf_counter() - t0
        failed = [r for r in done if not r.ok]
        if failed:
            raise RuntimeError(f"anchor solve {failed[0].key} failed: {failed[0].error}")
    return {
        "solid.solve_s": seconds,
        "solid.peak_mb": peak_mb,
        "solid.level": float(level),
        "solid.anchors": float(len(anchors)),
        "solid.anchors_1_worker_s": timings[1],
        "solid.anchors_2_workers_s": timings[2],
        "solid.anchors_speedup": timings[1] / timings[2],
    }
