"""Shared fixtures: seeded random numbers, one BLAS thread, one command tree and one build sheet.

Also how the default run spreads over processes (pytest-xdist, ``-n auto --dist
loadfile`` in pyproject.toml): how many workers and which modules start first.  (Two
workers compiling into numba's cache at once are kept apart by the kernels module
itself: :func:`synth.engine.kernels._one_cache_writer`.)
"""

from __future__ import annotations

import fcntl
import json
import math
import os
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

# ---------------------------------------------------------------------------------------
# spreading the run over processes
# ---------------------------------------------------------------------------------------

MAX_WORKERS = 8
"""Most workers ``-n auto`` starts.  The default run is about 460 s of work in modules
that cannot be split (a module's fixtures are made once, on one worker), the longest
57 s (``bench --quick``): past 8 workers nothing is gained, and each worker costs an
interpreter that has imported the whole stack."""

HEAVY_FIRST = (
    # wall seconds of each module in a cold run on two workers (load average 2.6)
    "end_to_end/test_bench_and_demo.py",          # 57: bench --quick, the demo
    "end_to_end/test_cutlist_templates.py",       # 42: three build sheets of 37 bars
    "solid/test_solid_table.py",                  # 41: 3-D level solves (cold cache)
    "cli/test_outputs_interrupted.py",            # 35: 29 runs forked and killed
    "solid/test_solid_commands.py",               # 29: tune --solid, a Dask cluster
    "reference/test_solid3d_self.py",             # 27: 3-D reference solves (cold cache)
    "reports_measure/test_stiffness_use.py",      # 21: tune and cutlist of the range
    "errors/test_reader_properties.py",           # 14
    "solid/test_solid_model.py",                  # 13
    "browser/test_listening_page.py",             # 12: headless Chromium
    "sweep/test_sweep.py",                        # 10: a Dask cluster
)
"""Modules that run first, longest first, so that no long one is left to the end.

``--dist loadfile`` hands each worker a whole module, in collection order (with
``--no-loadscope-reorder``), when it has two tests left; a 57 s module taken last
would leave the other worker idle for most of that time.  A module not listed keeps
its place after these.  The figures only order the list: a stale one costs speed,
never a check."""


CPU_MAX = Path("/sys/fs/cgroup/cpu.max")
"""A cgroup (v2) CPU quota: "QUOTA PERIOD" in microseconds, or "max PERIOD" for none."""


@pytest.hookimpl(optionalhook=True)
def pytest_xdist_auto_num_workers(config):
    """``-n auto``: one worker per core this process may use, none on a single core.

    The cores are those of the process's CPU affinity, fewer under a cgroup CPU quota
    (``cpu.max``, containers), at most :data:`MAX_WORKERS`.  On one core the run stays
    in this process (0 workers): a lone worker would only add its start-up.
    ``PYTEST_XDIST_AUTO_NUM_WORKERS`` still overrides (pytest-xdist reads it).
    """
    if os.environ.get("PYTEST_XDIST_AUTO_NUM_WORKERS"):
        return None
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (
        os.cpu_count() or 1)
    try:
        quota, period = CPU_MAX.read_text().split()[:2]
        if quota != "max":
            cores = min(cores, max(1, math.ceil(int(quota) / int(period))))
    except (OSError, ValueError):
        pass
    cores = min(cores, MAX_WORKERS)
    return 0 if cores <= 1 else cores


def pytest_collection_modifyitems(config, items):
    """Put the modules of :data:`HEAVY_FIRST` first, in its order (stable otherwise)."""
    rank = {name: i for i, name in enumerate(HEAVY_FIRST)}
    here = Path(__file__).resolve().parent

    def key(item):
        try:
            name = Path(item.path).resolve().relative_to(here).as_posix()
        except ValueError:
            return len(HEAVY_FIRST)
        return rank.get(name, len(HEAVY_FIRST))

    items.sort(key=key)


@pytest.fixture(scope="session", autouse=True)
def _one_blas_thread():
    """Hold BLAS/OpenMP pools to one thread while the tests run.

    The eigenproblems here are small (a few hundred DOF): with two threads on a shared
    machine the same call has taken seconds instead of milliseconds (design outline,
    performance facts).  One thread also makes rounding repeatable between runs.
    threadpoolctl limits the libraries loaded when it is called: scipy's own
    OpenBLAS is loaded first (importing scipy.linalg), or it would keep one thread
    per core in each worker.
    """
    import scipy.linalg  # noqa: F401  (loads scipy's BLAS so that the limit reaches it)

    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="session", autouse=True)
def _plan_cache_in_tmp(tmp_path_factory):
    """Keep the voice-plan cache of the test run in a temporary folder, never the user's."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("BARWRIGHT_CACHE", str(tmp_path_factory.mktemp("plan-cache")))
        yield


@pytest.fixture(scope="session", autouse=True)
def _command_tree_built_once():
    """Build the ``barwright`` command tree once for every ``CliRunner`` run of the session.

    typer converts the app into click commands on each ``CliRunner.invoke`` (20-50 ms,
    more as command modules are imported; half of a bad-input property run's time);
    the tree is the same each time, and its lazy table still imports a command's
    module on first use.  A test may build its own (test_option_properties.py).
    """
    import typer.main
    import typer.testing

    from synth.cli import app

    built = typer.main.get_command(app)

    def command(typer_app):
        return built if typer_app is app else typer.main.get_command(typer_app)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(typer.testing, "_get_command", command, raising=False)
        yield


@dataclass(frozen=True)
class CommandRun:
    """What a test reads of a finished command run: exit code, streams, exception."""

    exit_code: int
    stdout: str
    stderr: str
    exception: str | None


@pytest.fixture(scope="session")
def demo_cutlist(tmp_path_factory):
    """One ``barwright cutlist`` of the demo preset with ``--json``: (run, folder).

    The build sheet solves all 37 bars; the end-to-end sheet checks, the demo's
    sheet, the strict-JSON check and the trust marks read this one run.  Under
    pytest-xdist the workers share it: the first to need it runs it in the run's
    common temporary folder while holding a lock, the others wait and read its
    record (the tests only read the folder).
    """
    worker = os.environ.get("PYTEST_XDIST_WORKER")
    root = tmp_path_factory.getbasetemp()
    root = root.parent if worker else root   # the run's folder, above each worker's own
    folder, record = root / "demo-cutlist", root / "demo-cutlist.json"
    with open(root / "demo-cutlist.lock", "a") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if not record.exists():
            _run_demo_cutlist(folder, record)
        run = CommandRun(**json.loads(record.read_text(encoding="utf-8")))
    return run, folder


def _run_demo_cutlist(folder: Path, record: Path) -> None:
    from typer.testing import CliRunner

    from synth.cli import app
    from synth.config import presets_dir

    preset = presets_dir() / "instruments" / "lantern-street-bars.toml"
    result = CliRunner().invoke(app, ["cutlist", str(preset), "--out", str(folder), "--json"])
    exception = None if result.exception is None else repr(result.exception)
    text = json.dumps(asdict(CommandRun(result.exit_code, result.stdout, result.stderr,
                                        exception)))
    partial = record.with_suffix(".partial")
    partial.write_text(text, encoding="utf-8")
    os.replace(partial, record)


@pytest.fixture
def rng() -> np.random.Generator:
    """Return a generator with a fixed seed so noisy checks are repeatable."""
    return np.random.default_rng(20261202)


def _fe_rounding(bar, material, mesh, kind: str, freqs) -> np.ndarray:
    """Relative error rounding may put on FE frequencies ``freqs`` of one field.

    A symmetric eigensolver is backward stable, each eigenvalue within about
    eps lambda_max of an exact one (LAPACK Users' Guide, 3rd ed., section 4.7, error
    bounds for the symmetric eigenproblem, with its factor p(n) = 1; from memory):
    |df / f| <= eps (f_max / f)**2 / 2, f_max the mesh's highest frequency of the
    field.  Measured on the bar model: rigid-body eigenvalues at 0.03 to 0.7
    eps lambda_max on 8 to 256 elements.
    """
    from synth.physics.bar_fe import dense_reference_frequencies

    f_max = dense_reference_frequencies(bar, material, mesh)[kind][-1]
    return np.finfo(float).eps * (f_max / np.asarray(freqs)) ** 2 / 2


@pytest.fixture(scope="session")
def fe_rounding():
    """The rounding bound of bar-model frequencies (see _fe_rounding)."""
    return _fe_rounding
