"""Independent reference for the 1-D bar: Timoshenko equations solved by shooting.

The free-free Timoshenko beam with section properties varying along x is written
as a first-order system in (w, psi, M, V):

    w' = psi + V / (kGA),  psi' = M / (EI),  M' = -V - rho I om^2 psi,  V' = -rho A om^2 w

(the Euler-Bernoulli limit kGA -> inf, rho I -> 0 gives EI w'''' = rho A om^2 w).
From x = 0 with M = V = 0 two independent starts are integrated to x = L with
scipy's DOP853; the natural frequencies are the roots of the 2 x 2 determinant of
(M, V) at x = L.  This is a different method from the project's finite elements
(no mesh, no shape functions), used only as a check.
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq


def timoshenko_free_free(h_of_x, length, width, E, nu, rho, f_max, *, breakpoints=(),
                         shear_coefficient=None, n_scan=400, rtol=1e-11):
    """Return the bending frequencies (Hz) below ``f_max`` of a free-free bar."""
    G = E / (2 * (1 + nu))
    k = 10 * (1 + nu) / (12 + 11 * nu) if shear_coefficient is None else shear_coefficient
    edges = [0.0, *sorted(breakpoints), length]

    def rhs(x, y, om2):
        h = h_of_x(x)
        A = width * h
        Iy = width * h**3 / 12
        w, psi, M, V = y
        return [psi + V / (k * G * A), M / (E * Iy), -V - rho * Iy * om2 * psi,
                -rho * A * om2 * w]

    def end_det(f):
        om2 = (2 * np.pi * f) ** 2
        cols = []
        for y0 in ([1.0, 0.0, 0.0, 0.0], [0.0, 1.0, 0.0, 0.0]):
            y = np.array(y0)
            for a, b in zip(edges[:-1], edges[1:], strict=True):
                sol = solve_ivp(rhs, (a, b), y, args=(om2,), method="DOP853", rtol=rtol,
                                atol=1e-14)
                y = sol.y[:, -1]
            cols.append(y[2:])
        return cols[0][0] * cols[1][1] - cols[0][1] * cols[1][0]

    grid = np.linspace(f_max / n_scan, f_max, n_scan)
    vals = [end_det(f) for f in grid]
    roots = []
    for (f0, d0), (f1, d1) in zip(zip(grid[:-1], vals[:-1]), zip(grid[1:], vals[1:]), strict=True):
        if d0 * d1 < 0:
            roots.append(brentq(end_det, f0, f1, xtol=1e-10, rtol=1e-13))
    return np.array(roots)
