"""Uniform bars against closed forms and handbook tables.

Sources
-------
- Euler-Bernoulli free-free roots of cos x cosh x = 1: computed here with scipy's
  brentq; tabulated in Blevins, *Formulas for Natural Frequency and Mode Shape*
  (1979), table 8-1 (4.73004, 7.85320, 10.9956; mode-1 node 0.2242 L).
- Timoshenko values: an independent shooting solution (tests/physics_bar/shooting.py)
  and the design notes' computed table (physics.md section 2, [C]).
- St Venant torsion of a rectangle: Timoshenko & Goodier, *Theory of Elasticity*
  (1970), section 109, table of k1 = J/(a b^3).
- Cowper (1966), J. Appl. Mech. 33, 335: k = 10(1+nu)/(12+11nu).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq
from shooting import timoshenko_free_free

from synth.physics.bar_fe import cowper_shear_coefficient, solve_bar, torsion_constant_rectangle
from synth.physics.geometry import BarGeometry

FINE = 16  # degree-6 elements: partials within 3e-10 of 36 elements on these bars
SHOOTING = 1e-9  # FE discretisation at FINE (< 1e-9) and shooting (rtol 1e-11, roots 1e-13)



def eb_roots(n: int) -> np.ndarray:
    """First n positive roots of cos x cosh x = 1 (free-free Euler-Bernoulli)."""
    f = lambda x: math.cos(x) * math.cosh(x) - 1.0  # noqa: E731
    return np.array([brentq(f, (j + 0.25) * math.pi, (j + 0.75) * math.pi, xtol=1e-14)
                     for j in range(1, n + 1)])


def test_eb_roots_match_blevins_table() -> None:
    # Blevins (1979) table 8-1, free-free: 4.73004, 7.85320, 10.9956 (6 digits).
    assert eb_roots(3) == pytest.approx([4.73004, 7.85320, 10.9956], abs=1e-4)


def test_slender_uniform_bar_matches_euler_bernoulli(al6061) -> None:
    """h/L = 0.0025: Timoshenko corrections below 2e-4 for modes 1-3 (shear and
    rotary inertia lower mode n by about (beta_n r)**2 (1 + E / kG) / 2, r**2 = h**2/12:
    2.4e-5, 6.6e-5, 1.3e-4), so the FE, refined to 1e-4, lands within 3e-4 of
    Euler-Bernoulli, and the ratios too.
    """
    L, b, h = 0.8, 0.04, 0.002
    res = solve_bar(BarGeometry(L, b, h), al6061, n_lateral=0, n_torsional=0)
    E, rho = al6061.youngs_modulus_pa, al6061.density_kg_m3
    c = math.sqrt(E * b * h**3 / 12 / (rho * b * h))
    expected = eb_roots(3) ** 2 / (2 * math.pi * L**2) * c
    got = [m.frequency_hz for m in res.vertical[:3]]
    assert got == pytest.approx(expected, rel=3e-4)
    assert np.all(np.array(got) < expected)  # shear and rotary inertia only lower them
    # Ratios f2/f1, f3/f1 of the Blevins table: 2.7565, 5.4039.
    assert got[1] / got[0] == pytest.approx(2.756539, rel=3e-4)
    assert got[2] / got[0] == pytest.approx(5.403918, rel=3e-4)


def test_mode1_node_of_uniform_bar_at_0_2242_length(al6061) -> None:
    # Blevins: 0.2242 L; the makers' rule of thumb hangs bars about 22.4 % from
    # each end (common practice, no source). Slender bar: Timoshenko moves it < 1e-5 L.
    L = 0.8
    res = solve_bar(BarGeometry(L, 0.04, 0.002), al6061, n_lateral=0, n_torsional=0)
    n1 = res.vertical[0].nodes_m
    assert len(n1) == 2
    assert n1[0] / L == pytest.approx(0.224158, abs=2e-5)
    assert (L - n1[1]) / L == pytest.approx(0.224158, abs=2e-5)
    # Modes 2 and 3 (computed roots of the EB mode shape, physics.md section 1).
    n2 = np.array(res.vertical[1].nodes_m) / L
    n3 = np.array(res.vertical[2].nodes_m) / L
    assert n2 == pytest.approx([0.132108, 0.5, 0.867892], abs=5e-5)
    assert n3 == pytest.approx([0.094443, 0.355803, 0.644197, 0.905557], abs=5e-5)


def test_thick_uniform_bar_matches_timoshenko_shooting(al6061, fe_rounding) -> None:
    """0.3 x 0.05 x 0.02 m (h/L = 0.067): shear and rotary inertia lower f1 by 1.6 %.

    Independent shooting reference; the design notes' table gives 1135.706,
    3043.597, 5744.167 Hz for the same bar (physics.md section 2, computed).
    Tolerance: discretisation and shooting (SHOOTING) plus the FE's rounding bound;
    against the printed table, half a unit of its last digit.
    """
    L, b, h = 0.3, 0.05, 0.02
    bar = BarGeometry(L, b, h)
    res = solve_bar(bar, al6061, n_elements=FINE, degree=6, n_lateral=0, n_torsional=0)
    got = np.array([m.frequency_hz for m in res.vertical[:3]])
    ref = timoshenko_free_free(lambda x: h, L, b, al6061.youngs_modulus_pa,
                               al6061.poisson_ratio, al6061.density_kg_m3, 6000.0, n_scan=120)
    allowed = SHOOTING + fe_rounding(bar, al6061, res.modes[0].mesh, "vertical", got)
    assert np.all(np.abs(got / ref[:3] - 1) <= allowed), (got / ref[:3] - 1, allowed)
    assert got == pytest.approx([1135.706, 3043.597, 5744.167], abs=5e-4)


def test_cowper_coefficient() -> None:
    # Cowper (1966): 10(1+nu)/(12+11nu); nu = 0.33 -> 0.850928, nu = 0 -> 5/6.
    assert cowper_shear_coefficient(0.33) == pytest.approx(0.850928, abs=1e-6)
    assert cowper_shear_coefficient(0.0) == pytest.approx(5 / 6, abs=1e-12)


@pytest.mark.parametrize(("ratio", "k1"), [(1.0, 0.141), (2.0, 0.229), (2.5, 0.249),
                                           (3.0, 0.263), (4.0, 0.281), (5.0, 0.291),
                                           (10.0, 0.312)])
def test_torsion_constant_matches_timoshenko_goodier_table(ratio: float, k1: float) -> None:
    # Timoshenko & Goodier (1970) section 109 table, 3 digits.
    assert torsion_constant_rectangle(ratio, 1.0) / ratio == pytest.approx(k1, abs=6e-4)


def test_uniform_torsion_and_lateral(al6061, fe_rounding) -> None:
    """Torsion: St Venant gives f_n = n c_t / (2 L), c_t = sqrt(G J / (rho I_p)).

    The model adds the section's warping (Benscoter's theory; warping constant of
    the rectangle from its St Venant warping function), which stiffens short waves
    a little: for a square section the warping constant is tiny and St Venant holds
    to 1e-4; for the 0.3 x 0.05 x 0.02 m bar the first mode lies 0.35 % above St
    Venant (the 3-D solid model, tests/reference, puts it 0.23 % above).

    Lateral bending is the same Timoshenko beam turned on its side (depth = width):
    compare with the shooting reference with h and b swapped.
    """
    G, rho = al6061.shear_modulus_pa, al6061.density_kg_m3

    def st_venant(L, b, h, n):
        J = float(torsion_constant_rectangle(b, h))
        ip = b * h * (b**2 + h**2) / 12
        return n * math.sqrt(G * J / (rho * ip)) / (2 * L)

    from synth.physics.bar_fe import warping_constant_rectangle

    def vlasov_bound(L, b, h, n):
        # Vlasov torsion (warping rate tied to the twist rate) is the stiffest case:
        # f/f_SV <= sqrt(1 + E Gamma k^2 / (G J)), k = n pi / L (Vlasov 1961)
        k = n * math.pi / L
        ratio = al6061.youngs_modulus_pa * float(warping_constant_rectangle(b, h)) * k**2 / (
            G * float(torsion_constant_rectangle(b, h)))
        return math.sqrt(1 + ratio)

    for L, b, h in ((0.3, 0.02, 0.02), (0.3, 0.05, 0.02)):
        res = solve_bar(BarGeometry(L, b, h), al6061, n_vertical=1, n_lateral=0, n_torsional=2)
        for n, m in enumerate(res.of_kind("torsional"), start=1):
            ratio = m.frequency_hz / st_venant(L, b, h, n)
            assert 1.0 <= ratio <= vlasov_bound(L, b, h, n) + 1e-9, (L, b, h, n, ratio)
    # a square section barely warps: St Venant within 2e-4 for the first two modes
    square = solve_bar(BarGeometry(0.3, 0.02, 0.02), al6061, n_vertical=1, n_lateral=0,
                       n_torsional=2)
    tors = [m.frequency_hz for m in square.of_kind("torsional")]
    assert tors == pytest.approx([st_venant(0.3, 0.02, 0.02, n) for n in (1, 2)], rel=2e-4)
    assert st_venant(0.3, 0.05, 0.02, 1) == pytest.approx(3316.46, rel=1e-5)  # physics.md s. 2
    L, b, h = 0.3, 0.05, 0.02
    bar = BarGeometry(L, b, h)
    res = solve_bar(bar, al6061, n_vertical=1, n_lateral=2, n_torsional=0, n_elements=FINE,
                    degree=6)
    lat = np.array([m.frequency_hz for m in res.of_kind("lateral")])
    ref = timoshenko_free_free(lambda x: b, L, h, al6061.youngs_modulus_pa,
                               al6061.poisson_ratio, al6061.density_kg_m3, 7000.0, n_scan=120)
    allowed = SHOOTING + fe_rounding(bar, al6061, res.modes[0].mesh, "lateral", lat)
    assert np.all(np.abs(lat / ref[:2] - 1) <= allowed), (lat / ref[:2] - 1, allowed)
    # physics.md section 2 (computed), two decimals: half a unit of the last one
    assert lat[0] == pytest.approx(2638.55, abs=5e-3)


def test_warping_constant_of_a_thin_rectangle() -> None:
    # Roark's formulas (table of warping constants): thin rectangle b^3 t^3 / 144.
    from synth.physics.bar_fe import warping_constant_rectangle

    assert warping_constant_rectangle(1.0, 0.01) == pytest.approx(1e-6 / 144, rel=5e-3)
    assert warping_constant_rectangle(0.01, 1.0) == warping_constant_rectangle(1.0, 0.01)


def test_shape_normalisation_and_modal_mass(al6061) -> None:
    """Slender uniform bar: with integral(rho A w^2) = mass, |w| = 2 at the ends
    (Blevins' normalisation, physics.md section 1), and modal mass = bar mass.

    Tolerances: the Timoshenko terms (shear, rotary inertia) change Euler-Bernoulli
    quantities by the order of (beta_n r)**2 (1 + E / kG) / 2 at h/L = 0.0025: 2.4e-5
    for mode 1, 1.3e-4 for mode 3 (see the slender-bar test), so 3e-4 for modes 1-3
    and 5e-5 for mode 1's shape (physics.md prints it to 7 digits).
    """
    L = 0.8
    bar = BarGeometry(L, 0.04, 0.002)
    res = solve_bar(bar, al6061, n_lateral=0, n_torsional=0)
    mass = bar.mass_kg(al6061.density_kg_m3)
    for m in res.vertical[:3]:
        assert abs(m.shape_at(0.0)) == pytest.approx(2.0, rel=3e-4)
        assert abs(m.shape_at(L)) == pytest.approx(2.0, rel=3e-4)
        assert m.modal_mass == pytest.approx(mass, rel=3e-4)
    # physics.md section 1 values of phi_1 at 0.5 L and 0.1 L (computed from the EB shape).
    assert res.vertical[0].shape_at(0.5 * L) == pytest.approx(-1.215644, rel=5e-5)
    assert res.vertical[0].shape_at(0.1 * L) == pytest.approx(1.074329, rel=5e-5)
