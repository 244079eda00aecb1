"""Bar and tube as two coupled damped modes (physics.md section 8).

External references: the closed-form eigenvalues of the 2x2 system and the
section 8 worked example; numpy.linalg.eigvals and scipy.linalg.expm as
general-purpose reference libraries; the second-order two-oscillator model with
the Bloch-Siegert estimate of the rotating-wave error; energy conservation.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
import scipy.linalg

from synth.errors import ModelError
from synth.physics.coupling import (
    BarMode,
    CoupledPair,
    calibrate_coupling,
    couple,
    coupling_at_offset,
    suggest_tube_offset,
    sweep_tube_offset,
)
from synth.physics.tube import TubeSpec, bar_area_over_mouth

# physics.md section 8 example: f1 440 Hz, Q_bar 3000, Q_tube 52.45, mu 5 /s.
EXAMPLE = CoupledPair.from_q(440.0, 3000.0, 440.0, 52.45, 5.0)

# Invented demo bar (our own scenario): an A4 aluminium bar, 0.3 kg modal mass with
# the integral(phi^2) = L normalisation, centre shape value of a uniform bar
# (physics.md section 1: -1.2156), 50 mm wide over a 50 mm mouth, bare-bar
# radiation loss factor 1e-6 (between the section 6 estimates at 240 Hz and 1.1 kHz).
DEMO_BAR = BarMode(frequency_hz=440.0, q=3000.0, modal_mass_kg=0.3, mouth_shape_value=-1.2156,
                   area_over_mouth_m2=bar_area_over_mouth(0.05, 0.025),
                   radiation_loss_factor=1e-6)
DEMO_TUBE = TubeSpec(inner_radius_m=0.025, length_m=0.17, gap_to_bar_m=0.015)


def _textbook(s1, s2, mu):
    """Return lambda = (s1+s2)/2 +- sqrt(((s1-s2)/2)^2 - mu^2), physics.md section 8."""
    root = cmath.sqrt(((s1 - s2) / 2) ** 2 - mu * mu)
    return (s1 + s2) / 2 + root, (s1 + s2) / 2 - root


@pytest.mark.parametrize("offset_cents, mu", [(0, 5.0), (50, 5.0), (-30, 2.0), (0, 20.0),
                                              (10, 13.0), (400, 40.0)])
def test_eigenvalues_match_closed_form_and_numpy(offset_cents, mu):
    """Exact poles equal the quadratic-formula roots and numpy's eigenvalues of the matrix.

    Closed form from physics.md section 8; numpy.linalg.eigvals (LAPACK) as the
    reference library.  Tolerance 1e-12 relative to |s|: rounding only.
    """
    p = CoupledPair.from_q(440.0, 3000.0, 440.0 * 2 ** (offset_cents / 1200), 52.45, mu)
    ours = p.eigenvalues()
    scale = abs(p.s1)
    for ref in (_textbook(p.s1, p.s2, mu), tuple(np.linalg.eigvals(p.matrix))):
        for lam in ours:
            assert min(abs(lam - r) for r in ref) < 1e-12 * scale
    # the bar-like pole is the one nearer s1 (equally near when fully mixed)
    assert abs(ours[0] - p.s1) <= abs(ours[1] - p.s1) + 1e-12 * scale


def test_zero_coupling_gives_the_uncoupled_modes_exactly():
    """With mu = 0 the poles are s1 and s2 bit for bit (the matrix is diagonal)."""
    for off in (0.0, 37.0, -200.0):
        p = CoupledPair.from_q(523.25, 2500.0, 523.25 * 2 ** (off / 1200), 40.0, 0.0)
        lb, lt = p.eigenvalues()
        assert lb == p.s1 and lt == p.s2
        m = p.modes()
        assert m.pitch_pull_cents == 0.0
        # T60 = 2.198807 Q / f (physics.md section 6)
        assert m.t60_s[0] == pytest.approx(2.198807 * 2500.0 / 523.25, rel=1e-6)


@pytest.mark.parametrize("offset_cents, t60_s, pull_cents", [
    (0, 4.71, 0.000), (25, 9.34, -0.273), (50, 12.52, -0.174), (100, 14.23, -0.093),
    (-50, 12.51, 0.180),
])
def test_physics_notes_example(offset_cents, t60_s, pull_cents):
    """physics.md section 8 example: bar-mode T60 and pitch pull against tube offset.

    T60 to 1% (section 15 tolerance), pull to 0.001 c (the quoted rounding).  The
    tube keeps Q 52.45 as it is detuned.
    """
    m = EXAMPLE.detuned(offset_cents).modes()
    assert m.t60_s[0] == pytest.approx(t60_s, rel=0.01)
    assert m.pitch_pull_cents == pytest.approx(pull_cents, abs=1e-3)


def test_example_threshold_and_bare_t60():
    """Strong-coupling threshold 12.95 /s and bare T60 14.99 s (physics.md section 8).

    Tolerance: the quoted rounding.
    """
    assert EXAMPLE.strong_coupling_threshold_rad_s == pytest.approx(12.95, abs=5e-3)
    assert not EXAMPLE.strongly_coupled
    bare = CoupledPair.from_q(440.0, 3000.0, 440.0, 52.45, 0.0).modes()
    assert bare.t60_s[0] == pytest.approx(14.99, abs=5e-3)


@pytest.mark.parametrize("offset_cents", [0, 25, 50, 100, -50])
def test_weak_coupling_formula_agrees_with_exact(offset_cents):
    """Perturbation vs exact: damping within 4%, pull within 0.01 c (physics.md section 8)."""
    p = EXAMPLE.detuned(offset_cents)
    exact = p.eigenvalues()[0]
    weak = p.weak_coupling_eigenvalue()
    g1 = p.bar_decay_per_s
    assert (-weak.real - g1) == pytest.approx(-exact.real - g1, rel=0.04)
    pull = 1731.234 * math.log(weak.imag / exact.imag)
    assert abs(pull) < 0.01


def test_rotating_wave_form_against_second_order_oscillators():
    """RWA poles vs the two coupled damped oscillators of physics.md section 8.

    x_j'' + 2 g_j x_j' + (om_j^2 + g_j^2) x_j = kappa om1 om2 x_k, mu = kappa
    sqrt(om1 om2)/2 (stiffness chosen so the uncoupled poles agree exactly),
    solved by numpy.linalg.eigvals on the 4x4 state matrix.  The rotating-wave form
    drops counter-rotating terms; their frequency effect is the Bloch-Siegert shift
    -mu^2/(om1 + om2) (Bloch & Siegert 1940, Phys. Rev. 57, 522), matched here to
    1e-5 c at exact tuning.  Decay rates agree within 1e-3 relative, the size of
    the neglected terms mu/(om1 + om2) ~ 1e-3.
    """
    p = EXAMPLE
    om1, om2 = p.s1.imag, p.s2.imag
    g1, g2 = p.bar_decay_per_s, p.tube_decay_per_s
    mu = p.coupling_rate_rad_s
    kappa = 2 * mu / math.sqrt(om1 * om2)
    c = kappa * om1 * om2
    a = np.array([[0, 1, 0, 0], [-(om1 ** 2 + g1 ** 2), -2 * g1, c, 0],
                  [0, 0, 0, 1], [c, 0, -(om2 ** 2 + g2 ** 2), -2 * g2]])
    ev = np.linalg.eigvals(a)
    ev = ev[ev.imag > 0]
    for lam in p.eigenvalues():
        ref = ev[np.argmin(np.abs(ev - lam))]
        assert ref.real == pytest.approx(lam.real, rel=1e-3)
        shift_cents = 1731.234 * math.log(ref.imag / lam.imag)
        bloch_siegert = 1731.234 * math.log1p(-mu * mu / (om1 + om2) / lam.imag)
        assert shift_cents == pytest.approx(bloch_siegert, abs=1e-5)


def test_time_response_matches_matrix_exponential():
    """a(t) = expm(A t) a(0), scipy.linalg.expm as reference; strong and weak coupling.

    Tolerance 1e-9 of the initial amplitude (scipy's Pade approximant is accurate to
    about 1e-13 here; the margin covers the large A t at late times).
    """
    for p in (EXAMPLE.detuned(20), CoupledPair.from_q(440, 3000, 440, 52.45, 30.0),
              CoupledPair.from_q(440, 3000, 440 * 2 ** (1 / 1200), 52.45, 12.95)):
        ts = np.array([0.0, 1e-4, 0.01, 0.137, 1.0, 7.5])
        ours = p.amplitudes(ts, (1.0, 0.0))
        for i, t in enumerate(ts):
            ref = scipy.linalg.expm(p.matrix * t) @ np.array([1.0, 0.0])
            assert np.max(np.abs(ours[:, i] - ref)) < 1e-9


def test_lossless_pair_conserves_energy_and_radiated_energy_balances():
    """Energy conservation holds for the pair.

    With no loss |a1|^2 + |a2|^2 stays at E0 (the coupling is anti-Hermitian), and
    when every loss is radiation the sound radiated over the whole decay equals the
    strike energy (first law).  Tolerance 1e-9: rounding.
    """
    lossless = CoupledPair(440.0, 0.0, 450.0, 0.0, 7.0)
    a = lossless.amplitudes(np.linspace(0, 2.0, 101), (1.0, 0.0))
    assert np.max(np.abs(np.sum(np.abs(a) ** 2, axis=0) - 1.0)) < 1e-9
    all_radiative = CoupledPair(440.0, 0.3, 447.0, 20.0, 5.0, 0.3, 20.0)
    assert all_radiative.radiated_energy(strike_energy_j=2.5) == pytest.approx(2.5, rel=1e-9)
    t = np.linspace(0.0, 40.0, 400001)
    p = all_radiative.radiated_power(t, strike_energy_j=2.5)
    trapezoid = float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(t)))
    assert trapezoid == pytest.approx(2.5, rel=1e-5)   # trapezoid error at dt = 0.1 ms


def test_tube_shortens_the_bar_less_when_tuned_above_and_raises_the_level():
    """The tube shortens the fundamental and makes it louder.

    Tuned a few percent above the bar it shortens it less than tuned exactly
    (common practice, no source; physics.md section 8 gives the Lorentzian reason).
    Demo bar and tube, 20 C.
    """
    exact = coupling_at_offset(DEMO_BAR, DEMO_TUBE, 0.0)
    above = coupling_at_offset(DEMO_BAR, DEMO_TUBE, 1200 * math.log2(1.03))   # +3 %
    t_exact = exact.pair.modes().t60_s[0]
    t_above = above.pair.modes().t60_s[0]
    assert t_exact < t_above < DEMO_BAR.t60_s
    assert exact.pair.peak_gain_db() > above.pair.peak_gain_db() > 0.0
    assert exact.pair.energy_gain_db() > above.pair.energy_gain_db() > 0.0
    assert above.tube_offset_cents == pytest.approx(1200 * math.log2(1.03), abs=1e-6)


def test_sweep_shows_the_trade():
    """Across offsets 0..200 c the sustain rises and the peak gain falls.

    Monotonic, as the Lorentzian of physics.md section 8 says; a tube above the bar
    pulls it flat (same section).
    """
    sw = sweep_tube_offset(DEMO_BAR, DEMO_TUBE, [0, 10, 25, 50, 100, 200])
    assert np.all(np.diff(sw.bar_t60_s) > 0)
    assert np.all(np.diff(sw.peak_gain_db) < 0)
    assert np.all(sw.pitch_pull_cents[1:] < 0)
    assert np.all(sw.bar_t60_s < sw.bare_t60_s)


@pytest.mark.parametrize("gap_m, offset_cents", [(0.06, 0.0), (0.06, 30.0), (0.1, 0.0)])
def test_gain_matches_first_order_perturbation(gap_m, offset_cents):
    """The peak gain agrees with first-order perturbation theory for weak coupling.

    First order (physics.md section 8): the bar rings on as if alone, a1 =
    e^(s1 t), and drives the tube, a2 = i mu (e^(s1 t) - e^(s2 t)) / (s1 - s2) (the
    driven response from rest).  The peak of 2 g_rad1 |a1|^2 + 2 g_rad2 |a2|^2 over a
    10 us grid, over the bare bar's 2 g_rad1, gives the gain.  Here mu^2 / (g1 g2)
    <= 0.035, so the second-order terms stay below 0.05 dB.
    """
    p = coupling_at_offset(DEMO_BAR, TubeSpec(0.025, 0.1, gap_to_bar_m=gap_m),
                           offset_cents).pair
    s1, s2, mu = p.s1, p.s2, p.coupling_rate_rad_s
    assert mu * mu / (p.bar_decay_per_s * p.tube_decay_per_s) < 0.035
    t = np.linspace(0.0, 3.0, 300001)
    power = (2 * p.bar_radiation_decay_per_s * np.exp(-2 * p.bar_decay_per_s * t)
             + 2 * p.tube_radiation_decay_per_s * mu ** 2
             * np.abs(np.exp(s1 * t) - np.exp(s2 * t)) ** 2 / abs(s1 - s2) ** 2)
    first_order = 10 * math.log10(power.max() / (2 * p.bar_radiation_decay_per_s))
    assert p.peak_gain_db() == pytest.approx(first_order, abs=0.05)


def test_coupling_rate_model_invariances():
    """The coupling rate is invariant where it must be and moves as it must.

    It does not depend on how phi is normalised (kappa ~ S phi / sqrt(M), M ~
    phi^2), falls as the gap opens, and scales with the calibration factor.
    """
    bar2 = BarMode(440.0, 3000.0, 0.3 * 4.0, -1.2156 * 2.0, DEMO_BAR.area_over_mouth_m2, 1e-6)
    assert couple(bar2, DEMO_TUBE).coupling_rate_rad_s == pytest.approx(
        couple(DEMO_BAR, DEMO_TUBE).coupling_rate_rad_s, rel=1e-12)
    mus = [couple(DEMO_BAR, TubeSpec(0.025, 0.17, gap_to_bar_m=h)).coupling_rate_rad_s
           for h in (0.005, 0.01, 0.02, 0.04)]
    assert all(a > b for a, b in zip(mus, mus[1:], strict=False))
    assert couple(DEMO_BAR, DEMO_TUBE, coupling_calibration=1.7).coupling_rate_rad_s == \
        pytest.approx(1.7 * couple(DEMO_BAR, DEMO_TUBE).coupling_rate_rad_s, rel=1e-12)


def test_calibration_recovers_a_known_factor():
    """Round trip: T60 made with C_mu = 1.7 gives back 1.7 (consistency of the inversion)."""
    tube = DEMO_TUBE
    made = couple(DEMO_BAR, tube, coupling_calibration=1.7).pair.modes().t60_s[0]
    assert calibrate_coupling(DEMO_BAR, tube, bar_t60_with_tube_s=made) == pytest.approx(
        1.7, rel=1e-6)


def test_engine_form():
    """Engine parameters: poles, open-mouth mu, strike on the bar only, weights.

    Weights p = sqrt(rho c g_rad / (pi r^2)) per sqrt(J): free-field intensity
    p^2/(2 rho c) over 4 pi r^2 equals the radiated power 2 g_rad E (Kinsler et al.
    2000).  For the tube this is the monopole P = rho c k^2 |U|^2 / (8 pi) with
    |U|^2 = 2 E / M_a (physics.md section 8), checked to 1e-12.
    """
    cpl = couple(DEMO_BAR, DEMO_TUBE)
    e = cpl.pair.engine_form(strike_energy_j=0.04, reference_distance_m=2.0)
    assert e.s1 == cpl.pair.s1 and e.s2 == cpl.pair.s2
    assert e.initial_amplitudes == (0.2 + 0j, 0j)
    m = cpl.tube_mode
    rho, c = m.density_kg_m3, m.speed_of_sound_m_s
    k = m.omega_rad_s / c
    power_per_joule = rho * c * k * k * (2.0 / m.acoustic_mass_kg_m4) / (8 * math.pi)
    p_at_2m = math.sqrt(2 * rho * c * power_per_joule / (4 * math.pi * 4.0))
    assert e.weight_tube == pytest.approx(p_at_2m, rel=1e-12)
    assert e.weight_bar < e.weight_tube


def test_suggestion_meets_target_and_gain_floor():
    """The suggested offset gives the target T60 and keeps the gain above the floor.

    T60 to 1e-4 s (Brent tolerance 1e-6 cents); an impossible floor or target is
    refused with one line.
    """
    target = 12.0
    s = suggest_tube_offset(DEMO_BAR, DEMO_TUBE, target_t60_s=target, min_gain_db=10.0)
    assert s.offset_cents > 0
    check = coupling_at_offset(DEMO_BAR, DEMO_TUBE, s.offset_cents)
    assert check.pair.modes().t60_s[0] == pytest.approx(target, abs=1e-4)
    assert s.gain_db >= 10.0
    assert s.tube_length_m == pytest.approx(check.tube.length_m, abs=1e-12)
    with pytest.raises(ModelError) as err:
        suggest_tube_offset(DEMO_BAR, DEMO_TUBE, target_t60_s=target, min_gain_db=19.0)
    assert "floor allows" in str(err.value) and "\n" not in str(err.value)
    with pytest.raises(ModelError):
        suggest_tube_offset(DEMO_BAR, DEMO_TUBE, target_t60_s=20.0, min_gain_db=0.0)
