"""Speed of ``barwright measure`` (``barwright bench --only measuring``).

The case is a set of synthetic recordings of the demo range, one per note F3-F6
(37 files), 10 s each at 48 kHz, 24-bit WAV: 0.1 s of noise, then a strike
with five partials at 1, 2.62, 4, 6.1 and 10.08 times the note at A4 = 442 Hz
(T60 20, 4, 6, 2 and 1.5 s, the bar-like spread of a struck aluminium bar; those
above 0.45 x the rate left out), peak 0.5, noise 70 dB below full scale.  They
are written to a temporary folder once per run.  Every figure is a median over
repeats.

With ``--quick`` (a smoke run) the 37 recordings of the folder and of the serial
reference are 3 s long instead of 10 (the A4 recording of the one-file figures stays
10 s), the serial reference measures every fourth of them, and the repeats are fewer:
the folder figures then time a smaller job than the 60 s target is set for, and
both folder ratios are taken against those 3 s recordings measured one by one.

Targets (issue 14): one 10 s recording in under 2 s; the folder of 37 in under
60 s on two cores.

Figures
-------
measuring.one_10s_s
    Median wall time of :func:`synth.reports.measure.measure_file` on the A4
    recording (reading it included), s.
measuring.one_10s_vs_target
    That time over the 2 s target (below 1 meets it).
measuring.one_10s_vs_read_fft_ratio
    That time over the in-run reference: reading the same file and one
    ``numpy.fft.rfft`` of it (the cheapest look at the recording any
    measurement must take).
measuring.folder_37_s
    Median wall time of :func:`synth.reports.measure.measure_folder` on the 37
    recordings with two worker processes (pool start included), s.
measuring.folder_37_vs_target
    That time over the 60 s target.
measuring.folder_37_vs_serial_ratio
    That time over 37 x the median time of one file measured here in this run
    (each note once, one after the other, in this process): 0.5 is a perfect
    use of two cores, 1 no gain.
measuring.folder_rows_ok
    Recordings measured without error (37 expected), a check that the timed
    run did its job.
measuring.one_10s_cpu_s, measuring.folder_37_cpu_s
    CPU time of one file (this process, every thread) and of one folder run
    (this process and its workers), medians, s.  On a shared machine the wall
    times above rise with the load and these do not: ``folder_37_cpu_s / 2``
    is what the folder takes on two idle cores.
measuring.folder_37_cpu_vs_serial_ratio
    The folder's CPU time over 37 x the CPU time of one file: the cost of the
    worker processes (start, imports) on top of the measurements.
"""

from __future__ import annotations

import math
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from synth.bench import median_time
from synth.constants import LN_1000

FS = 48000
SECONDS = 10.0
QUICK_FOLDER_SECONDS = 3.0
REFERENCE_HZ = 442.0
LOWEST, HIGHEST = "F3", "F6"
_RATIOS = (1.0, 2.62, 4.0, 6.1, 10.08)
_T60S = (20.0, 4.0, 6.0, 2.0, 1.5)
_AMPS = (0.5, 0.1, 0.25, 0.05, 0.1)
TARGET_ONE_S = 2.0
TARGET_FOLDER_S = 60.0
WORKERS = 2


def recording(note: str, seed: int = 0, seconds: float = SECONDS) -> np.ndarray:
    """Return the synthetic recording of one note (see the module docstring)."""
    from synth.pitch import note_to_hz

    f0 = note_to_hz(note, REFERENCE_HZ)
    rng = np.random.default_rng(seed)
    n = int(seconds * FS)
    lead = int(0.1 * FS)
    t = np.arange(n - lead) / FS
    x = np.zeros(n)
    for ratio, t60, a in zip(_RATIOS, _T60S, _AMPS, strict=True):
        f = f0 * ratio
        if f > 0.45 * FS:
            continue
        phase = rng.uniform(-math.pi, math.pi)
        x[lead:] += a * np.exp(-t * LN_1000 / t60) * np.sin(2 * math.pi * f * t
                                                                      + phase)
    x = 0.5 * x / np.max(np.abs(x))
    return x + 10 ** (-70 / 20) * rng.standard_normal(n)


def notes() -> list[str]:
    """Return the 37 notes of the case, F3 to F6."""
    from synth.pitch import midi_to_note, note_to_midi

    return [midi_to_note(m) for m in range(note_to_midi(LOWEST), note_to_midi(HIGHEST) + 1)]


def write_case(folder: Path, seconds: float = SECONDS) -> list[tuple[Path, str]]:
    """Write the 37 recordings, ``seconds`` long, into ``folder``; return (path, note) pairs."""
    from synth.io import write_wav

    out = []
    for i, note in enumerate(notes()):
        path = folder / f"{note}.wav"
        write_wav(path, recording(note, seed=i, seconds=seconds), sample_rate=FS, force=True)
        out.append((path, note))
    return out


def run(quick: bool = False) -> dict[str, float]:
    """Time ``measure`` on one 10 s recording and on the folder of 37.

    Parameters
    ----------
    quick : bool
        Fewer repeats (one file 3 times instead of 7; the folder once instead of 3
        times); the folder's recordings 3 s long and the serial reference on every
        fourth of them (10 files).

    Returns
    -------
    dict of str to float
        The figures listed in the module docstring.
    """
    import soundfile

    from synth.io import write_wav
    from synth.reports.measure import measure_file, measure_folder

    with tempfile.TemporaryDirectory(prefix="barwright-bench-measure-") as tmp:
        folder = Path(tmp) / "case"
        folder.mkdir()
        case = write_case(folder, QUICK_FOLDER_SECONDS if quick else SECONDS)
        a4 = folder / "A4.wav"
        if quick:  # the one-file figures keep their 10 s recording
            a4 = Path(tmp) / "A4.wav"
            write_wav(a4, recording("A4", seed=notes().index("A4")), sample_rate=FS)

        def one() -> None:
            measure_file(a4, note="A4", reference_hz=REFERENCE_HZ)

        def read_fft() -> None:
            x, _ = soundfile.read(str(a4), dtype="float64")
            np.fft.rfft(x)

        t_one = median_time(one, 3 if quick else 7)
        cpu_one = median_time(one, 3 if quick else 7, warmup=0, clock=time.process_time)
        t_ref = median_time(read_fft, 9)
        serial = []
        serial_cpu = []
        for path, note in case[::4] if quick else case:
            t0, c0 = time.perf_counter(), time.process_time()
            measure_file(path, note=note, reference_hz=REFERENCE_HZ)
            serial.append(time.perf_counter() - t0)
            serial_cpu.append(time.process_time() - c0)
        # one file's CPU time, of the folder's own recordings
        cpu_file = statistics.median(serial_cpu) if quick else cpu_one
        rows: list = []
        cpu_folder: list[float] = []

        def folder_run() -> None:
            c0 = _cpu_with_children()
            rows[:] = measure_folder(folder, reference_hz=REFERENCE_HZ, workers=WORKERS)[0]
            cpu_folder.append(_cpu_with_children() - c0)

        t_folder = median_time(folder_run, 1 if quick else 3, warmup=0)
    ok = sum(r.error is None and r.measurement is not None for r in rows)
    return {
        "measuring.one_10s_s": t_one,
        "measuring.one_10s_vs_target": t_one / TARGET_ONE_S,
        "measuring.one_10s_vs_read_fft_ratio": t_one / t_ref,
        "measuring.folder_37_s": t_folder,
        "measuring.folder_37_vs_target": t_folder / TARGET_FOLDER_S,
        "measuring.folder_37_vs_serial_ratio": t_folder / (len(case)
                                                           * statistics.median(serial)),
        "measuring.folder_rows_ok": float(ok),
        "measuring.one_10s_cpu_s": cpu_one,
        "measuring.folder_37_cpu_s": statistics.median(cpu_folder),
        "measuring.folder_37_cpu_vs_serial_ratio": statistics.median(cpu_folder)
        / (len(case) * cpu_file),
    }


def _cpu_with_children() -> float:
    """CPU time of this process and of its finished child processes, s."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime
