"""The one executor for independent jobs: a local process pool, or a Dask cluster.

3-D solves of a range, the variants of a design sweep and the notes of a range
render are independent jobs.  Every such job goes through :func:`run_jobs`, which
runs them

- in this process when one worker is asked for (simplest to debug, and what a
  single job needs),
- on a local :class:`concurrent.futures.ProcessPoolExecutor` by default, one
  process per core, each held to one BLAS / OpenMP thread (two processes with two
  threads each only fight over the cores): the thread pools already loaded are
  limited when the worker starts (threadpoolctl), and ``OPENBLAS_NUM_THREADS``,
  ``OMP_NUM_THREADS`` and ``MKL_NUM_THREADS`` are set to 1 in the worker before it
  imports anything more, so a library it loads later (scipy carries its own
  OpenBLAS) starts with one thread too,
- on an existing Dask distributed cluster when a scheduler address is given
  (``scheduler="tcp://host:8786"`` or the ``BARWRIGHT_SCHEDULER`` environment
  variable); ``dask.distributed`` is imported only then.

Jobs of unequal size go to the workers longest first (``Job.cost``, an estimate in
any unit): the pool then does not end with one worker busy on a long job while the
other idles.  Results come back in job order whichever engine ran them.  A job that raises is
reported with its key and the error, and the other jobs complete.  A local worker
process that dies (killed, out of memory) breaks a process pool; the jobs that had
not finished are then run once more, each in a process of its own, and a job that
kills its worker twice is reported as failed.  Dask reschedules the work of a lost worker
itself.

The job function and its arguments must be picklable: a module-level function and
plain data or frozen settings.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Hashable, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from typing import Any

from synth.errors import ConfigError, ModelError, SynthError

SCHEDULER_ENV = "BARWRIGHT_SCHEDULER"
"""Environment variable holding a Dask scheduler address (used when none is given)."""


@dataclass(frozen=True)
class Job:
    """One independent job: ``func(*args)``, known to the user by ``key``.

    ``cost`` estimates its work (any unit shared by the jobs of one run); a pool or
    cluster starts the costliest first.
    """

    key: Hashable
    func: Callable[..., Any]
    args: tuple = ()
    cost: float = 0.0


def longest_first(jobs: Sequence[Job]) -> list[int]:
    """Return the job indices by falling cost (equal costs keep their order)."""
    return sorted(range(len(jobs)), key=lambda i: -jobs[i].cost)


@dataclass(frozen=True)
class JobResult:
    """What became of one job: its value, or the error that stopped it."""

    key: Hashable
    value: Any = None
    error: str | None = None

    @property
    def ok(self) -> bool:
        """True when the job returned a value."""
        return self.error is None


def default_workers() -> int:
    """Return the number of cores this process may use (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def scheduler_address(scheduler: str | None) -> str | None:
    """Return the Dask scheduler to use: the argument, else the environment, else None."""
    address = scheduler if scheduler is not None else os.environ.get(SCHEDULER_ENV) or None
    if address is not None and "://" not in address:
        raise ConfigError(f"= {address!r}: a scheduler address looks like tcp://host:8786",
                          source="--scheduler" if scheduler is not None else SCHEDULER_ENV)
    return address


def describe(workers: int | None = None, scheduler: str | None = None) -> str:
    """Say in words where jobs will run (for report headers)."""
    address = scheduler_address(scheduler)
    if address is not None:
        return f"Dask cluster at {address}"
    n = default_workers() if workers is None else workers
    return "this process" if n == 1 else f"local pool of {n} processes"


def run_jobs(jobs: Sequence[Job], *, workers: int | None = None, scheduler: str | None = None,
             progress: Callable[[JobResult], None] | None = None) -> list[JobResult]:
    """Run independent jobs and return their results in job order.

    Parameters
    ----------
    jobs : sequence of Job
        The work; keys name the jobs in error messages.
    workers : int, optional
        Local processes (default: every core this process may use; 1 runs the jobs
        here, one after the other).  Ignored when a scheduler is used.
    scheduler : str, optional
        Address of a running Dask distributed scheduler; default the
        ``BARWRIGHT_SCHEDULER`` environment variable, else the local pool.
    progress : callable, optional
        Called with each :class:`JobResult` as it completes (in completion order).

    Returns
    -------
    list of JobResult
        One per job, in the order of ``jobs``.
    """
    jobs = list(jobs)
    if workers is not None and workers < 1:
        raise ConfigError(f"= {workers}: must be 1 or more", source="--workers")
    address = scheduler_address(scheduler)
    if address is not None:
        return _run_dask(jobs, address, progress)
    n = min(default_workers() if workers is None else workers, max(len(jobs), 1))
    if n == 1:
        return _run_here(jobs, progress)
    return _run_pool(jobs, n, progress)


def values_or_raise(jobs: Sequence[Job], results: Sequence[JobResult], what: str) -> list:
    """Return the values of ``results`` in job order, or raise the first job's error.

    A job that failed is run once more in this process, so that its own exception
    (its type, hence the exit code, and its message) is raised just as with one
    worker; a job that fails only in a worker raises :class:`ModelError` naming
    ``what`` and its key.
    """
    for job, result in zip(jobs, results, strict=True):
        if not result.ok:
            job.func(*job.args)
            raise ModelError(f"{what} {result.key}: {result.error}")
    return [r.value for r in results]


def _call(job: Job) -> JobResult:
    try:
        return JobResult(job.key, job.func(*job.args))
    except SynthError as exc:
        return JobResult(job.key, error=str(exc))
    except Exception as exc:  # reported per job so that the others complete
        return JobResult(job.key, error=f"{type(exc).__name__}: {exc}")


def _run_here(jobs: list[Job], progress) -> list[JobResult]:
    out = []
    for job in jobs:
        result = _call(job)
        out.append(result)
        if progress is not None:
            progress(result)
    return out


THREAD_ENV = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
"""Environment variables a BLAS or OpenMP library reads for its thread count when it
loads."""


def _one_blas_thread() -> None:
    """Hold a worker to one thread: libraries loaded now and those it loads later."""
    for name in THREAD_ENV:
        os.environ[name] = "1"
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)


def _run_pool(jobs: list[Job], n: int, progress) -> list[JobResult]:
    results: dict[int, JobResult] = {}
    broken: list[int] = []
    with ProcessPoolExecutor(max_workers=n, initializer=_one_blas_thread) as pool:
        futures = {pool.submit(_call, jobs[i]): i for i in longest_first(jobs)}
        try:
            waiting = set(futures)
            while waiting:
                done, waiting = wait(waiting, return_when=FIRST_COMPLETED)
                for fut in done:
                    i = futures[fut]
                    try:
                        results[i] = fut.result()
                    except BrokenProcessPool:
                        broken.append(i)
                        continue
                    if progress is not None:
                        progress(results[i])
        except BaseException:
            pool.shutdown(wait=False, cancel_futures=True)
            raise
    # A dead worker breaks the whole pool, so every unfinished job failed with it.
    # Run each of them again in a process of its own, so that only a job that kills
    # its worker again is lost.
    for i in sorted(broken):
        results[i] = _run_alone(jobs[i])
        if progress is not None:
            progress(results[i])
    return [results[i] for i in range(len(jobs))]


def _run_alone(job: Job) -> JobResult:
    with ProcessPoolExecutor(max_workers=1, initializer=_one_blas_thread) as pool:
        try:
            return pool.submit(_call, job).result()
        except BrokenProcessPool:
            return JobResult(job.key, error="its worker process died (killed or out of "
                             "memory), twice")


def _run_dask(jobs: list[Job], address: str, progress) -> list[JobResult]:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise ConfigError(f"= {address!r}: needs Dask distributed (pip install "
                          "\"barwright[cluster]\")", source="--scheduler") from None
    try:
        client = Client(address, timeout="10s", set_as_default=False)
    except OSError as exc:
        raise ConfigError(f"= {address!r}: no Dask scheduler answers there ({exc})",
                          source="--scheduler") from None
    try:
        order = longest_first(jobs)
        futures = [client.submit(_call, jobs[i], pure=False, priority=len(jobs) - rank)
                   for rank, i in enumerate(order)]
        index = {fut.key: i for i, fut in zip(order, futures, strict=True)}
        results: dict[int, JobResult] = {}
        for fut in as_completed(futures, loop=client.loop):
            i = index[fut.key]
            try:
                result = fut.result()
            except Exception as exc:  # the cluster gave up on the task (lost workers)
                result = JobResult(jobs[i].key, error=f"the cluster lost it: {exc}")
            results[i] = result
            if progress is not None:
                progress(result)
        return [results[i] for i in range(len(jobs))]
    finally:
        client.close()
