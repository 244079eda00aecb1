"""Every command that predicts frequencies uses the preset's 3-D table, and says so.

The demo preset ships a [solid_correction] table. Each command (tune, partials, grind,
cutlist, strike, chord, render, sustain, compare) must give the corrected frequencies
and announce the table: one line of human output, a ``solid_correction`` field in its
JSON output and in the sidecar of every WAV it writes.

Outside checks: the command's frequencies against the 1-D bar solve (synth.physics.
bar_fe, held against Blevins and an independent shooting solution in
tests/physics_bar) times the table's factors, both computed here; the WAVs measured by
ESPRIT (synth.analysis.find_partials, Roy & Kailath 1989, checked on synthetic signals
in tests/analysis). Each test also checks that the correction moves the frequency it
looks at by far more than its tolerance, so a command that dropped the table fails.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
import tomli_w
from e2e_common import DEMO, run_json, run_ok

from synth.analysis import find_partials
from synth.config import load_toml
from synth.physics.bar_fe import solve_bar
from synth.physics.solid_correction import corrected_modes, correction_of
from synth.settings.instrument import load_instrument

NOTE = "A4"
ANNOUNCED = "Partials corrected by the preset's 3-D [solid_correction] table: anchors F3..F6"
SAME_SOLVE_REL = 1e-12
"""The command and this test run the same deterministic solve and multiply by the same
interpolated factor; JSON keeps a float's 17 digits. Equal to rounding of a few
operations (measured: bit for bit)."""
ESPRIT_HZ = 1e-3
"""ESPRIT on a 1-2 s render finds a planned partial within 1e-3 Hz (measured 3.3e-4 Hz
in test_chord.py; 0.004 cents at A4)."""
MIN_SHIFT_CENTS = 5.0
"""The demo's factors move partial 1 by 12-31 cents (F3..F6, the table itself); a check
whose frequency moves less than this could not tell the table from none."""


@pytest.fixture(scope="module")
def demo():
    """Return the demo preset, its alloy at the design temperature and its 3-D table."""
    inst = load_instrument(DEMO)
    table = correction_of(inst)
    assert table is not None, "the demo preset ships a [solid_correction] table"
    return inst, inst.material.at_temperature(inst.temperature_c), table


def _solve(demo, note: str, **counts):
    inst, mat, table = demo
    plain = solve_bar(inst.bar(note), mat, **counts)
    return plain, corrected_modes(plain, table, note)


def _sounding(demo, note: str):
    """Solve the modes the voice plan sounds (voicing._solve_sounding), plain and fixed."""
    return _solve(demo, note, n_vertical=5, n_lateral=0, n_torsional=2)


def _shift_cents(plain_hz: float, corrected_hz: float) -> float:
    return float(1200.0 * np.log2(corrected_hz / plain_hz))


def _announced(record, demo) -> None:
    """Check that a JSON / sidecar field is the table with its description."""
    _, _, table = demo
    assert record == json.loads(json.dumps(table.record())), record
    assert record["anchors"][0] == "F3" and record["mesh_level"] == table.mesh_level


def test_partials(demo) -> None:
    """partials: every tabled mode is the 1-D solve times its factor; line and field."""
    plain, fixed = _solve(demo, NOTE, n_vertical=5, n_lateral=2, n_torsional=2)
    data = run_json("partials", DEMO, "--note", NOTE, "--no-losses")
    _announced(data["solid_correction"], demo)
    rows = {(r["kind"], r["order"]): r["frequency_hz"] for r in data["partials"]}
    for m in fixed.modes:
        assert rows[(m.kind, m.order)] == pytest.approx(m.frequency_hz, rel=SAME_SOLVE_REL)
    assert abs(_shift_cents(plain.fundamental_hz, fixed.fundamental_hz)) > MIN_SHIFT_CENTS
    assert ANNOUNCED in run_ok("partials", DEMO, "--note", NOTE, "--no-losses").stdout


def test_tune(demo, tmp_path) -> None:
    """Tune through the table: predicted frequencies = written bar's 1-D solve x factors.

    And on target; line and field.
    """
    _, mat, table = demo
    out = tmp_path / "tuned.toml"
    data = run_json("tune", DEMO, "--note", NOTE, "--out", out)
    _announced(data["solid_correction"], demo)
    bar = data["bars"][0]
    plain = solve_bar(load_instrument(out).bar(NOTE), mat, n_vertical=3, n_lateral=0,
                      n_torsional=0)
    fixed = corrected_modes(plain, table, NOTE)
    # The file keeps 9 decimals of a metre: half a unit (5e-10 m) on the 0.33 m length,
    # 6 mm arch depth and 0.15 m span moves f by at most ~2e-7 relative (2 dL/L +
    # dt/t-like terms; measured 3e-9).
    np.testing.assert_allclose(bar["frequencies_hz"],
                               [m.frequency_hz for m in fixed.vertical[:3]], rtol=2e-7)
    assert bar["reachable"] and abs(bar["residual_cents"][0]) <= 1.0
    assert abs(_shift_cents(plain.fundamental_hz, fixed.fundamental_hz)) > MIN_SHIFT_CENTS
    assert ANNOUNCED in run_ok("tune", DEMO, "--note", NOTE).stdout


def test_grind(demo, tmp_path) -> None:
    """grind: the listed frequencies are the 1-D solve times the factors; line and field."""
    plain, fixed = _solve(demo, NOTE, n_vertical=3, n_lateral=0, n_torsional=0)
    data = run_json("grind", DEMO, "--note", NOTE, "--out", tmp_path / "g.png")
    _announced(data["solid_correction"], demo)
    got = [m["frequency_hz"] for m in data["modes"]]
    np.testing.assert_allclose(got, [m.frequency_hz for m in fixed.vertical[:3]],
                               rtol=SAME_SOLVE_REL)
    assert abs(_shift_cents(plain.fundamental_hz, got[0])) > MIN_SHIFT_CENTS
    human = run_ok("grind", DEMO, "--note", NOTE, "--out", tmp_path / "h.png").stdout
    assert ANNOUNCED in human and f"vertical 1 {got[0]:.2f} Hz" in human


def test_cutlist(demo, demo_cutlist, tmp_path) -> None:
    """cutlist: each bar's fundamental is the 1-D solve times its factor; line and field.

    The JSON is the run's one `cutlist DEMO --out FOLDER --json` (tests/conftest.py).
    """
    result, _ = demo_cutlist
    assert result.exit_code == 0, (result.exit_code, result.stderr[-2000:])
    assert "Traceback" not in result.stdout + result.stderr
    data = json.loads(result.stdout)
    _announced(data["solid_correction"], demo)
    by_note = {b["note"]: b for b in data["bars"]}
    for note in ("F3", NOTE, "F6"):
        plain, fixed = _solve(demo, note, n_vertical=3, n_lateral=0, n_torsional=0)
        assert by_note[note]["fundamental_hz"] == pytest.approx(fixed.fundamental_hz,
                                                                rel=SAME_SOLVE_REL)
        assert abs(_shift_cents(plain.fundamental_hz, fixed.fundamental_hz)) > MIN_SHIFT_CENTS
    assert ANNOUNCED in run_ok("cutlist", DEMO, "--out", tmp_path / "h").stdout


def _measured_fundamental(wav, near_hz: float) -> float:
    x, fs = sf.read(wav)
    found = np.array([p.frequency_hz for p in find_partials(x, fs).partials])
    return float(found[np.argmin(np.abs(found - near_hz))])


def _sound_checks(demo, data: dict, wav, human: str, notes: tuple[str, ...]) -> None:
    """JSON field, sidecar field, the announcement, and each note's partial 1 in the WAV."""
    _announced(data["solid_correction"], demo)
    _announced(json.loads(wav.with_suffix(".json").read_text())["solid_correction"], demo)
    assert ANNOUNCED in human
    for note in notes:
        plain, fixed = _sounding(demo, note)
        f = _measured_fundamental(wav, fixed.fundamental_hz)
        assert f == pytest.approx(fixed.fundamental_hz, abs=ESPRIT_HZ), note
        assert abs(_shift_cents(plain.fundamental_hz, f)) > MIN_SHIFT_CENTS


SOUND = ("--no-tubes", "--channels", 1, "--duration", 1.5)
"""Bare bars (the tube would pull partial 1 to the coupled pole), mono, short."""


def test_strike(demo, tmp_path) -> None:
    """strike: partial 1 in the WAV is the corrected one; line, JSON and sidecar field."""
    wav = tmp_path / "s.wav"
    data = run_json("strike", DEMO, NOTE, *SOUND, "--out", wav)
    human = run_ok("strike", DEMO, NOTE, *SOUND, "--out", wav, "--force").stdout
    _sound_checks(demo, data, wav, human, (NOTE,))


def test_chord(demo, tmp_path) -> None:
    """chord: partial 1 of each note in the WAV is the corrected one; line and fields."""
    wav = tmp_path / "c.wav"
    data = run_json("chord", DEMO, "F3 C5", *SOUND, "--out", wav)
    human = run_ok("chord", DEMO, "F3 C5", *SOUND, "--out", wav, "--force").stdout
    _sound_checks(demo, data, wav, human, ("F3", "C5"))


def test_render(demo, tmp_path) -> None:
    """render: an event file's note sounds at its corrected partial 1; line and fields."""
    events = tmp_path / "one.toml"
    events.write_text('[score]\ntempo_bpm = 60\nlength_s = 1.5\n\n'
                      f'[[strike]]\nbeat = 0\nnote = "{NOTE}"\nvelocity = 0.6\n')
    wav = tmp_path / "r.wav"
    opts = ("--no-tubes", "--channels", 1, "--out", wav)
    data = run_json("render", DEMO, events, *opts)
    human = run_ok("render", DEMO, events, *opts, "--force").stdout
    _sound_checks(demo, data, wav, human, (NOTE,))


def test_sustain(demo, tmp_path) -> None:
    """sustain: the row's partial 1 is the corrected one; line and field."""
    plain, fixed = _sounding(demo, NOTE)
    args = ("sustain", DEMO, "--note", NOTE, "--no-tubes", "--out", tmp_path)
    data = run_json(*args)
    _announced(data["solid_correction"], demo)
    assert data["notes"][0]["frequency_hz"] == pytest.approx(fixed.fundamental_hz,
                                                             rel=SAME_SOLVE_REL)
    assert abs(_shift_cents(plain.fundamental_hz, fixed.fundamental_hz)) > MIN_SHIFT_CENTS
    assert ANNOUNCED in run_ok(*args, "--force").stdout


def test_compare(demo, tmp_path) -> None:
    """Compare: A (with the table) corrected and announced, B (without it) plain.

    B is the same preset without its table, silent about it; JSON and sidecars say which.
    """
    data_b = load_toml(DEMO)
    data_b.pop("solid_correction")
    plain_preset = tmp_path / "plain.toml"
    plain_preset.write_bytes(tomli_w.dumps(data_b).encode("utf-8"))
    args = ("compare", DEMO, plain_preset, "--notes", NOTE, "--no-tubes", "--tail", 1.0)
    data = run_json(*args, "--out", tmp_path / "j")
    _announced(data["designs"]["A"]["solid_correction"], demo)
    assert data["designs"]["B"]["solid_correction"] is None
    side = json.loads((tmp_path / "j" / "A.json").read_text())
    _announced(side["solid_correction"], demo)
    assert json.loads((tmp_path / "j" / "B.json").read_text())["solid_correction"] is None
    plain, fixed = _sounding(demo, NOTE)
    row = data["notes"][0]["fundamental_hz"]
    assert row["A"] == pytest.approx(fixed.fundamental_hz, rel=SAME_SOLVE_REL)
    assert row["B"] == pytest.approx(plain.fundamental_hz, rel=SAME_SOLVE_REL)
    assert abs(_shift_cents(row["B"], row["A"])) > MIN_SHIFT_CENTS
    human = run_ok(*args, "--out", tmp_path / "h").stdout
    assert "A: " + ANNOUNCED in human and "B: Partials corrected" not in human
