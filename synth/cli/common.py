"""Shared pieces of the command line: error handling, tables, progress, JSON.

Only the ``synth.cli`` package prints or exits; everything below it returns data.
"""

from __future__ import annotations

import contextvars
import functools
import json
import math
import signal
import sys
import threading
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import typer

from synth.cli.usage import EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_MISSED, EXIT_TERMINATED
from synth.errors import ConfigError, SynthError
from synth.reports.tables import format_table  # noqa: F401  (commands import it from here)


def fail(message: str) -> typer.Exit:
    """Print one line on stderr and return the Exit to raise (code 2)."""
    typer.echo(f"barwright: error: {message}", err=True)
    return typer.Exit(code=EXIT_BAD_INPUT)




class Terminated(BaseException):
    """A SIGTERM arrived; raised in the main thread so that unfinished files are removed."""


_RUN_PLANS: contextvars.ContextVar[list | None] = contextvars.ContextVar(
    "barwright_run_plans", default=None)


_STOPPED: list[int] = []
"""The signals that stopped this run.  A signal's exception can surface inside library
code that catches it and raises another (seen: matplotlib, numpy's array printing);
the run is still treated as stopped, with its exit code."""


def _on_sigterm(signum, frame) -> None:
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # one is enough: let the cleanup finish
    _STOPPED.append(signal.SIGTERM)
    raise Terminated


def _on_sigint(signum, frame) -> None:
    _STOPPED.append(signal.SIGINT)
    raise KeyboardInterrupt


def _stopped_by(exc: BaseException) -> int | None:
    """Return the exit code of a run stopped by a signal (None: not stopped)."""
    if isinstance(exc, Terminated) or signal.SIGTERM in _STOPPED:
        return EXIT_TERMINATED
    if isinstance(exc, KeyboardInterrupt) or signal.SIGINT in _STOPPED:
        return EXIT_INTERRUPTED
    return None


def handle_errors(func: Callable) -> Callable:
    """Run a command: a SynthError becomes one stderr line and exit code 2.

    The files the command planned (:func:`plan_outputs`) are committed when it
    returns and removed when it fails or is stopped (Ctrl-C, SIGTERM).
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        outermost = _RUN_PLANS.get() is None
        plans: list = []
        token = _RUN_PLANS.set(plans)
        previous = None
        previous_int = None
        if outermost:
            _STOPPED.clear()
        if outermost and threading.current_thread() is threading.main_thread():
            previous = signal.signal(signal.SIGTERM, _on_sigterm)
            if signal.getsignal(signal.SIGINT) is signal.default_int_handler:
                previous_int = signal.signal(signal.SIGINT, _on_sigint)  # ignored stays so
        try:
            result = func(*args, **kwargs)
            _commit(plans)
            return result
        except BaseException as exc:
            _discard(plans)
            code = _stopped_by(exc)
            if code == EXIT_INTERRUPTED:
                typer.echo("barwright: interrupted; unfinished files removed", err=True)
                raise typer.Exit(code=EXIT_INTERRUPTED) from None
            if code == EXIT_TERMINATED:
                typer.echo("barwright: terminated; unfinished files removed", err=True)
                raise typer.Exit(code=EXIT_TERMINATED) from None
            if isinstance(exc, SynthError):
                raise fail(str(exc)) from None
            raise
        finally:
            _RUN_PLANS.reset(token)
            if previous is not None:
                signal.signal(signal.SIGTERM, previous)
            if previous_int is not None:
                signal.signal(signal.SIGINT, previous_int)

    return wrapper


def missed(message: str) -> typer.Exit:
    """Say on stderr that a job ran but missed what was asked; return the Exit (code 3).

    Print this before anything else the command prints, so it is the first line a
    user (or a script reading stderr) sees.
    """
    typer.echo(f"barwright: {message}", err=True)
    return typer.Exit(code=EXIT_MISSED)


def parse_field(text: str, *, option: str, value: str, lo: float, hi: float,
                unit: str = "", example: str) -> float:
    """One number inside a compound option value (``1:4:10``, ``F3:30``, ``A4:0.8``).

    Parameters
    ----------
    text : str
        The field as typed.
    option : str
        The option (or argument) it belongs to, e.g. ``"--ratios"``.
    value : str
        The whole value as typed, quoted in the message.
    lo, hi : float
        Allowed range, inclusive.
    unit : str
        Unit for the message, e.g. ``" s"``.
    example : str
        A valid value to show.

    Raises
    ------
    ConfigError
        Empty, not a number, NaN, infinite or out of range; the message names the
        option, the value, the field and what is allowed.
    """
    field = text.strip()
    try:
        number = float(field) if field and "_" not in field else math.nan
    except ValueError:
        number = math.nan
    if not (math.isfinite(number) and lo <= number <= hi):
        what = "an empty field" if not field else repr(field)
        raise ConfigError(f"= {value!r}: {what} must be a number from {lo:g} to {hi:g}{unit}, "
                          f"e.g. {example}", source=option)
    return number


def _commit(plans: list) -> None:
    """Put the planned files in place, unless a signal came and its exception was lost.

    Library code can catch the exception a signal raises and carry on (a run of
    ``cutlist`` went on to draw and commit its plots after a Ctrl-C); the run
    must still stop before its files appear, as it would have.
    """
    if _STOPPED:
        raise Terminated if signal.SIGTERM in _STOPPED else KeyboardInterrupt
    while plans:
        plans[0].commit()
        plans.pop(0)


def _discard(plans: list) -> None:
    for plan in plans:
        plan.discard()
    plans.clear()


def plan_outputs(targets: Iterable[Any], *, force: bool):
    """Check every file the running command will write, before it writes any.

    ``targets`` are paths or (path, what) pairs (see :class:`synth.io.OutputPlan`).
    A problem with any of them raises AudioError (one line, exit 2) and nothing is
    written.  Otherwise the folders are made, temporaries left there by killed runs
    are removed (and listed on stderr), and every write goes to a temporary until
    the command ends: :func:`commit_outputs`, or the return of the command, puts
    the files in place; an error or an interrupt removes them.  A command run by
    another one (``demo``) writes within the caller's plan, which must hold its
    files.
    """
    from synth import io

    targets = list(targets)
    active = io.active_plan()
    if active is not None:
        active.require(t if isinstance(t, str | Path) else t[0] for t in targets)
        return active
    plan = io.OutputPlan(targets, force=force)
    plan.open()
    plans = _RUN_PLANS.get()
    if plans is None:
        plan.discard()
        raise RuntimeError("plan_outputs is for commands wrapped in handle_errors")
    plans.append(plan)
    by_folder: dict[Path, list] = {}
    for path, size in plan.removed:
        by_folder.setdefault(path.parent, []).append((path, size))
    for folder, files in by_folder.items():
        total = sum(s for _, s in files)
        info(f"barwright: removed {len(files)} unfinished file(s) ({total / 1e6:.1f} MB) "
             f"left in {folder} by runs that were killed: "
             + ", ".join(p.name for p, _ in files))
    return plan


def commit_outputs() -> None:
    """Put the running command's planned files in place now (before saying so)."""
    plans = _RUN_PLANS.get()
    if plans:
        _commit(plans)


def wav_targets(path: Path) -> list[tuple[Path, str]]:
    """Return the files of a render: the WAV and its settings sidecar."""
    from synth import io

    return [(path, "WAV"), (io.sidecar_path(path), "settings sidecar")]


def warn(message: str) -> None:
    """Print a warning line on stderr."""
    typer.echo(f"barwright: warning: {message}", err=True)


def info(message: str) -> None:
    """Print a progress or status line on stderr (stdout stays for results)."""
    typer.echo(message, err=True)


def say_correction(record: dict | None, prefix: str = "") -> None:
    """Print the line saying a preset's 3-D correction table was applied (none: nothing).

    ``record`` is the ``solid_correction`` field of the command's JSON output
    (:func:`synth.physics.solid_correction.correction_record`); ``prefix`` names the
    design when there are several.
    """
    if record is not None:
        text = record["description"]
        typer.echo(prefix + text[:1].upper() + text[1:] + ".")


def default_output(file: Path, name: str) -> Path:
    """Where an output goes unless the user names it: renders/<file stem>/<name>."""
    return Path("renders") / file.stem / name


def file_label(label: str) -> str:
    """Return a bar or note label as part of a file name (F#4 -> Fs4, spaces to _)."""
    return label.replace(" ", "_").replace("#", "s")


def print_json(obj: Any) -> None:
    """Write ``obj`` as indented JSON on stdout (NaN becomes null)."""
    typer.echo(json_text(obj))


def json_text(obj: Any) -> str:
    """Return ``obj`` as indented JSON text (NaN and infinities become null)."""
    return json.dumps(_clean(obj), indent=2)


def _clean(obj: Any) -> Any:
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if hasattr(obj, "tolist"):
        return _clean(obj.tolist())
    return obj


class Progress:
    """A progress bar on stderr when it is a terminal; silent when piped.

    Use as ``with Progress(total, "tuning") as step: ... step(1, "F3")``.
    """

    def __init__(self, total: int, label: str):
        self.total = max(int(total), 1)
        self.label = label
        self.done = 0
        self.enabled = sys.stderr.isatty()

    def __enter__(self):
        self.advance(0)  # draw the empty bar at once: the first step may take long
        return self.advance

    def advance(self, n: int = 1, note: str = "") -> None:
        """Move the bar forward by ``n`` steps."""
        self.done = min(self.total, self.done + n)
        if not self.enabled:
            return
        width = 30
        filled = int(width * self.done / self.total)
        bar = "#" * filled + "." * (width - filled)
        sys.stderr.write(f"\r{self.label} [{bar}] {self.done}/{self.total} {note:<12}")
        sys.stderr.flush()

    def __exit__(self, *exc):
        if self.enabled:
            sys.stderr.write("\n")
            sys.stderr.flush()
        return False


def stiffness_in_use(design):
    """Return the stiffness calibration an instrument preset predicts with (None: none).

    The ``[stiffness]`` table of the calibration file the preset names; a single-bar
    file predicts uncalibrated.
    """
    from synth.physics.instrument import Instrument
    from synth.physics.solid_correction import model_correction

    if not isinstance(design, Instrument):
        return None
    correction = model_correction(design)
    return None if correction is None else correction.stiffness


def stiffness_record(stiffness) -> dict | None:
    """Return the ``stiffness_calibration`` value of a JSON document (None: uncalibrated)."""
    return None if stiffness is None else stiffness.to_dict()


def say_stiffness(stiffness, prefix: str = "") -> None:
    """Print the line that names the stiffness calibration in use (nothing without one)."""
    if stiffness is not None:
        text = stiffness.describe()
        typer.echo(prefix + (text if prefix else text[:1].upper() + text[1:]) + ".")
