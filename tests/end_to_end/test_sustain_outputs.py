"""`barwright sustain` end to end: files, numbers and suggestions checked from outside.

Its CSV against its JSON, its PNG, and its numbers against a render measured
independently and against a re-solve of its suggestions.

Sources
-------
- T60 of a partial from the slope of its log envelope (physics.md section 11;
  ``synth.analysis.fit_decay``, itself checked on synthetic decays of known T60 in
  tests/analysis), applied to a WAV written by `barwright strike`, a path that shares
  no analysis code with the report (the report uses a heterodyne envelope).
- A suggestion is a claim: "with the tube this many cents above its bar, the note
  rings for the target T60".  It is checked by building that instrument and asking
  the voice plan for the T60 of its fundamental.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import soundfile as sf
from e2e_common import DEMO, assert_png, read_csv, run_json, run_ok

from synth.analysis import fit_decay
from synth.physics.instrument import load_instrument
from synth.voicing import Voicer

NOTES = ("F3", "G3", "A4", "C5", "C6")
TARGET_S = 30.0
TOLERANCE_PERCENT = 15.0


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """One sustain run over five notes with a 30 s target: some flagged, some not."""
    folder = tmp_path_factory.mktemp("sustain")
    args = ["sustain", DEMO, "--target-t60", TARGET_S, "--out", folder]
    for n in NOTES:
        args += ["--note", n]
    data = run_json(*args)
    return folder, data


def test_files_written_where_the_json_says(report) -> None:
    """The CSV and PNG sit where --out and the JSON say; the PNG decodes."""
    folder, data = report
    assert Path(data["csv"]) == folder / "sustain.csv"
    assert Path(data["png"]) == folder / "sustain.png"
    assert_png(folder / "sustain.png")
    assert [n["note"] for n in data["notes"]] == list(NOTES)


def test_csv_holds_the_json_numbers(report) -> None:
    """Every CSV cell equals the JSON value to the CSV's printed precision (half a unit)."""
    folder, data = report
    rows = read_csv(folder / "sustain.csv")
    assert [r["note"] for r in rows] == list(NOTES)
    for row, rec in zip(rows, data["notes"], strict=True):
        pairs = [("frequency_hz", rec["frequency_hz"], 5e-5), ("cents", rec["cents"], 5e-4),
                 ("t60_rendered_s", rec["t60_rendered_s"], 5e-4),
                 ("target_t60_s", rec["target_t60_s"], 5e-4),
                 ("mismatch_percent", rec["mismatch_percent"], 5e-3),
                 ("level_difference_db_at_2s", rec["level_difference_db"], 5e-3)]
        pairs += [(f"q{i + 1}", q, 0.05) for i, q in enumerate(rec["q"])]
        pairs += [(f"t60_{i + 1}_s", t, 5e-4) for i, t in enumerate(rec["t60_partials_s"])]
        for key, value, half_unit in pairs:
            assert float(row[key]) == pytest.approx(value, abs=half_unit * 1.0001), key
        assert row["flagged"] == str(int(rec["flagged"]))
        assert row["suggestion"] == rec["suggestion"]
        assert rec["t60_s"] == rec["t60_partials_s"][0]


def test_flags_follow_the_tolerance(report) -> None:
    """Flagged exactly when |T60 - target| / target exceeds 15 %; mismatch by definition."""
    _, data = report
    for rec in data["notes"]:
        mismatch = 100 * (rec["t60_s"] - TARGET_S) / TARGET_S
        assert rec["mismatch_percent"] == pytest.approx(mismatch, rel=1e-12)
        assert rec["flagged"] == (abs(mismatch) > TOLERANCE_PERCENT)
    assert any(r["flagged"] for r in data["notes"]) and not all(
        r["flagged"] for r in data["notes"])


@pytest.mark.parametrize(("note", "seconds"), [("F3", 12.0), ("C5", 6.0), ("C6", 6.0)])
def test_rendered_t60_against_a_strike_measured_here(report, tmp_path, note, seconds) -> None:
    """The report's T60s against `fit_decay` on a WAV that `barwright strike` wrote.

    Both renders are noise-free, so the fit is limited by the coupled tube mode's
    beating early in the decay: measured agreement 1e-4 (F3, 5 dB of decay in 12 s)
    to 1e-7 (C5, C6) against the loss budget, and 0.4 % between the report's own
    rendered figure and the budget at F3.  Tolerance 1 %: the measured worst with a
    margin of 2.5, five times tighter than the 5 % the loss-budget test allows over
    the whole range.
    """
    _, data = report
    rec = next(r for r in data["notes"] if r["note"] == note)
    wav = tmp_path / f"{note}.wav"
    run_ok("strike", DEMO, note, "--duration", seconds, "--format", "float32",
           "--channels", 1, "--out", wav)
    x, fs = sf.read(wav)
    fit = fit_decay(x, fs, rec["frequency_hz"], start_s=0.5)
    assert fit.t60_s == pytest.approx(rec["t60_s"], rel=0.01)
    assert rec["t60_rendered_s"] == pytest.approx(fit.t60_s, rel=0.01)


def _with_offset(tmp_path: Path, offset_cents: float) -> Path:
    text = DEMO.read_text(encoding="utf-8")
    line = re.search(r"^offset_cents = 30\.0", text, flags=re.M)
    assert line is not None, "the demo's [tubes] offset moved; update this test"
    path = tmp_path / "offset.toml"
    path.write_text(text.replace(line.group(0), f"offset_cents = {offset_cents!r}"),
                    encoding="utf-8")
    return path


def _suggestions(motor_rate: float) -> list[tuple[str, float, str]]:
    from synth.reports.sustain import sustain_report

    v = Voicer(load_instrument(DEMO), sample_rate=48000.0, channels=1,
               motor_rate_rev_per_s=motor_rate)
    rep = sustain_report(v, ["F3", "G3", "C5"], target_t60_s=TARGET_S,
                         tolerance_percent=TOLERANCE_PERCENT, max_render_s=2.0)
    out = [(r.note, r.suggested_offset_cents, r.suggestion) for r in rep.rows
           if r.suggested_offset_cents is not None]
    assert len(out) == 3, [r.suggestion for r in rep.rows]
    return out


def _check_suggestions(tmp_path: Path, motor_rate: float) -> None:
    for note, offset, text in _suggestions(motor_rate):
        v = Voicer(load_instrument(_with_offset(tmp_path, offset)), sample_rate=48000.0,
                   channels=1, motor_rate_rev_per_s=motor_rate)
        t60 = v.fundamental(note)[2]
        miss = 100 * abs(t60 - TARGET_S) / TARGET_S
        assert miss <= TOLERANCE_PERCENT, (note, offset, t60)
        # The cut length quoted in the suggestion is the tube the new preset gets.
        cut_mm = float(re.search(r"cut ([0-9.]+) mm", text).group(1))
        assert v.tube_spec(note).length_m * 1e3 == pytest.approx(cut_mm, abs=0.05)


def test_suggested_offsets_reach_the_target_with_the_motor_stopped(tmp_path) -> None:
    """Re-solved with the suggested tube offset, each note rings within 15 % of 30 s.

    Measured: 30.000 s for F3 (+3.6 c), G3 (+5.7 c) and C5 (+43.1 c): the suggestion
    solves the same coupled-pole model, so it lands on the target to root-finding
    precision; the check allows the tolerance the report claims.
    """
    _check_suggestions(tmp_path, 0.0)


@pytest.mark.xfail(strict=True, raises=AssertionError, reason=(
    "sustain suggestions ignore the motor: at 3 rev/s the offsets suggested for a 30 s "
    "target (F3 +3.6 c, G3 +5.7 c, C5 +43.1 c, the same as with the motor stopped) give "
    "61.9 s, 60.4 s and 40.4 s when re-solved with the discs turning (+106 %, +101 %, "
    "+35 %, against a 15 % tolerance)"))
def test_suggested_offsets_reach_the_target_with_the_motor_running(tmp_path) -> None:
    """As above with the discs turning at 3 rev/s (known to fail: see the reason)."""
    _check_suggestions(tmp_path, 3.0)
