"""The per-instrument 3-D correction table ([solid_correction]).

Outside check: the table, built from 3-D solves at the two ends of a short range,
predicts a bar between the anchors within 3 cents of that bar's own 3-D solve (the
trade's tolerance for partials 2-3; common practice, no source).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import tomli_w
from cli_helpers import DEMO, assert_one_line_error, run

from synth.config import load_toml
from synth.physics.instrument import load_instrument
from synth.physics.solid import solve_levels
from synth.physics.solid_correction import anchor_notes, correction_of
from synth.pitch import cents


@pytest.fixture(scope="module")
def tuned(tmp_path_factory) -> Path:
    """Build the table of a six-note demo range (A4..D5), anchors A4 and D5, level 3."""
    folder = tmp_path_factory.mktemp("table")
    data = load_toml(DEMO)
    data.pop("bars")
    data.pop("solid_correction", None)  # the demo's own table: built again below
    data["lowest_note"], data["highest_note"] = "A4", "D5"
    short = folder / "short.toml"
    short.write_bytes(tomli_w.dumps(data).encode("utf-8"))
    out = folder / "short-tuned.toml"
    result = run("tune", short, "--correction-table", "--anchor-step", "5", "--level", "3",
                 "--workers", "2", "--out", out)
    assert result.exit_code == 0, result.stderr
    assert "[solid_correction] table" in result.stdout
    return out


def test_table_predicts_a_bar_between_the_anchors(tuned) -> None:
    """C5 (not an anchor): table-corrected partials 1-3 within 3 cents of its 3-D solve."""
    inst = load_instrument(tuned)
    table = correction_of(inst)
    assert table.anchors == ("A4", "D5")
    result = run("partials", tuned, "--note", "C5", "--json", "--no-losses")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert "[solid_correction]" in data["solid_correction"]["description"]
    rows = {(r["kind"], r["order"]): r["frequency_hz"] for r in data["partials"]}
    predicted = np.array([rows[("vertical", n)] for n in (1, 2, 3)])
    solid = solve_levels(inst.bar("C5"), inst.material.at_temperature(inst.temperature_c),
                         level=3)
    own = np.array([solid.partial("vertical", n).extrapolated_hz for n in (1, 2, 3)])
    assert np.all(np.abs(cents(predicted, own)) <= 3.0), cents(predicted, own)


def test_anchor_choice() -> None:
    """Both ends always; a short last interval moves the last anchor to the end."""
    notes = load_instrument(DEMO).notes
    assert anchor_notes(notes, 6) == ["F3", "B3", "F4", "B4", "F5", "B5", "F6"]
    assert anchor_notes(notes, 7)[0] == "F3" and anchor_notes(notes, 7)[-1] == "F6"


@pytest.mark.parametrize(("edit", "needle"), [
    (lambda t: t["factors"].update(vertical_1=[1.0, 3.0]), "solid_correction.factors"),
    (lambda t: t.update(anchors=["A4", "G7"]), "solid_correction.anchors"),
    (lambda t: t.update(mesh_level=0), "solid_correction.mesh_level"),
    (lambda t: t["factors"].update(vertical_9=[1.0, 1.0]), "vertical_9"),
])
def test_bad_tables_are_one_line_errors(tuned, tmp_path, edit, needle) -> None:
    """A bad [solid_correction] value stops the load: one line naming the key, exit 2."""
    data = load_toml(tuned)
    edit(data["solid_correction"])
    bad = tmp_path / "bad.toml"
    bad.write_bytes(tomli_w.dumps(data).encode("utf-8"))
    assert_one_line_error(run("partials", bad, "--note", "A4"), needle)
