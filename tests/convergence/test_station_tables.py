"""A densely measured profile converges to the smooth one it samples, at the cost of
a smooth one.

The parabolic arch h(x) = h0 - depth (1 - u**2) is given as 11 to 100 000 caliper
stations, interpolated linearly.  Linear interpolation of a function with constant
second derivative h'' errs by e(x) = (h''/2)(x - x_i)(x_{i+1} - x) between stations
(the interpolation remainder; any numerical analysis text), at most h'' dx**2 / 8, so
the partials must approach those of the parametric arch as dx**2.

Bound on the size: every energy density of the section (E (u' - z psi')**2 and
rho (u_t - z psi_t)**2 integrated over the depth, k G A, rho A) changes with the
thickness by at most 4 dh / h (the end value of a squared linear function over an
interval is at most 4 / h times its integral; the Legendre-Christoffel bound for
degree 1), so by the minimax characterisation of eigenvalues (Courant-Fischer)
|d lambda / lambda| <= 4 max |e / h| and |df / f| <= 2 max |e / h| =
h'' dx**2 / (4 h_min) to first order.
"""

from __future__ import annotations

import numpy as np
import pytest

from synth.physics.bar_fe import make_mesh, solve_bar
from synth.physics.geometry import ArchUndercut, BarGeometry, StationUndercut
from synth.physics.materials import Material

AL = Material("al6061-check", 68.9e9, 2700.0, 0.33, 23.6e-6, 167.0, 896.0, -4e-4, 5e-5)
L, B, H0, DEPTH, SPAN = 0.3, 0.05, 0.02, 0.012, 0.18
ARCH = BarGeometry(L, B, H0, ArchUndercut(DEPTH, SPAN, 2.0), min_thickness_m=0.003)
H2 = 2 * DEPTH / (SPAN / 2) ** 2  # h'' of the parabola
H_MIN = H0 - DEPTH
ELEMENTS = 24  # degree 6: the arch's partials agree with 16 and 36 elements within 1e-9


def table(n: int) -> BarGeometry:
    x = np.linspace(0.5 * (L - SPAN), 0.5 * (L + SPAN), n)
    return BarGeometry(L, B, H0, StationUndercut(tuple(x), tuple(ARCH.thickness_at(x))),
                       min_thickness_m=0.003)


def partials(bar: BarGeometry, fe_rounding) -> tuple[np.ndarray, np.ndarray]:
    """Five vertical partials on a fixed mesh, and their rounding bound."""
    res = solve_bar(bar, AL, n_elements=ELEMENTS, degree=6, n_lateral=0, n_torsional=0)
    f = np.array([m.frequency_hz for m in res.vertical])
    return f, fe_rounding(bar, AL, res.modes[0].mesh, "vertical", f)


@pytest.fixture(scope="module")
def differences(fe_rounding) -> dict[int, tuple[float, np.ndarray, np.ndarray]]:
    """Station count -> (dx, relative difference to the arch, rounding allowance)."""
    fa, ra = partials(ARCH, fe_rounding)
    out = {}
    for n in (11, 41, 241, 2001, 100_000):
        ft, rt = partials(table(n), fe_rounding)
        dx = SPAN / (n - 1)
        out[n] = (dx, ft / fa - 1, ra + rt)
    return out


def test_station_tables_stay_within_the_interpolation_bound(differences) -> None:
    for n, (dx, diff, rounding) in differences.items():
        bound = H2 * dx**2 / (4 * H_MIN)
        # the first-order bound, with the O(dx**4) rest (below 1e-3 of it at 11
        # stations) and the two solves' rounding
        assert np.all(np.abs(diff) <= 1.001 * bound + rounding), (n, diff / bound)
        # linear interpolation lies above a convex profile: thicker, stiffer, higher
        assert np.all(diff > -rounding), (n, diff)


def test_station_tables_converge_at_second_order(differences) -> None:
    """The exponent of dx fitted between 41 and 241 and between 241 and 2001 stations
    is 2 (linear interpolation error, O(dx**2)).
    """
    for a, b in ((41, 241), (241, 2001)):
        (dx_a, d_a, r_a), (dx_b, d_b, r_b) = differences[a], differences[b]
        rate = np.log(d_a / d_b) / np.log(dx_a / dx_b)
        # allowed: rounding in both differences, carried into the log ratio, and the
        # O(dx**2) relative rest of the expansion (at most 0.9 % at 11 stations, so
        # below 0.05 % at 41, which moves the exponent by < 3e-4): 1e-3
        slack = (r_a / np.abs(d_a) + r_b / np.abs(d_b)) / np.log(dx_a / dx_b) + 1e-3
        assert np.all(np.abs(rate - 2.0) <= slack), (a, b, rate, slack)
    # at 100 000 stations (dx = 1.8 um) the table is the arch to within rounding
    dx, d, rounding = differences[100_000]
    assert np.all(np.abs(d) <= H2 * dx**2 / (4 * H_MIN) + rounding), (d, rounding)


def test_a_dense_table_meshes_like_the_smooth_arch() -> None:
    """Cost follows the bar's waves, not its stations: 100 000 stations get no more
    elements than 41 do (18 on this bar, the arch itself 10).
    """
    dense = solve_bar(table(100_000), AL, n_lateral=1, n_torsional=1)
    few = solve_bar(table(41), AL, n_lateral=1, n_torsional=1)
    arch = solve_bar(ARCH, AL, n_lateral=1, n_torsional=1)
    assert dense.n_elements <= few.n_elements, (dense.n_elements, few.n_elements)
    assert dense.n_elements <= 2 * arch.n_elements, (dense.n_elements, arch.n_elements)
    # the default refinement's tolerance (1e-4) plus the interpolation bound
    dx = SPAN / (100_000 - 1)
    for d, a in zip(dense.modes, arch.modes, strict=True):
        assert d.frequency_hz == pytest.approx(a.frequency_hz,
                                               rel=2e-4 + H2 * dx**2 / (4 * H_MIN))


def test_caliper_stations_each_keep_their_node() -> None:
    """A coarse table's kinks are strong: every station is an element edge, as the
    profile's corners must be for the elements' full convergence rate.
    """
    bar = table(11)
    edges = make_mesh(bar, 12, 6).edges_m
    x = np.asarray(bar.undercut.x_m)
    assert np.all(np.min(np.abs(x[:, None] - edges[None, :]), axis=1) < 1e-12)



def test_241_stations_of_a_thin_arched_bar_solve() -> None:
    """The 0.32 x 0.055 x 0.012 m bar with a 7 mm parabolic arch as 241 stations
    once failed the rigid-body check (its rounding floor grew with the unknowns of
    a mesh with one element per station).  It solves, like its arch: within the
    refinement's 1e-4 of each and the interpolation bound.
    """
    arch = BarGeometry(0.32, 0.055, 0.012, ArchUndercut(0.007, 0.2, 2.0))
    x = np.linspace(0.06, 0.26, 241)
    bar = BarGeometry(0.32, 0.055, 0.012, StationUndercut(tuple(x), tuple(arch.thickness_at(x))))
    got, want = solve_bar(bar, AL), solve_bar(arch, AL)
    bound = (2 * 0.007 / 0.1**2) * (x[1] - x[0]) ** 2 / (4 * 0.005)
    for g, w in zip(got.modes, want.modes, strict=True):
        assert g.frequency_hz == pytest.approx(w.frequency_hz, rel=2e-4 + bound)
