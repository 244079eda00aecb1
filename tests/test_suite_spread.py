"""How the default run spreads over processes (tests/conftest.py): workers and module order.

Contract checks of the test set-up itself: ``-n auto`` follows the cores the run may
use, and every module named to start first exists (a stale name would order nothing).
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent


@pytest.fixture
def root_conftest(request):
    """The loaded ``tests/conftest.py`` (there are several modules named conftest)."""
    for plugin in request.config.pluginmanager.get_plugins():
        path = getattr(plugin, "__file__", None)
        if path and Path(path).resolve() == HERE / "conftest.py":
            return plugin
    pytest.fail("tests/conftest.py is not loaded")


def test_modules_started_first_exist(root_conftest) -> None:
    names = root_conftest.HEAVY_FIRST
    assert len(set(names)) == len(names)
    for name in names:
        assert (HERE / name).is_file(), name


@pytest.mark.parametrize(("cores", "cpu_max", "workers"), [
    (1, "max 100000", 0),        # one core: no workers, the run stays in one process
    (2, "max 100000", 2),
    (64, "max 100000", 8),       # MAX_WORKERS
    (4, "150000 100000", 2),     # a quota of 1.5 cores: 2
    (4, "50000 100000", 0),      # half a core: one process
])
def test_auto_workers_follow_the_usable_cores(root_conftest, monkeypatch, tmp_path, cores,
                                              cpu_max, workers) -> None:
    quota = tmp_path / "cpu.max"
    quota.write_text(cpu_max + "\n", encoding="utf-8")
    monkeypatch.setattr(root_conftest, "CPU_MAX", quota)
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: set(range(cores)), raising=False)
    monkeypatch.delenv("PYTEST_XDIST_AUTO_NUM_WORKERS", raising=False)
    assert root_conftest.pytest_xdist_auto_num_workers(None) == workers
    monkeypatch.setenv("PYTEST_XDIST_AUTO_NUM_WORKERS", "3")  # pytest-xdist's own override
    assert root_conftest.pytest_xdist_auto_num_workers(None) is None
