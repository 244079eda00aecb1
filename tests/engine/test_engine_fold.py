"""Constant coupled pairs rendered as two plain modes against the per-sample coupled update.

Independent path: the engine's own per-sample update of the coupled pair (exact
matrix exponential per step, ``FOLD_CONSTANT_PAIRS = False``), which
test_engine_pairs.py checks against closed forms.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest

from synth.engine import ModeBank, ModePair, Voice, render

FS = 48000.0
N = int(2 * FS)
EPS = np.finfo(float).eps
render_module = importlib.import_module("synth.engine.render")

PAIRS = [
    ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0), coupling_rad_s=5.0, weight_2=2.0),
    ModePair((440.0, 452.0), (0.3, 25.0), (1.0, 0.2), phase_rad=(0.3, -1.0),
                coupling_rad_s=12.0, weight_1=0.5, weight_2=3.0),
    ModePair((220.0, 220.0), (0.2, 0.2), (1.0, 0.0), coupling_rad_s=3.0),   # equal members
    ModePair((3000.0, 2990.0), (2.0, 40.0), (0.5, 0.5), coupling_rad_s=30.0,
                weight_2=-4.0),
]


def _voice(pair, damping=()):
    return Voice(100, ModeBank([1000.0, 2500.0], [1.0, 2.0], [0.3, 0.2], [0.1, 0.2]),
                 pairs=(pair,), channel_gains=(0.8, 0.6), damping=damping)


@pytest.mark.parametrize("damping", [(), ((48000, 20.0), (72000, 0.0))])
@pytest.mark.parametrize("pair", PAIRS)
def test_folded_pair_equals_the_coupled_update(pair, damping, monkeypatch) -> None:
    """Same samples within the per-sample update's rounding.

    Bound: each of the N steps of the coupled update rounds a complex 2x2
    matrix-vector product (about 8 eps relative to the state's magnitude) and the
    errors add up at most linearly, so the two renders differ by at most
    8 N eps (|w1| + |w2|) |a0| times the largest channel gain; the folded modes,
    re-anchored like any plain mode, add only rounding of their own.
    """
    voice = _voice(pair, damping)
    folded = render_module._Prepared(voice, FS, 2, N)
    assert folded.pairs == [] and folded.n_modes == 4
    monkeypatch.setattr(render_module, "FOLD_CONSTANT_PAIRS", False)
    coupled = render([voice], N, sample_rate=FS, retire_db=None)
    monkeypatch.setattr(render_module, "FOLD_CONSTANT_PAIRS", True)
    plain = render([voice], N, sample_rate=FS, retire_db=None)
    scale = (abs(pair.weight_1) + abs(pair.weight_2)) * np.hypot(*pair.amplitude) * 0.8
    assert np.max(np.abs(plain - coupled)) <= 8 * N * EPS * scale


def test_pairs_that_cannot_be_folded_stay_pairs() -> None:
    """A varying coupling, or damping on one member only, keeps the per-sample update."""
    varying = ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0),
                          coupling_rad_s=lambda first, n: np.full(n, 5.0))
    one_damped = ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0), coupling_rad_s=5.0,
                             damped=(True, False))
    for pair, damping in ((varying, ()), (one_damped, ((48000, 20.0),))):
        assert len(render_module._Prepared(_voice(pair, damping), FS, 2, N).pairs) == 1
    # the same one-member damping without any damping change folds
    assert render_module._Prepared(_voice(one_damped), FS, 2, N).pairs == []
