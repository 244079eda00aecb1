"""``measure FOLDER``: one table and one plot across the range, notes from file names.

Sources: the recordings are damped sinusoids built here at 12-TET frequencies
(A4 = 440 Hz, ISO 16:1975) times 1 : 4 : 10.08, with Q = pi f tau (physics.md
section 6); tolerances 0.2 cent and 3 % as in test_measure_render.py.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from measure_signals import damped_sines, run, wav

from synth.pitch import note_to_hz
from synth.reports.measure import note_from_name

NOTES = {"F3": -3.0, "A4": +2.0, "C5": 0.0}  # cents each bar is off its note


def strike(note: str, off_cents: float) -> np.ndarray:
    """Build partials 1, 4, 10.08 of the note, detuned by ``off_cents``, tau 1.5 / 0.6 / 0.2 s."""
    f1 = note_to_hz(note, 440.0) * 2 ** (off_cents / 1200)
    return 0.5 * damped_sines([f1, 4 * f1, 10.08 * f1], [1.5, 0.6, 0.2], [1.0, 0.4, 0.2],
                              seconds=3.0, lead_in_s=0.05)


@pytest.mark.parametrize(("name", "note"), [("A4.wav", "A4"), ("bar-07-F#3.flac", "F#3"),
                                            ("Bb5-take2.wav", "Bb5"), ("take4.wav", None),
                                            ("Csharp6.aiff", "C#6")])
def test_note_from_file_name(name, note):
    """The last note-like token of the name; none inside a word."""
    assert note_from_name(name) == note


def test_folder_gives_one_table_and_a_plot(tmp_path):
    """Three bars and a file without a note: rows by pitch, cents within 0.2, a PNG written."""
    folder = tmp_path / "proto"
    folder.mkdir()
    for note, off in NOTES.items():
        wav(folder / f"bar-{note}.wav", strike(note, off))
    wav(folder / "room-noise.wav", strike("A4", 0.0))
    png = tmp_path / "range.png"
    r = run("measure", folder, "--plot", png, "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    assert [n["note"] for n in doc["notes"]] == ["F3", "A4", "C5"]
    for n in doc["notes"]:
        assert n["cents"] == pytest.approx(NOTES[n["note"]], abs=0.2)
        p1, p2, p3 = n["partials"]
        # each partial within 0.2 cent, so their ratio within 0.4 cent (2.3e-4 relative)
        assert p2["frequency_hz"] / p1["frequency_hz"] == pytest.approx(4.0, rel=2.3e-4)
        assert p1["q"] == pytest.approx(math.pi * p1["frequency_hz"] * 1.5, rel=0.03)
    assert any("room-noise.wav" in s for s in doc["skipped"])
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert doc["reference_pitch_hz"] == 440.0


def test_folder_with_an_unusable_file_exits_3(tmp_path):
    """A silent file among good ones: the others are measured, exit 3, said first."""
    folder = tmp_path / "proto"
    folder.mkdir()
    wav(folder / "A4.wav", strike("A4", 0.0))
    wav(folder / "B4.wav", np.zeros(48000))
    r = run("measure", folder, "--plot", tmp_path / "r.png")
    assert r.exit_code == 3
    first = r.stderr.splitlines()[0]
    assert "1 of 2 recordings could not be measured" in first and "B4.wav" in first
    assert "A4" in r.stdout and (tmp_path / "r.png").exists()


def test_folder_refuses_single_file_options(tmp_path):
    """--note names one recording's note: refused for a folder, one line, exit 2."""
    folder = tmp_path / "proto"
    folder.mkdir()
    r = run("measure", folder, "--note", "A4")
    assert r.exit_code == 2
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "--note" in lines[0]
