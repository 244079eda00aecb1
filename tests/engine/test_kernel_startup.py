"""A new process reaches its first kernel call without importing scipy.linalg.

numba's array functions ask at import whether scipy's BLAS is there (for the
inner products of np.correlate and np.convolve only); :mod:`synth.engine.kernels`
answers that probe as absent when nothing has loaded scipy.linalg yet, which
spares a new process that import.  These checks run in fresh interpreters: the
probe is skipped, numba still computes np.convolve right (against numpy's own),
scipy.linalg still imports and solves afterwards (a 2x2 symmetric eigenproblem
against its closed form), and a process that loaded scipy.linalg first keeps it.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

_FRESH = r"""
import json, sys
import numpy as np
from synth.engine import kernels
k = np.ones(2)
n = np.zeros(2, dtype=np.int64)
out = np.zeros((8, 2))
kernels._banks_add(out, 0, 0, 8, k, k, 0.01 * k, 0 * k, k, 0 * k, n, n, 0 * k, 0 * k, 1024)
linalg_before = "scipy.linalg" in sys.modules
from numba import njit
import numba.np.arraymath as am

@njit
def conv(a, b):
    return np.convolve(a, b)

# dyadic values: every product and sum is exact, so any summation order agrees
a = np.array([1.0, -2.0, 0.5, 3.0])
b = np.array([0.25, 4.0, -1.0])
conv_ok = bool(np.array_equal(conv(a, b), np.convolve(a, b)))
import scipy.linalg
w = scipy.linalg.eigh(np.array([[2.0, 1.0], [1.0, 2.0]]), eigvals_only=True)
print(json.dumps({"linalg_before": linalg_before, "have_blas": bool(am._HAVE_BLAS),
                  "conv_ok": conv_ok, "eig": [float(x) for x in w],
                  "written": bool(np.any(out != 0.0))}))
"""

_LINALG_FIRST = r"""
import json, sys
import scipy.linalg
first = sys.modules["scipy.linalg"]
from synth.engine import kernels
import numba.np.arraymath as am
print(json.dumps({"same": sys.modules["scipy.linalg"] is first,
                  "have_blas": bool(am._HAVE_BLAS)}))
"""


def _run(code: str) -> dict:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        [str(ROOT), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep)}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, cwd=ROOT, timeout=600, check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_first_kernel_call_needs_no_scipy_linalg() -> None:
    """The probe is answered absent; numba and scipy.linalg work as before after it."""
    got = _run(_FRESH)
    assert got["written"]                # the kernel ran
    assert got["linalg_before"] is False  # no scipy.linalg on the way to the first sample
    assert got["have_blas"] is False      # numba took its plain inner-product loop
    assert got["conv_ok"]                 # ... which gives numpy's np.convolve exactly
    # eigenvalues of [[2, 1], [1, 2]]: 1 and 3 (closed form), to rounding
    assert abs(got["eig"][0] - 1.0) <= 8 * 2.0 ** -52 and abs(got["eig"][1] - 3.0) <= 8 * 2.0 ** -50


def test_a_process_holding_scipy_linalg_keeps_it() -> None:
    """Loaded first, scipy.linalg stays the module it was and numba sees its BLAS."""
    got = _run(_LINALG_FIRST)
    assert got["same"] and got["have_blas"]
