"""A point mass striking a system of modes, stepped in compiled code.

The loop is the one of :func:`synth.physics.mallet._run_steps` (its contract is
documented there): a mass on a power-law spring with Hunt & Crossley damping
pressing on a set of damped modes, integrated by classical RK4 with a fixed step
until an event.  Nothing here knows what the mass or the modes are; the physics
layer hands this function in as its ``runner`` (it cannot import the engine).
"""

from __future__ import annotations

import numpy as np

from synth.engine import kernels


def run_contact(s: np.ndarray, s_new: np.ndarray, work: np.ndarray, forces: np.ndarray,
                status: np.ndarray, peak: np.ndarray, dt: float, max_steps: int,
                coeffs: np.ndarray, modal: np.ndarray) -> None:
    """Step until the next event, in place (see :func:`synth.physics.mallet._run_steps`).

    Parameters
    ----------
    s, s_new : ndarray of float64, shape (5 + 2 n,)
        State before and after the last step.
    work : ndarray of float64, shape (5, 5 + 2 n)
        Scratch.
    forces : ndarray of float64, shape (max_steps,)
        Force at the start of each step, N.
    status : ndarray of int64, shape (5,)
        Step, event, in contact, contacts, separated once.
    peak : ndarray of float64, shape (1,)
        Largest compression so far, m.
    dt : float
        Step, s.
    max_steps : int
        Steps allowed in all.
    coeffs : ndarray of float64, shape (4,)
        Spring constant, exponent, damping (s/m) and inverse mass (1/kg).
    modal : ndarray of float64, shape (8, n)
        Per mode: phi, phi/M, om^2, 2 g, 2 g M, |phi|, damped angular frequency, g.
    """
    if status.dtype != np.int64 or status.shape != (5,):
        raise ValueError("status must be an int64 array of 5 values")
    if modal.ndim != 2 or modal.shape[0] != 8 or s.shape != (5 + 2 * modal.shape[1],):
        raise ValueError("modal must have 8 rows and s 5 + 2 n values")
    if work.shape != (5, s.size) or s_new.shape != s.shape or forces.size < max_steps:
        raise ValueError("work, s_new or forces has the wrong shape")
    kernels._contact_run(s, s_new, work, forces, status, peak, float(dt), int(max_steps),
                         np.ascontiguousarray(coeffs, dtype=np.float64),
                         np.ascontiguousarray(modal, dtype=np.float64))
