"""The lazy command group: ``barwright --help`` without the numeric stack, a complete table."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import typer.main

from synth.cli import app
from synth.cli.commands import COMMANDS

ROOT = Path(__file__).resolve().parents[2]

# Runs the command line as ``python -m synth`` does, then lists what it imported.
_PROBE = """
import runpy, sys
sys.argv = ["barwright"] + sys.argv[1:]
try:
    runpy.run_module("synth", run_name="__main__")
except SystemExit:
    pass
heavy = sorted({m.split(".")[0] for m in sys.modules} & {"numba", "scipy", "numpy"})
sys.stderr.write("HEAVY=" + ",".join(heavy) + "\\n")
"""


def _heavy_imports(*args: str) -> list[str]:
    proc = subprocess.run([sys.executable, "-c", _PROBE, *args], cwd=ROOT,
                          capture_output=True, text=True, timeout=120,
                          env={"PYTHONPATH": str(ROOT), "PATH": ""})
    line = [ln for ln in proc.stderr.splitlines() if ln.startswith("HEAVY=")]
    assert line, proc.stderr
    return [m for m in line[-1].removeprefix("HEAVY=").split(",") if m]


def test_help_and_unknown_command_leave_the_numeric_stack_out() -> None:
    """``--help`` and a mistyped command import neither numba, scipy nor numpy."""
    assert _heavy_imports("--help") == []
    assert _heavy_imports("no-such-command") == []


def test_table_matches_the_registered_commands() -> None:
    """Every command's module and one-line help in the table are the ones it registers.

    Independent path: typer's own conversion of the registered commands.
    """
    registered = {c.name: c for c in typer.main.get_group(app).commands.values()}
    # The same commands; their order in --help is the table's (registration order
    # depends on which modules a process imported first).
    assert sorted(registered) == sorted(COMMANDS)
    for name, (module, short) in COMMANDS.items():
        command = registered[name]
        assert command.callback.__module__ == module
        assert command.help.split("\n\n")[0].strip() == short


def test_command_help_is_complete() -> None:
    """``barwright strike --help`` still lists the command's own options."""
    proc = subprocess.run([sys.executable, "-m", "synth", "strike", "--help"], cwd=ROOT,
                          capture_output=True, text=True, timeout=300,
                          env={"PYTHONPATH": str(ROOT), "PATH": ""})
    assert proc.returncode == 0
    assert "--duration" in proc.stdout and "--mallet" in proc.stdout
