"""Spinning discs in the tube mouths (physics.md section 9).

The opening law o = 1 - beta |cos theta| and f_mod = 2 f_rot are geometric for a
flat disc (physics.md section 9, common practice / geometry); the spin-up laws are
the closed forms stated in synth.physics.motor.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from synth.physics.coupling import CoupledPair
from synth.physics.motor import (
    DiscModulation,
    MotorSpec,
    block_fraction,
    coupling_stream,
    disc_modulation,
    opening_block,
    opening_fraction,
    opening_stream,
    rotation_rate,
    shaft_angle,
    tube_weight_stream,
)

FS = 48000.0


@pytest.mark.parametrize("rate", [0.5, 3.0, 5.7])
def test_opening_repeats_twice_per_turn(rate, rng):
    """Period 1/(2 f_rot): |cos| repeats every half turn (geometric, flat disc).

    Checked at random times to 1e-12 (rounding of the angle), and the half period is
    the shortest one: a quarter period moves the opening by a finite amount.
    """
    m = MotorSpec(rate, block_fraction=0.8)
    t = rng.uniform(0.0, 20.0, 200)
    half = 1.0 / (2.0 * rate)
    o = opening_fraction(m, t)
    assert np.max(np.abs(opening_fraction(m, t + half) - o)) < 1e-12
    assert np.max(np.abs(opening_fraction(m, t + half / 2) - o)) > 0.5


def test_pulse_rate_is_the_envelope_spectrum_peak():
    """f_mod = 2 f_rot (physics.md section 9): the spectrum of o(t) peaks at 2 f_rot.

    4 s at 48 kHz with 2.5 rev/s gives a whole number of pulses, so the peak falls on
    the 5 Hz bin exactly (discrete Fourier transform, numpy.fft).
    """
    m = MotorSpec(2.5)
    o = opening_block(m, 0, int(4 * FS), FS)
    spec = np.abs(np.fft.rfft(o - o.mean()))
    freqs = np.fft.rfftfreq(o.size, 1.0 / FS)
    assert freqs[np.argmax(spec)] == pytest.approx(5.0, abs=1e-12)
    assert m.pulse_rate_hz == 5.0


@pytest.mark.parametrize("resting, expected", [
    ("open", 1.0), ("closed", 1.0 - 0.85), (60.0, 1.0 - 0.85 * 0.5), (90.0, 1.0),
])
def test_stopped_motor_rests_at_its_angle(resting, expected):
    """Rate 0: the opening stays at 1 - beta |cos theta_rest| (the law itself), to rounding."""
    m = MotorSpec(0.0, block_fraction=0.85, resting=resting)
    o = opening_block(m, 12345, 1000, FS)
    assert np.all(o == o[0])
    assert o[0] == pytest.approx(expected, abs=1e-15)


def test_phase_offset_moves_the_disc():
    """A disc mounted 90 degrees round the shaft is edge-on when the reference disc is flat."""
    m = MotorSpec(0.0, resting="closed")
    assert opening_block(m, 0, 1, FS, phase_offset_deg=90.0)[0] == pytest.approx(1.0, abs=1e-15)
    assert opening_block(m, 0, 1, FS)[0] == pytest.approx(0.15, abs=1e-15)


@pytest.mark.parametrize("law", ["exponential", "linear"])
def test_spin_up_reaches_the_rate_and_angle_is_its_integral(law):
    """Spin-up: the rate reaches the set rate, and the angle is 2 pi times its integral.

    Exponential: 1 - e^-10 of the rate after 10 time constants (tolerance 5e-5).
    Linear ramp: exactly the rate from the ramp time on.  The angle's central
    difference (1 us step) equals 2 pi f(t) to 1e-6 rev/s (step error f'' h^2 / 6).
    """
    m = MotorSpec(4.0, spin_up_s=0.3, spin_up_law=law, start_time_s=0.5)
    assert rotation_rate(m, 0.4) == 0.0
    late = rotation_rate(m, 0.5 + 10 * 0.3)
    if law == "exponential":
        assert late == pytest.approx(4.0 * (1 - math.exp(-10)), rel=1e-12)
        assert late == pytest.approx(4.0, rel=5e-5)
    else:
        assert rotation_rate(m, 0.8) == pytest.approx(4.0, rel=1e-12)
        assert rotation_rate(m, 0.65) == pytest.approx(2.0, rel=1e-12)
        assert late == 4.0
    t = np.array([0.6, 0.79, 0.81, 1.2, 3.0])
    h = 1e-6
    numeric = (shaft_angle(m, t + h) - shaft_angle(m, t - h)) / (2 * h) / (2 * math.pi)
    assert numeric == pytest.approx(rotation_rate(m, t), abs=1e-6)


def test_stream_blocks_join_seamlessly():
    """Blocks of any size give the same samples as one long block (invariance)."""
    m = MotorSpec(3.3, spin_up_s=0.2, resting=30.0)
    whole = opening_block(m, 0, 10000, FS, phase_offset_deg=17.0)
    stream = opening_stream(m, FS, phase_offset_deg=17.0)
    parts = np.concatenate([stream(0, 1234), stream(1234, 1), stream(1235, 8765)])
    assert np.array_equal(parts, whole)
    assert parts.dtype == np.float64


def test_coupling_and_weight_follow_the_opening():
    """Option 2 of physics.md section 9: mu and mouth radiation follow the opening.

    mu and the radiation resistance are proportional to the (floored) opening, so the
    pressure weight goes as its square root and the tube's radiation decay in
    proportion.  Half a turn (0.25 s) passes the flat position, where the floor holds.
    """
    m = MotorSpec(2.0, block_fraction=0.99)
    o = opening_block(m, 0, 12000, FS)
    factor = np.maximum(o, 0.05)
    mu = coupling_stream(m, 5.0, FS, floor=0.05)(0, 12000)
    # mu is applied over each step j -> j + 1, so it is taken at j + 1/2
    mid = np.maximum(opening_block(m, 0, 12000, FS, offset_samples=0.5), 0.05)
    assert mu == pytest.approx(5.0 * mid, rel=1e-15)
    assert mu.min() == pytest.approx(5.0 * 0.05, rel=1e-12)    # the floor holds near flat
    w = tube_weight_stream(m, 3.0, FS, floor=0.05)(0, 12000)
    assert w == pytest.approx(3.0 * np.sqrt(factor), rel=1e-15)
    d = DiscModulation(m, FS, 5.0, tube_wall_decay_per_s=8.0, tube_radiation_decay_per_s=18.0,
                       floor=0.05)
    assert d.tube_decay(0, 12000) == pytest.approx(8.0 + 18.0 * factor, rel=1e-15)


@pytest.mark.parametrize("beta, floor", [(0.85, 0.02), (0.99, 0.3), (0.0, 0.0)])
def test_mean_factor_closed_form(beta, floor):
    """Mean of max(1 - beta |cos|, floor) over a turn: closed form vs a 2e6-point average.

    The midpoint rule on this periodic function with two kinks errs by ~1e-12 here.
    """
    d = DiscModulation(MotorSpec(1.0, block_fraction=beta), FS, 1.0, floor=floor)
    th = (np.arange(2_000_000) + 0.5) * (2 * math.pi / 2_000_000)
    ref = np.mean(np.maximum(1 - beta * np.abs(np.cos(th)), floor))
    assert d.mean_factor() == pytest.approx(ref, abs=1e-9)
    if floor <= 1 - beta:
        assert d.mean_factor() == pytest.approx(1 - 2 * beta / math.pi, rel=1e-14)


def test_disc_modulation_from_a_pair():
    """Open-mouth values come from the pair: mu, the tube's wall and radiation decays.

    Also the engine form's frequencies, amplitudes and phases after a strike.
    """
    p = CoupledPair.from_q(440.0, 3000.0, 445.0, 52.45, 4.0, tube_radiation_decay_per_s=17.0)
    d = disc_modulation(p, MotorSpec(0.0), FS)
    assert d.coupling_rate(0, 3) == pytest.approx([4.0] * 3, rel=1e-15)
    assert d.tube_wall_decay_per_s + d.tube_radiation_decay_per_s == pytest.approx(
        p.tube_decay_per_s, rel=1e-12)
    assert d.tube_weight_open == pytest.approx(p.engine_form().weight_tube, rel=1e-15)
    e = p.engine_form(strike_energy_j=0.09)
    assert e.frequency_hz == pytest.approx((440.0, 445.0), rel=1e-15)
    assert e.amplitude == pytest.approx((0.3, 0.0), rel=1e-15)
    assert e.phase_rad == (0.0, 0.0)


def test_block_fraction_is_projected_disc_area():
    """A flat disc of radius r in a mouth of radius a blocks (r/a)^2 of it (circle areas)."""
    assert block_fraction(0.023, 0.025) == pytest.approx((0.023 / 0.025) ** 2, rel=1e-15)
