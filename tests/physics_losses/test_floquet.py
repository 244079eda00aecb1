"""Decay of the bar-like mode under the spinning discs (Floquet multiplier).

Sources
-------
- With constant coefficients, the period map of the 2 x 2 system is exp(A T), whose
  eigenvalues are exp(lambda T) with lambda the closed-form coupled poles
  (physics.md section 8): the Floquet decay must equal -Re(lambda) exactly.
- Floquet (1883): for periodic coefficients the decay over whole periods is set
  by the period map's eigenvalues; checked against a direct render of the same
  per-sample coefficients by the engine (tests/reports_sustain checks all notes).
"""

from __future__ import annotations

import math

import pytest

from synth.physics.coupling import CoupledPair
from synth.physics.motor import DiscModulation, MotorSpec, steady_bar_decay_per_s


def pair() -> CoupledPair:
    # physics.md section 8 example: 440 Hz, Q_bar 3000, Q_tube 52.45, mu = 5 /s
    return CoupledPair.from_q(440.0, 3000.0, 440.0 * 2 ** (25 / 1200), 52.45, 5.0,
                              bar_radiation_decay_per_s=0.0,
                              tube_radiation_decay_per_s=0.5 * 2 * math.pi * 440 / 77.47)


def test_stopped_open_motor_gives_the_coupled_pole() -> None:
    p = pair()
    mod = DiscModulation(MotorSpec(0.0, resting="open"), 48000.0, p.coupling_rate_rad_s,
                         tube_wall_decay_per_s=p.tube_decay_per_s - p.tube_radiation_decay_per_s,
                         tube_radiation_decay_per_s=p.tube_radiation_decay_per_s)
    exact = -p.eigenvalues()[0].real
    assert steady_bar_decay_per_s(p, mod) == pytest.approx(exact, rel=1e-9)
    # T60 at +25 cents, physics.md section 8: 9.34 s
    assert math.log(1000) / exact == pytest.approx(9.34, rel=0.01)


def test_spinning_discs_lengthen_the_sustain_between_open_and_closed() -> None:
    p = pair()
    kw = dict(tube_wall_decay_per_s=p.tube_decay_per_s - p.tube_radiation_decay_per_s,
              tube_radiation_decay_per_s=p.tube_radiation_decay_per_s)
    open_ = DiscModulation(MotorSpec(0.0, resting="open"), 48000.0, p.coupling_rate_rad_s, **kw)
    shut = DiscModulation(MotorSpec(0.0, resting="closed", block_fraction=0.85), 48000.0,
                          p.coupling_rate_rad_s, **kw)
    spin = DiscModulation(MotorSpec(3.0, block_fraction=0.85), 48000.0, p.coupling_rate_rad_s,
                          **kw)
    g_open, g_shut, g_spin = (steady_bar_decay_per_s(p, m) for m in (open_, shut, spin))
    assert g_shut < g_spin < g_open
