"""One process at a time adds a kernel to numba's cache (synth.engine.kernels._one_cache_writer).

numba (numba/core/caching.py, ``IndexDataCacheFile.save``) reads the index, picks
the first free data-file number, writes the index and then the data: two processes
saving two signatures of one kernel at once can both take number 1.  These checks
use numba's own cache class on a temporary folder: the save takes the lock before it
reads the index, and a second process's save waits while the lock is held.
"""

from __future__ import annotations

import fcntl
import subprocess
import sys
import time
from pathlib import Path

from numba.core.caching import IndexDataCacheFile

from synth.engine import kernels

ROOT = Path(__file__).resolve().parents[2]


def test_save_reads_and_writes_the_index_under_the_lock(tmp_path, monkeypatch) -> None:
    """The lock is taken first, then numba loads and writes the index and the data."""
    events: list[str] = []
    real_flock = fcntl.flock
    load, save_index = IndexDataCacheFile._load_index, IndexDataCacheFile._save_index

    def flock(f, op):
        events.append(f"lock {Path(f.name).name}")
        return real_flock(f, op)

    def loading(self):
        events.append("load index")
        return load(self)

    def saving(self, overloads):
        events.append("save index")
        return save_index(self, overloads)

    monkeypatch.setattr(fcntl, "flock", flock)
    monkeypatch.setattr(IndexDataCacheFile, "_load_index", loading)
    monkeypatch.setattr(IndexDataCacheFile, "_save_index", saving)
    cache = IndexDataCacheFile(str(tmp_path), "kernel-1", ("stamp", 1))
    cache.save(("signature", "a"), b"compiled code a")
    assert getattr(IndexDataCacheFile.save, "one_writer", False)
    assert events == [f"lock {kernels.CACHE_LOCK_NAME}", "load index", "save index"]
    assert cache.load(("signature", "a")) == b"compiled code a"


_SAVER = """
import sys
from numba.core.caching import IndexDataCacheFile
import synth.engine.kernels
cache = IndexDataCacheFile(sys.argv[1], "kernel-1", ("stamp", 1))
print("ready", flush=True)
cache.save(("signature", "b"), b"compiled code b")
print("saved", flush=True)
"""


def test_a_second_process_waits_for_the_lock(tmp_path) -> None:
    """While this process holds the lock, another's save does not write the index."""
    lock = open(tmp_path / kernels.CACHE_LOCK_NAME, "a")  # noqa: SIM115 (held below)
    fcntl.flock(lock, fcntl.LOCK_EX)
    proc = subprocess.Popen([sys.executable, "-c", _SAVER, str(tmp_path)], cwd=ROOT,
                            stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout is not None
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(1.0)  # time for an unguarded save (milliseconds) to have happened
        assert not (tmp_path / "kernel-1.nbi").exists()
        assert proc.poll() is None
    finally:
        fcntl.flock(lock, fcntl.LOCK_UN)
        lock.close()
    out, _ = proc.communicate(timeout=120)
    assert proc.returncode == 0 and out.strip() == "saved"
    cache = IndexDataCacheFile(str(tmp_path), "kernel-1", ("stamp", 1))
    assert cache.load(("signature", "b")) == b"compiled code b"
