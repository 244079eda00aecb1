"""Alloy moduli from a tapped offcut: ASTM E1876 formulas, our 1-D model, a synthetic tap.

Sources
-------
- ASTM E1876 (impulse excitation; the constant 0.9465, Pickett's T1 and the
  torsional factor R as coded are from memory of the 2015 edition).
- Our 1-D uniform-bar model (:func:`synth.physics.bar_fe.solve_bar`: Timoshenko
  bending, torsion with warping), an independent calculation of the same
  frequencies from E, G and the density: the formulas inverted on its
  frequencies must return the E and G it was given, up to the gap between
  Pickett's corrections and the Timoshenko/warping model.  Measured gaps
  (6061, nu 0.33): E +0.0082 / +0.0086 / +0.0036 / +0.0090 % and G +0.19 /
  +0.15 / +0.35 / +0.064 % for 300x40x10, 200x25x6, 300x50x20 and 250x30x5 mm;
  the tests hold E to 2e-4 and G to twice each measured gap.
- The worst-case propagation of physics.md's brief form, dE/E = 2 df/f +
  3 dL/L + 3 dt/t + dm/m + db/b (E proportional to m f^2 L^3 / (b t^3) times
  T1), with T1's own small share (2 x 6.585 (t/L)^2 on L and t, 1.5 % of those
  terms for t/L = 1/30).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from typer.testing import CliRunner

from synth.cli import app
from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import BarGeometry
from synth.reports.measure import measure_signal
from synth.reports.offcut import OffcutInputs, analyse_offcut, impulse_moduli, uncertainties
from synth.settings.material import load_material

FS = 48000
GAPS = [((0.3, 0.04, 0.01), 0.0019), ((0.2, 0.025, 0.006), 0.0015),
        ((0.3, 0.05, 0.02), 0.0035), ((0.25, 0.03, 0.005), 0.00064)]


def alloy(e=70.3e9, nu=0.34, rho=2710.0):
    """Return 6061 with the given E, nu and density (a batch unlike the handbook's)."""
    return replace(load_material("aluminium-6061-t6"), youngs_modulus_pa=e, poisson_ratio=nu,
                   density_kg_m3=rho)


@pytest.mark.parametrize(("size", "g_gap"), GAPS, ids=[f"{s[0]}x{s[1]}x{s[2]}" for s, _ in GAPS])
def test_formulas_invert_the_1d_model(size, g_gap):
    """E1876 on the 1-D model's frequencies returns its E (2e-4) and G (twice the gap)."""
    L, b, t = size
    mat = alloy(68.9e9, 0.33, 2700.0)
    modes = solve_bar(BarGeometry(length_m=L, width_m=b, thickness_m=t), mat, n_vertical=1,
                      n_lateral=0, n_torsional=1)
    e, g, nu = impulse_moduli(modes.mode("vertical", 1).frequency_hz,
                              modes.mode("torsional", 1).frequency_hz,
                              mass_kg=mat.density_kg_m3 * L * b * t, length_m=L, width_m=b,
                              thickness_m=t)
    assert e / mat.youngs_modulus_pa - 1 == pytest.approx(0.0, abs=2e-4)
    assert abs(g / mat.shear_modulus_pa - 1) <= 2 * g_gap


def test_uncertainty_matches_the_closed_form():
    """Each input's share is the exponent of E = 0.9465 m f^2 L^3 / (b t^3) T1 (T1 within 2 %)."""
    inp = OffcutInputs(length_m=0.3, width_m=0.04, thickness_m=0.01, mass_kg=0.3252,
                       length_tol_m=0.3e-3, width_tol_m=0.04e-3, thickness_tol_m=0.01e-3,
                       mass_tol_kg=0.3252e-3)  # every tolerance 1e-3 relative
    unc = uncertainties(574.6, 2306.4, inp, 0.5746, 2.3064)
    terms = unc["E"][1]
    for name, power in (("flexural_hz", 2), ("length_m", 3), ("thickness_m", 3),
                        ("mass_kg", 1), ("width_m", 1)):
        assert terms[name] / 1e-3 == pytest.approx(power, rel=0.02), name
    # f_t enters E only through nu in T1: d ln T1/d nu = 6.585 (0.0752 + 1.62 nu)
    # (t/L)^2 = 0.0045 at nu 0.33, t/L 1/30, times d nu/d ln f_t = -2 (1 + nu) = -2.7
    assert terms["torsional_hz"] / 1e-3 < 0.02
    assert unc["E"][0] == pytest.approx(sum(terms.values()))
    # G = 4 L m f^2 / (b t) R(b/t, b/L): f twice, m once
    assert unc["G"][1]["torsional_hz"] / 1e-3 == pytest.approx(2.0, rel=1e-6)
    assert unc["G"][1]["mass_kg"] / 1e-3 == pytest.approx(1.0, rel=1e-6)


def tap(mat, size, *, seconds=2.0, seed=5) -> np.ndarray:
    """Synthesise a corner tap from the 1-D model's modes, in noise 60 dB down."""
    L, b, t = size
    modes = solve_bar(BarGeometry(length_m=L, width_m=b, thickness_m=t), mat, n_vertical=3,
                      n_lateral=1, n_torsional=2)
    n = int(seconds * FS)
    tt = np.arange(n) / FS
    x = np.zeros(n)
    amps = {("vertical", 1): 0.4, ("vertical", 2): 0.2, ("vertical", 3): 0.1,
            ("torsional", 1): 0.2, ("torsional", 2): 0.05, ("lateral", 1): 0.03}
    for md in modes.modes:
        a = amps.get((md.kind, md.order), 0.0)
        t60 = 3.0 * 500.0 / md.frequency_hz + 0.5
        x += a * np.exp(-tt * math.log(1000) / t60) * np.sin(2 * math.pi * md.frequency_hz * tt)
    x = np.concatenate([np.zeros(int(0.1 * FS)), x])
    return x + 10 ** (-60 / 20) * 0.4 * np.random.default_rng(seed).standard_normal(x.size)


def test_synthetic_tap_recovers_e_and_g():
    """A tap built from the 1-D model with E 70.3 GPa, nu 0.34: E and G within 0.3 %."""
    size = (0.3, 0.04, 0.01)
    mat = alloy()
    m = measure_signal(tap(mat, size), FS, max_partials=16)
    L, b, t = size
    inp = OffcutInputs(length_m=L, width_m=b, thickness_m=t, mass_kg=mat.density_kg_m3 * L * b * t,
                       length_tol_m=5e-4, width_tol_m=2e-5, thickness_tol_m=2e-5,
                       mass_tol_kg=1e-4)
    r = analyse_offcut([m], inp)
    assert r.youngs_modulus_pa / mat.youngs_modulus_pa - 1 == pytest.approx(0.0, abs=3e-3)
    assert r.shear_modulus_pa / mat.shear_modulus_pa - 1 == pytest.approx(0.0, abs=3e-3)
    assert r.density_kg_m3 == pytest.approx(mat.density_kg_m3, rel=1e-12)
    # the 1-D model with the fitted values returns the measured frequencies
    assert abs(r.model_flexural_error) < 2e-4
    assert abs(r.model_torsional_error) < 2 * 0.0019
    # worst case: 3 x 0.2 % (t) + 3 x 0.17 % (L) + ... at these tolerances
    assert 0.01 < r.e_rel_tol < 0.02


def test_command_writes_a_material_file(tmp_path):
    """``barwright offcut`` writes a material file the loader reads back, E as measured."""
    import soundfile as sf

    size = (0.3, 0.04, 0.01)
    mat = alloy()
    wav = tmp_path / "tap.wav"
    sf.write(wav, tap(mat, size), FS, subtype="PCM_24")
    out = tmp_path / "batch-7.toml"
    mass_g = mat.density_kg_m3 * 0.3 * 0.04 * 0.01 * 1e3
    args = ["offcut", str(wav), "--length-mm", "300", "--width-mm", "40", "--thickness-mm",
            "10", "--mass-g", f"{mass_g:.3f}", "--out", str(out)]
    r = CliRunner().invoke(app, args)
    assert r.exit_code == 0, r.stderr
    assert "E " in r.stdout and "GPa" in r.stdout
    back = load_material(out)
    assert back.youngs_modulus_pa == pytest.approx(mat.youngs_modulus_pa, rel=3e-3)
    assert "ASTM E1876" in back.source["youngs_modulus_pa"]
    again = CliRunner().invoke(app, args)
    assert again.exit_code == 2 and "exists" in again.stderr


def test_width_below_thickness_is_refused(tmp_path):
    """Width is the wider side: one line, exit 2."""
    import soundfile as sf

    wav = tmp_path / "tap.wav"
    sf.write(wav, tap(alloy(), (0.3, 0.04, 0.01)), FS, subtype="PCM_24")
    r = CliRunner().invoke(app, ["offcut", str(wav), "--length-mm", "300", "--width-mm", "8",
                                 "--thickness-mm", "10", "--mass-g", "325"])
    assert r.exit_code == 2
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "--width-mm" in lines[0] and "swap" in lines[0]
