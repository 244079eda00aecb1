"""A signal whose exception library code swallowed still stops the run before its files appear.

Runs in a fresh interpreter that first gives SIGINT Python's default handler, as
a command started from a terminal has it (a test runner's worker may ignore
SIGINT, and a child inherits that), so that the command installs its own handlers.
Exit codes 130 and 143 are 128 + SIGINT and 128 + SIGTERM (common practice, no
source).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

_RUN = r"""
import json, os, signal, sys, time
signal.signal(signal.SIGINT, signal.default_int_handler)
from pathlib import Path
import typer
from synth import io
from synth.cli.common import handle_errors, plan_outputs

target = Path(sys.argv[1])
sig = getattr(signal, sys.argv[2])

@handle_errors
def command():
    plan_outputs([target], force=False)
    io.write_sidecar(target, {"written": True})
    try:
        os.kill(os.getpid(), sig)
        time.sleep(5)  # the handler raises here
    except BaseException:
        pass  # as library code that catches everything and carries on
    return "finished"

try:
    out = command()
except typer.Exit as exc:
    out = exc.exit_code
print(json.dumps({"out": out, "files": sorted(p.name for p in target.parent.iterdir())}))
"""


@pytest.mark.parametrize(("sig", "code"), [("SIGINT", 130), ("SIGTERM", 143)])
def test_swallowed_signal_stops_before_commit(tmp_path, sig, code) -> None:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep)}
    done = subprocess.run([sys.executable, "-c", _RUN, str(tmp_path / "x.json"), sig],
                          capture_output=True, text=True, env=env, timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    got = json.loads(done.stdout.strip().splitlines()[-1])
    assert got["out"] == code
    assert got["files"] == []  # neither the file nor its temporary
