"""Per-mode loss budget.

Sources
-------
- Zener (1937, 1938) thermoelastic loss, eta = Delta w tau/(1 + (w tau)^2); the
  design notes' worked values for 6061 (physics.md section 5, computed there):
  6.30e-6 at 200 Hz for h = 0.02 m, 1.75e-5 for h = 0.012 m.
- Q = pi f tau, T60 = tau ln 1000 (exact): Q = 1000 at 440 Hz gives T60 4.99729 s.
- Cord loss zeta_n = c_s sum phi_n(x_c)^2 / (2 w_n M_n) (physics.md section 6); a
  cord misplaced by dx from the mode-1 node loses as dx^2.
- Radiation: compact-slice dipole line (Lamb 1932; added mass of a strip, Blevins
  1979), checked against the design notes' estimate for the uniform
  0.3 x 0.05 x 0.02 m bar, mode 1: 2.4e-5 (physics.md section 6, computed, order of
  magnitude); and against the unit-efficiency ceiling 2 rho0 c/(rho h w) of a
  plate well above coincidence (Cremer, Heckl & Petersson 2005, ch. 7).
- Upper partials of a bar on cords die first (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import BarGeometry
from synth.physics.losses import (
    Calibration,
    ModeLoss,
    Supports,
    cord_eta,
    loss_budget,
    radiation_eta,
    thermoelastic_eta,
    zener_eta,
)
from synth.physics.materials import Material
from synth.physics.tube import air_density, speed_of_sound

AL = Material("al6061-check", 68.9e9, 2700.0, 0.33, 23.6e-6, 167.0, 896.0, -4e-4, 5e-5)


def test_zener_values_of_the_design_note() -> None:
    assert zener_eta(200.0, 0.020, AL) == pytest.approx(6.30e-6, rel=0.02)
    assert zener_eta(200.0, 0.012, AL) == pytest.approx(1.75e-5, rel=0.02)


def test_mode_weighted_zener_equals_plate_value_on_a_slender_uniform_bar() -> None:
    bar = BarGeometry(0.8, 0.04, 0.004)
    m = solve_bar(bar, AL, n_vertical=2, n_lateral=0, n_torsional=0).vertical[0]
    # shear holds < 0.1 % of the strain energy at h/L = 0.005
    assert thermoelastic_eta(m, bar, AL) == pytest.approx(zener_eta(m.frequency_hz, 0.004, AL),
                                                          rel=2e-3)


def test_q_t60_relations() -> None:
    ml = ModeLoss("vertical", 1, 440.0, {"internal": 1e-3})
    assert ml.q == pytest.approx(1000.0)
    assert ml.t60_s == pytest.approx(4.99729, rel=1e-5)
    assert ml.t60_s == pytest.approx(math.log(1000) * ml.q / (math.pi * 440.0), rel=1e-12)


def test_cords_at_the_nodes_spare_mode_1_and_misplacement_grows_as_dx_squared() -> None:
    bar = BarGeometry(0.3, 0.05, 0.012)
    res = solve_bar(bar, AL, n_lateral=0, n_torsional=0)
    m1, m2 = res.vertical[0], res.vertical[1]
    nodes = m1.nodes_m
    assert cord_eta(m1, bar, nodes, 0.3) < 1e-8 * cord_eta(m2, bar, nodes, 0.3)
    e1 = cord_eta(m1, bar, (nodes[0] + 0.001, nodes[1] - 0.001), 0.3)
    e2 = cord_eta(m1, bar, (nodes[0] + 0.002, nodes[1] - 0.002), 0.3)
    assert e2 / e1 == pytest.approx(4.0, rel=0.02)
    # closed form check: eta = c_s sum phi^2 / (w M)
    phi = m2.shape_at(np.array(nodes))
    expected = 0.3 * np.sum(phi**2) / (m2.angular_frequency * m2.modal_mass)
    assert cord_eta(m2, bar, nodes, 0.3) == pytest.approx(expected, rel=1e-12)


def test_radiation_compact_regime_and_ceiling() -> None:
    bar = BarGeometry(0.3, 0.05, 0.02)
    res = solve_bar(bar, AL, n_vertical=5, n_lateral=0, n_torsional=0)
    eta1 = radiation_eta(res.vertical[0], bar, AL)
    assert eta1 == pytest.approx(2.4e-5, rel=0.1)
    top = res.vertical[4]
    ceiling = 2 * air_density(20) * speed_of_sound(20) / (2700 * 0.02 * top.angular_frequency)
    eta5 = radiation_eta(top, bar, AL)
    assert 0.8 * ceiling < eta5 < ceiling


def test_budget_adds_terms_and_applies_calibration() -> None:
    bar = BarGeometry(0.35, 0.055, 0.013)
    res = solve_bar(bar, AL)
    plain = loss_budget(res)
    for ml in plain:
        assert ml.eta == pytest.approx(sum(ml.terms.values()), rel=1e-12)
    cal = Calibration({"internal": 2.0, "cords": 0.5},
                      {("*", "vertical", 2): 1234.0})
    scaled = loss_budget(res, calibration=cal)
    for a, b in zip(plain, scaled, strict=True):
        assert b.terms["internal"] == pytest.approx(2 * a.terms["internal"])
        assert b.terms["cords"] == pytest.approx(0.5 * a.terms["cords"])
        assert b.terms["radiation"] == pytest.approx(a.terms["radiation"])
    q2 = [m for m in scaled if m.kind == "vertical" and m.order == 2][0]
    assert q2.q == pytest.approx(1234.0)


def test_upper_partials_die_first_on_cords() -> None:
    bar = BarGeometry(0.35, 0.055, 0.013)
    budget = loss_budget(solve_bar(bar, AL), supports=Supports())
    t60 = [m.t60_s for m in budget if m.kind == "vertical"][:3]
    assert t60[0] > t60[1] > t60[2]
