"""Options shared by the sound commands (``strike``, ``chord``, ``render``), defined once.

:func:`render_options` adds the eleven options every render takes (tubes, motor,
output file, sample rate and format, channels, gain, end level, playback, JSON)
to a command's signature and hands them to the command as one frozen
:class:`RenderOptions`, so each option is written in one place and the command
functions stay short.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Annotated

import typer

from synth.defaults import RENDER_DEFAULTS

PresetArg = Annotated[Path, typer.Argument(help="Instrument preset (TOML) with solved [bars].",
                                           show_default=False)]
OutOpt = Annotated[Path | None, typer.Option(
    help="WAV file to write (default renders/<preset>/<what>.wav); a .json sidecar goes "
         "beside it.")]
ForceOpt = Annotated[bool, typer.Option(help="Overwrite the WAV and its sidecar if they exist.")]
RateOpt = Annotated[int, typer.Option("--sample-rate", min=44100, max=96000, metavar="Hz",
                                      help="44100, 48000 or 96000 Hz.")]
FormatOpt = Annotated[str, typer.Option(
    "--format", help="Sample format: pcm24 (24-bit PCM), float32 or pcm16.")]
ChannelsOpt = Annotated[int, typer.Option(
    min=1, max=2, help="1 = mono, 2 = stereo (bars panned by their place on the keyboard).")]
GainOpt = Annotated[float | None, typer.Option(
    min=-100.0, max=100.0, metavar="dB",
    help="Keep this fixed gain in dB instead of normalising the peak to -1 dBFS; lowered "
         "(with a warning) if it would clip.")]
MalletOpt = Annotated[str | None, typer.Option(
    help="Mallet preset from presets/mallets (default: the preset's [sound] mallet).")]
TubesOpt = Annotated[bool, typer.Option("--no-tubes", help="Leave the tubes out (bare bars).")]
MotorOpt = Annotated[float | None, typer.Option(
    min=0.0, max=50.0, metavar="rev/s",
    help="Motor rate in rev/s, overriding the preset (0 stops it). The "
         "tube mouths pulse at twice this rate.")]
EndLevelOpt = Annotated[float, typer.Option(
    "--end-level", min=-120.0, max=-20.0, metavar="dB",
    help="Level re the peak that the file's last 10 ms stay below: a render without a set "
         "length rings out to it, one with a set length is faded to it.")]
PedalOpt = Annotated[float, typer.Option(
    min=0.0, max=1.0, help="Damper pedal (before any pedal change of an event file): 1 = "
                           "dampers lifted (notes ring), 0 = dampers on the bars, in between = "
                           "half pedal.")]
VelocityHelp = (f"Strength 0..1 of a strike that gives none, mapped to a mallet speed by the "
                f"preset's [sound] table (default {RENDER_DEFAULTS.velocity:g}).")
PlayOpt = Annotated[bool, typer.Option(help="Play the WAV after writing it (needs the play "
                                            "extra and an output device).")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print the render's report as JSON.")]


@dataclass(frozen=True)
class RenderOptions:
    """The options every sound command takes (see the aliases above for their ranges)."""

    no_tubes: bool = False
    motor_rate: float | None = None
    out: Path | None = None
    force: bool = False
    sample_rate: int = 48000
    fmt: str = "pcm24"
    channels: int = 2
    gain_db: float | None = None
    end_level: float = RENDER_DEFAULTS.end_level_db
    play: bool = False
    json_out: bool = False


_ALIASES = {"no_tubes": TubesOpt, "motor_rate": MotorOpt, "out": OutOpt, "force": ForceOpt,
            "sample_rate": RateOpt, "fmt": FormatOpt, "channels": ChannelsOpt,
            "gain_db": GainOpt, "end_level": EndLevelOpt, "play": PlayOpt, "json_out": JsonOpt}
_SHARED = [inspect.Parameter(f.name, inspect.Parameter.KEYWORD_ONLY, default=f.default,
                             annotation=_ALIASES[f.name]) for f in fields(RenderOptions)]


def render_options(command: Callable) -> Callable:
    """Add the shared render options to ``command``, which takes them as ``render``.

    The command's own parameters come first in ``--help``; the shared ones follow
    in the order of :class:`RenderOptions`.
    """
    own = inspect.signature(command, eval_str=True)
    params = [p for p in own.parameters.values() if p.name != "render"]
    names = [p.name for p in _SHARED]

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        shared = RenderOptions(**{n: kwargs.pop(n) for n in names if n in kwargs})
        return command(*args, render=shared, **kwargs)

    # read by inspect.signature, which typer calls; functools.wraps does not declare it
    wrapper.__signature__ = own.replace(  # type: ignore[attr-defined]
        parameters=params + _SHARED)
    wrapper.__annotations__ = {p.name: p.annotation for p in params + _SHARED}
    return wrapper


MAX_WORKERS = 256
"""Most local worker processes a --workers option takes."""


def workers_option(what: str):
    """Return the ``--workers`` option of a command whose independent jobs are ``what``.

    Every such option goes through :func:`synth.executor.run_jobs`: default one
    process per core, 1 runs the jobs in this process; the results are the same
    whichever number ran them.
    """
    # a default value, not an Annotated type: a call is no type to a type checker
    return typer.Option(
        None, min=1, max=MAX_WORKERS, metavar="processes",
        help=f"Local worker processes for {what} (default: one per core; 1 runs them in "
             "this process, one after the other). The output is the same either way.")
