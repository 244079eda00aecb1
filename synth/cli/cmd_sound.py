"""Sound commands: ``strike``, ``chord`` and ``render`` to WAV (and optional playback)."""

from __future__ import annotations

import re
from collections.abc import Callable
from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import (
    Progress,
    commit_outputs,
    default_output,
    file_label,
    handle_errors,
    info,
    parse_field,
    plan_outputs,
    print_json,
    say_correction,
    say_stiffness,
    stiffness_record,
    warn,
    wav_targets,
)
from synth.cli.options import (  # noqa: F401  (cmd_compare reads the aliases from here)
    FormatOpt,
    MalletOpt,
    MotorOpt,
    PedalOpt,
    PresetArg,
    RateOpt,
    RenderOptions,
    TubesOpt,
    VelocityHelp,
    render_options,
    workers_option,
)
from synth.defaults import RENDER_DEFAULTS
from synth.errors import ConfigError

VelocityOpt = Annotated[float | None, typer.Option(
    min=0.0, max=1.0, show_default=False, help=VelocityHelp)]
SpeedOpt = Annotated[float | None, typer.Option(
    min=0.01, max=20.0, metavar="m/s", help="Mallet head speed at impact, m/s (instead of "
                                            "--velocity).")]
PositionOpt = Annotated[float | None, typer.Option(
    min=0.0, max=1.0, help="Strike point along the bar, 0..1 of its length (0.5 = centre, "
                           "which leaves partial 2 silent).")]
AcrossOpt = Annotated[float | None, typer.Option(
    min=-0.5, max=0.5, help="Strike point off the centreline, -0.5..0.5 of the width "
                            "(off-centre strikes excite torsion).")]
HoldOpt = Annotated[float | None, typer.Option(
    min=0.0, max=600.0, metavar="seconds",
    help="Key released after this many seconds; the dampers then act as --pedal allows "
         "(default: held for the whole render).")]
RollOpt = Annotated[float, typer.Option(
    min=0.0, max=2000.0, metavar="ms",
    help="Spread the notes from the lowest up over this many ms (0 = struck together).")]
ChordVelocityOpt = Annotated[float, typer.Option(min=0.0, max=1.0, help=VelocityHelp)]
CheckDecayOpt = Annotated[bool, typer.Option(
    help="Also track each note's level in its own band and report the decay per note, their "
         "spread and the balance over time (and a PNG).")]
EventsArg = Annotated[Path, typer.Argument(
    help="Event file: our TOML event list (see the README) or a standard MIDI file (.mid): "
         "notes and the sustain pedal (controller 64).", show_default=False)]
TailOpt = Annotated[float | None, typer.Option(
    min=0.0, max=600.0, metavar="seconds", show_default=False,
    help="Seconds after the last event, the end faded to --end-level (default: ring out to "
         f"--end-level, at most {RENDER_DEFAULTS.longest_s:g} s after the last event; an event "
         "file with its own length is cut there with a fade).")]


DurationOpt = Annotated[float | None, typer.Option(
    min=0.05, max=600.0, metavar="seconds", show_default=False,
    help="Length of the WAV, the end faded to --end-level (default: ring out to --end-level, "
         f"at most {RENDER_DEFAULTS.longest_s:g} s).")]


def _voicer(preset: Path, opts: RenderOptions):
    from synth.io import check_sample_rate
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    check_sample_rate(opts.sample_rate)
    return Voicer(load_instrument(preset), sample_rate=float(opts.sample_rate),
                  tubes=not opts.no_tubes, motor_rate_rev_per_s=opts.motor_rate,
                  channels=opts.channels)



def _render(path: Path, voices, seconds: float | None, voicer, opts: RenderOptions,
            settings: dict):
    """Render to the planned WAV with a progress bar; return the render's report.

    ``seconds=None`` rings out to the end level; a length is cut there with a fade.
    """
    from synth.output import render_to_wav, ring_out_length
    from synth.physics.solid_correction import correction_record

    ring = seconds is None
    n = (int(round(seconds * opts.sample_rate)) if seconds is not None
         else ring_out_length(voices, sample_rate=opts.sample_rate, end_level_db=opts.end_level))
    settings = {**voicer.plan_settings(), "requested_seconds": seconds,
                "solid_correction": correction_record(voicer.correction), **settings}
    with Progress(100, "rendering") as step:
        last = [0]

        def progress(done, total):
            pct = int(100 * done / max(total, 1))
            if pct > last[0]:
                step(pct - last[0])
                last[0] = pct

        return render_to_wav(path, voices, n,
                             sample_rate=opts.sample_rate, channels=opts.channels,
                             sample_format=opts.fmt, gain_db=opts.gain_db, force=opts.force,
                             settings=settings, progress=progress, ring_out=ring,
                             end_level_db=opts.end_level)


def _say(rep, opts: RenderOptions) -> dict:
    """Warn about a lowered gain and print the render's line; return its record."""
    plan = rep.plan
    if plan.would_clip:
        warn(f"--gain-db {plan.requested_gain_db:g} would clip (peak "
             f"{plan.peak_dbfs + plan.requested_gain_db - plan.gain_db:+.1f} dBFS); "
             f"lowered to {plan.gain_db:+.1f} dB so nothing clips")
    return {"wav": str(rep.path), "sidecar": str(rep.sidecar), "seconds": rep.seconds,
            "sample_rate_hz": opts.sample_rate, "channels": opts.channels,
            "peak_dbfs": plan.peak_dbfs, "gain_db": plan.gain_db, "mode": plan.mode,
            **rep.ending.record(), "render_wall_s": rep.wall_s}


def _print(record: dict, rep, opts: RenderOptions) -> None:
    plan = rep.plan
    if opts.json_out:
        print_json(record)
        return
    say_correction(record["solid_correction"])
    how = ("normalised to -1 dBFS peak" if plan.mode == "normalise"
           else f"fixed gain {plan.gain_db:+.1f} dB")
    typer.echo(f"wrote {rep.path} ({rep.seconds:.2f} s, {opts.sample_rate} Hz, "
               f"{'stereo' if opts.channels == 2 else 'mono'}, {opts.fmt}); peak "
               f"{plan.peak_dbfs:.1f} dBFS, gain {plan.gain_db:+.1f} dB ({how})")
    typer.echo(f"end: {rep.ending.sentence(rep.seconds)}")
    typer.echo(f"settings: {rep.sidecar}")


def _play(path: Path) -> None:
    from synth import io
    from synth.output import HEARING_CAUTION

    info(HEARING_CAUTION)
    try:
        samples, fs = io.read_audio(path)
        io.play(samples, fs)
    except Exception as exc:  # playback is optional: the WAV is written either way
        warn(f"cannot play ({exc}); the WAV is written")


def _finish(preset: Path, name: str, voices, seconds: float | None, *, voicer, opts: RenderOptions,
            settings: dict, wav: Path | None = None,
            also_write: Callable[[], None] | None = None, report: bool = True) -> dict:
    """Render to the WAV (planned with its sidecar), run ``also_write``, commit, report.

    Returns the report as a dict; ``report=False`` prints nothing, for a command that
    prints one JSON document of its own.
    """
    from synth.io import check_sample_format

    check_sample_format(opts.fmt)
    path = wav or opts.out or default_output(preset, f"{name}.wav")
    plan_outputs(wav_targets(path), force=opts.force)
    rep = _render(path, voices, seconds, voicer, opts, {"preset": str(preset), **settings})
    if also_write is not None:
        also_write()
    commit_outputs()
    from synth.physics.solid_correction import correction_record

    record = {**_say(rep, opts), "solid_correction": correction_record(voicer.correction),
              "stiffness_calibration": stiffness_record(voicer.stiffness)}
    if report:
        _print(record, rep, opts)
        if not opts.json_out:
            say_stiffness(voicer.stiffness)
    if opts.play:
        _play(rep.path)
    return record


@app.command("strike")
@handle_errors
@render_options
def strike_command(
    preset: PresetArg,
    note: Annotated[str, typer.Argument(help="Note to strike, e.g. F3, F#4, Bb5.",
                                        show_default=False)],
    mallet: MalletOpt = None,
    velocity: VelocityOpt = None,
    speed: SpeedOpt = None,
    position: PositionOpt = None,
    across: AcrossOpt = None,
    duration: DurationOpt = None,
    pedal: PedalOpt = RENDER_DEFAULTS.pedal,
    hold: HoldOpt = None,
    *,
    render: RenderOptions,
) -> None:
    """Render one struck bar to WAV: its computed partials, losses, tube and motor."""
    if velocity is not None and speed is not None:
        raise ConfigError("give --velocity or --speed, not both", source="--speed")
    if velocity is None and speed is None:
        velocity = RENDER_DEFAULTS.velocity
    v = _voicer(preset, render)
    name = v.instrument.check_note(note)
    voice = v.strike_voice(name, velocity=velocity, speed_m_s=speed, mallet=mallet,
                           position=position, across=across, release_s=hold,
                           pedal=((0.0, pedal),))
    strike = v.strike_settings(velocity=velocity, speed_m_s=speed, mallet=mallet,
                               position=position, across=across)
    _finish(preset, f"strike-{file_label(name)}", [voice], duration, voicer=v, opts=render,
            settings={"command": "strike", "note": name, **strike, "pedal": pedal,
                      "hold_s": hold})


_CHORD_NOTE = re.compile(r"^[A-Ga-g][#b]?-?\d+$")


def parse_chord(text: str, option: str = "NOTES") -> list[tuple[str, float | None]]:
    """Parse the notes of a chord, each optionally with a strength 0..1: ``"F3 A4:0.8 C5"``."""
    items = text.replace(",", " ").split()
    if not items:
        raise ConfigError("= '': give at least one note, e.g. \"F3 A4 C5\"", source=option)
    out = []
    for it in items:
        name, colon, strength = it.partition(":")
        if not _CHORD_NOTE.match(name):
            raise ConfigError(f"= {it!r}: write a note with an optional strength, e.g. A4 or "
                              "A4:0.8", source=option)
        vel = (parse_field(strength, option=option, value=it, lo=0.0, hi=1.0,
                           example="A4:0.8") if colon else None)
        out.append((name, vel))
    return out


@app.command("chord")
@handle_errors
@render_options
def chord_command(
    preset: PresetArg,
    notes: Annotated[str, typer.Argument(
        help='Notes, e.g. "F3 A4 C5"; a strength per note as "A4:0.8".', show_default=False)],
    mallet: MalletOpt = None,
    velocity: ChordVelocityOpt = RENDER_DEFAULTS.velocity,
    roll_ms: RollOpt = 0.0,
    duration: DurationOpt = None,
    check_decay: CheckDecayOpt = False,
    *,
    render: RenderOptions,
) -> None:
    """Render a chord (struck together or rolled) to WAV."""
    chord = parse_chord(notes)  # before any file is read: a typo costs nothing
    v = _voicer(preset, render)
    items = [(v.instrument.check_note(n, option="NOTES"), vel) for n, vel in chord]
    voices = _chord_voices(v, items, velocity, roll_ms, mallet)
    label = "-".join(file_label(n) for n, _ in items)
    wav = render.out or default_output(preset, f"chord-{label}.wav")
    decay = None
    if check_decay:
        from synth.cli.cmd_reports import chord_decay_check, decay_png_path
        from synth.io import check_sample_format

        png = decay_png_path(wav)
        check_sample_format(render.fmt)
        plan_outputs([*wav_targets(wav), (png, "decay plot")], force=render.force)
        decay = chord_decay_check(v, items, velocity, mallet, roll_ms, duration, png)
    record = _finish(
        preset, f"chord-{label}", voices, duration, voicer=v, opts=render, wav=wav,
        report=not (render.json_out and check_decay),
        settings={"command": "chord", "notes": [n for n, _ in items],
                  "strengths": [velocity if vel is None else vel for _, vel in items],
                  "roll_ms": roll_ms, "mallet": mallet or v.sound.mallet,
                  "strikes": [v.strike_settings(velocity=velocity if vel is None else vel,
                                                mallet=mallet) for _, vel in items]},
        also_write=None if decay is None else decay.write)
    if decay is not None:
        decay.report(json_out=render.json_out, render=record)


def _chord_voices(v, items, velocity: float, roll_ms: float, mallet: str | None) -> list:
    """Strike the notes from the lowest up, ``roll_ms`` spread over them."""
    order = sorted(range(len(items)), key=lambda i: v.instrument.note_fraction(items[i][0]))
    step = roll_ms / 1000.0 / max(len(items) - 1, 1) if roll_ms > 0 else 0.0
    voices = []
    for rank, i in enumerate(order):
        name, vel = items[i]
        voices.append(v.strike_voice(name, time_s=rank * step,
                                     velocity=velocity if vel is None else vel, mallet=mallet))
    return voices


def _score_for(v, events: Path, mallet: str | None):
    """Read an event file, check its notes against the preset, apply a default mallet."""
    from dataclasses import replace

    from synth.settings.score import read_events

    score = read_events(events)
    for k, st in enumerate(score.strikes):
        try:
            v.instrument.check_note(st.note, option="note")
        except ConfigError as exc:
            raise ConfigError(f"strike {k + 1} at {st.time_s:.3f} s: {exc.detail}",
                              source=str(events)) from None
    if mallet is not None:
        score = replace(score, strikes=tuple(replace(s, mallet=s.mallet or mallet)
                                             for s in score.strikes))
    return score


@app.command("render")
@handle_errors
@render_options
def render_command(
    preset: PresetArg,
    events: EventsArg,
    mallet: MalletOpt = None,
    pedal: PedalOpt = RENDER_DEFAULTS.pedal,
    tail: TailOpt = None,
    workers: int | None = workers_option("planning the strikes, one job per note"),
    *,
    render: RenderOptions,
) -> None:
    """Render a passage from an event file (TOML events or MIDI) to WAV."""
    v = _voicer(preset, render)
    score = _score_for(v, events, mallet)
    with Progress(len(score.strikes), "planning") as step:
        last = [0]

        def planned(done: int, total: int) -> None:
            step(done - last[0])
            last[0] = done

        voices = v.score_voices(score, default_pedal=pedal, progress=planned, workers=workers)
    if score.length_s is not None:
        seconds = score.length_s
    elif tail is not None:
        seconds = score.last_event_s + tail
    else:
        seconds = None   # ring out to the end level
    _finish(preset, events.stem, voices, seconds, voicer=v, opts=render,
            settings={"command": "render", "events": str(events), "strikes": len(voices),
                      "default_pedal": pedal, "mallet": mallet or v.sound.mallet,
                      "tail_s": tail, "score_length_s": score.length_s})
