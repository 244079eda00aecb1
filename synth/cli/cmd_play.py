"""``play``: the design played live from a MIDI keyboard (or a MIDI file) through the voice pool."""

from __future__ import annotations

import contextlib
import os
import sys
import threading
import time
from pathlib import Path
from typing import Annotated

import numpy as np
import typer

from synth.cli import app
from synth.cli.common import commit_outputs, handle_errors, info, missed, plan_outputs, warn
from synth.errors import AudioError, ConfigError

MIDI_INSTALL_HINT = ('install the playback extra with: pip install "barwright[play]" (it brings '
                     "sounddevice and the python-rtmidi backend of mido)")
STATUS_EVERY_S = 0.25
MAX_TAIL_S = 30.0
LOOKAHEAD_S = 0.2
"""A played file's events go into the pool's ring this long before they sound (the loop
that feeds them wakes every 5 ms; each keeps its own sample)."""


def _audio_module():
    """Return sounddevice with a usable output device, or raise one clear AudioError."""
    from synth.io import PLAY_INSTALL_HINT

    try:
        import sounddevice as sd
    except ImportError:
        raise AudioError(f"live output needs the sounddevice module; {PLAY_INSTALL_HINT}; "
                         "or write what would play with --midi-file FILE --to-wav OUT.wav"
                         ) from None
    except OSError:
        raise AudioError(f"live output needs the PortAudio library; {PLAY_INSTALL_HINT}"
                         ) from None
    try:
        sd.query_devices(kind="output")
    except Exception:  # noqa: BLE001  (PortAudio reports errors of its own type)
        raise AudioError("no audio output device found; connect one, or write what would "
                         "play with --midi-file FILE --to-wav OUT.wav") from None
    return sd


@contextlib.contextmanager
def _quiet_stderr():
    """Silence what C libraries write straight to file descriptor 2 (ALSA's own lines)."""
    try:
        fd = sys.stderr.fileno()
    except (AttributeError, OSError, ValueError):   # a captured stream: nothing to silence
        yield
        return
    saved = os.dup(fd)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), fd)
            yield
    finally:
        os.dup2(saved, fd)
        os.close(saved)


def _input_names() -> list[str]:
    import mido

    try:
        with _quiet_stderr():
            return list(mido.get_input_names())
    except ImportError:
        raise AudioError(f"MIDI input needs a mido backend; {MIDI_INSTALL_HINT}") from None
    except Exception as exc:  # noqa: BLE001  (the backend's own error types)
        raise AudioError("MIDI input could not be opened (no MIDI system on this machine: "
                         f"{str(exc).splitlines()[0] if str(exc) else type(exc).__name__}); "
                         "connect a keyboard, or play a file with --midi-file FILE") from None


def _choose_port(port: str | None) -> str:
    names = _input_names()
    if port is None:
        if not names:
            raise AudioError("no MIDI input port found; connect a keyboard (barwright play "
                             "--list-ports lists them), or play a file with --midi-file FILE")
        return names[0]
    if port not in names:
        raise ConfigError(f"= {port!r}: no such MIDI input port; found: "
                          + (", ".join(repr(n) for n in names) or "none"), source="--port")
    return port


def _player(presets: list[Path], *, sample_rate: int, channels: int, no_tubes: bool,
             motor_rate: float | None, layers: int, voices: int, gain_db: float, pedal: float,
             motor_top: float, motor_cc: int, switch_cc: int, workers: int | None):
    from synth.cli.cmd_sound import _voicer
    from synth.cli.options import RenderOptions
    from synth.live import LivePlayer

    opts = RenderOptions(no_tubes=no_tubes, motor_rate=motor_rate, sample_rate=sample_rate,
                         channels=channels)
    voicers = [_voicer(p, opts) for p in presets]
    player = LivePlayer(voicers, n_layers=layers, n_voices=voices, gain_db=gain_db,
                          pedal=pedal, motor_top=motor_top, motor_cc=motor_cc,
                          design_cc=switch_cc, workers=workers)
    player.pool.warm_up()
    return player


def _status_line(player, load, dropouts: int) -> str:
    s = player.status()
    text = (f"sounding {s['sounding']:2d} | pedal {s['pedal']:.2f} | motor "
            f"{s['motor_rev_per_s']:.1f} rev/s | design {s['design']} | load "
            f"{100 * load[0]:3.0f} % (max {100 * load[1]:3.0f} %) | dropouts {dropouts}")
    if s["steals"]:
        text += f" | stolen {s['steals']}"
    return text


def _to_wav(player, events, block: int, tail_s: float | None):
    """Yield what the audio callback writes, block by block, until the passage has rung out."""
    pool = player.pool
    fs = player.sample_rate
    last = events[-1][0] if events else 0
    end = last + int(round((MAX_TAIL_S if tail_s is None else tail_s) * fs))
    k = 0
    while pool.now < end:
        n = min(block, end - pool.now)
        while k < len(events) and events[k][0] < pool.now + n:
            player.handle(events[k][1], events[k][0])
            k += 1
        out = np.zeros((n, player.channels))
        pool.process(out)
        yield out
        if pool.fault is not None:
            return
        if tail_s is None and k == len(events) and pool.now > last and pool.sounding == 0:
            return


@app.command("play")
@handle_errors
def play_command(
    preset: Annotated[Path, typer.Argument(help="Instrument preset (TOML) with solved [bars]: "
                                                "design A.", show_default=False)],
    preset_b: Annotated[Path | None, typer.Argument(
        help="Second preset, design B: both are planned and loudness-matched as compare does; "
             "the switch controller or a program change picks the design of the next "
             "strike.", show_default=False)] = None,
    list_ports: Annotated[bool, typer.Option(
        "--list-ports", help="List the MIDI input ports and exit.")] = False,
    port: Annotated[str | None, typer.Option(
        help="MIDI input port to play from (default: the first one found).")] = None,
    midi_file: Annotated[Path | None, typer.Option(
        help="Play a standard MIDI file through the live engine instead of a port.")] = None,
    to_wav: Annotated[Path | None, typer.Option(
        help="With --midi-file: write what the audio callback produced, block by block, to "
             "this WAV instead of a device (no sound card needed).")] = None,
    record: Annotated[Path | None, typer.Option(
        help="Write what was played as a standard MIDI file (one tick per sample), for "
             "render to make the full WAV later.")] = None,
    gain_db: Annotated[float, typer.Option(
        min=-60.0, max=0.0, metavar="dB",
        help="Output gain, dB re compare's default phrase matched at -1 dBTP; starts quiet; "
             "controller 7 (volume) scales it down, ramped. "
             "Whatever the gain, a limiter keeps the output at or below -1 dBFS.")] = -18.0,
    pedal: Annotated[float, typer.Option(
        min=0.0, max=1.0, help="Damper pedal before the first controller 64: 1 = dampers "
                               "lifted, 0 = dampers on, in between = half pedal.")] = 1.0,
    motor_rate: Annotated[float | None, typer.Option(
        min=0.0, max=50.0, metavar="rev/s",
        help="Motor rate at the start in rev/s, overriding the preset (0 stops it).")] = None,
    motor_cc: Annotated[int, typer.Option(
        min=0, max=127, help="Controller number that sets the motor rate (value 127 = "
                             "--motor-top).")] = 1,
    motor_top: Annotated[float, typer.Option(
        min=0.0, max=50.0, metavar="rev/s",
        help="Motor rate at controller value 127.")] = 6.0,
    switch_cc: Annotated[int, typer.Option(
        min=0, max=127, help="Controller number that picks the design of the next strike: "
                             "below 64 = A, from 64 = B.")] = 80,
    layers: Annotated[int, typer.Option(
        min=1, max=127, help="Velocity layers planned per note before the stream starts "
                             "(about 20 ms each); a velocity plays the nearest layer.")] = 8,
    voices: Annotated[int, typer.Option(
        min=1, max=1024, help="Voices that can sound at once; when all sound, a new strike "
                              "takes over the quietest.")] = 64,
    block: Annotated[int, typer.Option(
        min=32, max=4096, metavar="samples",
        help="Samples per audio block (latency: block / sample rate).")] = 64,
    tail: Annotated[float | None, typer.Option(
        min=0.0, max=600.0, metavar="seconds",
        help="With --midi-file: seconds after the last event (default: until every voice "
             "has died away, at most 30 s).")] = None,
    workers: Annotated[int | None, typer.Option(
        min=1, max=256, help="Local processes that plan the notes before the stream starts "
                             "(default: every core this process may use).")] = None,
    no_tubes: Annotated[bool, typer.Option("--no-tubes", help="Leave the tubes out.")] = False,
    sample_rate: Annotated[int, typer.Option("--sample-rate", min=44100, max=96000,
                                             metavar="Hz", help="44100, 48000 or 96000 Hz."
                                             )] = 48000,
    channels: Annotated[int, typer.Option(min=1, max=2, help="1 = mono, 2 = stereo.")] = 2,
    fmt: Annotated[str, typer.Option(
        "--format", help="Sample format of --to-wav: pcm24, float32 or pcm16.")] = "pcm24",
    force: Annotated[bool, typer.Option(help="Overwrite --to-wav and --record files.")] = False,
) -> None:
    """Play the design live: MIDI in, sound out, through the real-time voice pool."""
    from synth import io, live

    if list_ports:
        _list_ports()
        return
    live.check_play_options(motor_cc=motor_cc, switch_cc=switch_cc, to_wav=to_wav,
                            midi_file=midi_file, fmt=fmt, sample_rate=sample_rate)
    events = live.file_events(midi_file, sample_rate)
    sd = port_name = None
    if to_wav is None:
        sd = _audio_module()
        if midi_file is None:
            port_name = _choose_port(port)
    targets = [(to_wav, "WAV")] if to_wav is not None else []
    if record is not None:
        targets.append((record, "MIDI recording"))
    if targets:
        plan_outputs(targets, force=force)
    presets = [preset] + ([preset_b] if preset_b is not None else [])
    player = _planned_player(presets, sample_rate=sample_rate, channels=channels,
                             no_tubes=no_tubes, motor_rate=motor_rate, layers=layers,
                             voices=voices, gain_db=gain_db, pedal=pedal, motor_top=motor_top,
                             motor_cc=motor_cc, switch_cc=switch_cc, workers=workers)
    if record is not None:
        player.start_recording()
    if to_wav is not None:
        io.write_wav(to_wav, _to_wav(player, events, block, tail), sample_rate=sample_rate,
                     sample_format=fmt, channels=channels, force=force)
    else:
        info("barwright: set your volume low before you play, especially on headphones; "
             f"output starts at {gain_db:+.0f} dB and never exceeds -1 dBFS")
        _stream(sd, player, block=block, port_name=port_name, events=events)
    _finish(player, to_wav=to_wav, record=record, force=force)


def _list_ports() -> None:
    names = _input_names()
    for name in names:
        typer.echo(name)
    if not names:
        info("barwright: no MIDI input ports found")


def _planned_player(presets: list[Path], *, gain_db: float, **kwargs):
    """Plan the player and say how long it took and each design's output gain."""
    t0 = time.perf_counter()
    player = _player(presets, gain_db=gain_db, **kwargs)
    levels = ", ".join(f"{d} {20 * np.log10(g) + gain_db:+.2f} dB"
                       for d, g in zip("AB", player.scales, strict=False))
    info(f"barwright: planned {player.pool.n_templates} strikes of {len(presets)} design(s) "
         f"in {time.perf_counter() - t0:.1f} s; output gain re 1 Pa: {levels}")
    for letter, v in zip("AB", player.voicers, strict=False):
        if v.stiffness is not None:
            info(f"barwright: design {letter}: {v.stiffness.describe()}")
    return player


def _finish(player, *, to_wav: Path | None, record: Path | None, force: bool) -> None:
    """Warn of strikes not played, write the recording, commit, and say what was written."""
    from synth import io
    from synth.live import recorded_midi_bytes

    fault = player.pool.fault
    status = player.status()
    if status["off_range"]:
        warn(f"{status['off_range']} strike(s) outside the range of the design were not "
             "played")
    if status["dropped_events"]:
        warn(f"{status['dropped_events']} event(s) did not fit the engine's queue and were "
             "lost")
    if record is not None:
        io.write_bytes(record, recorded_midi_bytes(player.recording, player.sample_rate),
                       force=force)
    if fault is not None:
        commit_outputs()   # what was recorded up to the fault is kept
        raise missed(f"output muted: {fault}; the voices were stopped")
    commit_outputs()
    for path in (to_wav, record):
        if path is not None:
            info(f"barwright: wrote {path}")


def _stream(sd, player, *, block: int, port_name: str | None, events) -> None:
    """Run the output stream until Ctrl-C (or the end of the file) with a status line."""
    pool = player.pool
    fs = player.sample_rate
    budget = block / fs
    loads = np.zeros(2)          # last, largest callback time / block duration
    dropouts = [0]

    def callback(outdata, frames, time_info, status):
        t = time.perf_counter()
        if status.output_underflow:
            dropouts[0] += 1
        pool.process(outdata)
        used = (time.perf_counter() - t) / budget
        loads[0] = used
        if used > loads[1]:
            loads[1] = used

    lock = threading.Lock()

    def on_message(msg):
        with lock:   # one block ahead: every event lands inside a block not yet rendered
            player.handle(msg, pool.now + block)

    midi_in = None
    stream = sd.OutputStream(samplerate=fs, blocksize=block, channels=player.channels,
                             dtype="float32", callback=callback)
    ahead = max(8 * block, int(LOOKAHEAD_S * fs))   # file events queued this far ahead
    tty = sys.stderr.isatty()
    try:
        if port_name is not None:
            import mido

            midi_in = mido.open_input(port_name, callback=on_message)
            info(f"barwright: playing from {port_name!r}; Ctrl-C stops")
        with stream:
            k = 0
            last_status = 0.0
            while True:
                if events is not None:
                    while k < len(events) and events[k][0] < pool.now + ahead:
                        player.handle(events[k][1], events[k][0])
                        k += 1
                    if k == len(events) and pool.now > (events[-1][0] if events else 0) \
                            and pool.sounding == 0:
                        break
                if pool.fault is not None:
                    break
                now = time.monotonic()
                if tty and now - last_status >= STATUS_EVERY_S:
                    sys.stderr.write("\r" + _status_line(player, loads, dropouts[0]))
                    sys.stderr.flush()
                    last_status = now
                time.sleep(0.005)
    except KeyboardInterrupt:
        pass
    finally:
        if midi_in is not None:
            midi_in.close()
        if tty:
            sys.stderr.write("\n")
    info("barwright: " + _status_line(player, loads, dropouts[0]))
    if dropouts[0]:
        warn(f"{dropouts[0]} block(s) reached the device late (dropouts); try a larger "
             "--block or fewer --voices")
