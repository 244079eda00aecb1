"""Shared helpers of the command-line tests: invoke, and check the one-line error rule."""

from __future__ import annotations

from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir

DEMO = presets_dir() / "instruments" / "lantern-street-bars.toml"
"""The demo instrument (invented scenario)."""
DEMO_7075 = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
BAR = presets_dir() / "bars" / "parabolic-example.toml"


def run(*args):
    """Invoke ``barwright`` in-process; stdout and stderr are kept apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


def stderr_lines(result) -> list[str]:
    """Non-empty stderr lines."""
    return [ln for ln in result.stderr.splitlines() if ln.strip()]


def assert_one_line_error(result, *needles: str) -> str:
    """Exit code 2, one stderr line holding every needle, nothing on stdout, no traceback.

    The rule of the design outline: bad input gives one line on stderr naming the
    option or file, the value and what is allowed, and exit code 2.
    """
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr,
                                   result.exception)
    lines = stderr_lines(result)
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("barwright: error: "), lines[0]
    assert result.stdout == "", result.stdout
    assert "Traceback" not in result.stdout + result.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])
    return lines[0]
