"""Benchmarks behind ``barwright bench``.

Each module in this package is a suite with a function
``run(quick: bool) -> dict[str, float]`` returning figures keyed by dotted name
(``"fe.solve_ms_median"``, ``"engine.numpy_ratio"``).  Ratios are taken against a
reference measured in the same run, because the machines are shared and noisy.
Suites are found by module name, so adding one needs no registration.
"""

from __future__ import annotations

import importlib
import pkgutil
import statistics
import time
from collections.abc import Callable


def suite_names() -> list[str]:
    """Return the names of every benchmark suite, sorted."""
    return sorted(m.name for m in pkgutil.iter_modules(__path__) if not m.name.startswith("_"))


def run_suite(name: str, quick: bool = False) -> dict[str, float]:
    """Import and run one suite."""
    module = importlib.import_module(f"{__name__}.{name}")
    return module.run(quick=quick)


def median_time(func: Callable[[], object], repeats: int, warmup: int = 1,
                clock: Callable[[], float] = time.perf_counter) -> float:
    """Return the median time of ``func()`` in seconds over ``repeats`` calls.

    ``clock`` is wall time by default; ``time.thread_time`` gives this thread's CPU time.
    """
    for _ in range(warmup):
        func()
    times = []
    for _ in range(repeats):
        t0 = clock()
        func()
        times.append(clock() - t0)
    return statistics.median(times)


def bank_kernel_call(f_hz, decay_per_s, amplitude, phase_rad, n: int,
                     sample_rate: float) -> Callable[[], None]:
    """Return a call of the bank kernel alone: every mode given, ``n`` samples, mono."""
    import numpy as np

    from synth.engine import kernels

    cycles = np.asarray(f_hz, dtype=float) / sample_rate
    g = np.asarray(decay_per_s, dtype=float) / sample_rate
    a = np.asarray(amplitude, dtype=float)
    ph = np.asarray(phase_rad, dtype=float)
    out = np.zeros((n, 1))
    state = np.zeros((2, cycles.size))
    clock = np.array([0, -1], dtype=np.int64)
    gains = np.ones(1)
    empty = np.ones(0)

    def call() -> None:
        clock[:] = (0, -1)
        kernels._bank_add(out, 0, gains, empty, False, state, clock, cycles, g, a, ph,
                          0, n, 1024, 0, 2 ** 40, 0.0, 0.0)

    return call
