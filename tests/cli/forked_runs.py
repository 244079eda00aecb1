"""Command runs forked from one process that has imported the stack once.

The kill tests start some thirty command runs, and a fresh interpreter spends
about 2.6 s of CPU importing numpy, scipy, numba, matplotlib and the command
modules before a command does any work.  Here one server process (``python -c``
with :data:`SERVER`) imports all of it once; each run is a ``fork`` of it whose
child sets up what a freshly started ``barwright`` would have (signal
dispositions, working folder, stdout to /dev/null, stderr to a file), runs the
command line and leaves the way the interpreter would: the exit code of
``SystemExit``, death by SIGINT for an uncaught ``KeyboardInterrupt``, a
traceback and 1 for anything else, atexit handlers and non-daemon threads
first.  The child is a real process with its own id: signals go to it directly,
its temporaries carry its id, and the server reports its exit status as
``waitpid`` gives it (``-N`` for a signal, as ``subprocess`` does).

The server also holds every run before it commits its files
(``OutputPlan.commit`` pauses 300 s), so a signal always lands while temporaries
exist.
"""

from __future__ import annotations

import json
import os
import select
import signal
import subprocess
import sys
import time
from pathlib import Path

SERVER = """\
import atexit, importlib, json, os, signal, sys, threading, time, traceback
import synth.io as io
commit = io.OutputPlan.commit
def held(self):
    time.sleep(300)
    return commit(self)
io.OutputPlan.commit = held
from synth.cli import app
from synth.cli.commands import COMMANDS
for module in sorted({m for m, _ in COMMANDS.values()}):
    importlib.import_module(module)
import scipy.linalg
import synth.analysis, synth.engine.kernels, synth.reports.plots, synth.voicing
synth.reports.plots.pyplot()

def child(request):
    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    os.chdir(request["cwd"])
    null = os.open(os.devnull, os.O_RDWR)
    err = os.open(request["stderr"], os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
    os.dup2(null, 0)
    os.dup2(null, 1)
    os.dup2(err, 2)
    code = 0
    try:
        app(args=request["args"], prog_name="barwright")
    except SystemExit as exc:
        if exc.code is None:
            code = 0
        elif isinstance(exc.code, int):
            code = exc.code
        else:
            print(exc.code, file=sys.stderr)
            code = 1
    except KeyboardInterrupt:
        code = -signal.SIGINT
    except BaseException:
        traceback.print_exc()
        code = 1
    threading._shutdown()
    atexit._run_exitfuncs()
    sys.stdout.flush()
    sys.stderr.flush()
    if code < 0:
        signal.signal(-code, signal.SIG_DFL)
        os.kill(os.getpid(), -code)
    os._exit(code)

print(json.dumps({"ready": os.getpid()}), flush=True)
for line in sys.stdin:
    request = json.loads(line)
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:
        try:
            child(request)
        finally:
            os._exit(1)
    print(json.dumps({"pid": pid}), flush=True)
    _, status = os.waitpid(pid, 0)
    print(json.dumps({"exit": os.waitstatus_to_exitcode(status)}), flush=True)
"""

READY_TIMEOUT_S = 300.0
"""Longest wait for the server's imports (a loaded machine has taken 20 s)."""


def _default_signals() -> None:
    """Give the server the signal dispositions of a command typed at a terminal.

    A test run started in the background by a non-interactive shell (as CI may be)
    ignores SIGINT, and an ignored signal stays ignored across exec; Python then
    installs no Ctrl-C handler and the child would never see the interrupt.
    """
    signal.signal(signal.SIGINT, signal.SIG_DFL)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)


class ForkedRun:
    """One command run, a child of the server: its process id and, once ended, exit code."""

    def __init__(self, server: RunServer, pid: int, stderr: Path) -> None:
        self._server = server
        self.pid = pid
        self.returncode: int | None = None
        self._stderr = stderr

    def poll(self) -> int | None:
        """Return the exit code if the run has ended, else None (never blocks)."""
        if self.returncode is None:
            msg = self._server.message(timeout=0.0)
            if msg is not None:
                self.returncode = msg["exit"]
        return self.returncode

    def send_signal(self, sig: int) -> None:
        """Send ``sig`` to the run's own process."""
        os.kill(self.pid, sig)

    def wait(self, timeout: float) -> int:
        """Wait for the end of the run; return its exit code."""
        if self.returncode is None:
            msg = self._server.message(timeout=timeout)
            if msg is None:
                raise TimeoutError(f"run {self.pid} still going after {timeout} s")
            self.returncode = msg["exit"]
        return self.returncode

    def stderr(self) -> str:
        """Return what the run wrote to stderr."""
        return self._stderr.read_text(encoding="utf-8", errors="replace")


class RunServer:
    """The server process: start it once, then fork one command run at a time."""

    def __init__(self, source_root: Path) -> None:
        env = {**os.environ, "PYTHONPATH": str(source_root)}
        self._proc = subprocess.Popen([sys.executable, "-c", SERVER], env=env,
                                      stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                      preexec_fn=_default_signals)
        self._buffer = b""
        msg = self.message(timeout=READY_TIMEOUT_S)
        if msg is None or "ready" not in msg:
            self.close()
            raise RuntimeError(f"the run server did not start: {msg}")

    def message(self, timeout: float) -> dict | None:
        """Read the server's next message, waiting at most ``timeout`` seconds."""
        deadline = time.monotonic() + timeout
        while b"\n" not in self._buffer:
            left = max(0.0, deadline - time.monotonic())
            ready, _, _ = select.select([self._proc.stdout], [], [], left)
            if not ready:
                return None
            chunk = os.read(self._proc.stdout.fileno(), 65536)
            if not chunk:
                raise RuntimeError(f"the run server ended (exit {self._proc.wait()})")
            self._buffer += chunk
        line, self._buffer = self._buffer.split(b"\n", 1)
        return json.loads(line)

    def start(self, args, cwd: Path, stderr: Path) -> ForkedRun:
        """Fork a run of ``barwright args`` in ``cwd``; its stderr goes to ``stderr``."""
        request = {"args": [str(a) for a in args], "cwd": str(cwd), "stderr": str(stderr)}
        self._proc.stdin.write((json.dumps(request) + "\n").encode())
        self._proc.stdin.flush()
        msg = self.message(timeout=60.0)
        if msg is None or "pid" not in msg:
            raise RuntimeError(f"the run server did not fork: {msg}")
        return ForkedRun(self, msg["pid"], stderr)

    def close(self) -> None:
        """End the server (it finishes when its input closes)."""
        try:
            self._proc.stdin.close()
            self._proc.wait(timeout=30)
        except (OSError, subprocess.TimeoutExpired):
            self._proc.kill()
            self._proc.wait()
