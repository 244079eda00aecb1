"""Usage errors (unknown option, bad or out-of-range value) as one line on stderr.

typer and click print a usage block and a (sometimes boxed) message over several
lines.  barwright prints one line, ``barwright: error: strike --hold = 1e300: must be
a number from 0 to 600 seconds``, and exits with code 2.  The command line runs the
app in click's non-standalone mode and formats the exception here, so the output is
the same whether or not rich is installed and whichever click (typer's own copy or
the ``click`` package) typer uses.
"""

from __future__ import annotations

import sys
import types
import typing
from collections.abc import Callable, Sequence

import typer

EXIT_DONE = 0
EXIT_BAD_INPUT = 2
"""Input the user can fix (the usage-error code of click/typer)."""
EXIT_MISSED = 3
"""The job ran but its result misses what was asked (e.g. a bar outside tolerance)."""
EXIT_INTERRUPTED = 130
"""Exit code after Ctrl-C (128 + SIGINT)."""
EXIT_TERMINATED = 143
"""Exit code after a SIGTERM (128 + SIGTERM)."""


def _exception_modules() -> list[types.ModuleType]:
    mods = []
    try:  # typer >= 0.2x carries its own copy of click
        from typer._click import exceptions as vendored

        mods.append(vendored)
    except ImportError:
        pass
    try:
        from click import exceptions as package

        mods.append(package)
    except ImportError:
        pass
    return mods


def _classes(name: str) -> tuple[type[typing.Any], ...]:
    # Any: the classes are found at run time in typer's or click's module, and their
    # attributes (show, exit_code, message) are click's, not BaseException's.
    return tuple(getattr(m, name) for m in _exception_modules() if hasattr(m, name))


def one_line_usage_errors(run: Callable[[list[str]], object],
                          args: Sequence[str] | None) -> typing.NoReturn:
    """Call ``run(args)`` (the app in non-standalone mode) and exit like the command line.

    Usage errors print ``barwright: error: ...`` on one line and exit 2; help text
    asked for with no arguments prints as usual (exit 2, as click does); otherwise the
    exit code is the command's.
    """
    argv = list(sys.argv[1:] if args is None else args)
    try:
        rv = run(argv)
    except _classes("NoArgsIsHelpError") as exc:
        exc.show()
        sys.exit(exc.exit_code)
    except _classes("ClickException") as exc:
        typer.echo(f"barwright: error: {describe(exc, argv)}", err=True)
        sys.exit(EXIT_BAD_INPUT if exc.exit_code in (0, 1, 2) else exc.exit_code)
    except _classes("Abort"):
        typer.echo("barwright: aborted", err=True)
        sys.exit(1)
    sys.exit(rv if isinstance(rv, int) and not isinstance(rv, bool) else EXIT_DONE)


# exc: a ClickException from typer's or click's module (see _classes)
def describe(exc: typing.Any, argv: Sequence[str]) -> str:
    """One line for a click usage error: command, option, value, what is allowed."""
    ctx = getattr(exc, "ctx", None)
    command = ctx.info_name if ctx is not None and ctx.parent is not None else None
    param = getattr(exc, "param", None)
    missing = type(exc).__name__ == "MissingParameter"
    if param is not None and not missing and getattr(exc, "message", None) is not None:
        name = _param_name(param)
        raw = _raw_value(param, argv)
        head = f"{name} = {raw}" if raw is not None else name
        reason = _number_rule(param) or _flat(exc.message)
        text = f"{head}: {reason}"
    else:
        text = _flat(exc.format_message())
        if command is not None:
            return f"{command}: {text} (see barwright {command} --help)"
    return f"{command} {text}" if command is not None else text


def _flat(text: str) -> str:
    return " ".join(str(text).split())


def _param_name(param) -> str:
    opts = getattr(param, "opts", None) or []
    if getattr(param, "param_type_name", "") == "option" and opts:
        return max(opts, key=len)
    return str(getattr(param, "name", "") or "value").upper()


def _raw_value(param, argv: Sequence[str]) -> str | None:
    """Return the text the user gave for an option (its last occurrence), as typed."""
    if getattr(param, "param_type_name", "") != "option":
        return None
    found = None
    opts = list(getattr(param, "opts", []) or [])
    for i, a in enumerate(argv):
        for o in opts:
            if a == o and i + 1 < len(argv):
                found = argv[i + 1]
            elif a.startswith(o + "="):
                found = a[len(o) + 1:]
    if found is None:
        return None
    plain = found and found.isprintable() and found.strip() == found
    return found if plain else repr(found)


def number_kind(param) -> str | None:
    """Return ``"number"``, ``"whole number"`` or None for a non-numeric option."""
    desc = getattr(param, "type_descriptor", None)  # typer's own parameter types
    ann = getattr(desc, "annotation", None)
    if ann is not None:
        if typing.get_origin(ann) in (typing.Union, types.UnionType):
            ann = next((a for a in typing.get_args(ann) if a is not type(None)), None)
        if ann is int:
            return "whole number"
        if ann is float:
            return "number"
        return None
    name = getattr(getattr(param, "type", None), "name", "") or ""  # click's types
    if name.startswith("integer"):
        return "whole number"
    if name.startswith("float"):
        return "number"
    return None


def option_bounds(param) -> tuple[float | None, float | None]:
    """Return the (min, max) an option declares; None where it declares none."""
    lo, hi = getattr(param, "min", None), getattr(param, "max", None)
    if lo is None and hi is None:
        ptype = getattr(param, "type", None)
        lo, hi = getattr(ptype, "min", None), getattr(ptype, "max", None)
    return lo, hi


def _number_rule(param) -> str | None:
    """``must be a number from 0 to 600 seconds`` for a numeric option, else None."""
    kind = number_kind(param)
    if kind is None:
        return None
    lo, hi = option_bounds(param)
    unit = getattr(param, "metavar", None)
    unit = f" {unit}" if unit and unit.lower() not in ("float", "int", "integer") else ""
    if lo is not None and hi is not None:
        return f"must be a {kind} from {lo:g} to {hi:g}{unit}"
    if lo is not None:
        return f"must be a {kind} >= {lo:g}{unit}"
    if hi is not None:
        return f"must be a {kind} <= {hi:g}{unit}"
    return f"must be a finite {kind}{unit}"
