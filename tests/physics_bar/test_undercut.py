"""Undercut (arched) bars: independent shooting reference, symmetry, mass.

Sources
-------
- Timoshenko shooting on the varying section (tests/physics_bar/shooting.py):
  an independent method (ODE integration with scipy's DOP853), not the FE.
- The design notes' quartic-arch regression bar (physics.md section 3.4, computed
  there by shooting and by reduced-integration FE): 459.377, 1837.494,
  4593.686 Hz, mode-1 nodes at 0.20303 L, mass 0.6420 kg.
"""

from __future__ import annotations

import numpy as np
import pytest
from shooting import coupled_free_free

from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import ArchUndercut, BarGeometry, FlatArchUndercut, StationUndercut

FINE = 16  # degree-6 elements: partials within 3e-10 of 36 elements on these bars
SHOOTING = 1e-9  # FE discretisation at FINE (< 1e-9) and shooting (rtol 1e-11, roots 1e-13)


# physics.md section 3.4: h = h0 - (h0 - hc)(1 - u^4), u = |x - L/2| / (L/2 - x1)
L, B, H0, HC, X1 = 0.3, 0.05, 0.02, 0.0083553, 0.0832084
QUARTIC = BarGeometry(L, B, H0, ArchUndercut(H0 - HC, L - 2 * X1, 4.0), min_thickness_m=0.002)


def test_quartic_arch_matches_shooting_with_the_centroid_shift(al6061, fe_rounding) -> None:
    """The undercut lowers each section's centroid below the flat top, coupling
    bending to stretching; an independent shooting solution of those equations
    (shooting.coupled_free_free) must agree with the FE to 2e-5.

    The design notes' figures for this bar (physics.md section 3.4: 459.377,
    1837.494, 4593.686 Hz) take the centroid as the axis everywhere and so leave
    the coupling out: partial 3 then sits 2.5 % above the 3-D solid model
    (tests/reference), the coupled model within 0.1 %.
    """
    res = solve_bar(QUARTIC, al6061, n_lateral=0, n_torsional=0)
    fine = solve_bar(QUARTIC, al6061, n_elements=FINE, degree=6, n_lateral=0, n_torsional=0)
    got = np.array([m.frequency_hz for m in fine.vertical[:3]])
    ref = coupled_free_free(QUARTIC.thickness_at, L, B, H0, al6061.youngs_modulus_pa,
                            al6061.poisson_ratio, al6061.density_kg_m3, 4700.0,
                            breakpoints=QUARTIC.breakpoints(), n_scan=160)
    allowed = SHOOTING + fe_rounding(QUARTIC, al6061, fine.modes[0].mesh, "vertical", got)
    assert np.all(np.abs(got / ref[:3] - 1) <= allowed), (got / ref[:3] - 1, allowed)
    auto = np.array([m.frequency_hz for m in res.vertical[:3]])
    assert auto == pytest.approx(ref[:3], rel=1e-4)  # the refinement's tolerance
    uncoupled = np.array([459.377, 1837.494, 4593.686])
    assert np.all(got < uncoupled)  # the coupling only lowers the modes here
    # computed here, printed to 5 decimals (the uncoupled model of physics.md 3.4
    # puts it at 0.20303)
    assert res.vertical[0].nodes_m[0] / L == pytest.approx(0.20305, abs=5e-6)
    # physics.md section 3.4 prints 4 digits: half a unit of the last one
    assert res.mass_kg == pytest.approx(0.6420, abs=5e-5)


def test_uniform_bar_has_no_coupling(al6061) -> None:
    """A uniform bar keeps its centroid on the reference line: Timoshenko shooting
    without coupling is reproduced exactly (see test_uniform_reference).
    """
    bar = BarGeometry(0.3, 0.05, 0.02)
    res = solve_bar(bar, al6061, n_elements=FINE, degree=6, n_lateral=0, n_torsional=0)
    got = [m.frequency_hz for m in res.vertical[:3]]
    # physics.md section 2 prints three decimals: half a unit of the last one (the FE
    # error, below 1e-9 relative, is far smaller)
    assert got == pytest.approx([1135.706, 3043.597, 5744.167], abs=5e-4)


def test_symmetric_undercut_gives_symmetric_nodes(al6061) -> None:
    bars = [
        QUARTIC,
        BarGeometry(0.32, 0.055, 0.012, StationUndercut(
            (0.06, 0.10, 0.16, 0.22, 0.26), (0.012, 0.0082, 0.005, 0.0082, 0.012))),
        BarGeometry(0.40, 0.06, 0.013, FlatArchUndercut(0.007, 0.26, 0.08, "round")),
    ]
    for bar in bars:
        res = solve_bar(bar, al6061)
        for m in res.modes:
            n = np.array(m.nodes_m)
            assert n + n[::-1] == pytest.approx(np.full(len(n), bar.length_m), abs=1e-9), m


def test_arch_moves_mode1_nodes_toward_the_ends(al6061) -> None:
    """Deepening the arch moves the cord holes from 0.2242 L toward the ends
    (physics.md section 1: 0.2030 L for the section 3.4 bar).
    """
    nodes = []
    for depth in (0.0, 0.004, 0.008, 0.0116):
        uc = ArchUndercut(depth, 0.18, 4.0) if depth else None
        res = solve_bar(BarGeometry(0.3, 0.05, 0.02, uc), al6061, n_vertical=1,
                        n_lateral=0, n_torsional=0)
        nodes.append(res.vertical[0].nodes_m[0] / 0.3)
    assert np.all(np.diff(nodes) < 0), nodes


def test_too_slender_a_bar_is_refused_in_its_own_terms(al6061) -> None:
    """A 0.3 m bar 0.1 mm thick (3000 thicknesses long) drowns its partials in
    rounding (lambda_max / lambda_1 grows as the square of the slenderness); the
    message names the bar's proportions, not the eigensolver's.
    """
    from synth.errors import ModelError

    with pytest.raises(ModelError, match=r"too slender to model: length 0\.3 m over its "
                                         r"thinnest section 0\.0001 m is 3e\+03 times"):
        solve_bar(BarGeometry(0.3, 0.05, 0.0001, min_thickness_m=5e-5), al6061)
    # lateral bending: the width is the depth that matters
    with pytest.raises(ModelError, match=r"over its width 1e-05 m is 3e\+04 times"):
        solve_bar(BarGeometry(0.3, 1e-5, 0.02), al6061)


def test_a_block_is_not_a_beam(al6061) -> None:
    """A bar shorter than twice its larger side is refused, naming its length."""
    from synth.errors import ModelError

    with pytest.raises(ModelError, match=r"length_m = 0\.05 m is too short for a beam of "
                                         r"0\.05 x 0\.02 m section.*0\.1 m"):
        solve_bar(BarGeometry(0.05, 0.05, 0.02), al6061)


def test_undercut_mass_by_quadrature(al6061) -> None:
    # Parabolic arch: removed area = (2/3) depth * span exactly.
    bar = BarGeometry(0.3, 0.05, 0.02, ArchUndercut(0.01, 0.2, 2.0))
    expected = 2700.0 * 0.05 * (0.3 * 0.02 - 2 / 3 * 0.01 * 0.2)
    assert bar.mass_kg(2700.0) == pytest.approx(expected, rel=1e-12)
    assert solve_bar(bar, al6061).mass_kg == pytest.approx(expected, rel=1e-10)
