"""Bad input to `barwright compare`: exit code 2 and one line on stderr (design outline)."""

from __future__ import annotations

import numpy as np
from compare_helpers import DESIGN_A, DESIGN_B, assert_one_line_error, read, run


def test_unknown_preset(tmp_path) -> None:
    """A design file that does not exist is named on the one error line."""
    r = run("compare", tmp_path / "no-such.toml", DESIGN_B, "--out", tmp_path / "o")
    assert_one_line_error(r, "no-such.toml", "not found")


def test_blind_zero(tmp_path) -> None:
    """--blind 0 is refused before any rendering."""
    r = run("compare", DESIGN_A, DESIGN_B, "--blind", 0, "--out", tmp_path / "o")
    assert_one_line_error(r, "--blind", "= 0")


def test_missing_design_and_half_scoring(tmp_path) -> None:
    """One design only, or --score without --answers: exit 2, one line."""
    assert_one_line_error(run("compare", DESIGN_A), "two design presets")
    assert_one_line_error(run("compare", "--score", tmp_path / "key.toml"), "--answers")


def test_note_outside_the_range(tmp_path) -> None:
    """A note the instruments do not have (C2, below F3) names the option."""
    r = run("compare", DESIGN_A, DESIGN_B, "--notes", "C2", "--out", tmp_path / "o")
    assert_one_line_error(r, "C2", "range")


def test_same_file_twice_is_allowed_but_warned(tmp_path) -> None:
    """A against itself: it runs, warns once, and both files hold the same samples."""
    out = tmp_path / "same"
    r = run("compare", DESIGN_A, DESIGN_A, "--notes", "A4", "--tail", "0.6", "--out", out)
    assert r.exit_code == 0, r.stdout + r.stderr
    warnings = [ln for ln in r.stderr.splitlines() if "warning" in ln]
    assert len(warnings) == 1 and "same file" in warnings[0]
    np.testing.assert_array_equal(read(out / "A.wav"), read(out / "B.wav"))
    assert "gain given to B: +0.00 dB" in r.stdout
