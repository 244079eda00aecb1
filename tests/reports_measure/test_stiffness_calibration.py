"""Stiffness calibration: a modulus and per-partial factors hidden in a render come back.

The "prototype bar" is the demo's A4 rendered by the tool's own voice plan and
engine from a hidden truth: the alloy's Young's modulus x 1.02 and per-partial
factors (1.004, 0.995, 1 / (1.004 x 0.995)) on vertical 1-3, multiplied into
every anchor of the preset's 3-D correction table (linear interpolation between
anchors keeps them exact at every note).  ``barwright measure --calibrate``
against the untouched demo preset must return them: the issue asks 1 % on the
stiffness.  The tighter bound used besides is the fit's own worst-case
uncertainty from the frequency resolution 1/T (the measured frequencies of such
a render are good to a small fraction of a cent, tests/reports_measure/
test_measure_render.py).  The factors are defined with geometric mean 1 (a
change common to all partials is stiffness), so the hidden ones are chosen so.

``barwright tune --calibration`` then re-tunes the neighbours G#4 and A#4, and
their bars, re-solved with the hidden truth, must hit target within 1 cent
(the issue's check); the uncalibrated design misses by the modulus' share,
1200 log2 sqrt(1.02) = 17.1 cents, so the check can fail.

Sources: f proportional to sqrt(E) with Poisson's ratio held (the generalized
eigenproblem K u = omega^2 M u with K proportional to E; Bathe, Finite Element
Procedures, 1996, section 10.2); the least-squares estimate of one additive
constant is the mean of the data (Lawson & Hanson, Solving Least Squares
Problems, 1974, chapter 1); the hidden values are the check values.
"""

from __future__ import annotations

import json
import math
import tomllib
from dataclasses import replace

import numpy as np
import pytest
import tomli_w
from measure_signals import FS, PRESET, assert_one_line_error, run, run_json, wav

from synth.engine.render import render
from synth.physics.bar_fe import solve_bar
from synth.physics.solid_correction import correction_of
from synth.physics.stiffness import fit_stiffness
from synth.pitch import cents
from synth.settings.instrument import design_from_table, load_instrument
from synth.voicing import Voicer

HIDDEN_SCALE = 1.02
HIDDEN_FACTORS = (1.004, 0.995, 1.0 / (1.004 * 0.995))
NOTE = "A4"
NEIGHBOURS = ("G#4", "A#4")


def truth_instrument():
    """Return the demo preset with the hidden modulus and per-partial factors."""
    data = tomllib.loads(PRESET.read_text(encoding="utf-8"))
    factors = data["solid_correction"]["factors"]
    for n, c in enumerate(HIDDEN_FACTORS, start=1):
        factors[f"vertical_{n}"] = [v * c for v in factors[f"vertical_{n}"]]
    inst = design_from_table(data, str(PRESET))
    material = replace(inst.material, youngs_modulus_pa=inst.material.youngs_modulus_pa
                       * HIDDEN_SCALE)
    return replace(inst, material=material)


def render_truth(*, tubes: bool, seconds: float = 4.0) -> np.ndarray:
    """Render a hard-mallet strike of the truth's A4, mono, peak 0.5, -70 dBFS noise."""
    v = Voicer(truth_instrument(), sample_rate=FS, tubes=tubes, channels=1)
    voice = v.strike_voice(NOTE, mallet="hard", position=0.4, across=0.3, time_s=0.1)
    x = render([voice], int(round(seconds * FS)), sample_rate=FS)[:, 0]
    x = 0.5 * x / np.max(np.abs(x))
    return x + 10 ** (-70 / 20) * np.random.default_rng(5).standard_normal(x.size)


@pytest.fixture(scope="module")
def calibrated(tmp_path_factory):
    """Measure the bare truth bar with ``measure --calibrate --no-tubes``."""
    d = tmp_path_factory.mktemp("stiffness")
    take = wav(d / "a4-prototype.wav", render_truth(tubes=False))
    out = d / "cal.toml"
    doc = run_json("measure", take, "--calibrate", PRESET, "--note", NOTE, "--no-tubes",
                   "--out", out)
    return d, out, doc["calibration"]["stiffness"]


def test_fit_of_exact_frequencies_is_exact() -> None:
    """Model x sqrt(s) x c_n in, s and c_n out, to rounding (a few eps of the logs)."""
    model = (442.0, 1768.0, 4455.0)
    measured = [f * math.sqrt(HIDDEN_SCALE) * c for f, c in zip(model, HIDDEN_FACTORS,
                                                                 strict=True)]
    fit = fit_stiffness(model, measured, (0.1, 0.1, 0.1))
    assert fit.youngs_scale == pytest.approx(HIDDEN_SCALE, rel=1e-13)
    assert fit.factors == pytest.approx(HIDDEN_FACTORS, rel=1e-13)
    # residual cents are 1200 log2 c_n
    assert fit.residual_cents == pytest.approx(
        [1200 * math.log2(c) for c in HIDDEN_FACTORS], abs=1e-9)
    # worst-case bound: 2 mean(df/f)
    assert fit.scale_uncertainty == pytest.approx(2 * np.mean(0.1 / np.array(measured)))


def test_one_d_partials_scale_as_sqrt_e() -> None:
    """The method's premise: E x 1.02 moves every vertical partial by sqrt(1.02).

    Same geometry, so the refinement picks the same mesh (it looks at relative
    changes only) and only the eigensolver's rounding remains (1e-9 is far above
    it and far below the 0.01 % the refinement allows).
    """
    inst = load_instrument(PRESET)
    mat = inst.material.at_temperature(inst.temperature_c)
    geo = inst.bar(NOTE)
    a = solve_bar(geo, mat, n_vertical=3, n_lateral=0, n_torsional=0)
    b = solve_bar(geo, replace(mat, youngs_modulus_pa=mat.youngs_modulus_pa * HIDDEN_SCALE),
                  n_vertical=3, n_lateral=0, n_torsional=0)
    for n in (1, 2, 3):
        ratio = b.mode("vertical", n).frequency_hz / a.mode("vertical", n).frequency_hz
        assert ratio == pytest.approx(math.sqrt(HIDDEN_SCALE), rel=1e-9), n


def test_hidden_stiffness_and_factors_are_recovered(calibrated) -> None:
    """E x 1.02 within 1 % (issue) and within the fit's own bound; factors likewise."""
    _, _, st = calibrated
    scale = st["youngs_modulus_scale"]
    assert scale == pytest.approx(HIDDEN_SCALE, rel=0.01)  # the check
    assert abs(scale / HIDDEN_SCALE - 1) <= st["scale_uncertainty"]
    for c, hidden, u in zip(st["factors"], HIDDEN_FACTORS, st["factor_uncertainty"],
                            strict=True):
        assert abs(c / hidden - 1) <= u, (c, hidden, u)
    # the residual is what the modulus cannot explain: the hidden factors, in cents
    assert st["residual_cents"] == pytest.approx(
        [1200 * math.log2(c) for c in HIDDEN_FACTORS], abs=0.05)


def test_model_frequencies_are_the_3d_corrected_ones(calibrated) -> None:
    """Composition: the fit compares with 1-D x the 3-D table, not the bare 1-D model."""
    _, _, st = calibrated
    inst = load_instrument(PRESET)
    table = correction_of(inst)
    assert table is not None
    mat = inst.material.at_temperature(inst.temperature_c)
    one_d = solve_bar(inst.bar(NOTE), mat, n_vertical=3, n_lateral=0, n_torsional=0)
    for n in (1, 2, 3):
        expected = one_d.mode("vertical", n).frequency_hz * table.factor(NOTE, "vertical", n)
        # the voice plan solves more modes than this call, so the two meshes may differ
        # within the refinement's bound (partials settle to 1e-4); the table's factors
        # are 1.007-1.02 here, far outside it
        assert st["model_hz"][n - 1] == pytest.approx(expected, rel=1e-4), n
        assert abs(table.factor(NOTE, "vertical", n) - 1) > 10 * 1e-4


def test_file_records_the_measurement_and_loads_from_a_preset(calibrated) -> None:
    """[stiffness] holds scale, factors, note, recording, frequencies, uncertainty."""
    d, out, st = calibrated
    table = tomllib.loads(out.read_text(encoding="utf-8"))["stiffness"]
    assert table["note"] == NOTE and table["recording"] == "a4-prototype.wav"
    for key in ("model_hz", "measured_hz", "tolerance_hz", "residual_cents"):
        assert table[key] == pytest.approx(st[key], rel=1e-8), key
    assert table["youngs_modulus_pa"] == pytest.approx(st["youngs_modulus_pa"], rel=1e-8)
    preset = d / "with-calibration.toml"
    preset.write_text(PRESET.read_text(encoding="utf-8")
                      + '\n[damping]\ncalibration_file = "cal.toml"\n', encoding="utf-8")
    inst = load_instrument(preset)
    loaded = inst.tables.damping.stiffness
    assert loaded.youngs_scale == pytest.approx(st["youngs_modulus_scale"], rel=1e-8)
    assert loaded.factors == pytest.approx(st["factors"], rel=1e-8)


def resolve_with_truth(path, notes) -> dict[str, np.ndarray]:
    """Cents off target of the tuned bars in ``path``, solved with the hidden truth."""
    tuned = load_instrument(path)
    truth = truth_instrument()
    table = correction_of(truth)
    mat = truth.material.at_temperature(truth.temperature_c)
    out = {}
    for note in notes:
        modes = solve_bar(tuned.bar(note), mat, n_vertical=3, n_lateral=0, n_torsional=0)
        f = [modes.mode("vertical", n).frequency_hz * table.factor(note, "vertical", n)
             for n in (1, 2, 3)]
        targets = truth.target_hz(note) * np.asarray(truth.target_ratios[:3])
        out[note] = np.asarray(cents(np.asarray(f), targets))
    return out


def test_retuned_neighbours_hit_target_with_the_hidden_truth(calibrated) -> None:
    """G#4 and A#4 re-tuned with the calibration: within 1 cent of target in the truth."""
    d, cal, _ = calibrated
    notes = [a for n in NEIGHBOURS for a in ("--note", n)]
    on = d / "tuned-calibrated.toml"
    doc = run_json("tune", PRESET, "--calibration", cal, *notes, "--out", on)
    changes = {c["note"]: c for c in doc["stiffness_calibration"]["changes"]}
    assert set(changes) == set(NEIGHBOURS)
    for note, miss in resolve_with_truth(on, NEIGHBOURS).items():
        assert np.all(np.abs(miss) <= 1.0), (note, miss)  # the check
    # the uncalibrated design misses by about the modulus' 17 cents: the check can fail
    off = d / "tuned-uncalibrated.toml"
    run_json("tune", PRESET, *notes, "--out", off)
    for note, miss in resolve_with_truth(off, NEIGHBOURS).items():
        assert miss[0] > 10.0, (note, miss)
    # the reported change is the difference of the two written designs
    cal_inst, raw_inst = load_instrument(on), load_instrument(off)
    for note in NEIGHBOURS:
        dl = 1e3 * (cal_inst.bar(note).length_m - raw_inst.bar(note).length_m)
        # the file holds lengths to the micrometre (9 digits): half a unit of that
        assert changes[note]["length_change_mm"] == pytest.approx(dl, abs=1e-3)
        dd = 1e3 * (cal_inst.bar(note).undercut.depth_m - raw_inst.bar(note).undercut.depth_m)
        assert changes[note]["depth_change_mm"] == pytest.approx(dd, abs=1e-3)


def test_tune_table_says_what_changed(calibrated) -> None:
    """The human output has the per-bar change table and names the calibration."""
    _, cal, _ = calibrated
    r = run("tune", PRESET, "--calibration", cal, "--note", "G#4")
    assert r.exit_code == 0, r.stderr
    for text in ("length change mm", "depth change mm", "uncalibrated",
                 "Stiffness calibrated from a prototype bar", "calibrated stiffness"):
        assert text in r.stdout, text


def test_tubes_table_is_kept_and_tables_are_not_overwritten(calibrated, tmp_path) -> None:
    """One file: measure adds [damping] and [stiffness] to a tubecal file, keeps [tubes]."""
    d, _, _ = calibrated
    take = d / "a4-prototype.wav"
    out = tmp_path / "shop.toml"
    out.write_text("# tube calibration (as tubecal writes it)\n[tubes]\n"
                   "gap_calibration = 1.25\ncoupling_calibration = 0.9\n", encoding="utf-8")
    args = ("measure", take, "--calibrate", PRESET, "--note", NOTE, "--no-tubes", "--out", out)
    run_json(*args)
    data = tomllib.loads(out.read_text(encoding="utf-8"))
    assert set(data) == {"damping", "stiffness", "tubes"}
    assert data["tubes"] == {"gap_calibration": 1.25, "coupling_calibration": 0.9}
    assert "# tube calibration (as tubecal writes it)" in out.read_text(encoding="utf-8")
    before = out.read_bytes()
    assert_one_line_error(run(*args), str(out), "[damping], [stiffness]", "--force")
    assert out.read_bytes() == before
    run_json(*args, "--force")
    assert tomllib.loads(out.read_text(encoding="utf-8"))["tubes"]["gap_calibration"] == 1.25
    # and tubecal's direction: [tubes] into a file that holds [damping] and [stiffness]
    from synth.reports.measure import calibration_text
    from synth.settings.damping import calibration_target

    target = calibration_target(out, ("tubes",), force=True)
    text = calibration_text(["# tubes again"], {"tubes": {"gap_calibration": 1.5}},
                            target.kept, target.header)
    again = tomllib.loads(text)
    assert again["tubes"] == {"gap_calibration": 1.5}
    assert again["stiffness"] == data["stiffness"] and again["damping"] == data["damping"]
    with pytest.raises(Exception, match=r"already holds \[tubes\]"):
        calibration_target(out, ("tubes",))


def test_a_file_that_is_not_a_calibration_is_refused(calibrated, tmp_path) -> None:
    """An existing non-calibration TOML at --out: one line, exit 2, untouched."""
    d, _, _ = calibrated
    out = tmp_path / "preset.toml"
    out.write_text(tomli_w.dumps({"name": "x", "blank": {"width_m": 0.05}}), encoding="utf-8")
    before = out.read_bytes()
    r = run("measure", d / "a4-prototype.wav", "--calibrate", PRESET, "--note", NOTE,
            "--no-tubes", "--out", out)
    assert_one_line_error(r, str(out), "already exists; use --force")
    assert out.read_bytes() == before


def test_tune_calibration_without_stiffness_is_refused(tmp_path) -> None:
    """--calibration FILE without [stiffness]: one line, exit 2."""
    f = tmp_path / "tubes-only.toml"
    f.write_text("[tubes]\ngap_calibration = 1.2\n", encoding="utf-8")
    r = run("tune", PRESET, "--calibration", f, "--note", "A4")
    assert_one_line_error(r, str(f), "no [stiffness] table")


def test_tune_calibration_with_solid_is_refused(calibrated) -> None:
    """--calibration with --solid is not supported yet: one line, exit 2, before solving."""
    _, cal, _ = calibrated
    r = run("tune", PRESET, "--calibration", cal, "--note", "A4", "--solid")
    assert_one_line_error(r, "--solid", "stiffness calibration")


def test_json_of_measure_holds_the_stiffness(calibrated) -> None:
    """The calibration JSON carries the fit (scale, factors, residual, uncertainty)."""
    _, _, st = calibrated
    for key in ("youngs_modulus_scale", "factors", "model_hz", "measured_hz", "tolerance_hz",
                "residual_cents", "rms_residual_cents", "scale_uncertainty",
                "factor_uncertainty", "youngs_modulus_pa"):
        assert key in st, key
    json.dumps(st, allow_nan=False)


def test_recovered_under_the_tube(tmp_path) -> None:
    """The prototype recorded over its tube: vertical 1 taken back by the model's pull.

    The truth's tube is cut 30 cents above the truth's bar, as the model's is above
    its own, so the pull in cents is the same and the recovery stays within the
    frequency-resolution bound (measured: 1.0199996).
    """
    take = wav(tmp_path / "a4-over-tube.wav", render_truth(tubes=True))
    r = run("measure", take, "--calibrate", PRESET, "--note", NOTE, "--out",
            tmp_path / "cal.toml", "--json")
    assert r.exit_code == 0, r.stderr
    st = json.loads(r.stdout)["calibration"]["stiffness"]
    assert st["youngs_modulus_scale"] == pytest.approx(HIDDEN_SCALE, rel=0.01)  # issue
    assert abs(st["youngs_modulus_scale"] / HIDDEN_SCALE - 1) <= st["scale_uncertainty"]
    assert "tube pull" in r.stderr and "--no-tubes" in r.stderr


def test_tune_takes_the_file_the_preset_names(calibrated) -> None:
    """Without --calibration, tune uses the [stiffness] of the preset's calibration_file."""
    d, _, st = calibrated
    preset = d / "names-its-calibration.toml"
    preset.write_text(PRESET.read_text(encoding="utf-8")
                      + '\n[damping]\ncalibration_file = "cal.toml"\n', encoding="utf-8")
    doc = run_json("tune", preset, "--note", "A4")
    used = doc["stiffness_calibration"]
    assert used["youngs_modulus_scale"] == pytest.approx(st["youngs_modulus_scale"], rel=1e-8)
    assert used["source"].endswith("cal.toml")
    assert [c["note"] for c in used["changes"]] == ["A4"]
    # the plain preset has no calibration file: no stiffness table in its JSON
    assert "stiffness_calibration" not in run_json("tune", PRESET, "--note", "A4")


@pytest.mark.parametrize(("table", "needle"), [
    ("youngs_modulus_scale = 3.0\nfactors = [1.0, 1.0, 1.0]",
     "stiffness.youngs_modulus_scale = 3: too large; allowed: 0.5 to 2"),
    ("youngs_modulus_scale = 1.0\nfactors = [1.0, 1.0]",
     "stiffness.factors = [1, 1]: must hold exactly 3 numbers"),
    ("youngs_modulus_scale = 1.0\nfactors = [1.0, 1.0, 1.0]\nfoo = 1",
     "stiffness.foo = 1: unknown key"),
    ("factors = [1.0, 1.0, 1.0]", "youngs_modulus_scale"),
])
def test_bad_stiffness_table_is_one_line(tmp_path, table, needle) -> None:
    """A [stiffness] table out of range, short, with a stray key or missing one: exit 2."""
    f = tmp_path / "cal.toml"
    f.write_text("[stiffness]\n" + table + "\n", encoding="utf-8")
    assert_one_line_error(run("tune", PRESET, "--calibration", f, "--note", "A4"), str(f),
                          needle)
