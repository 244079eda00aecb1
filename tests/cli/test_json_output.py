"""Every ``--json`` prints one valid JSON document and nothing else on stdout.

The contract of the design outline: ``--json`` gives machine output on stdout;
messages, warnings and progress go to stderr.  Each command's success path runs on
the demo presets (kept short), and stdout must parse with :func:`json.loads` as it
is (RFC 8259 JSON: no NaN or Infinity, which Python's parser would accept, so the
parse refuses them explicitly).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from cli_helpers import BAR, DEMO, DEMO_7075, assert_one_line_error, run

from synth.config import presets_dir


def _refuse_constant(name: str):
    raise AssertionError(f"{name} is not JSON (RFC 8259)")


def parse(result) -> object:
    """Parse the stdout of a successful run as strict JSON."""
    assert result.exit_code == 0, (result.stdout, result.stderr, result.exception)
    return json.loads(result.stdout, parse_constant=_refuse_constant)


@pytest.fixture(scope="module")
def take(tmp_path_factory) -> Path:
    """Write a recorded strike of A4 (simulated: 0.2 s lead-in, noise at -85 dBFS, seeded)."""
    from synth.engine.render import render
    from synth.io import write_wav
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    fs = 48000
    voicer = Voicer(load_instrument(DEMO), sample_rate=float(fs), channels=1)
    x = render([voicer.strike_voice("A4", time_s=0.2, velocity=0.7, position=0.3, across=0.3)],
               int(2.5 * fs), sample_rate=fs)[:, 0]
    x = 0.5 * x / np.max(np.abs(x))
    x += 10 ** (-85 / 20) * np.random.default_rng(37).standard_normal(x.size)
    return write_wav(tmp_path_factory.mktemp("take") / "a4.wav", x, sample_rate=fs)


def test_partials_tune_grind_cutlist(tmp_path: Path, demo_cutlist) -> None:
    """The bar commands on the demo preset and the bundled parabolic bar."""
    doc = parse(run("partials", DEMO, "--note", "A4", "--json"))
    assert doc["bar"] == "A4" and doc["partials"]
    doc = parse(run("tune", DEMO, "--note", "A4", "--json"))
    assert [b["note"] for b in doc["bars"]] == ["A4"] and doc["missed"] == 0
    doc = parse(run("grind", BAR, "--out", tmp_path / "g.png", "--json"))
    assert Path(doc["plot"]).exists()
    doc = parse(demo_cutlist[0])  # `cutlist DEMO --out FOLDER --json`, run once (conftest)
    assert len(doc["bars"]) == 37


def test_strike_chord_render(tmp_path: Path) -> None:
    """Sound commands: the render report, and chord --check-decay as one document."""
    doc = parse(run("strike", DEMO, "A4", "--duration", "0.3", "--out", tmp_path / "s.wav",
                    "--json"))
    assert Path(doc["wav"]).exists()
    doc = parse(run("chord", DEMO, "F3 A4:0.8", "--duration", "0.3", "--out",
                    tmp_path / "c.wav", "--json"))
    assert Path(doc["wav"]).exists()
    doc = parse(run("chord", DEMO, "F3 A4 C5", "--duration", "2", "--check-decay", "--out",
                    tmp_path / "d.wav", "--json"))
    assert Path(doc["render"]["wav"]).exists() and len(doc["notes"]) == 3
    events = presets_dir() / "events" / "harbour-waltz.toml"
    doc = parse(run("render", DEMO, events, "--out", tmp_path / "r.wav", "--sample-rate",
                    "44100", "--channels", "1", "--json"))
    assert doc["sample_rate_hz"] == 44100


def test_chord_check_decay_json_failure_prints_nothing_on_stdout(tmp_path: Path) -> None:
    """The failing path of chord --check-decay --json: one error line, stdout empty."""
    out = tmp_path / "d.wav"
    out.write_bytes(b"keep")
    r = run("chord", DEMO, "F3 A4", "--duration", "1", "--check-decay", "--out", out,
            "--json")
    assert_one_line_error(r, "already exists")
    assert out.read_bytes() == b"keep"
    assert_one_line_error(run("chord", DEMO, "F3 A4:2", "--check-decay", "--json"), "NOTES")


def test_sustain_compare_bench(tmp_path: Path) -> None:
    """Reports: sustain on two notes, a short comparison and its scoring, a quick bench."""
    doc = parse(run("sustain", DEMO, "--note", "A4", "--note", "C5", "--out", tmp_path / "su",
                    "--json"))
    assert [n["note"] for n in doc["notes"]] == ["A4", "C5"]
    folder = tmp_path / "cmp"
    doc = parse(run("compare", DEMO, DEMO_7075, "--notes", "A4", "--tail", "0.5", "--blind",
                    "2", "--seed", "1", "--out", folder, "--json"))
    key = Path(doc["blind"]["key"])
    doc = parse(run("compare", "--score", key, "--answers", "A,B", "--json"))
    assert doc["trials"] == 2
    doc = parse(run("bench", "--quick", "--only", "tuning", "--json"))
    assert doc


def test_measure_and_calibrate(tmp_path: Path, take: Path) -> None:
    """Measure alone and with --calibrate: the calibration sits inside the one document."""
    doc = parse(run("measure", take, "--note", "A4", "--json"))
    assert doc["partials"]
    doc = parse(run("measure", take, "--note", "A4", "--calibrate", DEMO, "--out",
                    tmp_path / "cal.toml", "--json"))
    assert doc["calibration"]["file"] == str(tmp_path / "cal.toml")
