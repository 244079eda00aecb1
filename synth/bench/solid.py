"""3-D solid model benchmark: one bar to a set accuracy, and a range's solves on 1 and 2 workers.

Figures
-------
solid.solve_s
    One bar of the demo (A4) solved in 3-D, level by level until the estimated error
    of vertical partials 1-3 is below 0.05 % (0.2 % with ``--quick``), in a fresh
    process without the disk cache, one BLAS thread: wall time. Target < 60 s.
solid.solve_cpu_s
    The CPU time of that solve: what the wall time would be on a free core (the
    machine's other work stretches the wall time, not this).
solid.peak_mb
    Peak resident memory of that process, MB (ru_maxrss: includes the interpreter and
    the imported libraries, about 150 MB). Target < 4096 MB.
solid.level, solid.estimated_error_pct
    The finest mesh level that solve needed, and the error it reached, percent.
solid.anchors
    How many anchor notes the range solves below use.
solid.anchors_1_worker_s, solid.anchors_2_workers_s
    The 3-D solves of the demo's anchor notes (both ends and every 6 semitones, one
    solve each at level 4; with ``--quick`` three notes at level 2), no cache: in this
    process (``workers=1``) held to one BLAS thread, and on a local pool of two worker
    processes (synth.executor.run_jobs: one BLAS thread each, longest job first).
    Medians over repeats (3, 1 with ``--quick``), the two kinds of run alternating.
solid.anchors_speedup
    Their ratio (target 1.7): 2 at best on two free cores.
solid.anchors_speedup_balance_bound
    The best ratio the job sizes allow: the summed job times over the longest-first
    schedule of the same job times on two workers (seven unequal jobs do not split
    evenly in two).
solid.anchors_1_worker_cpu_pct, solid.anchors_2_workers_cpu_pct
    CPU time the runs got over their wall time and worker count, percent (medians):
    below 100 the machine's other work took the cores.
solid.anchors_job_inflation
    Summed in-worker wall time of the jobs on two workers over that on one (median of
    repeats): above 1 when two solves at once slow each other (shared memory bandwidth
    and cache) or other work takes the cores.
solid.anchors_cpu_work_ratio
    CPU seconds the two-worker run used over those of the one-worker run (medians):
    about 1 when running two at once adds no work (no pickling or start-up to speak
    of, no stalls on shared memory, which count as CPU time). Then a speed-up short of
    the balance bound comes from the CPU share the machine's other work left.
"""

from __future__ import annotations

import os
import resource
import statistics
import time
from concurrent.futures import ProcessPoolExecutor

from synth.config import presets_dir
from synth.executor import THREAD_ENV, Job, longest_first, run_jobs
from synth.physics.solid import solve_bar_3d, solve_level, unknowns
from synth.settings.instrument import load_instrument

VERTICAL = (("vertical", 1), ("vertical", 2), ("vertical", 3))


def _demo():
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    return inst, inst.material.at_temperature(inst.temperature_c)


def _one_bar(accuracy: float) -> tuple[float, float, int, float, float]:
    for name in THREAD_ENV:
        os.environ[name] = "1"
    from threadpoolctl import threadpool_limits

    inst, mat = _demo()
    with threadpool_limits(1):
        t0, c0 = time.perf_counter(), time.process_time()
        result = solve_bar_3d(inst.bar("A4"), mat, accuracy=accuracy, watched=VERTICAL,
                              cache=False)
        seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    error = max(result.partial(k, o).error for k, o in VERTICAL)
    return seconds, cpu, result.finest.level, peak_kb / 1024.0, error


def _anchor(note: str, level: int) -> tuple[float, float]:
    """Solve one anchor; return its vertical 1 (Hz) and the wall time inside the worker."""
    inst, mat = _demo()
    t0 = time.perf_counter()
    f = solve_level(inst.bar(note), mat, level).mode("vertical", 1).frequency_hz
    return f, time.perf_counter() - t0


def _cpu_s() -> float:
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def _timed(jobs: list[Job], workers: int) -> tuple[float, float, list[float]]:
    """Run the jobs; return wall s, CPU percent of wall x workers, in-worker job walls."""
    from threadpoolctl import threadpool_limits

    c0, t0 = _cpu_s(), time.perf_counter()
    if workers == 1:
        with threadpool_limits(1):  # the reference: one core, as each pool worker gets
            done = run_jobs(jobs, workers=1)
    else:
        done = run_jobs(jobs, workers=workers)
    wall = time.perf_counter() - t0
    cpu = _cpu_s() - c0  # pool workers are reaped when run_jobs returns: counted here
    failed = [r for r in done if not r.ok]
    if failed:
        raise RuntimeError(f"anchor solve {failed[0].key} failed: {failed[0].error}")
    return wall, 100.0 * cpu / (wall * workers), [r.value[1] for r in done]


def _two_worker_makespan(times: list[float]) -> float:
    """Finish time of ``times`` run longest first on two workers."""
    load = [0.0, 0.0]
    for t in sorted(times, reverse=True):
        load[load.index(min(load))] += t
    return max(load)


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; see the module docstring for the figures."""
    with ProcessPoolExecutor(max_workers=1) as pool:
        seconds, solve_cpu, level, peak_mb, error = pool.submit(_one_bar,
                                                     2e-3 if quick else 5e-4).result()
    inst, _ = _demo()
    notes = list(inst.notes)
    anchors = [notes[0], notes[len(notes) // 2], notes[-1]] if quick else notes[::6]
    if anchors[-1] != notes[-1]:
        anchors.append(notes[-1])
    mesh = 2 if quick else 4
    jobs = [Job(n, _anchor, (n, mesh), cost=float(unknowns(inst.bar(n), mesh)))
            for n in anchors]
    assert longest_first(jobs)[0] == 0  # the lowest note is the longest bar
    runs: dict[int, list] = {1: [], 2: []}
    for _ in range(1 if quick else 3):
        for workers in (1, 2):
            runs[workers].append(_timed(jobs, workers))
    wall = {w: statistics.median(r[0] for r in runs[w]) for w in runs}
    cpu = {w: statistics.median(r[1] for r in runs[w]) for w in runs}
    job_times = [statistics.median(r[2][i] for r in runs[1]) for i in range(len(jobs))]
    inflation = statistics.median(sum(b[2]) / sum(a[2])
                                  for a, b in zip(runs[1], runs[2], strict=True))
    work = {w: statistics.median(r[0] * r[1] * w / 100.0 for r in runs[w]) for w in runs}
    return {
        "solid.solve_s": seconds,
        "solid.solve_cpu_s": solve_cpu,
        "solid.peak_mb": peak_mb,
        "solid.level": float(level),
        "solid.estimated_error_pct": 100.0 * error,
        "solid.anchors": float(len(anchors)),
        "solid.anchors_1_worker_s": wall[1],
        "solid.anchors_2_workers_s": wall[2],
        "solid.anchors_speedup": wall[1] / wall[2],
        "solid.anchors_speedup_balance_bound": sum(job_times) / _two_worker_makespan(job_times),
        "solid.anchors_1_worker_cpu_pct": cpu[1],
        "solid.anchors_2_workers_cpu_pct": cpu[2],
        "solid.anchors_job_inflation": inflation,
        "solid.anchors_cpu_work_ratio": work[2] / work[1],
    }
