"""Clean renders: attack, end level, sidecar and shared defaults of the sound commands.

The attack follows the contact force, every file ends below its end level, the
sidecar holds every resolved setting, and the sound commands share one set of
defaults.

Checks against something the render does not compute itself:

- the attack: the Hunt & Crossley contact force is zero at the first touch and
  grows with the compression (Hunt, K. H. and Crossley, F. R. E., "Coefficient
  of restitution interpreted as damping in vibroimpact", J. Appl. Mech. 42(2),
  440-445, 1975; from memory), so the modes start from rest and sample 0 of the
  file is zero; while the force pushes one way and the fundamental's period is
  long beside the time (A4: 2.3 ms against the first 0.5 ms), each sample is
  further from zero than the one before.  The file is 24-bit PCM: each sample
  is rounded by at most half a step (2^-24 of full scale), so sample 0 is within
  half a step of zero and a difference of neighbours within one step of the
  true difference;
- the end: the last 10 ms of each file read back with libsndfile (soundfile)
  against the level the command says, re the file's own peak;
- the sidecar: against the values asked for on the command line, the preset's
  ``[sound]`` table read here with tomllib and the preset file hashed here with
  hashlib;
- defaults: read from the command line's own option objects and ``--help``.
"""

from __future__ import annotations

import hashlib
import json
import math
import tomllib

import numpy as np
import pytest
import soundfile as sf
import typer.main
from cli_helpers import DEMO, DEMO_7075, run

from synth.cli import app
from synth.config import presets_dir
from synth.defaults import RENDER_DEFAULTS

HALF_STEP_24 = 2.0 ** -24   # rounding of a 24-bit PCM sample, full scale 1
WALTZ = presets_dir() / "events" / "harbour-waltz.toml"


def _last_10ms_db(path) -> float:
    """Largest magnitude of the file's last 10 ms re its peak, dB (libsndfile read)."""
    x, fs = sf.read(path, dtype="float64", always_2d=True)
    tail = np.max(np.abs(x[-int(round(0.01 * fs)):]))
    return 20 * np.log10(max(tail, 1e-300) / np.max(np.abs(x)))


def test_strike_attack_rises_from_zero_with_the_contact_force(tmp_path):
    """A4, default mallet and strength: the first 0.5 ms start at zero and grow as the force.

    Before the change sample 0 was 0.126 of full scale (the free modes
    extrapolated back to the first touch).  Now sample 0 is zero within the
    file's rounding, and each sample of the first 0.5 ms lies within the
    momentum envelope ``rho(t) S``: ``rho`` is the momentum the Hunt & Crossley
    contact has given by ``t`` over all it gives (integrated here with the
    trapezoid rule from the contact's force pulse, which
    :func:`synth.physics.mallet.simulate_contact` returns), ``S`` the sum of the
    voice's free amplitudes, scaled to the file by its gain.  ``rho`` itself
    must start at 0 and rise monotonically (the force is >= 0).  Measured: the
    file's first 0.5 ms reach 0.016 of its peak (tubed A4, the tube still
    building up), and the envelope allows 0.03 of full scale there.  A strictly
    monotonic rise is not asked: partials 2 and 3 (periods 0.57 and 0.22 ms) turn
    within the window; the largest fall between neighbours is 0.4 % of the peak.
    """
    from synth.physics.mallet import simulate_contact
    from synth.settings.instrument import load_instrument
    from synth.settings.mallet import load_mallet
    from synth.voicing import Voicer

    out = tmp_path / "a4.wav"
    r = run("strike", DEMO, "A4", "--duration", "0.2", "--channels", "1", "--out", out)
    assert r.exit_code == 0, r.stderr
    x, fs = sf.read(out, dtype="float64", always_2d=True)
    side = json.loads(out.with_suffix(".json").read_text())
    n = int(round(0.0005 * fs))                   # 24 samples at 48 kHz
    assert abs(x[0, 0]) <= HALF_STEP_24

    plan = Voicer(load_instrument(DEMO), channels=1)
    model = plan.model("A4")
    sound = model.sounding()
    modes = [model.modes.modes[i] for i, _ in sound]
    geo = model.modes.geometry
    res = simulate_contact(
        load_mallet(side["mallet"]), side["speed_m_s"],
        omega_rad_s=np.array([m.angular_frequency for m in modes]),
        modal_mass_kg=np.array([m.modal_mass for m in modes]),
        shape_value=np.array([float(m.vertical_displacement_at(side["position"] * geo.length_m,
                                                               side["across"] * geo.width_m))
                              for m in modes]),
        decay_per_s=np.array([b.decay_per_s for _, b in sound]))
    force, t = np.asarray(res.force_n), np.asarray(res.time_s)
    assert force[0] == 0.0 and np.all(force >= 0.0)
    momentum = np.concatenate([[0.0], np.cumsum(0.5 * (force[1:] + force[:-1]) * np.diff(t))])
    assert np.all(np.diff(momentum) >= 0.0)
    rho = np.interp(np.arange(n) / fs, t, momentum / momentum[-1])
    voice = plan.strike_voice("A4", speed_m_s=side["speed_m_s"])
    free_sum = float(np.sum(np.abs(voice.modes.amplitude))) + sum(
        np.hypot(*p.amplitude) * (abs(p.weight_1) + abs(p.weight_2)) for p in voice.pairs)
    gain = 10 ** (side["gain_db"] / 20)
    assert np.all(np.abs(x[:n, 0]) <= rho * free_sum * gain + HALF_STEP_24)
    assert np.max(np.abs(x[:n, 0])) > 0.0


def test_hard_mallet_starts_at_zero(tmp_path):
    """A hard mallet (contact 0.5 ms): sample 0 is still zero, then the free ring."""
    out = tmp_path / "c5.wav"
    r = run("strike", DEMO, "C5", "--mallet", "hard", "--duration", "0.2", "--out", out)
    assert r.exit_code == 0, r.stderr
    x, _ = sf.read(out, dtype="float64", always_2d=True)
    assert np.max(np.abs(x[0])) <= HALF_STEP_24


@pytest.mark.parametrize(("args", "ending"), [
    (("strike", DEMO, "A4"), "rang out"),
    (("strike", DEMO, "A4", "--duration", "2", "--format", "pcm16"), "faded"),
    (("strike", DEMO, "F3", "--motor-rate", "3", "--duration", "1.5"), "faded"),
    (("chord", DEMO, "F3 A4 C5", "--duration", "2"), "faded"),
    (("chord", DEMO, "A4 C5", "--end-level", "-40"), "rang out"),
    (("render", DEMO, WALTZ), "rang out"),
    (("render", DEMO, WALTZ, "--tail", "0.5", "--gain-db", "-20"), "faded"),
], ids=["strike", "strike-length", "strike-motor", "chord-length", "chord-40dB", "render",
        "render-tail"])
def test_every_sound_command_ends_below_its_end_level(tmp_path, args, ending):
    """The last 10 ms lie below the stated end level; the summary and the sidecar say how."""
    out = tmp_path / "x.wav"
    r = run(*args, "--out", out)
    assert r.exit_code == 0, r.stderr
    side = json.loads(out.with_suffix(".json").read_text())
    level = float(args[args.index("--end-level") + 1]) if "--end-level" in args else -60.0
    assert side["end_level_db"] == level and side["ending"] == ending
    measured = _last_10ms_db(out)
    assert measured < level, measured
    # the sidecar's figure is taken before the samples are rounded to the format: the
    # tail and the peak each move by at most half a step (2^-24 or 2^-16 of full scale)
    # null: the last 10 ms are silent (every mode retired), -inf dB, which JSON cannot hold
    tail_db = side["last_10ms_db_re_peak"]
    tail_db = -math.inf if tail_db is None else tail_db
    assert tail_db < level
    half = HALF_STEP_24 if sf.info(out).subtype == "PCM_24" else 2.0 ** -16
    peak = float(np.max(np.abs(sf.read(out, dtype="float64")[0])))
    said, got = 10 ** (tail_db / 20), 10 ** (measured / 20)
    assert abs(said - got) <= 2 * half / (peak - half), (said, got)
    assert f"end: {ending.split()[0]}" in r.stdout or (ending == "faded" and "end: cut" in
                                                        r.stdout), r.stdout
    if ending == "faded" and "--duration" in args:
        assert sf.info(out).frames == round(float(args[args.index("--duration") + 1]) * 48000)


def test_render_says_when_its_longest_ring_out_is_reached(tmp_path):
    """No silent 30 s cut: a passage rings out as long as it needs, or says it was cut."""
    out = tmp_path / "w.wav"
    r = run("render", DEMO, WALTZ, "--pedal", "1", "--out", out)
    assert r.exit_code == 0, r.stderr
    side = json.loads(out.with_suffix(".json").read_text())
    assert side["ending"] == "rang out" and "30 s" not in r.stdout
    assert side["longest_s"] >= side["seconds"]


def test_compare_files_end_below_the_end_level(tmp_path):
    """compare: A, B and AB end below -60 dB re their peak, and the report says so."""
    out = tmp_path / "cmp"
    r = run("compare", DEMO, DEMO_7075, "--notes", "A4", "--tail", "1", "--out", out)
    assert r.exit_code == 0, r.stderr
    assert "end: both cut at" in r.stdout
    for name in ("A.wav", "B.wav", "AB.wav"):
        assert _last_10ms_db(out / name) < RENDER_DEFAULTS.end_level_db, name
    side = json.loads((out / "A.json").read_text())
    assert side["end_level_db"] == RENDER_DEFAULTS.end_level_db and side["ending"] == "faded"


def test_sidecar_holds_every_resolved_value(tmp_path):
    """Every setting that shaped the render is in the sidecar, equal to what was asked."""
    out = tmp_path / "asked.wav"
    r = run("strike", DEMO, "A4", "--position", "0.3", "--across", "0.1", "--speed", "1.5",
            "--pedal", "0.5", "--hold", "0.2", "--motor-rate", "3", "--gain-db", "-20",
            "--sample-rate", "44100", "--end-level", "-70", "--mallet", "hard",
            "--duration", "0.5", "--out", out)
    assert r.exit_code == 0, r.stderr
    side = json.loads(out.with_suffix(".json").read_text())
    asked = {"position": 0.3, "across": 0.1, "speed_m_s": 1.5, "pedal": 0.5, "hold_s": 0.2,
             "motor_rate_rev_per_s": 3.0, "requested_gain_db": -20.0, "gain_db": -20.0,
             "sample_rate_hz": 44100, "end_level_db": -70.0, "mallet": "hard", "tubes": True,
             "requested_seconds": 0.5, "channels": 2, "note": "A4",
             "preset_sha256": hashlib.sha256(DEMO.read_bytes()).hexdigest()}
    assert {k: side[k] for k in asked} == asked

    out = tmp_path / "default.wav"
    r = run("strike", DEMO, "A4", "--duration", "0.3", "--out", out)
    assert r.exit_code == 0, r.stderr
    side = json.loads(out.with_suffix(".json").read_text())
    sound = tomllib.loads(DEMO.read_text())["sound"]
    lo, hi = sound["speed_min_m_s"], sound["speed_max_m_s"]
    v = RENDER_DEFAULTS.velocity
    resolved = {"position": sound["position"], "across": sound["across"],
                "mallet": sound["mallet"], "velocity": v, "pedal": RENDER_DEFAULTS.pedal,
                "end_level_db": RENDER_DEFAULTS.end_level_db, "motor_rate_rev_per_s": 0.0,
                "tubes": True, "sample_rate_hz": 48000}
    assert {k: side[k] for k in resolved} == resolved
    # the [sound] table maps strength 0..1 geometrically between its two speeds
    # (README, [sound]; evaluated here)
    assert side["speed_m_s"] == pytest.approx(lo * (hi / lo) ** v, rel=1e-12)
    for key in ("position", "across", "speed_m_s", "mallet", "pedal", "motor_rate_rev_per_s",
                "tubes", "end_level_db", "gain_db", "sample_rate_hz", "preset_sha256",
                "ending", "fade_s", "last_10ms_db_re_peak"):
        assert side[key] is not None, key


def _params(name: str) -> dict:
    command = typer.main.get_command(app).get_command(None, name)
    return {p.name: p for p in command.params}


def test_sound_commands_share_one_set_of_defaults():
    """strike, chord, render and compare: one strength, one pedal, one end level."""
    from synth.engine.score import Score, Strike
    from synth.reports.compare import DEFAULT_VELOCITY, FADE_S, events_passage

    strike, chord, render = _params("strike"), _params("chord"), _params("render")
    assert strike["pedal"].default == render["pedal"].default == RENDER_DEFAULTS.pedal
    assert chord["velocity"].default == DEFAULT_VELOCITY == RENDER_DEFAULTS.velocity
    assert strike["velocity"].default is None and strike["speed"].default is None
    for params in (strike, chord, render):
        assert params["end_level"].default == RENDER_DEFAULTS.end_level_db
    # no set length: every command rings out by default
    assert strike["duration"].default is None and chord["duration"].default is None
    assert render["tail"].default is None
    score = Score((Strike(0.0, "A4", velocity=0.6),), ())
    assert events_passage(score).default_pedal == RENDER_DEFAULTS.pedal
    # the fade compare applies keeps its last 10 ms below the end level:
    # sin^2(pi h / (2 F)) at h = 10 ms
    assert np.sin(np.pi * 0.01 / (2 * FADE_S)) ** 2 <= 10 ** (RENDER_DEFAULTS.end_level_db / 20)
    for name in ("strike", "chord"):
        text = run(name, "--help").stdout
        assert f"default {RENDER_DEFAULTS.velocity:g}" in " ".join(text.split())
