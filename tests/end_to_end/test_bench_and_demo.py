"""`barwright bench --quick` and `barwright demo` end to end (each run once per module).

Speed is never asserted here (that is what the benchmark is for). What is checked:
the benchmark produces every figure its suites document, each a finite number, and
the figures that say whether the timed work did its job hold; the demo writes every
file it names, each readable as what its name says, and its sound obeys two facts
of the physics notes.
"""

from __future__ import annotations

import ast
import json
import math
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf
from e2e_common import assert_png, read_csv, run_json, run_ok

import synth.bench

pytestmark = pytest.mark.slow


def _documented_figures() -> dict[str, str]:
    """Figure names listed under "Figures" in each suite's docstring, by suite."""
    found = {}
    for suite in synth.bench.suite_names():
        path = Path(synth.bench.__file__).parent / f"{suite}.py"
        doc = ast.get_docstring(ast.parse(path.read_text(encoding="utf-8"))) or ""
        section = doc.split("Figures\n-------\n", 1)
        assert len(section) == 2, f"{suite}: no Figures section in its docstring"
        lines = section[1].splitlines()
        for line, after in zip(lines, [*lines[1:], ""], strict=True):
            if after.startswith("---"):  # the next section's heading
                break
            if line and not line.startswith(" "):
                for name in line.split(","):
                    if name.strip():
                        found[name.strip()] = suite
    return found


@pytest.fixture(scope="module")
def bench() -> dict:
    """One quick benchmark run, as JSON."""
    return run_json("bench", "--quick")


def test_bench_produces_every_documented_figure(bench) -> None:
    """Every figure a suite documents is in the output, finite, and none is undocumented."""
    documented = _documented_figures()
    assert set(documented) == set(bench), (set(documented) ^ set(bench))
    for name, value in bench.items():
        assert isinstance(value, int | float) and math.isfinite(value), name
        assert value >= 0, name


def test_bench_timed_work_did_its_job(bench) -> None:
    """The work the timings measure was done right (not a speed check).

    8 partials in the synthetic recording, 37 recordings measured in the folder; every
    bar tuned reaches its target within `tune`'s +-1 / +-3 cents; each ratio is a ratio
    of positive times.
    """
    assert bench["analysis.partials_found"] == 8
    assert bench["tuning.on_target"] == bench["tuning.bars"] > 0
    assert bench["tuning.worst_residual_cents"] <= 3.0
    assert bench["sustain.notes"] > 0 and bench["fe.mesh_elements"] >= 1
    assert bench["sweep.failed"] == 0 and bench["sweep.variants"] >= 2
    assert bench["measuring.folder_rows_ok"] == 37  # every synthetic recording measured
    for name in ("engine.numpy_ratio", "fe.dense_over_solve", "sustain.analysis_over_render"):
        assert bench[name] > 0, name


# --- demo --------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> tuple[Path, str]:
    """One demo run into a scratch folder."""
    folder = tmp_path_factory.mktemp("demo") / "out"
    r = run_ok("demo", "--out", folder)
    return folder, r.stdout


def _check_file(path: Path) -> None:
    suffix = path.suffix
    if suffix == ".wav":
        x, fs = sf.read(path, always_2d=True)
        assert fs in (44100, 48000, 96000) and x.shape[0] > 0, path
        peak = float(np.max(np.abs(x)))
        # never clipped; peak-normalised renders sit at -1 dBFS (24-bit rounding)
        assert 0 < peak <= 10 ** (-1 / 20) + 2.0 ** -23, (path, peak)
    elif suffix == ".png":
        assert_png(path, min_side=100)
    elif suffix == ".json":
        assert isinstance(json.loads(path.read_text(encoding="utf-8")), dict), path
    elif suffix == ".toml":
        tomllib.loads(path.read_text(encoding="utf-8"))
    elif suffix == ".csv":
        assert read_csv(path), path
    elif suffix == ".html":  # the listening page: one document with its players
        from html.parser import HTMLParser

        tags = []

        class Collect(HTMLParser):
            def handle_starttag(self, tag, attrs):
                tags.append(tag)

        Collect().feed(path.read_text(encoding="utf-8"))
        assert tags[:1] == ["html"] and tags.count("audio") >= 3, (path, tags[:5])
    else:
        raise AssertionError(f"unexpected file {path}")


def test_demo_files_all_present_and_valid(demo) -> None:
    """Every path the demo prints exists; every file it wrote reads as its kind."""
    folder, out = demo
    named = {Path(p) for p in re.findall(rf"{re.escape(str(folder))}/[\w./-]+\.\w+", out)}
    assert named, out[-2000:]
    for p in named:
        assert p.is_file(), p
    written = sorted(p for p in folder.rglob("*") if p.is_file())
    for p in written:
        _check_file(p)
    # every top-level file is named in the output, apart from the JSON sidecars
    top = {p for p in written if p.parent == folder and p.suffix != ".json"}
    assert top <= named, sorted(str(p) for p in top - named)
    # every render has its sidecar; prototype-A4.wav stands for a microphone
    # recording of a built bar (the input of the calibration step) and has none
    for wav in folder.rglob("*.wav"):
        if wav.name != "prototype-A4.wav":
            assert wav.with_suffix(".json").is_file(), wav
    assert {"cutlist.csv", "profiles.png", "sustain.csv", "sustain.png"} <= {
        p.name for p in written}


def test_demo_tube_makes_the_note_louder(demo) -> None:
    """At the one gain the A4 pair shares, the bare bar peaks lower than A4 with its tube.

    The tube's mouth radiates as a monopole where the bare bar is a cancelled dipole
    (physics.md sections 6 and 8), so the tube adds level; the sustain report keeps
    at least 3 dB of tube gain by default. The pair is rendered at the tubed
    strike's gain (its peak at -1 dBFS); the sidecars hold the gain and the peaks.
    """
    folder, _ = demo
    tubed = json.loads((folder / "strike-A4.json").read_text())
    bare = json.loads((folder / "strike-A4-bare.json").read_text())
    assert bare["gain_db"] == tubed["gain_db"]
    assert tubed["peak_dbfs"] - bare["peak_dbfs"] >= 3.0, (tubed["peak_dbfs"],
                                                          bare["peak_dbfs"])


def test_demo_build_sheet_is_the_cutlist_command(demo, demo_cutlist) -> None:
    """The demo's cutlist.csv is what `barwright cutlist` writes for the same preset."""
    folder, _ = demo
    result, sheet = demo_cutlist  # one `cutlist` run of the demo preset (tests/conftest.py)
    assert result.exit_code == 0, (result.exit_code, result.stderr[-2000:])
    assert read_csv(folder / "cutlist.csv") == read_csv(sheet / "cutlist.csv")
