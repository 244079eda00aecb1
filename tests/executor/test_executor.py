"""The one executor: this process, a local process pool and a Dask cluster give the
same results in job order; a failing job is reported and the others complete; a
worker that dies does not lose the other results.

The Dask checks start a real ``distributed.LocalCluster`` with two worker processes
on this machine.
"""

from __future__ import annotations

import math
import os
import signal
import sys
from pathlib import Path

import pytest

from synth.errors import ConfigError, ModelError
from synth.executor import Job, describe, run_jobs


def _work(x: float) -> float:
    """Some arithmetic with a result that depends on the input only."""
    return math.fsum(math.sin(x * k) / k for k in range(1, 2000))


def _fails(x: float) -> float:
    raise ModelError(f"bar {x} cannot be solved")


def _crashes(x: float) -> float:
    return 1.0 / (x - x)


def _dies_once(marker: str) -> str:
    """Kill the worker process the first time it runs; return normally the second."""
    path = Path(marker)
    if not path.exists():
        path.write_text("died once")
        os.kill(os.getpid(), signal.SIGKILL)
    return "second try"


def _always_dies(_: int) -> None:
    os.kill(os.getpid(), signal.SIGKILL)


JOBS = [Job(f"bar {i}", _work, (0.1 * i,)) for i in range(6)]
EXPECTED = [_work(0.1 * i) for i in range(6)]


@pytest.mark.parametrize("workers", [1, 2])
def test_results_come_back_in_job_order(workers: int) -> None:
    seen = []
    results = run_jobs(JOBS, workers=workers, progress=seen.append)
    assert [r.key for r in results] == [j.key for j in JOBS]
    assert [r.value for r in results] == EXPECTED  # same arithmetic, bit for bit
    assert all(r.ok for r in results)
    assert sorted(r.key for r in seen) == sorted(j.key for j in JOBS)


@pytest.mark.parametrize("workers", [1, 2])
def test_a_failing_job_is_reported_and_the_others_complete(workers: int) -> None:
    jobs = [*JOBS[:2], Job("F6", _fails, (3.0,)), Job("C6", _crashes, (1.0,)), *JOBS[2:]]
    results = run_jobs(jobs, workers=workers)
    by_key = {r.key: r for r in results}
    assert by_key["F6"].error == "bar 3.0 cannot be solved"
    assert by_key["C6"].error.startswith("ZeroDivisionError")
    assert [by_key[j.key].value for j in JOBS] == EXPECTED


def test_a_killed_worker_loses_nothing_else(tmp_path: Path) -> None:
    jobs = [*JOBS[:3], Job("A4", _dies_once, (str(tmp_path / "marker"),)),
            Job("F3", _always_dies, (0,)), *JOBS[3:]]
    results = run_jobs(jobs, workers=2)
    by_key = {r.key: r for r in results}
    assert by_key["A4"].value == "second try"
    assert "worker process died" in by_key["F3"].error
    assert [by_key[j.key].value for j in JOBS] == EXPECTED


def test_bad_settings_are_one_line_errors() -> None:
    with pytest.raises(ConfigError, match="--workers = 0: must be 1 or more"):
        run_jobs(JOBS, workers=0)
    with pytest.raises(ConfigError, match="looks like tcp://host:8786"):
        run_jobs(JOBS, scheduler="localhost")
    assert describe(workers=1) == "this process"
    assert describe(workers=2) == "local pool of 2 processes"


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip("distributed")
    import cloudpickle

    # Workers cannot import this test module by name: send its functions by value.
    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, silence_logs=40) as lc:
        yield lc
    cloudpickle.unregister_pickle_by_value(sys.modules[__name__])


def test_dask_cluster_gives_the_same_results(cluster) -> None:
    local = run_jobs(JOBS, workers=2)
    remote = run_jobs(JOBS, scheduler=cluster.scheduler_address)
    assert [r.value for r in remote] == [r.value for r in local] == EXPECTED
    assert describe(scheduler=cluster.scheduler_address).startswith("Dask cluster at tcp://")


def test_dask_reports_a_failing_job_and_survives_a_killed_worker(cluster, tmp_path) -> None:
    jobs = [*JOBS[:2], Job("F6", _fails, (3.0,)),
            Job("A4", _dies_once, (str(tmp_path / "marker"),)), *JOBS[2:]]
    results = run_jobs(jobs, scheduler=cluster.scheduler_address)
    by_key = {r.key: r for r in results}
    assert by_key["F6"].error == "bar 3.0 cannot be solved"
    assert by_key["A4"].value == "second try"  # Dask reran the lost worker's task
    assert [by_key[j.key].value for j in JOBS] == EXPECTED


def test_scheduler_from_the_environment(cluster, monkeypatch) -> None:
    monkeypatch.setenv("BARWRIGHT_SCHEDULER", cluster.scheduler_address)
    assert describe() == f"Dask cluster at {cluster.scheduler_address}"
    assert [r.value for r in run_jobs(JOBS[:2])] == EXPECTED[:2]


def _threads(_: int) -> tuple[dict, list[int]]:
    """Return the thread variables of a worker's environment and its BLAS pools' sizes."""
    import scipy.linalg  # noqa: F401  (scipy carries its own OpenBLAS: loaded by now)
    from threadpoolctl import threadpool_info

    from synth.executor import THREAD_ENV

    return ({name: os.environ.get(name) for name in THREAD_ENV},
            [lib["num_threads"] for lib in threadpool_info()])


def test_pool_workers_hold_one_blas_thread() -> None:
    """Each pool worker runs one BLAS / OpenMP thread, libraries loaded later included.

    Two workers with a BLAS pool of one thread per core each only fight over the cores
    (threadpoolctl documents the oversubscription this avoids).
    """
    results = run_jobs([Job(i, _threads, (i,)) for i in range(2)], workers=2)
    for r in results:
        env, threads = r.value
        assert set(env.values()) == {"1"}, env
        assert threads and all(n == 1 for n in threads), threads


def test_costliest_jobs_start_first_and_results_keep_job_order() -> None:
    """Longest first (equal costs keep their order); results still come in job order."""
    from synth.executor import longest_first

    jobs = [Job(f"bar {i}", _work, (0.1 * i,), cost=c)
            for i, c in enumerate([1.0, 5.0, 3.0, 5.0, 0.0, 2.0])]
    assert longest_first(jobs) == [1, 3, 2, 5, 0, 4]
    assert [r.value for r in run_jobs(jobs, workers=2)] == EXPECTED
