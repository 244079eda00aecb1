"""Numbers resting on uncalibrated tube terms are marked in tables and JSON.

The tube's bar-over-mouth correction (``gap_calibration``) sets every tube
length and pitch; the coupling strength (``coupling_calibration``) sets every
tube T60 and gain.  Both are derived, not measured, until the preset sets them
(``barwright tubecal``).  Checked: the demo (neither set) marks its sustain T60
and level and its cut list's tube lengths; a preset that sets both marks nothing,
and so does one whose calibration file holds them in a ``[tubes]`` table (which
the voice plan then uses).
Facts of this tool's output format, no outside source.
"""

from __future__ import annotations

import json

import pytest
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


def test_cutlist_marks_uncalibrated_tube_lengths(tmp_path, demo_cutlist):
    """Demo: tube lengths rest on the gap correction; calibrated preset: no mark."""
    r, _ = demo_cutlist  # `cutlist` of the demo preset with --json, run once (tests/conftest.py)
    assert r.exit_code == 0, r.stderr
    assert json.loads(r.stdout)["uncalibrated"]["tube_length_m"] == ["gap_calibration"]
    r = run("cutlist", calibrated_preset(tmp_path), "--out", tmp_path / "b")
    assert r.exit_code == 0, r.stderr
    assert "tube mm ~" not in r.stdout and "~ uncalibrated" not in r.stdout


def test_calibration_file_tubes_reach_the_voice_plan(tmp_path):
    """A calibration file's [tubes] (tubecal --out) is used by renders and sustain, unmarked."""
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    (tmp_path / "tubes.toml").write_text(
        "[tubes]\ngap_calibration = 1.25\ncoupling_calibration = 0.85\n")
    preset = tmp_path / "with-file.toml"
    preset.write_text(PRESET.read_text() + '\n[damping]\ncalibration_file = "tubes.toml"\n')
    v = Voicer(load_instrument(preset), tubes=True, channels=1)
    assert v.tube_settings.gap_calibration == 1.25
    assert v.tube_settings.coupling_calibration == 0.85
    assert v.tube_settings.uncalibrated() == ()
    plain = Voicer(load_instrument(PRESET), tubes=True, channels=1)
    assert v.model("A4").coupling.pair.modes().t60_s[0] != pytest.approx(
        plain.model("A4").coupling.pair.modes().t60_s[0], rel=1e-3)
    r = run("sustain", preset, "--note", "A4", "--out", tmp_path / "s", "--json")
    assert json.loads(r.stdout)["uncalibrated"]["t60_s"] == []
