"""The 1-D bar model against the 3-D linear-elastic solid model.

The solid model is solid3d.py, built with scikit-fem: 27-node quadratic hexahedra,
converged to better than 0.1 % (see test_solid3d_self.py).

The design outline asks for vertical modes 1-3 within 1 %, first torsional and first
lateral within 3 %, and cord holes within 0.5 % of the length. The gaps measured here
are far smaller, so each check holds the gap to about twice its measured size (plus
the 3-D mesh's own coarse-to-fine change where that is comparable), which is what
lets a real change in the 1-D model show:

=========================  ==========================  ===============
quantity                   measured gap (1-D vs 3-D)   tolerance
=========================  ==========================  ===============
vertical 1-3, uniform      -0.10, -0.33, -0.59 %       0.8 %
vertical 1-3, arch         -0.26, +0.13, +0.07 %       0.5 %
lateral 1, uniform         -0.08 %                     0.2 %
lateral 1, arch            +2.26 %                     3 % (see below)
torsional 1                +0.13 % uniform, -0.02 %    0.3 %
                           arch
cord holes, arch           1.6e-5 L                    1e-4 L
=========================  ==========================  ===============

The arch's lateral mode keeps the outline's 3 %: the 1-D lateral model bends the
whole section about its own centroid and the measured 2.3 % is a model limit, not
rounding. The 3-D mesh changes these figures by at most 0.06 % from the coarse to
the fine mesh (torsion of the arch), inside every margin above.
"""

from __future__ import annotations

import pytest
from solid3d import ALUMINIUM_6061, ArchProfile
from solid3d import BarGeometry as SolidBar
from solid3d import solve_bar as solve_solid

from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import ArchUndercut, BarGeometry
from synth.physics.materials import Material

AL = Material("al6061-check", ALUMINIUM_6061.youngs_modulus_pa, ALUMINIUM_6061.density_kg_m3,
              ALUMINIUM_6061.poisson_ratio, 23.6e-6, 167.0, 896.0, -4e-4, 5e-5)

# physics.md section 3.4 quartic arch: L 0.3, b 0.05, h0 0.02, hc 0.0083553, x1 0.0832084
L, B, H0, HC, X1 = 0.3, 0.05, 0.02, 0.0083553, 0.0832084
CASES = {
    "thick uniform 0.3 x 0.05 x 0.02": (BarGeometry(L, B, H0), SolidBar.uniform(L, B, H0)),
    "quartic arch": (BarGeometry(L, B, H0, ArchUndercut(H0 - HC, L - 2 * X1, 4.0)),
                     SolidBar(L, B, H0, ArchProfile(L, H0, HC, X1, exponent=4.0))),
}


VERTICAL_TOL = {"thick uniform 0.3 x 0.05 x 0.02": 0.008, "quartic arch": 0.005}
LATERAL_TOL = {"thick uniform 0.3 x 0.05 x 0.02": 0.002, "quartic arch": 0.03}
TORSIONAL_TOL = 0.003
CORD_HOLE_TOL_L = 1e-4


@pytest.fixture(scope="module", params=list(CASES))
def pair(request):
    """Both models of one bar: (name, 1-D result, 3-D result)."""
    one_d, solid = CASES[request.param]
    return request.param, solve_bar(one_d, AL), solve_solid(solid)


def test_vertical_modes_against_the_solid(pair) -> None:
    """Partials 1-3 of both bars (tolerances in the module docstring)."""
    name, one, solid = pair
    for order in (1, 2, 3):
        f1 = one.mode("vertical", order).frequency_hz
        f3 = solid.frequency_hz("vertical", order)
        assert f1 == pytest.approx(f3, rel=VERTICAL_TOL[name]), (name, order, f1, f3)


def test_first_lateral_against_the_solid(pair) -> None:
    """First sideways bending mode of both bars."""
    name, one, solid = pair
    f1 = one.mode("lateral", 1).frequency_hz
    assert f1 == pytest.approx(solid.frequency_hz("lateral", 1), rel=LATERAL_TOL[name]), name


def test_first_torsional_against_the_solid_uniform() -> None:
    """First torsional mode of the thick uniform bar."""
    one_d, solid = CASES["thick uniform 0.3 x 0.05 x 0.02"]
    f1 = solve_bar(one_d, AL).mode("torsional", 1).frequency_hz
    assert f1 == pytest.approx(solve_solid(solid).frequency_hz("torsional", 1),
                               rel=TORSIONAL_TOL)


def test_first_torsional_against_the_solid_undercut() -> None:
    """Needs the warping term: St Venant torsion alone is 5 % low on this arch."""
    one_d, solid = CASES["quartic arch"]
    f1 = solve_bar(one_d, AL).mode("torsional", 1).frequency_hz
    assert f1 == pytest.approx(solve_solid(solid).frequency_hz("torsional", 1),
                               rel=TORSIONAL_TOL)


def test_cord_holes_of_the_undercut_bar_against_the_solid() -> None:
    """Mode-1 nodes within 1e-4 L (0.03 mm on this bar; measured 1.6e-5 L)."""
    one_d, solid = CASES["quartic arch"]
    n1 = solve_bar(one_d, AL).vertical[0].nodes_m
    n3 = solve_solid(solid).mode("vertical", 1).node_positions_m
    assert len(n1) == len(n3) == 2
    for a, b in zip(n1, n3, strict=True):
        assert abs(a - b) <= CORD_HOLE_TOL_L * L
    # and they sit nearer the ends than the uniform bar's 0.2242 L (Blevins)
    assert n1[0] / L < 0.2242 and n3[0] / L < 0.2242
