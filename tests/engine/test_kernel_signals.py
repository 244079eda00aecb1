"""A signal that arrives while numba loads a kernel acts after the load, not inside it.

numba reads cached kernels through LLVM callbacks into Python (ctypes), where an
exception a signal handler raises is printed and dropped.  In a fresh
interpreter, a SIGINT is sent at the start of a kernel's load (numba's
``Dispatcher.compile``, wrapped before :mod:`synth.engine.kernels` is imported):
the KeyboardInterrupt must surface once the load has finished, with the kernel
loaded and usable, and never inside the load.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

_RUN = r"""
import json, os, signal
signal.signal(signal.SIGINT, signal.default_int_handler)  # a runner's worker may ignore it
import numpy as np
from numba.core.dispatcher import Dispatcher

inner = Dispatcher.compile
state = {"loads": 0, "interrupted_inside": False}

def compile_with_a_signal(self, sig):
    state["loads"] += 1
    os.kill(os.getpid(), signal.SIGINT)   # Ctrl-C while the kernel loads
    try:
        return inner(self, sig)
    except KeyboardInterrupt:
        state["interrupted_inside"] = True
        raise

Dispatcher.compile = compile_with_a_signal
from synth.engine import kernels

flat = np.arange(6, dtype=np.int32) << 8
out = np.zeros(18, dtype=np.uint8)
after = False
try:
    kernels._pack_pcm(flat, out, 3)
except KeyboardInterrupt:
    after = True
loaded = len(kernels._pack_pcm.overloads)
kernels._pack_pcm(flat, out, 3)   # usable afterwards
print(json.dumps({"after": after, "loaded": loaded, "packed": out[:6].tolist(), **state}))
"""


def test_ctrl_c_during_a_kernel_load_acts_after_it() -> None:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep)}
    done = subprocess.run([sys.executable, "-c", _RUN], capture_output=True, text=True,
                          env=env, cwd=ROOT, timeout=600, check=False)
    assert done.returncode == 0, done.stderr
    got = json.loads(done.stdout.strip().splitlines()[-1])
    assert got["loads"] >= 1
    assert not got["interrupted_inside"]
    assert got["after"] and got["loaded"] == 1
    assert got["packed"] == [0, 0, 0, 1, 0, 0]  # samples 0 and 1 (<< 8): their top 24 bits
    assert "Exception ignored" not in done.stderr
