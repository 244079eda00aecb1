"""``barwright demo``: the whole job on the bundled demo instrument.

The demo instrument (presets/instruments/lantern-street-bars.toml) is invented: a
three-octave F3-F6 instrument of 6061-T6 bars built by an invented shop for an
invented client.  The demo writes only into its output folder (default
``renders/demo/``) and replaces the files it wrote there on an earlier run.
Every file is planned before the first is written and all appear together at
the end; a demo that fails or is stopped leaves none of them.
"""

from __future__ import annotations

import statistics
import time
from pathlib import Path
from typing import Annotated

import numpy as np
import typer

from synth.cli import app
from synth.cli.common import (
    Progress,
    commit_outputs,
    format_table,
    handle_errors,
    info,
    plan_outputs,
)
from synth.config import presets_dir

DEMO_PRESET = "lantern-street-bars.toml"

DEMO_WAVS = ("strike-A4.wav", "strike-A4-bare.wav", "strike-F3-motor.wav", "strike-C5-hard.wav",
             "chord-F3-A4-C5-E6.wav", "harbour-waltz.wav")
"""The renders of step 4, in order."""

DEMO_TRIALS = 8
"""Blind trials of step 6."""


def demo_outputs(out: Path) -> list[tuple[Path, str]]:
    """Return every file the demo writes into ``out``."""
    from synth import io
    from synth.reports.compare import planned_files

    files = [(out / "cutlist.csv", "cut list"), (out / "profiles.png", "profile sheet")]
    for name in DEMO_WAVS:
        files += [(out / name, "WAV"), (io.sidecar_path(out / name), "settings sidecar")]
    files += [(out / "sustain.csv", "table"), (out / "sustain.png", "plot"),
              (out / "chord-decay.png", "plot")]
    files += [(p, "comparison file") for p in planned_files(out / "compare", DEMO_TRIALS,
                                                            page=True)]
    files += [(out / "prototype-A4.wav", "recording"),
              (out / "calibration-A4.toml", "calibration file")]
    return files


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
    plan_outputs(demo_outputs(out), force=True)
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
    typer.echo(f"   {SAFETY}\n")

    # 4. Sound: strikes, a chord, a passage
    from synth.engine.score import read_events
    from synth.output import render_to_wav
    from synth.voicing import Voicer

    typer.echo("4. sound (peak-normalised to -1 dBFS; start playback quietly)")
    fs = 48000
    stereo = Voicer(inst, sample_rate=float(fs), channels=2)
    spinning = Voicer(inst, sample_rate=float(fs), channels=2, motor_rate_rev_per_s=3.0)
    bare = Voicer(inst, sample_rate=float(fs), channels=2, tubes=False)
    a4, a4_bare, f3_motor, c5_hard, chord, waltz = DEMO_WAVS
    renders = [
        (a4, [stereo.strike_voice("A4", velocity=0.6)], 5.0, "A4, tubes on"),
        (a4_bare, [bare.strike_voice("A4", velocity=0.6)], 5.0, "A4 without its tube"),
        (f3_motor, [spinning.strike_voice("F3", velocity=0.6)], 8.0,
         "F3 with the motor at 3 rev/s (6 pulses/s)"),
        (c5_hard, [stereo.strike_voice("C5", velocity=0.7, mallet="hard")], 4.0,
         "C5 with a hard mallet"),
        (chord, [stereo.strike_voice(n, time_s=0.02 * k, velocity=0.6)
                 for k, n in enumerate(("F3", "A4", "C5", "E6"))], 6.0,
         "F major-seventh spread, rolled 60 ms"),
    ]
    score = read_events(presets_dir() / "events" / "harbour-waltz.toml")
    passage = stereo.score_voices(score)
    renders.append((waltz, passage, score.last_event_s + 1.0,
                    "a short passage (presets/events/harbour-waltz.toml)"))
    with Progress(len(renders), "rendering") as step:
        for name, voices, seconds, what in renders:
            rep = render_to_wav(out / name, voices, int(seconds * fs), sample_rate=fs,
                                channels=2, force=True,
                                settings={"command": "demo", "what": what,
                                          "preset": str(path)})
            typer.echo(f"   {rep.path}   ({what}; {rep.seconds:.1f} s, gain "
                       f"{rep.plan.gain_db:+.1f} dB)")
            step(1, name)
    typer.echo("")

    # 5. Reports: sustain across the range, even chord decay
    from synth.reports.chord import chord_decay, chord_decay_png
    from synth.reports.sustain import sustain_csv, sustain_png, sustain_report

    mono = Voicer(inst, sample_rate=float(fs), channels=1)
    with Progress(len(inst.notes), "sustain") as step:
        sus = sustain_report(mono, progress=lambda n: step(1, n))
    io.write_bytes(out / "sustain.csv", sustain_csv(sus).encode("utf-8"), force=True)
    io.write_bytes(out / "sustain.png", sustain_png(sus, f"{inst.name}: sustain"), force=True)
    worst = max(abs(r.render_agreement_percent) for r in sus.rows)
    flagged = [r.note for r in sus.rows if r.flagged]
    typer.echo("5. reports")
    typer.echo(f"   sustain: target {sus.target_label}; {len(flagged)} of {len(sus.rows)} notes "
               f"outside +-{sus.tolerance_percent:g} % (fundamental T60 "
               f"{sus.rows[0].t60_s[0]:.1f} s at {sus.rows[0].note} to "
               f"{sus.rows[-1].t60_s[0]:.1f} s at {sus.rows[-1].note}); rendered T60 within "
               f"{worst:.2f} % of the budget")
    typer.echo(f"   {out / 'sustain.csv'}   {out / 'sustain.png'}")
    cd = chord_decay(stereo, [(n, 0.6) for n in ("F3", "A4", "C5", "E6")], seconds=6.0)
    io.write_bytes(out / "chord-decay.png", chord_decay_png(cd, "F3 A4 C5 E6"), force=True)
    typer.echo("   chord F3 A4 C5 E6: decay " + ", ".join(
        f"{n.note} {n.decay_db_per_s:.1f}" for n in cd.notes) + f" dB/s (spread "
        f"{cd.spread_db_per_s:.1f} dB/s)")
    typer.echo(f"   {out / 'chord-decay.png'}\n")

    # 6. For the client: the same passage in another alloy, loudness-matched, blind trials
    from synth.cli.cmd_compare import compare_command

    option = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
    typer.echo("6. for the client: 6061-T6 (A) against 7075-T6 (B), loudness-matched")
    compare_command(design_a=path, design_b=option, out=out / "compare", blind=DEMO_TRIALS,
                    seed=37, force=True, page=True)
    typer.echo("")

    # 7. Back from the shop: measure a prototype bar and pull the loss model onto it
    from synth.cli.cmd_measure import measure_command
    from synth.engine.render import render
    from synth.physics.losses import Calibration

    typer.echo("7. a prototype A4 bar, struck over its tube and recorded (here simulated with "
               "losses the model does not know: alloy x1.5, cords x0.8, radiation x1.2)")
    proto = Voicer(inst, sample_rate=float(fs), channels=1,
                   calibration=Calibration({"internal": 1.5, "cords": 0.8, "radiation": 1.2}))
    take = render([proto.strike_voice("A4", time_s=0.2, velocity=0.7, position=0.3,
                                      across=0.3)], int(6.0 * fs), sample_rate=fs)[:, 0]
    take = 0.5 * take / np.max(np.abs(take))
    take += 10 ** (-85 / 20) * np.random.default_rng(37).standard_normal(take.size)
    recording = io.write_wav(out / "prototype-A4.wav", take, sample_rate=fs, force=True)
    measure_command(recording=recording, note="A4", calibrate=path,
                    out=out / "calibration-A4.toml", force=True)
    commit_outputs()
    info(f"demo done: files in {out}")
