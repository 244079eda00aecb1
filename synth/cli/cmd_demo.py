"""``barwright demo``: the whole job on the bundled demo instrument.

The demo instrument (presets/instruments/tarrow-37.toml) is invented: a
three-octave F3-F6 instrument of 6061-T6 bars built by an invented shop for an
invented client.  The demo writes only into its output folder (default
``renders/demo/``) and replaces the files it wrote there on an earlier run.
"""

from __future__ import annotations

import statistics
import time
from pathlib import Path
from typing import Annotated

import numpy as np
import typer

from synth.cli import app
from synth.cli.common import Progress, format_table, handle_errors, info
from synth.config import presets_dir

DEMO_PRESET = "tarrow-37.toml"


def demo_preset_path() -> Path:
    """Path of the bundled demo instrument."""
    return presets_dir() / "instruments" / DEMO_PRESET


@app.command("demo")
@handle_errors
def demo_command(
    out: Annotated[Path, typer.Option(help="Folder for the demo's files (replaced on each run).")
                   ] = Path("renders/demo"),
) -> None:
    """Run the main job on the bundled demo instrument and say where every file went."""
    from synth import io
    from synth.physics.bar_fe import solve_bar
    from synth.physics.instrument import load_instrument
    from synth.physics.tuning import tune_instrument
    from synth.pitch import cents
    from synth.reports.cutlist import SAFETY, cut_rows, cutlist_csv
    from synth.reports.plots import profile_sheet_png

    path = demo_preset_path()
    inst = load_instrument(path)
    out.mkdir(parents=True, exist_ok=True)
    typer.echo(f"demo instrument: {inst.name} ({inst.description})")
    typer.echo(f"  {inst.raw.get('workshop', '')}; for {inst.raw.get('client', '')}")
    typer.echo(f"  {len(inst.notes)} bars {inst.notes[0]}-{inst.notes[-1]}, "
               f"{inst.material.name}, A4 = {inst.reference_pitch_hz:g} Hz at "
               f"{inst.temperature_c:g} C\n")

    # 1. Partials of every bar from its geometry
    material = inst.material.at_temperature(inst.temperature_c)
    rows = []
    t0 = time.perf_counter()
    with Progress(len(inst.notes), "partials") as step:
        for note in inst.notes:
            res = solve_bar(inst.bar(note), material)
            v = res.vertical
            target = inst.target_hz(note)
            tors = res.of_kind("torsional")[0].frequency_hz
            lat = res.of_kind("lateral")[0].frequency_hz
            rows.append([note, f"{v[0].frequency_hz:.2f}",
                         f"{float(cents(v[0].frequency_hz, target)) + 0.0:+.2f}",
                         f"{v[1].frequency_hz / v[0].frequency_hz:.4f}",
                         f"{v[2].frequency_hz / v[0].frequency_hz:.4f}",
                         f"{tors:.0f}", f"{lat:.0f}",
                         f"{v[0].nodes_m[0] * 1e3:.1f}"])
            step(1, note)
    typer.echo("1. partials from geometry (1-D finite elements, mesh refined to 0.01 %)")
    typer.echo(format_table(
        ["note", "f1 Hz", "cents", "f2/f1", "f3/f1", "torsion 1 Hz", "lateral 1 Hz",
         "cord hole mm"], rows))
    typer.echo(f"   {len(rows)} bars solved in {time.perf_counter() - t0:.2f} s; target "
               f"ratios {', '.join(f'{r:g}' for r in inst.target_ratios)}\n")

    # 2. Design to target: re-solve every bar from its blank
    t0 = time.perf_counter()
    with Progress(len(inst.notes), "tuning") as step:
        tuned = tune_instrument(inst, progress=lambda n: step(1, n))
    worst = np.max([np.abs(r.residual_cents) for r in tuned], axis=0)
    typer.echo("2. design to target: length and arch solved per bar from the blank")
    typer.echo(f"   {sum(r.reachable for r in tuned)}/{len(tuned)} bars on target in "
               f"{time.perf_counter() - t0:.2f} s (median "
               f"{statistics.median(r.n_solves for r in tuned):.0f} finite-element solves per bar)")
    typer.echo("   worst residual per partial, cents: "
               + ", ".join(f"p{i + 1} {w:.3f}" for i, w in enumerate(worst)) + "\n")

    # 3. Build sheet
    from synth.voicing import tube_cut_lengths

    cut = cut_rows(inst, tube_lengths=tube_cut_lengths(inst))
    csv_path, png_path = out / "cutlist.csv", out / "profiles.png"
    io.write_bytes(csv_path, cutlist_csv(cut).encode("utf-8"), force=True)
    io.write_bytes(png_path, profile_sheet_png([(r.note, inst.bar(r.note), r.cord_holes_m)
                                                for r in cut],
                                               title=f"{inst.name}: bar profiles"), force=True)
    typer.echo("3. build sheet")
    typer.echo(f"   {csv_path}   (lengths, stations, cord holes)")
    typer.echo(f"   {png_path}   (profile drawings)")
    typer.echo(f"   {SAFETY}")
    info(f"demo done: files in {out}")
