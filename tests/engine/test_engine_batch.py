"""Voices rendered together in one kernel call against each voice rendered on its own.

Independent path: the per-voice bank kernel (``BATCH_BANKS = False``), which
test_engine_modes.py checks against numpy evaluating each mode in closed form.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest

from synth.engine import ModeBank, ModePair, Voice, render

FS = 48000.0
EPS = np.finfo(float).eps
render_module = importlib.import_module("synth.engine.render")


def _passage(rng, n_voices=24, n_samples=int(3 * FS)):
    voices = []
    for i in range(n_voices):
        start = int(rng.integers(0, n_samples // 2))
        n = int(rng.integers(1, 9))
        bank = ModeBank(rng.uniform(100, 15000, n), rng.uniform(0.2, 6.0, n),
                        rng.uniform(-0.05, 0.05, n), rng.uniform(-3, 3, n))
        damping = ((start + int(rng.integers(1, FS)), 25.0),) if i % 3 == 0 else ()
        pairs = ((ModePair((440.0, 443.0), (0.5, 20.0), (0.05, 0.0),
                              coupling_rad_s=lambda first, k: np.full(k, 6.0)),)
                 if i % 7 == 0 else ())
        stop = start + int(FS) if i % 5 == 0 else None
        voices.append(Voice(start, bank, channel_gains=(0.9, 0.4) if i % 2 else (0.7,),
                            damping=damping, pairs=pairs, stop_sample=stop))
    return voices, n_samples


@pytest.mark.parametrize("block_size", [16384, 1000])
def test_batched_voices_equal_voices_one_by_one(rng, block_size, monkeypatch) -> None:
    """Same samples to rounding, with damping changes, stops, a varying pair and stereo.

    Bound: both paths evaluate each mode exactly at an anchor and then step a
    complex one-pole recursion for at most ANCHOR_EVERY samples, each step
    rounding the state by a few eps relative, so each sample differs by at most
    about 8 ANCHOR_EVERY eps times the sum of the mode amplitudes (times the
    largest gain, < 1).
    """
    voices, n = _passage(rng)
    monkeypatch.setattr(render_module, "BATCH_BANKS", False)
    alone = render(voices, n, sample_rate=FS, block_size=block_size, retire_db=None)
    monkeypatch.setattr(render_module, "BATCH_BANKS", True)
    together = render(voices, n, sample_rate=FS, block_size=block_size, retire_db=None)
    total = sum(float(np.sum(np.abs(v.modes.amplitude))) for v in voices)
    assert np.max(np.abs(together - alone)) <= 8 * render_module.ANCHOR_EVERY * EPS * total
