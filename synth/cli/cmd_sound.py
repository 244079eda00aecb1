"""Sound commands: ``strike``, ``chord`` and ``render`` to WAV (and optional playback)."""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import (
    Progress,
    default_output,
    file_label,
    handle_errors,
    info,
    print_json,
    warn,
)
from synth.errors import ConfigError

PresetArg = Annotated[Path, typer.Argument(help="Instrument preset (TOML) with solved [bars].",
                                           show_default=False)]
OutOpt = Annotated[Path | None, typer.Option(
    help="WAV file to write (default renders/<preset>/<what>.wav); a .json sidecar goes "
         "beside it.")]
ForceOpt = Annotated[bool, typer.Option(help="Overwrite the WAV and its sidecar if they exist.")]
RateOpt = Annotated[int, typer.Option("--sample-rate", help="44100, 48000 or 96000 Hz.")]
FormatOpt = Annotated[str, typer.Option(
    "--format", help="Sample format: pcm24 (24-bit PCM), float32 or pcm16.")]
ChannelsOpt = Annotated[int, typer.Option(
    min=1, max=2, help="1 = mono, 2 = stereo (bars panned by their place on the keyboard).")]
GainOpt = Annotated[float | None, typer.Option(
    help="Keep this fixed gain in dB instead of normalising the peak to -1 dBFS; lowered "
         "(with a warning) if it would clip.")]
MalletOpt = Annotated[str | None, typer.Option(
    help="Mallet preset from presets/mallets (default: the preset's [sound] mallet).")]
TubesOpt = Annotated[bool, typer.Option("--no-tubes", help="Leave the tubes out (bare bars).")]
MotorOpt = Annotated[float | None, typer.Option(
    min=0.0, max=50.0, help="Motor rate in rev/s, overriding the preset (0 stops it). The "
                            "tube mouths pulse at twice this rate.")]
PlayOpt = Annotated[bool, typer.Option(help="Play the WAV after writing it (needs the play "
                                            "extra and an output device).")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print the render's report as JSON.")]


def _voicer(preset: Path, *, sample_rate: int, channels: int, no_tubes: bool,
            motor_rate: float | None):
    from synth.io import SAMPLE_RATES_HZ
    from synth.physics.instrument import load_instrument
    from synth.voicing import Voicer

    if sample_rate not in SAMPLE_RATES_HZ:
        raise ConfigError(f"= {sample_rate}: must be one of "
                          + ", ".join(str(r) for r in SAMPLE_RATES_HZ), source="--sample-rate")
    inst = load_instrument(preset)
    return Voicer(inst, sample_rate=float(sample_rate), tubes=not no_tubes,
                  motor_rate_rev_per_s=motor_rate, channels=channels)


def _finish(preset: Path, name: str, out: Path | None, voices, seconds: float, *,
            voicer, sample_rate: int, channels: int, fmt: str, gain_db: float | None,
            force: bool, play: bool, json_out: bool, settings: dict) -> None:
    from synth import io
    from synth.output import HEARING_CAUTION, render_to_wav

    if fmt not in io.SAMPLE_FORMATS:
        raise ConfigError(f"= {fmt!r}: must be one of " + ", ".join(io.SAMPLE_FORMATS),
                          source="--format")
    path = out or default_output(preset, f"{name}.wav")
    if out is None:
        path.parent.mkdir(parents=True, exist_ok=True)
    n = int(round(seconds * sample_rate))
    settings = {"preset": str(preset), "tubes": voicer.tubes_active,
                "motor_rate_rev_per_s": voicer.motor.rate_rev_per_s, **settings}
    with Progress(100, "rendering") as step:
        last = [0]

        def progress(done, total):
            pct = int(100 * done / max(total, 1))
            if pct > last[0]:
                step(pct - last[0])
                last[0] = pct

        rep = render_to_wav(path, voices, n, sample_rate=sample_rate, channels=channels,
                            sample_format=fmt, gain_db=gain_db, force=force, settings=settings,
                            progress=progress)
    plan = rep.plan
    if plan.would_clip:
        warn(f"--gain-db {plan.requested_gain_db:g} would clip (peak "
             f"{plan.peak_dbfs + plan.requested_gain_db - plan.gain_db:+.1f} dBFS); "
             f"lowered to {plan.gain_db:+.1f} dB so nothing clips")
    if json_out:
        print_json({"wav": str(rep.path), "sidecar": str(rep.sidecar), "seconds": rep.seconds,
                    "sample_rate_hz": sample_rate, "channels": channels,
                    "peak_dbfs": plan.peak_dbfs, "gain_db": plan.gain_db, "mode": plan.mode,
                    "render_wall_s": rep.wall_s})
    else:
        how = ("normalised to -1 dBFS peak" if plan.mode == "normalise"
               else f"fixed gain {plan.gain_db:+.1f} dB")
        typer.echo(f"wrote {rep.path} ({rep.seconds:.2f} s, {sample_rate} Hz, "
                   f"{'stereo' if channels == 2 else 'mono'}, {fmt}); peak "
                   f"{plan.peak_dbfs:.1f} dBFS, gain {plan.gain_db:+.1f} dB ({how})")
        typer.echo(f"settings: {rep.sidecar}")
    if play:
        info(HEARING_CAUTION)
        try:
            samples, fs = io.read_audio(rep.path)
            io.play(samples, fs)
        except Exception as exc:  # playback is optional: the WAV is written either way
            warn(f"cannot play ({exc}); the WAV is written")


@app.command("strike")
@handle_errors
def strike_command(
    preset: PresetArg,
    note: Annotated[str, typer.Argument(help="Note to strike, e.g. F3, F#4, Bb5.",
                                        show_default=False)],
    mallet: MalletOpt = None,
    velocity: Annotated[float | None, typer.Option(
        min=0.0, max=1.0, help="Strength 0..1, mapped to a mallet speed by the preset's "
                               "[sound] table (default: a 1 m/s strike).")] = None,
    speed: Annotated[float | None, typer.Option(
        min=0.01, max=20.0, help="Mallet head speed at impact, m/s (instead of --velocity).")
    ] = None,
    position: Annotated[float | None, typer.Option(
        min=0.0, max=1.0, help="Strike point along the bar, 0..1 of its length (0.5 = centre, "
                               "which leaves partial 2 silent).")] = None,
    across: Annotated[float | None, typer.Option(
        min=-0.5, max=0.5, help="Strike point off the centreline, -0.5..0.5 of the width "
                                "(off-centre strikes excite torsion).")] = None,
    duration: Annotated[float, typer.Option(min=0.05, max=600.0,
                                            help="Length of the WAV, seconds.")] = 5.0,
    pedal: Annotated[float, typer.Option(
        min=0.0, max=1.0, help="Damper pedal: 1 = dampers lifted (the note rings), 0 = "
                               "dampers on the bar, in between = half pedal.")] = 1.0,
    hold: Annotated[float | None, typer.Option(
        min=0.0, help="Key released after this many seconds; the dampers then act as "
                      "--pedal allows (default: held for the whole render).")] = None,
    no_tubes: TubesOpt = False,
    motor_rate: MotorOpt = None,
    out: OutOpt = None,
    force: ForceOpt = False,
    sample_rate: RateOpt = 48000,
    fmt: FormatOpt = "pcm24",
    channels: ChannelsOpt = 2,
    gain_db: GainOpt = None,
    play: PlayOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Render one struck bar to WAV: its computed partials, losses, tube and motor."""
    if velocity is not None and speed is not None:
        raise ConfigError("give --velocity or --speed, not both", source="--speed")
    v = _voicer(preset, sample_rate=sample_rate, channels=channels, no_tubes=no_tubes,
                motor_rate=motor_rate)
    name = v.instrument.check_note(note)
    voice = v.strike_voice(name, velocity=velocity, speed_m_s=speed, mallet=mallet,
                           position=position, across=across, release_s=hold,
                           pedal=((0.0, pedal),))
    _finish(preset, f"strike-{file_label(name)}", out, [voice], duration, voicer=v,
            sample_rate=sample_rate, channels=channels, fmt=fmt, gain_db=gain_db, force=force,
            play=play, json_out=json_out,
            settings={"command": "strike", "note": name, "mallet": mallet or v.sound.mallet,
                      "velocity": velocity, "speed_m_s": speed, "position": position,
                      "across": across, "pedal": pedal, "hold_s": hold})


_CHORD_ITEM = re.compile(r"^([A-Ga-g][#b]?-?\d+)(?::([0-9.]+))?$")


def parse_chord(text: str) -> list[tuple[str, float | None]]:
    """Notes of a chord, each optionally with a strength: ``"F3 A4:0.8 C5"``."""
    items = text.replace(",", " ").split()
    if not items:
        raise ConfigError("= '': give at least one note, e.g. \"F3 A4 C5\"", source="NOTES")
    out = []
    for it in items:
        m = _CHORD_ITEM.match(it)
        if not m:
            raise ConfigError(f"= {it!r}: write a note with an optional strength, e.g. A4 or "
                              "A4:0.8", source="NOTES")
        vel = None if m.group(2) is None else float(m.group(2))
        if vel is not None and not 0.0 <= vel <= 1.0:
            raise ConfigError(f"= {it!r}: strength must be 0..1", source="NOTES")
        out.append((m.group(1), vel))
    return out


@app.command("chord")
@handle_errors
def chord_command(
    preset: PresetArg,
    notes: Annotated[str, typer.Argument(
        help='Notes, e.g. "F3 A4 C5"; a strength per note as "A4:0.8".', show_default=False)],
    mallet: MalletOpt = None,
    velocity: Annotated[float, typer.Option(min=0.0, max=1.0,
                                            help="Strength of notes given without one.")] = 0.6,
    roll_ms: Annotated[float, typer.Option(
        min=0.0, max=2000.0, help="Spread the notes from the lowest up over this many ms "
                                  "(0 = struck together).")] = 0.0,
    duration: Annotated[float, typer.Option(min=0.05, max=600.0,
                                            help="Length of the WAV, seconds.")] = 6.0,
    check_decay: Annotated[bool, typer.Option(
        help="Also track each note's level in its own band and report the decay per note, "
             "their spread and the balance over time (and a PNG).")] = False,
    no_tubes: TubesOpt = False,
    motor_rate: MotorOpt = None,
    out: OutOpt = None,
    force: ForceOpt = False,
    sample_rate: RateOpt = 48000,
    fmt: FormatOpt = "pcm24",
    channels: ChannelsOpt = 2,
    gain_db: GainOpt = None,
    play: PlayOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Render a chord (struck together or rolled) to WAV."""
    v = _voicer(preset, sample_rate=sample_rate, channels=channels, no_tubes=no_tubes,
                motor_rate=motor_rate)
    items = [(v.instrument.check_note(n, option="NOTES"), vel) for n, vel in parse_chord(notes)]
    order = sorted(range(len(items)), key=lambda i: v.instrument.note_fraction(items[i][0]))
    step = roll_ms / 1000.0 / max(len(items) - 1, 1) if roll_ms > 0 else 0.0
    voices = []
    for rank, i in enumerate(order):
        name, vel = items[i]
        voices.append(v.strike_voice(name, time_s=rank * step,
                                     velocity=velocity if vel is None else vel, mallet=mallet))
    label = "-".join(file_label(n) for n, _ in items)
    _finish(preset, f"chord-{label}", out, voices, duration, voicer=v, sample_rate=sample_rate,
            channels=channels, fmt=fmt, gain_db=gain_db, force=force, play=play,
            json_out=json_out and not check_decay,
            settings={"command": "chord", "notes": [n for n, _ in items],
                      "strengths": [velocity if vel is None else vel for _, vel in items],
                      "roll_ms": roll_ms, "mallet": mallet or v.sound.mallet})
    if check_decay:
        from synth.cli.cmd_reports import chord_decay_report

        chord_decay_report(preset, v, items, velocity, mallet, roll_ms, duration, out,
                           force=force, json_out=json_out)


@app.command("render")
@handle_errors
def render_command(
    preset: PresetArg,
    events: Annotated[Path, typer.Argument(
        help="Event file: our TOML event list (see the README) or a standard MIDI file "
             "(.mid): notes and the sustain pedal (controller 64).", show_default=False)],
    mallet: MalletOpt = None,
    pedal: Annotated[float, typer.Option(
        min=0.0, max=1.0, help="Pedal before the file's first pedal event: 1 = dampers "
                               "lifted, 0 = dampers on.")] = 0.0,
    tail: Annotated[float | None, typer.Option(
        min=0.0, max=600.0, help="Seconds after the last event (default: until the "
                                 "slowest note has fallen 60 dB, at most 30 s).")] = None,
    no_tubes: TubesOpt = False,
    motor_rate: MotorOpt = None,
    out: OutOpt = None,
    force: ForceOpt = False,
    sample_rate: RateOpt = 48000,
    fmt: FormatOpt = "pcm24",
    channels: ChannelsOpt = 2,
    gain_db: GainOpt = None,
    play: PlayOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Render a passage from an event file (TOML events or MIDI) to WAV."""
    from dataclasses import replace

    from synth.engine.render import ring_out_sample
    from synth.engine.score import read_events

    v = _voicer(preset, sample_rate=sample_rate, channels=channels, no_tubes=no_tubes,
                motor_rate=motor_rate)
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
    with Progress(len(score.strikes), "planning") as step:
        voices = v.score_voices(score, default_pedal=pedal, progress=lambda k, n: step(1))
    if score.length_s is not None:
        seconds = score.length_s
    elif tail is not None:
        seconds = score.last_event_s + tail
    else:
        if not voices:
            raise ConfigError("has no strikes to render", source=str(events))
        ring = ring_out_sample(voices, sample_rate=sample_rate, level_db=-60.0)
        ring_s = math.inf if ring is None else ring / sample_rate
        seconds = min(ring_s, score.last_event_s + 30.0)
    _finish(preset, events.stem, out, voices, seconds, voicer=v, sample_rate=sample_rate,
            channels=channels, fmt=fmt, gain_db=gain_db, force=force, play=play,
            json_out=json_out,
            settings={"command": "render", "events": str(events), "strikes": len(voices),
                      "default_pedal": pedal, "mallet": mallet})
