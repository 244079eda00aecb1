"""Coupled pairs against scipy's matrix exponential and the closed-form eigenvalues.

System (physics.md, section 8): d/dt [a1, a2] = [[s1, i mu], [i mu, s2]] [a1, a2],
s_j = i om_j - g_j, eigenvalues lambda+- = (s1 + s2)/2 +- sqrt(((s1 - s2)/2)^2 - mu^2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.linalg
from engine_fits import prony_one_mode
from scipy.integrate import solve_ivp

from synth.engine import ModeBank, ModePair, Voice, render
from synth.errors import ModelError
from synth.pitch import cents

FS = 48000.0


def pair_outputs(pair_kwargs, n, fs=FS, block_size=8192):
    """Render Im(a1) and Im(a2) separately (weights (1, 0) and (0, 1))."""
    out = []
    for w1, w2 in ((1.0, 0.0), (0.0, 1.0)):
        p = ModePair(weight_1=w1, weight_2=w2, **pair_kwargs)
        out.append(render([Voice(0, ModeBank.empty(), pairs=(p,))], n, sample_rate=fs,
                          retire_db=None, block_size=block_size)[:, 0])
    return out


def system(f, g, mu):
    """Return s1, s2 and the coupling matrix of physics.md section 8."""
    s1 = 2j * np.pi * f[0] - g[0]
    s2 = 2j * np.pi * f[1] - g[1]
    return s1, s2, np.array([[s1, 1j * mu], [1j * mu, s2]])


KW = dict(frequency_hz=(440.0, 445.0), decay_per_s=(0.5, 26.35), amplitude=(1.0, 0.3),
          phase_rad=(0.2, 1.1), coupling_rad_s=5.0)


def test_constant_coupling_matches_expm():
    """Each step is the exact exponential: scipy.linalg.expm(A t) a0 agrees to 1e-10.

    Tolerance: 48000 steps of float64 rounding (~N eps = 1e-11 of the state).
    """
    n = 48000
    y1, y2 = pair_outputs(KW, n)
    _, _, a_mat = system(KW["frequency_hz"], KW["decay_per_s"], KW["coupling_rad_s"])
    a0 = np.array([1.0 * np.exp(0.2j), 0.3 * np.exp(1.1j)])
    for m in (1, 97, 12345, n - 1):
        a = scipy.linalg.expm(a_mat * m / FS) @ a0
        assert abs(a[0].imag - y1[m]) <= 1e-10
        assert abs(a[1].imag - y2[m]) <= 1e-10


def test_trajectory_matches_closed_form_eigenvalues():
    """The whole trajectory equals the eigen-expansion built from physics.md's lambda+-.

    Eigenvector of [[s1, i mu], [i mu, s2]] for lambda: (i mu, lambda - s1).
    """
    f, g, mu = KW["frequency_hz"], KW["decay_per_s"], KW["coupling_rad_s"]
    s1, s2, _ = system(f, g, mu)
    root = np.sqrt(((s1 - s2) / 2) ** 2 - mu ** 2 + 0j)
    lam = np.array([(s1 + s2) / 2 + root, (s1 + s2) / 2 - root])
    vecs = np.array([[1j * mu, 1j * mu], [lam[0] - s1, lam[1] - s1]])
    a0 = np.array([1.0 * np.exp(0.2j), 0.3 * np.exp(1.1j)])
    c = np.linalg.solve(vecs, a0)
    n = 24000
    t = np.arange(n) / FS
    traj = vecs @ (c[:, None] * np.exp(np.outer(lam, t)))
    y1, y2 = pair_outputs(KW, n)
    assert np.max(np.abs(y1 - traj[0].imag)) <= 1e-10
    assert np.max(np.abs(y2 - traj[1].imag)) <= 1e-10


def test_zero_coupling_is_two_plain_modes():
    """With mu = 0 each member is a mode of the bank (same convention), and nothing leaks."""
    kw = dict(KW, coupling_rad_s=0.0)
    n = 20000
    y1, y2 = pair_outputs(kw, n)
    for j, y in enumerate((y1, y2)):
        bank = ModeBank([kw["frequency_hz"][j]], [kw["decay_per_s"][j]],
                        [kw["amplitude"][j]], [kw["phase_rad"][j]])
        ref = render([Voice(0, bank)], n, sample_rate=FS, retire_db=None)[:, 0]
        # The pair steps without re-anchoring, so its rounding accumulates over the
        # 20000 steps: N eps = 20000 x 2.2e-16 = 4.4e-12 of the amplitude (1.0).
        assert np.max(np.abs(y - ref)) <= 20000 * np.finfo(float).eps
    # the coupling term is exactly zero: a silent member stays exactly silent
    _, quiet = pair_outputs(dict(kw, amplitude=(1.0, 0.0)), n)
    assert np.all(quiet == 0.0)


@pytest.mark.parametrize("vary_decay", [False, True])
def test_time_varying_coupling_matches_ode_solver(vary_decay):
    """Coupling mu(t) (and tube decay g2(t)) per step at its midpoint: exact frozen steps.

    Reference: scipy's DOP853 on the same ODE at rtol 1e-12.  The frozen-step
    (exponential midpoint) error is O(dt^2) times the curves' second
    derivatives: with a 6 Hz modulation it is far below the 1e-8 allowed.
    """
    f, g = (440.0, 443.0), (0.46, 26.35)
    mu0, depth, f_mod = 8.0, 0.6, 6.0

    def mu_of_t(t):
        return mu0 * (1 + depth * np.sin(2 * np.pi * f_mod * t))

    def g2_of_t(t):
        return g[1] + (10.0 * (1 + np.cos(2 * np.pi * f_mod * t)) if vary_decay else 0.0 * t)

    def at_midsteps(fn):
        return lambda first, n: fn((np.arange(first, first + n) + 0.5) / FS)

    kw = dict(frequency_hz=f, decay_per_s=g, amplitude=(1.0, 0.0),
              coupling_rad_s=at_midsteps(mu_of_t),
              decay_2_curve=at_midsteps(g2_of_t) if vary_decay else None)
    n = int(0.25 * FS)
    y1, y2 = pair_outputs(kw, n, block_size=1000)
    s1 = 2j * np.pi * f[0] - g[0]

    def rhs(t, a):
        m = mu_of_t(t)
        s2 = 2j * np.pi * f[1] - g2_of_t(t)
        return [s1 * a[0] + 1j * m * a[1], 1j * m * a[0] + s2 * a[1]]

    t_eval = np.array([0.05, 0.1, 0.2, (n - 1) / FS])
    sol = solve_ivp(rhs, (0, t_eval[-1]), np.array([1.0 + 0j, 0j]), method="DOP853",
                    rtol=1e-12, atol=1e-14, t_eval=t_eval)
    for t, a in zip(t_eval, sol.y.T, strict=True):
        m = int(round(t * FS))
        assert abs(y1[m] - a[0].imag) <= 1e-8
        assert abs(y2[m] - a[1].imag) <= 1e-8


def test_decay_curve_below_its_bound_is_refused():
    """decay_per_s[1] must bound the decay curve from below (it decides the drop)."""
    pair = ModePair((440.0, 441.0), (0.5, 20.0), (1.0, 0.0), coupling_rad_s=5.0,
                       decay_2_curve=lambda first, n: np.full(n, 10.0))
    with pytest.raises(ModelError, match=r"decay curve = 10 /s at sample 0 is below"):
        render([Voice(0, ModeBank.empty(), pairs=(pair,))], 100, sample_rate=FS)


@pytest.mark.parametrize("offset_cents, t60_s", [(0.0, 4.71), (50.0, 12.52)])
def test_bar_mode_t60_of_physics_example(offset_cents, t60_s):
    """physics.md section 8 example [C]: 440 Hz, Q_bar 3000, Q_tube 52.45, mu 5 /s.

    Bar-mode T60 4.71 s (tube at the bar) and 12.52 s (tube 50 cents above),
    tolerance 1 % as in physics.md section 15.  Measured on the bar member's
    output after the tube-like mode has died (its decay is ~25 /s).
    """
    f1 = 440.0
    f2 = f1 * 2 ** (offset_cents / 1200)
    g1 = math.pi * f1 / 3000.0    # g = om / (2 Q)
    g2 = math.pi * f2 / 52.45
    kw = dict(frequency_hz=(f1, f2), decay_per_s=(g1, g2), amplitude=(1.0, 0.0),
              coupling_rad_s=5.0)
    n = int(2.0 * FS)
    y1, _ = pair_outputs(kw, n)
    f_meas, g_meas = prony_one_mode(y1[int(1.5 * FS):], FS)
    assert math.log(1000.0) / g_meas == pytest.approx(t60_s, rel=0.01)
    if offset_cents == 50.0:
        # pitch pull of the bar mode: -0.174 cents (physics.md section 8; table rounding 0.001)
        assert float(cents(f_meas, f1)) == pytest.approx(-0.174, abs=0.001)
