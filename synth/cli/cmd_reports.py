"""Report commands: ``sustain`` (and the chord decay check of ``chord``)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import typer

from synth.cli import app
from synth.cli.common import (
    Progress,
    commit_outputs,
    default_output,
    format_table,
    handle_errors,
    parse_field,
    plan_outputs,
    print_json,
    say_correction,
    say_stiffness,
    stiffness_record,
)
from synth.cli.options import workers_option

if TYPE_CHECKING:  # annotations only: the report module loads when the command runs
    from synth.reports.chord import ChordDecay

MAX_T60_S = 600.0
"""Longest T60 a target may ask for, s (the upper bound of --target-t60)."""


@app.command("sustain")
@handle_errors
def sustain_command(
    preset: Annotated[Path, typer.Argument(help="Instrument preset with solved [bars].",
                                           show_default=False)],
    target: Annotated[str, typer.Option(
        metavar="trend|even",
        help="trend: T60 falling smoothly with pitch, fitted to the range's own notes (a "
             "polynomial in log T60 over note number), flagging notes that break from their "
             "neighbours; even: the median T60 for every note, so chords fade evenly.")
    ] = "trend",
    trend_order: Annotated[int, typer.Option(
        min=0, max=3, help="Order of the trend fit (0 is the same as even, about the "
                           "geometric mean).")] = 2,
    target_t60: Annotated[float | None, typer.Option(
        min=0.01, max=MAX_T60_S, metavar="seconds",
        help="One T60 target for every note, s (overrides --target).")] = None,
    target_curve: Annotated[str | None, typer.Option(
        help='T60 targets through given notes, e.g. "F3:40,C5:20,F6:8" (log-interpolated).')
    ] = None,
    tolerance: Annotated[float, typer.Option(
        min=0.1, max=500.0, metavar="percent",
        help="Flag notes whose T60 misses the target by more than this "
             "many percent.")] = 15.0,
    at_time: Annotated[float, typer.Option(
        min=0.0, max=60.0, metavar="seconds",
        help="Time after the strike at which to state the level "
             "difference, s.")] = 2.0,
    min_gain: Annotated[float, typer.Option(
        min=0.0, max=30.0, metavar="dB",
        help="Keep the tube's gain above this (dB over the bare bar) when suggesting a "
             "tube offset.")] = 3.0,
    max_offset_cents: Annotated[float, typer.Option(
        min=1.0, max=1200.0, metavar="cents",
        help="Largest tube offset above its bar a suggestion may ask for.")] = 100.0,
    out_preset: Annotated[Path | None, typer.Option(
        help="Write a copy of the preset with the suggested tube lengths cut in "
             "([bars.NOTE] tube = {length_m}), ready for render or sustain.",
        show_default=False)] = None,
    no_tubes: Annotated[bool, typer.Option("--no-tubes", help="Bare bars.")] = False,
    motor_rate: Annotated[float | None, typer.Option(
        min=0.0, max=50.0, metavar="rev/s",
        help="Motor rate in rev/s, overriding the preset (0 stops it).")
    ] = None,
    note: Annotated[list[str] | None, typer.Option(help="Only these notes (repeatable).")
                    ] = None,
    out: Annotated[Path | None, typer.Option(
        help="Folder for sustain.csv and sustain.png (default renders/<preset>/).")] = None,
    force: Annotated[bool, typer.Option(help="Overwrite existing files.")] = False,
    workers: int | None = workers_option("the notes' budgets and rendered strikes"),
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Sustain across the range: T60 per note and partial, mismatch against the target.

    Q and T60 come from the loss budget (tube and discs included); the
    fundamental's T60 is also measured on the model's own render of a strike.
    By default the target follows the range's own trend. Flagged tubed notes get
    a tube offset solved with the same voice (motor included) and checked by
    re-solving before it is printed; --out-preset writes those tube lengths.
    """
    from synth.reports import sustain as rs
    from synth.settings.instrument import load_instrument

    rs.check_sustain_options(target, target_t60, target_curve)
    if target_curve is not None:
        check_target_curve(target_curve)
    inst = load_instrument(preset)
    notes = [inst.check_note(n) for n in note] if note else list(inst.notes)
    folder = out or default_output(preset, "")
    csv_path, png_path = folder / "sustain.csv", folder / "sustain.png"
    planned = [(csv_path, "table"), (png_path, "plot")]
    if out_preset is not None:
        planned.append((out_preset, "preset"))
    plan_outputs(planned, force=force)
    v = rs.sustain_voicer(inst, no_tubes=no_tubes, motor_rate=motor_rate)
    curve = rs.parse_target_curve(target_curve, notes) if target_curve else None
    with Progress(len(notes), "sustain") as step:
        rep = rs.sustain_report(v, notes, target_t60_s=target_t60, target_curve=curve,
                                target=target, trend_order=trend_order,
                                tolerance_percent=tolerance, at_time_s=at_time,
                                min_gain_db=min_gain, max_offset_cents=max_offset_cents,
                                progress=lambda n: step(1, n), workers=workers)
    lengths = rs.write_sustain_files(rep, inst, preset, csv_path=csv_path, png_path=png_path,
                                     out_preset=out_preset, tolerance=tolerance, force=force)
    commit_outputs()
    ts = v.tube_settings if rep.tubes else None  # with a calibration file's [tubes]
    open_terms = list(ts.uncalibrated()) if ts is not None else []
    if json_out:
        _print_sustain_json(rep, open_terms, csv_path, png_path, out_preset, v.stiffness)
        return
    _print_sustain(rep, open_terms, at_time=at_time, tolerance=tolerance, csv_path=csv_path,
                   png_path=png_path, lengths=lengths, out_preset=out_preset,
                   stiffness=v.stiffness)


def _print_sustain_json(rep, open_terms, csv_path, png_path, out_preset, stiffness) -> None:
    print_json({
        "uncalibrated": {"t60_s": open_terms, "level_difference_db": open_terms},
        "target": rep.target_label, "tolerance_percent": rep.tolerance_percent,
        "tubes": rep.tubes, "motor_rate_rev_per_s": rep.motor_rate_rev_per_s,
        "csv": str(csv_path), "png": str(png_path),
        "max_offset_cents": rep.max_offset_cents,
        "solid_correction": rep.solid_correction,
        "stiffness_calibration": stiffness_record(stiffness),
        "preset": None if out_preset is None else str(out_preset),
        "notes": [{"note": r.note, "frequency_hz": r.frequency_hz, "cents": r.cents,
                   "q": list(r.q), "t60_s": r.t60_s[0], "t60_partials_s": list(r.t60_s),
                   "t60_rendered_s": r.t60_rendered_s, "target_t60_s": r.target_t60_s,
                   "mismatch_percent": r.mismatch_percent,
                   "level_difference_db": r.level_difference_db, "flagged": r.flagged,
                   "suggestion": r.suggestion,
                   "suggested_offset_cents": r.suggested_offset_cents,
                   "suggested_tube_length_m": r.suggested_length_m,
                   "suggested_t60_s": r.suggested_t60_s,
                   "warnings": list(r.warnings)} for r in rep.rows]})


def _print_sustain(rep, open_terms, *, at_time, tolerance, csv_path, png_path, lengths,
                   out_preset, stiffness) -> None:
    rows = [[r.note, f"{r.frequency_hz:.2f}", f"{r.cents + 0.0:+.2f}",
             *[f"{t:.2f}" for t in r.t60_s], f"{r.t60_rendered_s:.2f}",
             f"{r.mismatch_percent:+.0f}", f"{r.level_difference_db:+.1f}",
             "OUT" if r.flagged else "", r.suggestion] for r in rep.rows]
    typer.echo(format_table(
        ["note", "f1 Hz", "cents", "T60 p1 s" + (" ~" if open_terms else ""), "T60 p2 s",
         "T60 p3 s", "p1 rendered", "mismatch %",
         f"dB at {at_time:g} s" + (" ~" if open_terms else ""), "flag", "suggestion"],
        rows, align="lrrrrrrrrll"))
    n_out = sum(r.flagged for r in rep.rows)
    typer.echo(f"target: {rep.target_label}; {n_out} of {len(rep.rows)} notes outside "
               f"+-{tolerance:g} %; tubes {'on' if rep.tubes else 'off'}, motor "
               f"{rep.motor_rate_rev_per_s:g} rev/s")
    say_correction(rep.solid_correction)
    say_stiffness(stiffness)
    if open_terms:
        typer.echo("~ uncalibrated: the fundamental's T60 and level under its tube rest on "
                   + " and ".join(open_terms) + " (derived, not measured); fit them with "
                   "`barwright tubecal`")
    typer.echo(f"wrote {csv_path} and {png_path}"
               + (f"; preset with {len(lengths)} suggested tube length(s): {out_preset}"
                  if out_preset is not None else ""))


def check_target_curve(text: str) -> None:
    """Refuse a --target-curve value unless every item is NOTE:T60 with a finite T60.

    Raises
    ------
    ConfigError
        Naming --target-curve, the value and the item that is wrong.
    """
    from synth.errors import ConfigError
    from synth.pitch import note_to_midi

    example = "F3:40,C5:20,F6:8"
    for item in text.replace(" ", "").split(","):
        name, colon, t60 = item.partition(":")
        try:
            note_to_midi(name)
        except ConfigError:
            colon = ""
        if not colon:
            raise ConfigError(f"= {text!r}: {item!r} must be NOTE:T60_SECONDS, e.g. {example}",
                              source="--target-curve") from None
        parse_field(t60, option="--target-curve", value=text, lo=0.01, hi=MAX_T60_S,
                    unit=" s", example=example)


def decay_png_path(wav: Path) -> Path:
    """Return where ``chord --check-decay`` draws its plot: beside the WAV, ``-decay.png``."""
    base = wav.with_suffix("")
    return base.parent / f"{base.name}-decay.png"


@dataclass
class ChordDecayCheck:
    """The even-decay check of a chord, computed before anything is written."""

    result: ChordDecay
    png: Path
    title: str

    def write(self) -> None:
        """Write the plot (into the running command's plan)."""
        from synth import io
        from synth.reports.chord import chord_decay_png

        io.write_bytes(self.png, chord_decay_png(self.result, self.title), force=True)

    def report(self, *, json_out: bool, render: dict | None = None) -> None:
        """Print the decay per note and the balance over time.

        With ``json_out`` the one JSON document holds the check and, under ``"render"``,
        the report of the WAV ``chord`` wrote.
        """
        res, png = self.result, self.png
        if json_out:
            print_json({"render": render, "spread_db_per_s": res.spread_db_per_s,
                        "times_s": list(res.times_s),
                        "png": str(png),
                        "notes": [{"note": n.note, "frequency_hz": n.frequency_hz,
                                   "decay_db_per_s": n.decay_db_per_s, "t60_s": n.t60_s,
                                   "balance_db": list(n.balance_db),
                                   "warnings": list(n.warnings)}
                                  for n in res.notes]})
            return
        typer.echo(format_table(
            ["note", "f1 Hz", "decay dB/s", "T60 s", *[f"at {t:g} s dB" for t in res.times_s]],
            [[n.note, f"{n.frequency_hz:.2f}", f"{n.decay_db_per_s:.2f}", f"{n.t60_s:.2f}",
              *["-" if b != b else f"{b:+.1f}" for b in n.balance_db]] for n in res.notes],
            title="decay of each note in its own band (balance: level re the loudest note)"))
        typer.echo(f"spread of decay rates: {res.spread_db_per_s:.2f} dB/s; plot: {png}")


def chord_decay_check(voicer, items, velocity, mallet, roll_ms, duration,
                      png: Path) -> ChordDecayCheck:
    """Track each note of the chord in its own band (called by ``chord`` before it writes)."""
    from synth.reports.chord import chord_decay

    strengths = [(n, velocity if v is None else v) for n, v in items]
    length = {} if duration is None else {"seconds": duration}
    res = chord_decay(voicer, strengths, mallet=mallet, roll_ms=roll_ms, **length)
    return ChordDecayCheck(res, png, f"{voicer.instrument.name}: "
                           + " ".join(n for n, _ in items))
