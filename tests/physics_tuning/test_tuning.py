"""Inverse design, grind map and temperature drift.

Sources
-------
- Rayleigh-quotient sensitivity of a uniform Euler-Bernoulli bar,
  S_n = 3 e_s - e_k (physics.md section 3, computed there): S_1(L/2) = +6.0888/L,
  S_1(0) = -4/L, sign change at 0.1472 L; a uniform thickness scale (1 + eps)
  gives df/f = eps exactly (f is proportional to h).
- Central finite differences of the full finite-element solve (the issue's 5 %).
- Bar drift d ln f/dT = (1/2) d ln E/dT + alpha/2 (physics.md section 4):
  -0.326 c/K for 6061 with d ln E/dT = -4e-4 /K (coefficient from memory).
- Shop sanity (common practice, no source): metal removed from the middle lowers
  the fundamental most; metal removed near the ends, or a shorter bar, raises
  every partial.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import BarGeometry, GroundUndercut, UndercutFamily
from synth.physics.tuning import (
    CENTS_PER_LN,
    TuneSpec,
    grind_map,
    sensitivity_density,
    temperature_shift_cents,
    tune_bar,
)
from synth.settings.material import load_material

AL = load_material("aluminium-6061-t6")
RATIOS = (1.0, 4.0, 2 ** (40 / 12))  # 1 : 4 : 10.08, common practice, no source


POWER_4 = UndercutFamily("power", 4.0)


def spec(note="A4", f=442.0, family=POWER_4, ratios=RATIOS, w=0.05,
         h=0.012):
    return TuneSpec(note, f, ratios, w, h, 0.0025, family, AL)


@pytest.mark.parametrize("family", [UndercutFamily("power", 4.0), UndercutFamily("flat"),
                                    UndercutFamily("free", stations=5)])
def test_tuned_bar_hits_targets_on_an_independent_finer_mesh(family) -> None:
    s = spec(family=family)
    r = tune_bar(s)
    assert r.reachable, r.message
    assert abs(r.residual_cents[0]) <= 1.0 and np.all(np.abs(r.residual_cents[1:]) <= 3.0)
    fine = solve_bar(r.geometry, AL, n_vertical=3, n_lateral=0, n_torsional=0,
                     n_elements=64, degree=6)
    miss = 1200 * np.log2(np.array([m.frequency_hz for m in fine.vertical]) / s.targets_hz)
    assert np.all(np.abs(miss) <= np.abs(r.residual_cents) + 0.5)


def test_infeasible_targets_report_instead_of_raising() -> None:
    # 1:2:3 is below the uniform bar's 1 : 2.76 : 5.40 ratios: no undercut can reach it.
    r = tune_bar(spec(family=UndercutFamily("parabolic"), ratios=(1.0, 2.0, 3.0)))
    assert not r.reachable
    assert "not reachable" in r.message
    assert abs(r.residual_cents[0]) < 1.0  # the length still places the fundamental
    assert np.max(np.abs(r.residual_cents[1:])) > 3.0
    # The parabolic arch cannot place 4 and 10 together either (physics.md section 3.4).
    r2 = tune_bar(spec(family=UndercutFamily("parabolic"), ratios=(1.0, 4.0, 10.0)))
    assert not r2.reachable and r2.message.startswith("not reachable")


def test_sensitivity_density_of_uniform_bar_matches_rayleigh_values() -> None:
    L, h = 0.8, 0.002  # slender: Timoshenko terms below 1e-4
    bar = BarGeometry(L, 0.04, h)
    res = solve_bar(bar, AL, n_vertical=2, n_lateral=0, n_torsional=0)
    m1 = res.vertical[0]

    def S(x):  # dimensionless S_n * L from the cents density
        return sensitivity_density(m1, bar, AL, x) * 2 * h / CENTS_PER_LN * L

    assert S(0.5 * L) == pytest.approx(6.0888, rel=2e-3)
    assert S(0.0) == pytest.approx(-4.0, rel=2e-3)
    xs = np.linspace(0.10, 0.20, 2001) * L
    crossing = xs[np.argmin(np.abs(S(xs)))] / L
    assert crossing == pytest.approx(0.1472, abs=5e-4)
    # Integral of S over the bar is 2: a uniform (1 + eps) thickness gives df/f = eps.
    x, w = np.polynomial.legendre.leggauss(64)
    total = np.sum(w * S(0.5 * L * (x + 1))) * 0.5
    assert total == pytest.approx(2.0, rel=1e-3)


def test_grind_map_matches_central_finite_differences() -> None:
    r = tune_bar(spec())
    bar = r.geometry
    res = solve_bar(bar, AL, n_vertical=3, n_lateral=0, n_torsional=0)
    gm = grind_map(res, n_stations=7, band_m=0.01, removal_m=1e-4)
    step = 2e-5  # 0.02 mm either way: small enough for first order, large for rounding
    # Both sides of each difference are solved on one fixed mesh (48 elements of
    # degree 6, band edges as nodes), so their discretisation errors cancel.  With the
    # adaptive refinement each side may stop on a different mesh; the 1e-5 relative
    # that separates two converged meshes is then of the size of the difference itself
    # (0.2 cent per 0.02 mm at the ends) and the check read noise on another LAPACK.
    for i, xc in enumerate(gm.x_m):
        f = []
        for depth in (step, -step):
            g = BarGeometry(bar.length_m, bar.width_m, bar.thickness_m,
                            GroundUndercut(bar.undercut, ((xc, 0.01, depth),)), 0.0005)
            rr = solve_bar(g, AL, n_vertical=3, n_lateral=0, n_torsional=0,
                           n_elements=48, degree=6)
            f.append(np.array([m.frequency_hz for m in rr.vertical]))
        fd = 1200 * np.log2(f[0] / f[1]) / (2 * step) * 1e-4  # cents per 0.1 mm removed
        for j in range(3):
            scale = np.max(np.abs(gm.cents[:, j]))
            assert gm.cents[i, j] == pytest.approx(fd[j], rel=0.05, abs=0.01 * scale), (i, j)


def test_grind_map_shop_sanity() -> None:
    r = tune_bar(spec())
    res = solve_bar(r.geometry, AL, n_vertical=3, n_lateral=0, n_torsional=0)
    gm = grind_map(res, n_stations=31)
    mid = len(gm.x_m) // 2
    # centre: the fundamental falls, and falls more than at any other station
    assert gm.cents[mid, 0] < 0
    assert np.argmin(gm.cents[:, 0]) in (mid - 1, mid, mid + 1)
    # ends: every partial rises
    assert np.all(gm.cents[0] > 0) and np.all(gm.cents[-1] > 0)
    # shortening the bar raises every partial
    g = r.geometry
    shorter = BarGeometry(g.length_m - 0.001, g.width_m, g.thickness_m, g.undercut,
                          g.min_thickness_m)
    f0 = [m.frequency_hz for m in res.vertical]
    f1 = [m.frequency_hz for m in solve_bar(shorter, AL, n_lateral=0, n_torsional=0).vertical[:3]]
    assert np.all(np.array(f1) > np.array(f0))


def test_bar_temperature_drift() -> None:
    # physics.md section 4: d ln f/dT = (1/2)(d ln E/dT) + alpha/2 = -0.326 c/K for
    # d ln E/dT = -4e-4 /K, alpha = 23.6e-6 /K. The full solve agrees to first order.
    bar = BarGeometry(0.3, 0.05, 0.012)
    shift = temperature_shift_cents(bar, AL, 20.0, 30.0)
    expected = 1200 / math.log(2) * (0.5 * -4e-4 + 0.5 * 23.6e-6) * 10
    assert shift == pytest.approx(np.full(3, expected), rel=5e-3)
    assert expected / 10 == pytest.approx(-0.326, abs=1e-3)
