"""Voice plans cached on disk: a stored plan equals a fresh one; any change of setting misses."""

from __future__ import annotations

import dataclasses
import pickle
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import synth.voicing as voicing
from synth import plan_cache
from synth.voicing import Voicer

ROOT = Path(__file__).resolve().parents[2]


def _plan_arrays(voice) -> list:
    """Every number of a voice's plan, for exact comparison."""
    bank = voice.modes
    parts = [bank.frequency_hz, bank.decay_per_s, bank.amplitude, bank.phase_rad,
             np.asarray(voice.channel_gains), voice.onset]
    for pair in voice.pairs:
        parts.append(np.array([*pair.frequency_hz, *pair.decay_per_s, *pair.amplitude,
                               *pair.phase_rad, pair.weight_1]))
    return parts


def _strikes(demo, notes=("F3", "A4", "C6")):
    v = Voicer(demo)
    return [v.strike_voice(n, velocity=0.7, across=0.1) for n in notes]


def test_stored_plan_equals_fresh_plan(demo, tmp_path, monkeypatch) -> None:
    """Plans read back from disk are bit-identical to plans computed without a cache.

    Independent path: the same Voicer with the cache switched off.
    """
    monkeypatch.setenv(plan_cache.CACHE_ENV, "off")
    fresh = _strikes(demo)
    monkeypatch.setenv(plan_cache.CACHE_ENV, str(tmp_path))
    _strikes(demo)                       # computes and stores
    # a note model, a contact and the strike's plan (modes, pairs, onset) each
    assert len(list((tmp_path / "plans").glob("*.pkl"))) == 9

    def refuse(*args, **kwargs):
        raise AssertionError("planned again although the plan is stored")

    monkeypatch.setattr(voicing, "solve_bar", refuse)
    monkeypatch.setattr(voicing, "simulate_contact", refuse)
    monkeypatch.setattr(voicing, "render", refuse)
    stored = _strikes(demo)              # a new Voicer: everything from disk
    for a, b in zip(fresh, stored, strict=True):
        for x, y in zip(_plan_arrays(a), _plan_arrays(b), strict=True):
            np.testing.assert_array_equal(x, y)


@pytest.mark.parametrize("voicer", [
    {"motor_rate_rev_per_s": 3.0},     # turning discs: the pieces cached apart
    {"tubes": False}, {"attack": False}, {"channels": 1, "sample_rate": 44100.0}])
def test_stored_variant_equals_fresh(demo, tmp_path, monkeypatch, voicer) -> None:
    """Each way of planning a strike reads back from disk what it computes without a cache.

    Independent path: the same settings with the cache switched off; start,
    damping and the stereo gains included.
    """
    def strikes():
        v = Voicer(demo, **voicer)
        return [v.strike_voice("A4", time_s=t, velocity=0.6, release_s=t + 0.5,
                               pedal=((0.0, 1.0), (0.8, 0.2))) for t in (0.0, 0.37)]

    monkeypatch.setenv(plan_cache.CACHE_ENV, "off")
    fresh = strikes()
    monkeypatch.setenv(plan_cache.CACHE_ENV, str(tmp_path))
    strikes()
    stored = strikes()
    for a, b in zip(fresh, stored, strict=True):
        assert (a.start_sample, a.damping, a.label) == (b.start_sample, b.damping, b.label)
        for x, y in zip(_plan_arrays(a), _plan_arrays(b), strict=True):
            np.testing.assert_array_equal(x, y)


def test_unreadable_entry_is_made_again(demo, tmp_path, monkeypatch) -> None:
    """A truncated entry counts as a miss and is rewritten."""
    monkeypatch.setenv(plan_cache.CACHE_ENV, str(tmp_path))
    first = _strikes(demo, ("A4",))[0]
    for path in (tmp_path / "plans").glob("*.pkl"):
        path.write_bytes(path.read_bytes()[:10])
    again = _strikes(demo, ("A4",))[0]
    for x, y in zip(_plan_arrays(first), _plan_arrays(again), strict=True):
        np.testing.assert_array_equal(x, y)
    for path in (tmp_path / "plans").glob("*.pkl"):
        pickle.loads(path.read_bytes())


def _model_key(inst, note="A4", **voicer):
    return Voicer(inst, **voicer)._plan_key("note-model", note)


def test_key_changes_with_every_setting_that_matters(demo) -> None:
    """Changing a bar, the alloy, the temperature, tubes, channels or note changes the key."""
    base = _model_key(demo)
    assert _model_key(demo) == base
    bar = demo.bars["A4"]
    thicker = dataclasses.replace(demo, bars={**demo.bars, "A4": dataclasses.replace(
        bar, width_m=bar.width_m * (1 + 1e-12))})
    denser = dataclasses.replace(demo, material=dataclasses.replace(
        demo.material, density_kg_m3=demo.material.density_kg_m3 + 1e-9))
    warmer = dataclasses.replace(demo, temperature_c=demo.temperature_c + 0.5)
    keys = [base, _model_key(thicker), _model_key(denser), _model_key(warmer),
            _model_key(demo, tubes=False), _model_key(demo, channels=1),
            _model_key(demo, note="A#4")]
    assert len(set(keys)) == len(keys)


def test_contact_key_changes_with_the_strike(demo) -> None:
    """Mallet, speed, position and the stroke across the bar each change the contact key."""
    v = Voicer(demo)
    head = voicing._mallet("medium")
    soft = voicing._mallet("soft")
    args = [("A4", head, 1.0, 0.45, 0.0), ("A4", soft, 1.0, 0.45, 0.0),
            ("A4", head, 1.0 + 1e-12, 0.45, 0.0), ("A4", head, 1.0, 0.46, 0.0),
            ("A4", head, 1.0, 0.45, 0.1)]
    keys = {v._plan_key("contact", *a) for a in args}
    assert len(keys) == len(args)


def test_key_is_the_same_in_another_process(demo) -> None:
    """A key made in a fresh interpreter equals this one (no addresses or hash seeds in it)."""
    code = ("from synth.config import presets_dir\n"
            "from synth.settings.instrument import load_instrument\n"
            "from synth.voicing import Voicer\n"
            "inst = load_instrument(presets_dir() / 'instruments' / 'lantern-street-bars.toml')\n"
            "print(Voicer(inst)._plan_key('note-model', 'A4'))\n")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True,
                         text=True, timeout=300,
                         env={"PYTHONPATH": str(ROOT), "PATH": "", "PYTHONHASHSEED": "12345"})
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == _model_key(demo)
