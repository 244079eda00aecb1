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


def median_time(func: Callable[[], object], repeats: int, warmup: int = 1) -> float:
    """Return the median wall time of ``func()`` in seconds over ``repeats`` calls."""
    for _ in range(warmup):
        func()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)
