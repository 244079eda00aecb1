"""Retiring voices: what is dropped stays below the stated level re the output's peak.

The reference is the same render with retirement disabled (``retire_db=None``):
the module docstring of :mod:`synth.engine.render` proves that the summed tails
of the retired voices stay below ``retire_db`` re the output's peak; these
checks compare the two renders sample by sample against that level.  The
amplitude bounds rest on closed forms: a decaying mode a exp(-g t) (physics.md,
section 6) and the eigenvalues of a coupled pair (physics.md, section 8;
Fletcher & Rossing 1998, ch. 2).
"""

from __future__ import annotations

import gc
import importlib
import math

import numpy as np
import pytest

from synth.engine import (
    RETIRE_EVERY,
    ModeBank,
    ModePair,
    Voice,
    constant_power_pan,
    peak_bound,
    render,
    render_blocks,
)

FS = 48000.0


def _opening(first, n):
    """Return a pulsing factor 0.2..1 (a disc opening and closing a tube mouth)."""
    t = np.arange(first, first + n) / FS
    return 0.6 + 0.4 * np.cos(2 * np.pi * 6.0 * t)


def passage(rng, n_strikes=40, spacing=2400, curves=False):
    """Strikes every ``spacing`` samples: banks, bar-tube pairs, damping, pans.

    With ``curves`` each pair has a coupling, a tube weight and a tube decay
    following the opening (as with the motor running).
    """
    voices = []
    for k in range(n_strikes):
        f0 = rng.uniform(150.0, 1500.0)
        bank = ModeBank(f0 * np.array([1.0, 3.9, 9.8, 2.7]), rng.uniform(0.5, 40.0, 4),
                        rng.uniform(-0.1, 0.1, 4), rng.uniform(-3, 3, 4))
        amp = rng.uniform(0.02, 0.2)
        if curves:
            pair = ModePair((f0, f0 * 1.017), (rng.uniform(0.3, 2.0), 8.0), (amp, 0.0),
                               coupling_rad_s=lambda first, n: 3.0 * _opening(first, n),
                               weight_1=0.5, weight_2=lambda first, n: 12.0 * _opening(first, n),
                               decay_2_curve=lambda first, n: 8.0 + 20.0 * (1 - _opening(first, n)))
        else:
            pair = ModePair((f0, f0 * 1.017), (rng.uniform(0.3, 2.0), 8.0), (amp, 0.0),
                               coupling_rad_s=3.0, weight_1=0.5, weight_2=12.0)
        damping = [(k * spacing + 20000, 30.0)] if k % 3 == 0 else []
        voices.append(Voice(k * spacing, bank, channel_gains=constant_power_pan(
            rng.uniform(-1, 1)), pairs=(pair,), damping=damping, label=f"s{k}"))
    return voices


@pytest.mark.parametrize("curves", [False, True])
@pytest.mark.parametrize("level_db", [-100.0, -60.0, -40.0])
def test_retiring_changes_output_less_than_stated_level(rng, curves, level_db):
    """|render(retire_db) - render(None)| < 10^(retire_db/20) x peak, at every sample.

    The passage is short, so -100 dB retires a few voices only; -60 and -40 dB
    retire most of them.  The check asserts that voices were retired (the
    renders differ), so it cannot pass by keeping everything.
    """
    voices = passage(rng, curves=curves)
    n = 40 * 2400 + 131072  # 4.7 s
    full = render(voices, n, sample_rate=FS, retire_db=None)
    cut = render(voices, n, sample_rate=FS, retire_db=level_db)
    peak = np.max(np.abs(full))
    diff = np.max(np.abs(cut - full))
    assert diff < 10 ** (level_db / 20) * peak
    assert diff > 0.0  # something was retired


def test_retirement_does_not_depend_on_block_size(rng):
    """Decisions fall on a fixed grid of the output clock: same samples for any block size.

    1e-13 of the peak, as for the render without retirement (rounding of the
    compiled group loops only).
    """
    voices = passage(rng, n_strikes=12, curves=True)
    n = 12 * 2400 + 6 * RETIRE_EVERY
    ref = render(voices, n, sample_rate=FS, retire_db=-40.0, block_size=n)
    for block in (777, 4096, 10000):
        y = render(voices, n, sample_rate=FS, retire_db=-40.0, block_size=block)
        assert np.max(np.abs(y - ref)) <= 1e-13 * np.max(np.abs(ref))


def test_retired_voice_state_is_released(rng):
    """Once retired, a voice's render state is no longer held (memory follows the sounding voices).

    More plain strikes than a render keeps as validated (``PREPARED_KEPT``), 0.1 s
    apart, each decaying by 100 dB in about 0.2 s: by the end only the last few can
    be held.
    """
    render_mod = importlib.import_module("synth.engine.render")
    prepared = render_mod._Prepared
    n_voices = render_mod.PREPARED_KEPT + 44
    voices = [Voice(k * 4800, ModeBank([440.0 + k], [60.0], [0.5])) for k in range(n_voices)]
    stop = n_voices - 10
    blocks = render_blocks(voices, n_voices * 4800, sample_rate=FS, block_size=4800)
    for k, _ in enumerate(blocks):
        if k == stop:  # the render is suspended here, its sounding voices alive
            gc.collect()
            held = sum(isinstance(o, prepared) for o in gc.get_objects())
    assert 1 <= held <= 10
    with_all = render_blocks(voices, n_voices * 4800, sample_rate=FS, block_size=4800,
                             retire_db=None)
    for k, _ in enumerate(with_all):
        if k == stop:
            gc.collect()
            kept = sum(isinstance(o, prepared) for o in gc.get_objects())
    assert kept == stop + 1  # without retirement every voice begun is held (the contrast)


def test_single_mode_is_retired_once_below_level():
    """A lone mode a exp(-g t) is retired on the first grid point where a exp(-g t) < 1e-5 a.

    Its own start is the output's peak region, so the level re peak is known in
    closed form: peak <= a, and the mode reaches 1e-5 a at t = ln(1e5)/g.
    """
    g = 10.0
    v = Voice(0, ModeBank([1000.0], [g], [1.0], [math.pi / 2]))  # starts at its peak, 1.0
    n = int(2.0 * FS)
    y = render([v], n, sample_rate=FS)[:, 0]
    t_level = math.log(1e5) / g * FS
    grid_after = math.ceil(t_level / RETIRE_EVERY) * RETIRE_EVERY
    assert grid_after + RETIRE_EVERY < n
    assert np.all(y[grid_after + RETIRE_EVERY:] == 0.0)   # retired by the next grid point
    assert np.any(y[: int(t_level) - RETIRE_EVERY] != 0.0)  # not before the level is reached


def test_fast_modes_retire_while_their_voice_sounds_on(monkeypatch):
    """Upper modes that decay fast are dropped alone; the slow fundamental rings on.

    Three modes a_k exp(-g_k t) (closed form; physics.md, section 6) with
    g = 0.5, 40 and 90 1/s: the two fast ones are below 1e-5 of the peak after
    0.29 s, the fundamental stays above it for 23 s.  Against the render that
    keeps everything the difference stays below -100 dB re the peak; after 1 s
    the render equals that of the fundamental alone to rounding (1e-13 of the
    peak, as for block sizes), and the engine computed fewer mode-samples.
    """
    render_mod = importlib.import_module("synth.engine.render")
    kernels = importlib.import_module("synth.engine.kernels")
    work = [0]
    banks_add = kernels._banks_add

    def counting(out, o0, t0, t1, *columns):
        work[0] += columns[2].size * (t1 - t0)
        return banks_add(out, o0, t0, t1, *columns)

    monkeypatch.setattr(kernels, "_banks_add", counting)
    bank = ModeBank([220.0, 871.0, 2156.0], [0.5, 40.0, 90.0], [1.0, 0.6, 0.4], [0.3, 1.1, 2.0])
    voice = Voice(0, bank, channel_gains=constant_power_pan(0.2))
    alone = Voice(0, ModeBank([220.0], [0.5], [1.0], [0.3]),
                  channel_gains=constant_power_pan(0.2))
    n = int(3.0 * FS)
    full = render([voice], n, sample_rate=FS, retire_db=None)
    work_full, work[0] = work[0], 0
    cut = render([voice], n, sample_rate=FS)
    work_cut = work[0]
    fundamental = render([alone], n, sample_rate=FS, retire_db=None)
    peak = float(np.max(np.abs(full)))
    diff = np.abs(cut - full)
    assert np.max(diff) < 1e-5 * peak
    assert np.max(diff) > 0.0
    after = int(1.0 * FS)
    assert np.max(np.abs(cut[after:] - fundamental[after:])) <= 1e-13 * peak
    assert np.max(np.abs(full[after:] - fundamental[after:])) > 0.0  # kept modes still add
    # the fast modes went within the first second: at most 1 s of them was computed
    assert work_cut <= work_full - 2 * (n - after)
    monkeypatch.setattr(render_mod, "RETIRE_MODES", False)
    work[0] = 0
    voices_only = render([voice], n, sample_rate=FS)
    assert work[0] == work_full  # whole-voice retirement alone keeps all three here
    assert np.array_equal(voices_only, full)


def test_peak_bound_holds_and_is_none_for_undeclared_curves(rng):
    """The advance bound is never below the rendered peak; curves need declared bounds."""
    voices = passage(rng, n_strikes=15)
    n = 15 * 2400 + 20000
    bound = peak_bound(voices, n, sample_rate=FS)
    peak = np.max(np.abs(render(voices, n, sample_rate=FS, retire_db=None)))
    assert bound >= peak
    assert peak_bound(passage(rng, n_strikes=3, curves=True), n, sample_rate=FS) is None
    declared = [Voice(0, ModeBank([500.0], [3.0], [0.5]), gain_curve=_opening,
                      gain_curve_max=1.0)]
    assert peak_bound(declared, n, sample_rate=FS) == pytest.approx(0.5, rel=1e-8)


@pytest.mark.parametrize("fold", [True, False])
def test_peak_bound_of_one_pair_is_its_eigenmode_sum(fold, monkeypatch):
    """A constant pair: bound = sum_j |w . V_j| |(V^-1 a0)_j| (eigenvectors of the 2x2 system).

    Checked against numpy's eigendecomposition of
    [[i om1 - g1, i mu], [i mu, i om2 - g2]] (physics.md, section 8).  Folded into
    two plain modes (the default) the bound is that sum, to the rounding of the
    decomposition (cond(V) eps, < 1e-13 here); kept as a pair, the engine adds
    the margins of the pair's steps.
    """
    monkeypatch.setattr(importlib.import_module("synth.engine.render"),
                        "FOLD_CONSTANT_PAIRS", fold)
    pair = ModePair((300.0, 305.0), (0.4, 9.0), (0.3, 0.0), coupling_rad_s=4.0,
                       weight_1=0.2, weight_2=15.0)
    a = np.array([[complex(-0.4, 2 * math.pi * 300.0), 4.0j],
                  [4.0j, complex(-9.0, 2 * math.pi * 305.0)]])
    _, vec = np.linalg.eig(a)
    expected = float(np.sum(np.abs(np.array([0.2, 15.0]) @ vec)
                            * np.abs(np.linalg.solve(vec, [0.3, 0.0]))))
    got = peak_bound([Voice(0, ModeBank.empty(), pairs=(pair,))], 1000, sample_rate=FS)
    if fold:  # plus the relative margin of 1e-9 every advance bound carries
        assert got == pytest.approx(expected * (1 + 1e-9), rel=1e-10)
    else:
        # the engine adds relative margins of 1e-6 (rounding of the pair's steps) and
        # 1e-9, and 1e-12 cond(V) (|w1| + |w2|) |a0| for the rounding of V^-1 a0
        # (< 1e-10 here)
        assert got == pytest.approx(expected * (1 + 1e-6) * (1 + 1e-9), rel=1e-10)
    # far below the magnitude bound (|w1| + |w2|) |a0| of a tube that barely moves
    assert got < 0.25 * (0.2 + 15.0) * 0.3


def test_declared_bound_is_enforced():
    """A curve above its declared bound is refused (the retirement relies on it)."""
    from synth.errors import ModelError

    v = Voice(0, ModeBank([500.0], [3.0], [0.5]), gain_curve=_opening, gain_curve_max=0.5)
    with pytest.raises(ModelError, match="gain_curve_max"):
        render([v], 1000, sample_rate=FS)
