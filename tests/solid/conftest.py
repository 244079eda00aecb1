"""Shared set-up of the 3-D model tests: a fresh cache folder per module, CLI helpers."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

_CLI = str(Path(__file__).resolve().parent.parent / "cli")
if _CLI not in sys.path:
    sys.path.insert(0, _CLI)  # cli_helpers: run, DEMO, assert_one_line_error


@pytest.fixture(scope="module", autouse=True)
def cache_folder(tmp_path_factory):
    """Point the cache of finished 3-D solves at a fresh folder for each module."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("BARWRIGHT_CACHE", str(tmp_path_factory.mktemp("solid-cache")))
        yield
