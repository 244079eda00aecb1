"""Both cores: the jobs users spread with ``--workers``, on one worker and on two.

Each job is the library call its command makes, run on the demo instrument
(lantern-street-bars) through :func:`synth.executor.run_jobs` with ``workers=1``
(every job in this process) and ``workers=2`` (a local pool), the two runs
interleaved so that both meet the same load:

* ``range``: an 8 s stereo strike of each of the 37 notes, one WAV each, plan
  cache empty (every third note with ``--quick``);
* ``sustain``: :func:`synth.reports.sustain.sustain_report` over the range, plan
  cache filled (every third note with ``--quick``);
* ``tune``: :func:`synth.physics.tuning.tune_instrument` over the range (1-D, runs
  of ten neighbouring bars; the lowest 20 notes, two runs, with ``--quick``).

Each kind of run is repeated 5 times (once with ``--quick``: the figures are then
single runs, not medians).

The speed-up is the median wall time on one worker over the median on two
(target >= 1.7 on two free cores).  On a shared machine the other processes take
cores away from the pool, so the CPU time of each run is reported beside it: this
process and its finished worker processes, user + system; and a reference job,
interleaved with the others, shows what two workers can gain at all at that
moment: twelve jobs that each only count for 0.1 s of thread CPU time (no memory
traffic, no pickling to speak of).  A job's share of the reference is its
speed-up over the reference's.

Figures
-------
workers.range_2_over_1, workers.sustain_2_over_1, workers.tune_2_over_1
    Wall-time speed-up of two workers over one (medians of interleaved runs).
workers.reference_2_over_1
    The same for the reference job (CPU only): what the machine allowed.
workers.range_of_reference, workers.sustain_of_reference, workers.tune_of_reference
    Each job's speed-up over the reference's.
workers.range_wall_1_s, workers.range_wall_2_s,
workers.sustain_wall_1_s, workers.sustain_wall_2_s,
workers.tune_wall_1_s, workers.tune_wall_2_s
    The median wall times, s.
workers.range_cpu_1_s, workers.range_cpu_2_s,
workers.sustain_cpu_1_s, workers.sustain_cpu_2_s,
workers.tune_cpu_1_s, workers.tune_cpu_2_s
    Median CPU time of a run, s (pool start and pickling included on two).
"""

from __future__ import annotations

import resource
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from synth.config import presets_dir
from synth.executor import Job, run_jobs
from synth.output import render_to_wav
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer

FS = 48000
RANGE_SECONDS = 8
"""Length of each note's WAV in the range render, s."""


def _preset() -> Path:
    return presets_dir() / "instruments" / "lantern-street-bars.toml"


def range_note(preset: str, note: str, out: str) -> float:
    """One job of the range render: plan and render one strike (module level: picklable)."""
    v = Voicer(load_instrument(preset), sample_rate=float(FS))
    report = render_to_wav(out, [v.strike_voice(note)], RANGE_SECONDS * FS, sample_rate=FS,
                           force=True)
    return report.plan.peak


def _cpu_s() -> float:
    """CPU time of this process and its waited-for children, s."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def two_over_one(run: Callable[[int, int], object], repeats: int) -> dict[str, float]:
    """Time ``run(workers, repeat)`` on 1 and 2 workers, interleaved; medians.

    Returns ``{"2_over_1", "wall_1_s", "wall_2_s", "cpu_1_s", "cpu_2_s"}``.
    """
    wall: dict[int, list[float]] = {1: [], 2: []}
    cpu: dict[int, list[float]] = {1: [], 2: []}
    for r in range(repeats):
        for workers in (1, 2):
            c0, t0 = _cpu_s(), time.perf_counter()
            run(workers, r)
            wall[workers].append(time.perf_counter() - t0)
            cpu[workers].append(_cpu_s() - c0)
    w1, w2 = statistics.median(wall[1]), statistics.median(wall[2])
    return {"2_over_1": w1 / w2, "wall_1_s": w1, "wall_2_s": w2,
            "cpu_1_s": statistics.median(cpu[1]), "cpu_2_s": statistics.median(cpu[2])}


REFERENCE_JOBS = 12
REFERENCE_CPU_S = 0.1


def spin(cpu_s: float) -> int:
    """Count until ``cpu_s`` of this thread's CPU time has passed (the reference job)."""
    t0 = time.thread_time()
    n = 0
    while time.thread_time() - t0 < cpu_s:
        n += 1
    return n


def _reference(workers: int, r: int) -> None:
    run_jobs([Job(k, spin, (REFERENCE_CPU_S,)) for k in range(REFERENCE_JOBS)],
             workers=workers)


def _range_runner(folder: Path, notes: tuple[str, ...]) -> Callable[[int, int], object]:
    from synth.bench.userjobs import _cache_in

    def run(workers: int, r: int) -> None:
        with _cache_in(folder / f"range-cache-{workers}-{r}"):
            jobs = [Job(n, range_note, (str(_preset()), n, str(folder / f"r{n}.wav")))
                    for n in notes]
            bad = [res for res in run_jobs(jobs, workers=workers) if not res.ok]
        if bad:
            raise RuntimeError(f"range render: {bad[0].key}: {bad[0].error}")

    return run


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; return figures keyed by dotted name."""
    from synth.bench.userjobs import _cache_in
    from synth.physics.tuning import TUNE_SEGMENT, tune_instrument
    from synth.reports.sustain import sustain_report

    inst = load_instrument(_preset())
    repeats = 1 if quick else 5
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        picked = list(inst.notes[::3] if quick else inst.notes)
        tuned = list(inst.notes[:2 * TUNE_SEGMENT] if quick else inst.notes)
        jobs = {
            "reference": _reference,
            "range": _range_runner(d, tuple(picked)),
            "sustain": lambda w, r: sustain_report(Voicer(inst, channels=1), picked,
                                                   workers=w),
            "tune": lambda w, r: tune_instrument(inst, tuned, workers=w),
        }
        with _cache_in(d / "cache"):
            sustain_report(Voicer(inst, channels=1), picked, workers=1)  # fills the plan cache
            for name, call in jobs.items():
                for key, value in two_over_one(call, repeats).items():
                    if name != "reference" or key == "2_over_1":
                        figures[f"workers.{name}_{key}"] = value
    for name in ("range", "sustain", "tune"):
        figures[f"workers.{name}_of_reference"] = (figures[f"workers.{name}_2_over_1"]
                                                   / figures["workers.reference_2_over_1"])
    return figures
