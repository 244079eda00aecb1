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
    for f0, d0, f1, d1 in zip(grid[:-1], vals[:-1], grid[1:], vals[1:], strict=True):
        if d0 * d1 < 0:
            roots.append(brentq(end_det, f0, f1, xtol=1e-10, rtol=1e-13))
    return np.array(roots)


def coupled_free_free(h_of_x, length, width, blank, E, nu, rho, f_max, *, breakpoints=(),
                      n_scan=400, rtol=1e-11):
    """Bending frequencies of a free-free bar whose undercut lowers the centroid.

    Reference line at the blank's mid-plane (z_r = blank/2), section from
    blank - h to blank: A = b h, S = A e with e = (blank - h)/2, I_r = I_c + A e^2.
    Generalised forces N = EA u' - ES psi', M = -ES u' + EI_r psi', V = kGA (w' - psi);
    equations N' = -om^2 (rho A u - rho S psi), M' = -V - om^2 (rho I_r psi - rho S u),
    V' = -om^2 rho A w; free ends N = M = V = 0 (3 x 3 end determinant).  Roots of
    longitudinal modes come out too; the caller keeps the bending ones.
    """
    G = E / (2 * (1 + nu))
    k = 10 * (1 + nu) / (12 + 11 * nu)
    edges = [0.0, *sorted(breakpoints), length]

    def sections(x):
        h = h_of_x(x)
        A = width * h
        e = 0.5 * (blank - h)
        Ic = width * h**3 / 12
        return A, A * e, Ic + A * e * e

    def rhs(x, y, om2):
        A, S, Ir = sections(x)
        w, psi, u, N, M, V = y
        det = A * Ir - S * S
        du = (Ir * N + S * M) / (E * det)
        dpsi = (S * N + A * M) / (E * det)
        return [psi + V / (k * G * A), dpsi, du,
                -om2 * rho * (A * u - S * psi),
                -V - om2 * rho * (Ir * psi - S * u),
                -om2 * rho * A * w]

    def end_det(f):
        om2 = (2 * np.pi * f) ** 2
        cols = []
        for y0 in np.eye(6)[:3]:
            y = y0.copy()
            for a, b in zip(edges[:-1], edges[1:], strict=True):
                sol = solve_ivp(rhs, (a, b), y, args=(om2,), method="DOP853", rtol=rtol,
                                atol=1e-14)
                y = sol.y[:, -1]
            cols.append(y[3:])
        return float(np.linalg.det(np.array(cols)))

    grid = np.linspace(f_max / n_scan, f_max, n_scan)
    vals = [end_det(f) for f in grid]
    roots = []
    for f0, d0, f1, d1 in zip(grid[:-1], vals[:-1], grid[1:], vals[1:], strict=True):
        if d0 * d1 < 0:
            roots.append(brentq(end_det, f0, f1, xtol=1e-10, rtol=1e-13))
    return np.array(roots)
