"""Design sweeps: each variant is what the preset reader and the sustain report say.

Sources
-------
- Independent path: for each tube offset, a preset file written with that offset
  (a text edit of the demo file) is read by ``load_instrument`` and run through
  ``sustain_report``; the sweep's T60 per register must equal that report's T60
  of the fundamental within 1e-9 relative (the same model, so only rounding may
  differ).
- The evenness figure against a spread computed by hand on made-up T60s: a
  smooth quadratic trend (in log T60 over semitones) has zero spread, and one
  note off the trend by a known factor gives the RMS of that residual.
- A Dask LocalCluster with two worker processes and the local process pool run
  the same jobs: the tables must be identical (each job holds BLAS to one thread,
  so both engines compute the same numbers).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from synth.cli import app
from synth.errors import ConfigError
from synth.physics.instrument import load_instrument
from synth.reports import sweep
from synth.reports.demo import demo_preset_path
from synth.reports.sustain import sustain_report
from synth.voicing import Voicer

PRESET = demo_preset_path()
OFFSETS = (0, 20, 40, 60)


def run(*args):
    """Run the command line in this process."""
    return CliRunner().invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def offset_sweep():
    """Run the sweep over tube offsets 0/20/40/60 cents in this process."""
    return sweep.run_sweep(PRESET, [f"tubes.offset_cents={','.join(map(str, OFFSETS))}"],
                           workers=1)


def _preset_with_offset(folder: Path, cents: float) -> Path:
    text = PRESET.read_text(encoding="utf-8")
    edited, n = re.subn(r"(?m)^offset_cents = [-0-9.]+", f"offset_cents = {cents:.1f}", text)
    assert n == 1
    path = folder / f"offset-{cents:g}.toml"
    path.write_text(edited, encoding="utf-8")
    return path


def test_offset_sweep_reproduces_the_sustain_report(offset_sweep, tmp_path) -> None:
    """Give, per variant and register, the T60 ``sustain`` reports for that preset."""
    assert offset_sweep.failed == []
    for cents, result in zip(OFFSETS, offset_sweep.results, strict=True):
        assert result.settings == (("tubes.offset_cents", cents),)
        inst = load_instrument(_preset_with_offset(tmp_path, cents))
        plan = Voicer(inst, sample_rate=48000.0, channels=1)
        report = sustain_report(plan, list(result.registers), max_render_s=1.0)
        for row, t60 in zip(report.rows, result.t60_s, strict=True):
            assert t60 == pytest.approx(row.t60_s[0], rel=1e-9)
        # every note of the evenness trend too, against the plan's fundamental
        for note, t60 in result.t60_by_note:
            assert t60 == pytest.approx(plan.fundamental(note)[2], rel=1e-9)
    # the offsets change the sustain: the middle register rings longer as the tube
    # moves away from the bar (less coupling; common practice, no source)
    mids = [r.t60_s[1] for r in offset_sweep.results]
    assert mids == sorted(mids) and mids[-1] > 1.5 * mids[0]


def test_evenness_against_a_hand_computed_spread() -> None:
    """Give 0 % on a smooth trend and the RMS of a known residual otherwise."""
    semis = np.arange(0.0, 37.0, 3.0)
    smooth = np.exp(3.5 - 0.04 * semis + 2e-4 * semis**2)
    assert sweep.evenness_percent(semis, smooth) == pytest.approx(0.0, abs=1e-9)
    # residuals +-r alternating about a trend they do not bend much: the quadratic
    # fit takes little of them, so the spread is near 100 (e^r - 1)
    r = 0.05
    wobble = smooth * np.exp(r * (-1.0) ** np.arange(semis.size))
    got = sweep.evenness_percent(semis, wobble)
    x = semis - semis.mean()
    y = np.log(wobble)
    design = np.vstack([x**2, x, np.ones_like(x)]).T
    resid = y - design @ np.linalg.lstsq(design, y, rcond=None)[0]
    assert got == pytest.approx(100 * math.expm1(math.sqrt(np.mean(resid**2))), rel=1e-9)
    assert 0.8 * 100 * math.expm1(r) < got < 100 * math.expm1(r)


def test_pareto_front_against_brute_force(rng) -> None:
    """Keep exactly the points that no other point beats on both counts."""
    x, y = rng.random(40), rng.random(40)
    front = set(sweep.pareto_front(list(x), list(y)))
    for i in range(40):
        beaten = any(x[j] <= x[i] and y[j] >= y[i] and (x[j], y[j]) != (x[i], y[i])
                     for j in range(40))
        assert (i not in front) == beaten


def test_parse_vary_values_and_lists() -> None:
    """Read numbers, whole numbers, names, booleans and colon lists."""
    v = sweep.parse_vary("blank.thickness_m=0.013:0.011,0.012")
    assert v == sweep.Vary("blank.thickness_m", ([0.013, 0.011], 0.012))
    assert sweep.parse_vary("sound.mallet=soft,hard").values == ("soft", "hard")
    assert sweep.parse_vary("motor.rate_rev_per_s=0,3").values == (0, 3)
    assert sweep.parse_vary("tubes.enabled=true,false").values == (True, False)
    tables = sweep.variant_tables(PRESET, [v])
    assert tables[0][1]["blank"]["thickness_m"] == [0.013, 0.011]
    assert tables[1][1]["blank"]["thickness_m"] == [0.012, 0.012]  # a scalar fills the list
    for bad in ("offset_cents", "=1,2", "tubes..gap_m=1", "tubes.gap_m=1,,2",
                "tubes.gap_m=nan"):
        with pytest.raises(ConfigError, match="--vary"):
            sweep.parse_vary(bad)


@pytest.mark.parametrize("vary, words", [
    ("tubes.offset_cents=0,3000", "tubes.offset_cents = 3000"),
    ("tubes.no_such_key=1", "unknown key"),
    ("material=unobtainium", "unknown material"),
    ("sound.mallet=no-such-mallet", "unknown mallet"),
])
def test_bad_variant_is_one_line_exit_2_nothing_written(tmp_path, vary, words) -> None:
    """Refuse a bad key or value in one stderr line, exit 2, before writing anything."""
    result = run("sweep", PRESET, "--vary", vary, "--workers", "1", "--out", tmp_path / "o")
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "Traceback" not in result.output
    assert not (tmp_path / "o").exists()


def test_failed_variant_is_reported_and_the_rest_complete(tmp_path, monkeypatch) -> None:
    """Exit 3 with the failure said first; the other variants are in the table."""
    real = sweep._evaluate

    def sometimes(settings, data, source):
        if dict(settings)["tubes.offset_cents"] == 20:
            raise ConfigError("= 20: made to fail by the test", source="tubes.offset_cents")
        return real(settings, data, source)

    monkeypatch.setattr(sweep, "_evaluate", sometimes)
    out = tmp_path / "o"
    result = run("sweep", PRESET, "--vary", "tubes.offset_cents=0,20", "--workers", "1",
                 "--out", out, "--json")
    assert result.exit_code == 3
    first = result.stderr.splitlines()[0]
    assert first == "barwright: 1 of 2 variants failed; the others are reported"
    assert "variant 2 (tubes.offset_cents=20)" in result.stderr
    record = json.loads(result.stdout)
    assert record["failed"] == 1
    ok, failed = record["variants"]
    assert ok["error"] is None and ok["t60_mid_s"] > 0
    assert "made to fail" in failed["error"] and "t60_mid_s" not in failed
    assert sorted(p.name for p in out.iterdir()) == ["sweep.csv", "sweep.json", "sweep.png"]


@pytest.fixture(scope="module")
def cluster():
    """Start a Dask LocalCluster with two worker processes on this machine."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, silence_logs=40) as lc:
        yield lc


def test_dask_cluster_and_local_pool_give_identical_tables(cluster) -> None:
    """Run one grid on both engines and compare the tables and the full records."""
    varies = ["tubes.offset_cents=10,50", "sound.mallet=soft,hard"]
    local = sweep.run_sweep(PRESET, varies, workers=2)
    remote = sweep.run_sweep(PRESET, varies, scheduler=cluster.scheduler_address)
    assert local.failed == [] and remote.failed == []
    assert sweep.sweep_csv(remote) == sweep.sweep_csv(local)
    strip = {"engine"}
    a = {k: v for k, v in sweep.sweep_record(local).items() if k not in strip}
    b = {k: v for k, v in sweep.sweep_record(remote).items() if k not in strip}
    assert a == b
    assert remote.engine.startswith("Dask cluster at tcp://")
    # the mallet changes the loudness and nothing of the decay
    soft, hard = local.results[0], local.results[1]
    assert soft.t60_s == hard.t60_s and hard.loudness_lufs > soft.loudness_lufs + 3.0

