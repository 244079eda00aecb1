"""Bad bar files and options: exit code 2, one stderr line naming file and key."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from synth.cli import app

GOOD = """
material = "aluminium-6061-t6"
length_m = 0.320
width_m = 0.055
thickness_m = 0.012
"""


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def write(tmp_path: Path, text: str, name: str = "bar.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def assert_one_line_error(result, *needles: str) -> None:
    assert result.exit_code == 2, result.output
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.output and "Traceback" not in result.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])


def test_good_file_runs(tmp_path: Path) -> None:
    r = run("partials", write(tmp_path, GOOD))
    assert r.exit_code == 0, r.output
    assert "vertical" in r.stdout


@pytest.mark.parametrize(
    ("change", "key"),
    [
        (("length_m = 0.320", "length_m = 0.0"), "length_m"),
        (("width_m = 0.055", "width_m = -0.05"), "width_m"),
        (("thickness_m = 0.012", "thickness_m = -1"), "thickness_m"),
        (("length_m = 0.320", 'length_m = "long"'), "length_m"),
    ],
)
def test_non_positive_sizes(tmp_path: Path, change, key: str) -> None:
    p = write(tmp_path, GOOD.replace(*change))
    assert_one_line_error(run("partials", p), str(p), key)


def test_undercut_reaching_zero(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "[undercut]\nx_m = [0.1, 0.16, 0.22]\n"
              "thickness_m = [0.012, 0.0, 0.012]\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.thickness_m")


def test_undercut_thicker_than_blank(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "[undercut]\nx_m = [0.1, 0.16, 0.22]\n"
              "thickness_m = [0.012, 0.015, 0.012]\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.thickness_m", "exceeds")


def test_undercut_below_minimum_thickness(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "min_thickness_m = 0.004\n[undercut]\nfamily = \"parabolic\"\n"
                               "depth_m = 0.009\nspan_m = 0.2\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.depth_m", "minimum")


def test_stations_outside_or_unordered(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "[undercut]\nx_m = [0.1, 0.5]\nthickness_m = [0.01, 0.01]\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.x_m", "inside the bar")
    p = write(tmp_path, GOOD + "[undercut]\nx_m = [0.2, 0.1]\nthickness_m = [0.01, 0.01]\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.x_m", "increasing")


def test_too_many_stations(tmp_path: Path) -> None:
    """A table is read up to MAX_STATIONS (100 000) stations; one more is refused
    at load, naming the key and the bound, before any number is checked.
    """
    from synth.physics.geometry import MAX_STATIONS

    n = MAX_STATIONS + 1
    x = ", ".join(f"{0.06 + 0.2 * i / n:.9f}" for i in range(n))
    h = ", ".join(["0.011"] * n)
    p = write(tmp_path, GOOD + f"[undercut]\nx_m = [{x}]\nthickness_m = [{h}]\n")
    assert_one_line_error(run("partials", p), str(p), "undercut.x_m", "holds 100001 numbers",
                          "allowed: up to 100000")


def test_dense_stations_solve(tmp_path: Path) -> None:
    """20 001 stations of a parabolic arch (a scanned profile) solve like the arch."""
    n = 20_001
    xs = [0.07 + 0.18 * i / (n - 1) for i in range(n)]
    hs = [0.012 - 0.005 * (1 - ((x - 0.16) / 0.09) ** 2) for x in xs]
    p = write(tmp_path, GOOD + "[undercut]\nx_m = [" + ", ".join(f"{v:.9f}" for v in xs)
              + "]\nthickness_m = [" + ", ".join(f"{v:.9f}" for v in hs) + "]\n")
    r = run("partials", p)
    assert r.exit_code == 0, r.output
    assert "vertical" in r.stdout


def test_unknown_material(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD.replace("aluminium-6061-t6", "unobtainium"))
    assert_one_line_error(run("partials", p), str(p), "material", "unknown material",
                          "aluminium-6061-t6")


def test_inline_material_missing_modulus(tmp_path: Path) -> None:
    text = GOOD.replace('material = "aluminium-6061-t6"',
                        "material = { density_kg_m3 = 2700.0, poisson_ratio = 0.33 }")
    p = write(tmp_path, text)
    assert_one_line_error(run("partials", p), str(p), "material.youngs_modulus_pa")


def test_unknown_key_is_named(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "lenght_m = 0.3\n")
    assert_one_line_error(run("partials", p), str(p), "lenght_m", "unknown key")


def test_malformed_toml(tmp_path: Path) -> None:
    p = write(tmp_path, GOOD + "[undercut\n")
    assert_one_line_error(run("partials", p), str(p), "malformed TOML")


def test_missing_file(tmp_path: Path) -> None:
    assert_one_line_error(run("partials", tmp_path / "nope.toml"), "nope.toml", "not found")


def test_unknown_note_name(tmp_path: Path) -> None:
    preset = write(tmp_path, """
name = "test range"
material = "aluminium-6061-t6"
lowest_note = "F3"
highest_note = "A3"
[blank]
width_m = [0.06, 0.058]
thickness_m = [0.013, 0.013]
[bars.F3]
length_m = 0.45
""", "inst.toml")
    assert_one_line_error(run("partials", preset, "--note", "H3"), "--note", "unknown note")
    assert_one_line_error(run("partials", preset, "--note", "C6"), "not in this instrument")
    assert_one_line_error(run("partials", preset), "--note")
    ok = run("partials", preset, "--note", "F3")
    assert ok.exit_code == 0, ok.output


def test_tune_reports_unreachable_targets_and_exits_3() -> None:
    from synth.config import presets_dir

    demo = presets_dir() / "instruments" / "lantern-street-bars.toml"
    r = run("tune", demo, "--note", "A4", "--ratios", "1:2:3", "--family", "parabolic")
    assert r.exit_code == 3, r.output  # ran, but missed what was asked
    assert r.stderr.startswith("barwright: 1 of 1 bars missed their targets")
    assert "not reachable" in r.stdout and "depth at zero" in r.stdout
    bad = run("tune", demo, "--ratios", "2:4:10")
    assert_one_line_error(bad, "--ratios", "must start at 1")
    bad = run("tune", demo, "--family", "spline")
    assert_one_line_error(bad, "--family")
