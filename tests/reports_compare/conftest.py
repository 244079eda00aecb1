"""One short comparison of the two demo presets, run once through the command line.

Design A is the demo instrument (6061-T6 bars), design B its 7075-T6 option; the
passage is two notes and one second of ringing (1.6 s), with four blind trials,
so every file check reads files the command really wrote.
"""

from __future__ import annotations

import tomllib

import pytest
from compare_helpers import DESIGN_A, DESIGN_B, GAP_S, TRIALS, Written, run


@pytest.fixture(scope="module")
def written(tmp_path_factory) -> Written:
    """Run the comparison once per test module and load its key."""
    folder = tmp_path_factory.mktemp("compare") / "out"
    r = run("compare", DESIGN_A, DESIGN_B, "--notes", "A4 C5", "--tail", "1.0",
            "--gap", GAP_S, "--blind", TRIALS, "--seed", 11, "--out", folder)
    assert r.exit_code == 0, r.output + r.stderr
    with open(folder / "blind-key.toml", "rb") as f:
        key = tomllib.load(f)
    return Written(folder, r.stdout, r.stderr, key)
