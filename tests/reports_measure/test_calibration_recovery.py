"""Calibration recovery: factors hidden in a render come back from its measurement.

A note is rendered with a hidden calibration (internal friction x1.6, cords
x0.7, radiation x1.3, the issue's example) and an off-centre strike, so that
torsional mode 1 sounds besides vertical modes 1-3.  ``barwright measure
--calibrate`` against the uncalibrated demo preset must return those factors
within 5 % (the issue's check).

Why one strike is enough for A4: the four modes load the terms very
differently (uncalibrated shares of each mode's loss, from the plan):
vertical 1 has its nodes at the cords, so its loss is internal friction,
thermoelastic loss and, under the tube, the tube; torsional 1 is 86 % cords;
vertical 3 is 90 % radiation; vertical 2 mixes all three.  With the tube,
vertical 1 is spent on the tube factor and three modes remain for three
factors (condition number about 5); without it the system is over-determined.
At C6 under the tube vertical 2 and 3 are both radiation-dominated, so internal
friction is not identifiable: the command must say so and keep it.

Sources: the relation 1/Q = sum of loss factors (physics.md section 6); the
tube's extra loss on the coupled bar-like pole (physics.md section 8); the
hidden factors are the check values.
"""

from __future__ import annotations

import json
import tomllib

import pytest
from measure_signals import HIDDEN, PRESET, render_strike, run, run_json, warning_lines, wav


@pytest.fixture(scope="module")
def a4_hidden(tmp_path_factory):
    """A4, tubes on, hidden calibration, seeded -70 dBFS noise, 24-bit WAV."""
    d = tmp_path_factory.mktemp("hidden")
    return wav(d / "a4-hidden.wav", render_strike("A4", calibration=HIDDEN, noise_dbfs=-70.0,
                                                  seed=3))


def test_hidden_factors_are_recovered_with_the_tube(a4_hidden, tmp_path) -> None:
    """Internal x1.6, cords x0.7, radiation x1.3 come back within 5 %; tube stays 1."""
    out = tmp_path / "cal.toml"
    doc = run_json("measure", a4_hidden, "--calibrate", PRESET, "--note", "A4", "--out", out)
    cal = doc["calibration"]
    assert cal["tubes"] is True
    assert set(cal["fitted_terms"]) == {"internal", "cords", "radiation", "tube"}
    for term, hidden in HIDDEN.items():
        assert cal["factors"][term] == pytest.approx(hidden, rel=0.05), term  # issue: 5 %
    # the tube was not touched by the hidden calibration
    assert cal["factors"]["tube"] == pytest.approx(1.0, rel=0.05)
    assert cal["factors"]["thermoelastic"] == 1.0 and cal["factors"]["air"] == 1.0
    assert [(m["kind"], m["order"]) for m in cal["modes"]] == [
        ("vertical", 1), ("vertical", 2), ("vertical", 3), ("torsional", 1)]
    # the uncalibrated model misses by well over the noise; the calibrated one matches
    # within 1 % (what remains is measurement noise at -70 dBFS)
    assert max(abs(m["error_before_percent"]) for m in cal["modes"]) > 10.0
    for m in cal["modes"]:
        assert abs(m["error_after_percent"]) < 1.0, m
    assert cal["overrides"] == [] and cal["fallback"] is False
    assert tomllib.loads(out.read_text())["damping"]["factors"]["internal"] == pytest.approx(
        cal["factors"]["internal"])


def test_table_output_shows_before_after_and_factors(a4_hidden, tmp_path) -> None:
    """The human output has the before/after table, the factors and the preset hint."""
    r = run("measure", a4_hidden, "--calibrate", PRESET, "--note", "A4", "--out",
            tmp_path / "cal.toml")
    assert r.exit_code == 0, r.stderr
    for text in ("measured Q", "Q before", "Q after", "error before %", "error after %",
                 "calibration factors", "internal", "fitted", "held: preset's value",
                 'calibration_file = "'):
        assert text in r.stdout, text


def test_hidden_factors_are_recovered_from_a_bare_bar(tmp_path) -> None:
    """Without the tube (--no-tubes) the three factors come back within 5 %."""
    path = wav(tmp_path / "a4-bare.wav", render_strike("A4", calibration=HIDDEN, tubes=False,
                                                       noise_dbfs=-70.0, seed=4))
    doc = run_json("measure", path, "--calibrate", PRESET, "--note", "A4", "--no-tubes",
                   "--out", tmp_path / "cal.toml")
    cal = doc["calibration"]
    assert cal["tubes"] is False
    assert set(cal["fitted_terms"]) == {"internal", "cords", "radiation"}
    for term, hidden in HIDDEN.items():
        assert cal["factors"][term] == pytest.approx(hidden, rel=0.05), term  # issue: 5 %
    assert cal["factors"]["tube"] == 1.0


def test_ill_conditioned_note_says_so_and_keeps_the_term(tmp_path) -> None:
    """C6 under its tube: internal friction is not identifiable, said and held."""
    path = wav(tmp_path / "c6.wav", render_strike("C6", calibration=HIDDEN, seed=5,
                                                  noise_dbfs=-70.0))
    r = run("measure", path, "--calibrate", PRESET, "--note", "C6", "--out",
            tmp_path / "cal.toml", "--json")
    assert r.exit_code == 0, r.stderr
    assert any("internal is not identifiable" in w for w in warning_lines(r))
    cal = json.loads(r.stdout)["calibration"]
    assert cal["held_terms"] == ["internal"] and cal["factors"]["internal"] == 1.0
    # every mode is still matched, by the other factors or by an override (5 % limit)
    for m in cal["modes"]:
        assert abs(m["error_after_percent"]) <= 5.0 or m["override_q"] is not None


def test_nothing_identifiable_falls_back_to_overrides(tmp_path) -> None:
    """No identifiable factor: per-mode Q overrides instead, and they match."""
    # A centre strike on the centreline leaves vertical 2 and torsion 1 silent
    # (strike at a node); cords then load no matched mode enough to be fitted.
    path = wav(tmp_path / "centre.wav", render_strike("A4", position=0.5, across=0.0, seed=6,
                                                      noise_dbfs=-70.0))
    out = tmp_path / "cal.toml"
    bare = run("measure", path, "--calibrate", PRESET, "--note", "A4", "--terms", "cords",
               "--out", out, "--json")
    assert bare.exit_code == 3 and not out.exists(), bare.stderr  # missed: written on request
    assert bare.stderr.splitlines()[0].startswith("barwright: no loss factor is identifiable")
    r = run("measure", path, "--calibrate", PRESET, "--note", "A4", "--terms", "cords",
            "--out", out, "--keep-overrides", "--json")
    assert r.exit_code == 3, r.stderr
    cal = json.loads(r.stdout)["calibration"]
    assert cal["fallback"] is True and cal["fitted_terms"] == []
    assert any("no loss factor is identifiable" in w for w in warning_lines(r))
    assert {(o["kind"], o["order"]) for o in cal["overrides"]} == {("vertical", 1),
                                                                   ("vertical", 3)}
    assert any("vertical 2" in u for u in cal["unmatched"])
    assert any("torsional 1" in u for u in cal["unmatched"])
    table = tomllib.loads(out.read_text())["damping"]
    assert len(table["override"]) == 2
    # overrides make the model match the measured Q of those modes
    for m in cal["modes"]:
        assert m["q_after"] == pytest.approx(m["measured_q"], rel=1e-5)  # the file holds 6 digits
