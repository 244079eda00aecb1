"""Numbers resting on uncalibrated tube terms are marked in tables and JSON.

The tube's bar-over-mouth correction (``gap_calibration``) sets every tube
length and pitch; the coupling strength (``coupling_calibration``) sets every
tube T60 and gain.  Both are derived, not measured, until the preset sets them
(``barwright tubecal``).  Checked: the demo (neither set) marks its sustain T60
and level and its cut list's tube lengths; a preset that sets both marks nothing.
Facts of this tool's output format, no outside source.
"""

from __future__ import annotations

import json

from measure_signals import PRESET, run


def calibrated_preset(tmp_path):
    """Return the demo preset with both tube calibrations set."""
    text = PRESET.read_text().replace(
        "flanged = false", "flanged = false\ngap_calibration = 1.2\ncoupling_calibration = 0.9", 1)
    path = tmp_path / "calibrated.toml"
    path.write_text(text)
    return path


def test_sustain_marks_uncalibrated_t60_and_level(tmp_path):
    """Demo: JSON lists both terms, the table marks its columns with '~' and says why."""
    r = run("sustain", PRESET, "--note", "A4", "--out", tmp_path / "a", "--json")
    assert r.exit_code in (0, 3), r.stderr
    doc = json.loads(r.stdout)
    assert doc["uncalibrated"]["t60_s"] == ["gap_calibration", "coupling_calibration"]
    r = run("sustain", PRESET, "--note", "A4", "--out", tmp_path / "b")
    assert "T60 p1 s ~" in r.stdout and "~ uncalibrated" in r.stdout
    r = run("sustain", calibrated_preset(tmp_path), "--note", "A4", "--out", tmp_path / "c",
            "--json")
    assert json.loads(r.stdout)["uncalibrated"]["t60_s"] == []


def test_cutlist_marks_uncalibrated_tube_lengths(tmp_path):
    """Demo: tube lengths rest on the gap correction; calibrated preset: no mark."""
    r = run("cutlist", PRESET, "--out", tmp_path / "a", "--json")
    assert r.exit_code == 0, r.stderr
    assert json.loads(r.stdout)["uncalibrated"]["tube_length_m"] == ["gap_calibration"]
    r = run("cutlist", calibrated_preset(tmp_path), "--out", tmp_path / "b")
    assert r.exit_code == 0, r.stderr
    assert "tube mm ~" not in r.stdout and "~ uncalibrated" not in r.stdout
