"""`barwright grind` end to end: the grind map against finite differences of the bar solve.

The map is a first-order (Rayleigh-quotient) sensitivity: cents each partial moves when
0.1 mm is ground from a 10 mm band. The outside check is the definition of that
derivative: grind the band in the bar model (synth.physics.geometry.GroundUndercut),
solve it with 0.05 mm more and 0.05 mm less metal, and difference the partials.
"""

from __future__ import annotations

import numpy as np
import pytest
from e2e_common import DEMO, assert_png, run_json

from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import BarGeometry, GroundUndercut
from synth.settings.instrument import load_instrument

NOTE = "C5"
FD_ELEMENTS = 48
"""Mesh of the finite-difference solves: both signs on the same mesh, its edges on
the band, so the discretisation largely cancels in the difference. The map's
agreement with it improves with this mesh (worst partial-3 gap 4.7 % of the map's
largest entry with 12 elements, 1.0 % with 48, 0.31 % with 96, measured on C5): what
remains is the finite-difference solve's error, not the map's."""
TOLERANCE_OF_MAX = 0.02
CHECKED_STATIONS = slice(None, None, 3)


@pytest.fixture(scope="module")
def grind(tmp_path_factory):
    """One grind map of the C5 bar with the default stations, band and depth."""
    png = tmp_path_factory.mktemp("grind") / "c5.png"
    return run_json("grind", DEMO, "--note", NOTE, "--out", png), png


@pytest.fixture(scope="module")
def bar():
    """Return the C5 bar and its alloy at the preset's temperature."""
    inst = load_instrument(DEMO)
    return inst.bar(NOTE), inst.material.at_temperature(inst.temperature_c)


def test_stations_and_plot(grind, bar) -> None:
    """21 band centres, first and last half a band from the ends; thickness there; PNG."""
    data, png = grind
    geo, _ = bar
    assert data["bar"] == NOTE and data["plot"] == str(png)
    assert data["band_m"] == pytest.approx(0.010) and data["removal_m"] == pytest.approx(1e-4)
    xs = np.array([s["x_m"] for s in data["stations"]])
    np.testing.assert_allclose(xs, np.linspace(0.005, geo.length_m - 0.005, 21), atol=1e-12)
    np.testing.assert_allclose([s["thickness_m"] for s in data["stations"]],
                               geo.thickness_at(xs), atol=1e-12)
    assert [(m["kind"], m["order"]) for m in data["modes"]] == [
        ("vertical", 1), ("vertical", 2), ("vertical", 3)]
    assert_png(png)


def test_map_equals_central_differences_of_the_solve(grind, bar) -> None:
    """Every third station, all three partials, against central differences.

    Tolerance: 2 % of the largest entry of that partial's column (the measured 1.0 %
    with a margin of 2; see FD_ELEMENTS). The shop signs (common practice, no source)
    come with it: grinding the middle lowers the fundamental, grinding the ends raises
    every partial.
    """
    data, _ = grind
    geo, mat = bar
    band, depth = data["band_m"], data["removal_m"]
    cents = np.array([s["cents"] for s in data["stations"]])
    scale = np.max(np.abs(cents), axis=0)
    for station in data["stations"][CHECKED_STATIONS]:
        f = []
        for d in (0.5 * depth, -0.5 * depth):
            ground = BarGeometry(geo.length_m, geo.width_m, geo.thickness_m,
                                 GroundUndercut(geo.undercut, ((station["x_m"], band, d),)),
                                 geo.min_thickness_m)
            res = solve_bar(ground, mat, n_vertical=3, n_lateral=0, n_torsional=0,
                            n_elements=FD_ELEMENTS)
            f.append(np.array([m.frequency_hz for m in res.vertical]))
        fd = 1200 * np.log2(f[0] / f[1])
        assert np.all(np.abs(np.array(station["cents"]) - fd) <= TOLERANCE_OF_MAX * scale)
    mid = len(cents) // 2
    assert cents[mid, 0] < 0 and np.all(cents[0] > 0) and np.all(cents[-1] > 0)
