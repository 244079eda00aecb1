"""One short comparison of the two demo presets, run once through the command line.

Design A is the demo instrument (6061-T6 bars), design B its 7075-T6 option heard
from twice the distance (``listening_distance_m = 2``: far field, about -6 dB, so the
two renders differ by several LU before matching and the matching has real work to
do); the passage is two notes and one second of ringing (1.6 s), with four blind
trials, so every file check reads files the command really wrote.
"""

from __future__ import annotations

import tomllib

import pytest
from compare_helpers import DESIGN_A, DESIGN_B, GAP_S, TRIALS, Written, run

FAR_DISTANCE_M = 2.0


@pytest.fixture(scope="module")
def written(tmp_path_factory) -> Written:
    """Run the comparison once per test module and load its key."""
    base = tmp_path_factory.mktemp("compare")
    text = DESIGN_B.read_text(encoding="utf-8")
    assert "listening_distance_m = 1.0" in text
    far_b = base / "lantern-street-bars-7075-far.toml"
    far_b.write_text(text.replace("listening_distance_m = 1.0",
                                  f"listening_distance_m = {FAR_DISTANCE_M}"), encoding="utf-8")
    folder = base / "out"
    r = run("compare", DESIGN_A, far_b, "--notes", "A4 C5", "--tail", "1.0",
            "--gap", GAP_S, "--blind", TRIALS, "--seed", 11, "--out", folder)
    assert r.exit_code == 0, r.output + r.stderr
    with open(folder / "blind-key.toml", "rb") as f:
        key = tomllib.load(f)
    return Written(folder, r.stdout, r.stderr, key)
