"""Killed runs: no target appears, and no temporary stays behind for long.

Every writing command is started as its own process, stopped with SIGTERM or
SIGKILL once its first temporary file exists, and checked: no target file; after
SIGTERM no temporary either (the run removes them itself, exit 143 = 128 +
SIGTERM, the shell convention); after SIGKILL, which no process can catch, the
temporaries carry the dead process's id and the next writing command in that
folder removes them and says so.

Each run is a process forked from one server that imported the stack once for
the module (``forked_runs.py``: its child sets the signal dispositions, folder and
streams a new ``barwright`` process has, and exits as the interpreter would), so
the thirty runs do not each spend seconds importing numpy, scipy and numba.  So
that the kill lands while temporaries exist even for commands that write in a few
milliseconds, the server holds every run before it commits its files
(``OutputPlan.commit`` is wrapped with a pause); everything else runs unchanged.
"""

from __future__ import annotations

import signal
import time
from pathlib import Path

import pytest
from forked_runs import ForkedRun, RunServer
from outputs_commands import COMMANDS, PRESET, run, temporaries, write_inputs

import synth

SOURCE_ROOT = Path(synth.__file__).resolve().parents[1]

WAIT_FOR_TEMPORARY_S = 180.0
"""Longest wait for the first temporary (the demo tunes 37 bars first)."""


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    """Write an event list and a recorded strike once for the module."""
    return write_inputs(tmp_path_factory.mktemp("inputs"))


@pytest.fixture(scope="module")
def server():
    """One process with the stack imported; every killed run is forked from it."""
    srv = RunServer(SOURCE_ROOT)
    yield srv
    srv.close()


def _written_temporaries(folder: Path) -> list[str]:
    # the folder probe (.write-test...) lives for microseconds; wait for a real output
    return [n for n in temporaries(folder) if not n.startswith(".write-test.")]


def _start_and_kill(server, args, out: Path, cwd: Path, sig: int) -> tuple[ForkedRun, str]:
    proc = server.start(args, cwd, cwd / "run.stderr")
    try:
        deadline = time.monotonic() + WAIT_FOR_TEMPORARY_S
        while not _written_temporaries(out):
            if proc.poll() is not None:
                pytest.fail(f"exited {proc.returncode} before writing: {proc.stderr()}")
            if time.monotonic() > deadline:
                pytest.fail("no temporary file appeared")
            time.sleep(0.02)
        proc.send_signal(sig)
        proc.wait(timeout=120)
    finally:
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=120)
    return proc, proc.stderr()


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL], ids=["SIGTERM", "SIGKILL"])
@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_killed_run_leaves_no_target_and_no_temporary(name, sig, tmp_path, inputs, server):
    """Stop the command mid-run; then no target exists and no temporary survives a next run."""
    args, targets = COMMANDS[name]
    out = tmp_path / "out"
    proc, err = _start_and_kill(server, args(out, inputs), out, tmp_path, sig)
    present = [t for t in targets if (out / t).exists()]
    assert present == [], (present, err)
    if sig == signal.SIGTERM:
        assert proc.returncode == 143, err
        assert "barwright: terminated; unfinished files removed" in err
        assert temporaries(tmp_path) == []
        return
    assert proc.returncode == -signal.SIGKILL
    left = _written_temporaries(out)
    assert left and all(f".{proc.pid}@" in n for n in left), left
    again = run("tune", PRESET, "--note", "A4", "--out", out / "again.toml")
    assert again.exit_code == 0, again.output
    assert f"removed {len(left)} unfinished file(s)" in again.stderr
    assert temporaries(out) == []


def test_rerun_of_a_killed_render_completes(tmp_path, inputs, server):
    """A strike killed mid-write, run again with the same settings: the WAV and sidecar appear."""
    args, targets = COMMANDS["strike"]
    out = tmp_path / "out"
    _start_and_kill(server, args(out, inputs), out, tmp_path, signal.SIGKILL)
    again = run("strike", PRESET, "A4", "--duration", "0.5", "--out", out / "s.wav")
    assert again.exit_code == 0, again.output
    assert "removed 1 unfinished file(s)" in again.stderr
    assert sorted(p.name for p in out.iterdir()) == sorted(targets)


@pytest.mark.parametrize("name", ["strike", "cutlist"])
def test_ctrl_c_leaves_no_target_and_no_temporary(name, tmp_path, inputs, server):
    """SIGINT (Ctrl-C): the run removes its temporaries and exits 130 (128 + SIGINT)."""
    args, targets = COMMANDS[name]
    out = tmp_path / "out"
    proc, err = _start_and_kill(server, args(out, inputs), out, tmp_path, signal.SIGINT)
    assert proc.returncode == 130, err
    assert "barwright: interrupted; unfinished files removed" in err
    assert [t for t in targets if (out / t).exists()] == []
    assert temporaries(tmp_path) == []
