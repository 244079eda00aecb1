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

import json
import re
from pathlib import Path

import pytest
import soundfile as sf
from e2e_common import DEMO, assert_png, read_csv, run_json, run_ok

from synth.analysis import fit_decay
from synth.settings.instrument import load_instrument
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
    # fitted up to the closing fade the sidecar states (the fade is no decay of the bar)
    fade_s = json.loads(wav.with_suffix(".json").read_text(encoding="utf-8"))["fade_s"]
    assert 0 < fade_s < 1
    fit = fit_decay(x[:len(x) - int(round(fade_s * fs))], fs, rec["frequency_hz"],
                    start_s=0.5)
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


def _suggestions(motor_rate: float):
    from synth.reports.sustain import sustain_report

    v = Voicer(load_instrument(DEMO), sample_rate=48000.0, channels=1,
               motor_rate_rev_per_s=motor_rate)
    rep = sustain_report(v, ["F3", "G3", "C5"], target_t60_s=TARGET_S,
                         tolerance_percent=TOLERANCE_PERCENT, max_render_s=2.0)
    return [(r.note, r.suggested_offset_cents, r.suggestion) for r in rep.rows]


def _t60_with_offset(tmp_path: Path, note: str, offset: float, motor_rate: float) -> float:
    v = Voicer(load_instrument(_with_offset(tmp_path, offset)), sample_rate=48000.0,
               channels=1, motor_rate_rev_per_s=motor_rate)
    return v.fundamental(note)[2], v


def _check_suggestions(tmp_path: Path, motor_rate: float) -> int:
    """Check every row: a printed offset lands in tolerance when re-solved; a row that
    says no offset reaches the target misses it at 0, 50 and 100 cents alike.
    Returns the number of printed offsets.
    """
    printed = 0
    for note, offset, text in _suggestions(motor_rate):
        if offset is None:
            assert "no tube offset within 0..100 c reaches" in text, (note, text)
            t60s = [_t60_with_offset(tmp_path, note, c, motor_rate)[0] for c in (0, 50, 100)]
            over = [t > TARGET_S * (1 + TOLERANCE_PERCENT / 100) for t in t60s]
            under = [t < TARGET_S * (1 - TOLERANCE_PERCENT / 100) for t in t60s]
            assert all(over) or all(under), (note, t60s)
            continue
        printed += 1
        t60, v = _t60_with_offset(tmp_path, note, offset, motor_rate)
        miss = 100 * abs(t60 - TARGET_S) / TARGET_S
        assert miss <= TOLERANCE_PERCENT, (note, offset, t60)
        # The cut length quoted in the suggestion is the tube the new preset gets.
        cut_mm = float(re.search(r"cut ([0-9.]+) mm", text).group(1))
        assert v.tube_spec(note).length_m * 1e3 == pytest.approx(cut_mm, abs=0.05)
    return printed


def test_suggested_offsets_reach_the_target_with_the_motor_stopped(tmp_path) -> None:
    """Re-solved with the suggested tube offset, each note rings within 15 % of 30 s.

    Measured: 30.000 s for F3, G3 and C5: the suggestion solves the same coupled-pole
    model and is re-solved before it is printed, so it lands on the target to
    root-finding precision; the check allows the tolerance the report claims.
    """
    assert _check_suggestions(tmp_path, 0.0) == 3


def test_suggested_offsets_reach_the_target_with_the_motor_running(tmp_path) -> None:
    """As above with the discs turning at 3 rev/s: the suggestion is solved with the
    row's own voice (discs included).  Measured: C5 +13 c gives 30.00 s; F3 and G3
    ring 52-91 s at every offset from 0 to 100 c, and the report says so instead of
    printing an offset (the old advice, solved without the discs, gave 61.9 / 60.4 /
    40.4 s for its F3 / G3 / C5 offsets).
    """
    assert _check_suggestions(tmp_path, 3.0) >= 1
