"""Speed of the sound engine (``barwright bench --only engine``).

Every figure is a median over repeats on one core (the kernels are single
threaded; BLAS is held to one thread).  The reference is measured in the same
run: numpy evaluating the same modes, ``a exp(-g t) sin(2 pi f t + phi)`` in
float64, block by block.

With ``--quick``: 1 s passages instead of 4 s (the numpy reference over 0.25 s
instead of 1 s) and medians of 3 repeats instead of 7 (the motor scale keeps its
20 s; its pair is checked over 2000 samples instead of 8000).

Figures
-------
engine.mode_samples_per_s
    Plain mode banks streamed through :func:`render_blocks`: a passage of 16
    voices x 32 modes, mono, all overheads included.
engine.kernel_mode_samples_per_s
    The bank kernel alone, one call, 64 modes.
engine.numpy_mode_samples_per_s, engine.numpy_ratio
    The numpy reference and the streamed engine's speed over it.
engine.gain_curve_mode_samples_per_s
    The same passage with a per-sample gain curve on every voice.
engine.pair_steps_per_s
    One coupled pair with a per-sample coupling curve, streamed.
engine.pair_decay_curve_steps_per_s
    The same with the second member's decay rate following a curve too.
engine.pair_kernel_steps_per_s
    The pair kernel alone (per-sample coupling).
engine.pair_note_vs_bank_ratio
    A 24-mode note with a coupled pair (coupling and weight curves) and a gain
    curve, over the same note's bare bank (time ratio).
engine.pair_decay_note_vs_bank_ratio
    The same with the pair's second decay rate following a curve as well.
engine.motor_pair_steps_per_s
    The demo scale (the 37 notes of ``lantern-street-bars`` 0.5 s apart, 20 s at
    48 kHz, stereo) with the motor at 3 rev/s: every note's bar-tube pair follows
    the rotor law the engine evaluates itself.  Pair-steps (sum over voices of
    pairs x samples from the strike to the end) over the thread CPU time of
    :func:`render_blocks` (modes included), median of 7 renders (3 with
    ``--quick``).  Target >= 150e6.
engine.motor_curve_pair_steps_per_s, engine.motor_pair_vs_curve_ratio
    The same voices with the law given only as per-sample curves (numpy
    streams, median of 3), and the first figure over it.
engine.motor_pair_max_error
    The scale's first pair rendered alone against scipy.linalg.expm of each
    frozen step (coefficients from the pair's curves), over 8000 samples (2000
    with ``--quick``): largest error relative to the pair's largest output.
    Target < 1e-9.
engine.warm_start_render_s
    A new Python process that imports the engine (kernels from numba's cache)
    and renders a 5 s, 24-mode note at 48 kHz: wall time.
"""

from __future__ import annotations

import functools
import math
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from synth.bench import bank_kernel_call, median_time
from synth.engine import ModeBank, ModePair, Voice, kernels, render, render_blocks
from synth.engine.render import _series_coefficients
from synth.engine.voice import Curve
from synth.errors import ModelError

FS = 48000.0


def _passage(rng: np.random.Generator, n_voices: int, n_modes: int, n_samples: int,
             curve=None) -> list[Voice]:
    spacing = max(1, n_samples // (4 * n_voices))
    voices = []
    for i in range(n_voices):
        f = rng.uniform(150.0, 12000.0, n_modes)
        voices.append(Voice(i * spacing, ModeBank(f, rng.uniform(0.2, 3.0, n_modes),
                                                  rng.uniform(0.01, 0.05, n_modes),
                                                  rng.uniform(-3, 3, n_modes)),
                            gain_curve=curve))
    return voices


def _drain(voices, n_samples) -> None:
    for _ in render_blocks(voices, n_samples, sample_rate=FS, retire_db=None):
        pass


def _numpy_voice_blocks(voices, n_samples, block=8192) -> None:
    out = np.zeros(block)
    for b0 in range(0, n_samples, block):
        n = min(block, n_samples - b0)
        out[:n] = 0.0
        for v in voices:
            lo = max(b0, v.start_sample)
            if lo >= b0 + n:
                continue
            t = (np.arange(lo, b0 + n) - v.start_sample) / FS
            m = v.modes
            y = (m.amplitude[:, None] * np.exp(-np.outer(m.decay_per_s, t))
                 * np.sin(2 * np.pi * np.outer(m.frequency_hz, t) + m.phase_rad[:, None]))
            out[lo - b0:n] += y.sum(axis=0)


def _table_curve(values: np.ndarray):
    def curve(first, n):
        return values[first:first + n]
    return curve


def _warm_start_s() -> float:
    code = (
        "import numpy as np\n"
        "from synth.engine import ModeBank, Voice, render_blocks\n"
        "rng = np.random.default_rng(1)\n"
        "v = Voice(0, ModeBank(rng.uniform(150, 9000, 24), rng.uniform(0.5, 3, 24),"
        " rng.uniform(0.01, 0.05, 24)))\n"
        "for _ in render_blocks([v], 5 * 48000, sample_rate=48000): pass\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)  # fill the cache if empty
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", code], check=True)
    return time.perf_counter() - t0


def run(quick: bool = False) -> dict[str, float]:
    """Run the engine suite; return figures keyed by dotted name."""
    repeats = 3 if quick else 7
    seconds = 1.0 if quick else 4.0
    n = int(seconds * FS)
    rng = np.random.default_rng(20261202)
    figures: dict[str, float] = {}
    with threadpool_limits(limits=1):
        # plain banks, streamed
        n_voices, n_modes = 16, 32
        voices = _passage(rng, n_voices, n_modes, n)
        _drain(voices, 1024)  # compile or load from the cache
        active = sum(n - v.start_sample for v in voices) * n_modes
        t = median_time(lambda: _drain(voices, n), repeats)
        figures["engine.mode_samples_per_s"] = active / t

        # numpy reference on the same voices over a shorter stretch
        n_np = int(0.25 * FS) if quick else int(1.0 * FS)
        active_np = sum(max(0, n_np - v.start_sample) for v in voices) * n_modes
        t_np = median_time(lambda: _numpy_voice_blocks(voices, n_np), max(3, repeats // 2))
        figures["engine.numpy_mode_samples_per_s"] = active_np / t_np
        figures["engine.numpy_ratio"] = figures["engine.mode_samples_per_s"] / (active_np / t_np)

        # bank kernel alone
        k = 64
        bank_kernel = bank_kernel_call(rng.uniform(150.0, 12000.0, k), rng.uniform(0.2, 3.0, k),
                                       rng.uniform(0.01, 0.05, k), np.zeros(k), n, FS)
        figures["engine.kernel_mode_samples_per_s"] = k * n / median_time(bank_kernel, repeats)

        # gain curves
        curve = _table_curve(0.5 + 0.4 * np.cos(2 * np.pi * 3.0 * np.arange(n + 1) / FS))
        voices_c = _passage(np.random.default_rng(20261202), n_voices, n_modes, n, curve)
        _drain(voices_c, 1024)
        t = median_time(lambda: _drain(voices_c, n), repeats)
        figures["engine.gain_curve_mode_samples_per_s"] = active / t

        # coupled pair with per-sample coupling
        steps = np.arange(n + 1)
        mu = _table_curve(5.0 * (1.0 + 0.5 * np.sin(2 * np.pi * 6.0 * (steps + 0.5) / FS)))
        g2 = _table_curve(26.0 + 8.0 * np.sin(2 * np.pi * 6.0 * (steps + 0.5) / FS))
        w2 = _table_curve(2.0 + np.cos(2 * np.pi * 6.0 * steps / FS))
        pair = ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0), coupling_rad_s=mu)
        pair_v = [Voice(0, ModeBank.empty(), pairs=(pair,))]
        _drain(pair_v, 1024)
        figures["engine.pair_steps_per_s"] = n / median_time(lambda: _drain(pair_v, n), repeats)
        pair_g = ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0), coupling_rad_s=mu,
                             decay_2_curve=g2)
        pair_gv = [Voice(0, ModeBank.empty(), pairs=(pair_g,))]
        _drain(pair_gv, 1024)
        figures["engine.pair_decay_curve_steps_per_s"] = n / median_time(
            lambda: _drain(pair_gv, n), repeats)

        # pair kernel alone
        om = np.array([2 * math.pi * 440.0, 2 * math.pi * 441.5])
        mu_arr = mu(0, n)
        w_arr = np.ones(n)
        d = 0.5 * abs(complex(17.54, om[0] - om[1])) / FS
        cosh_c, sinh_c = _series_coefficients(d * d + 1e-4, "bench")
        pstate = np.zeros(4)
        out = np.zeros((n, 1))
        gains = np.ones(1)
        empty = np.ones(0)

        def pair_kernel():
            pstate[:] = (1.0, 0.0, 0.0, 0.0)
            kernels._pair_add(out, 0, n, gains, empty, False, pstate, om, 0.46,
                              np.array([18.0]), False, 1.0 / FS, mu_arr, 1.0, w_arr,
                              cosh_c, sinh_c, np.ones(1))

        figures["engine.pair_kernel_steps_per_s"] = n / median_time(pair_kernel, repeats)

        # one note: coupled pair + curves vs the bare bank
        note_bank = ModeBank(440.0 * np.array([1, 4, 10] + list(range(11, 32))),
                             rng.uniform(0.3, 3.0, 24), rng.uniform(0.01, 0.05, 24))
        bare = [Voice(0, note_bank)]
        t_bare = median_time(lambda: _drain(bare, n), repeats)
        for name, extra in (("pair_note_vs_bank_ratio", {}),
                            ("pair_decay_note_vs_bank_ratio", {"decay_2_curve": g2})):
            full_pair = ModePair((440.0, 441.5), (0.46, 18.0), (1.0, 0.0),
                                    coupling_rad_s=mu, weight_2=w2, **extra)
            full = [Voice(0, note_bank, gain_curve=curve, pairs=(full_pair,))]
            _drain(full, 1024)
            t_full = median_time(functools.partial(_drain, full, n), repeats)
            figures[f"engine.{name}"] = t_full / t_bare
        figures.update(_motor_figures(repeats, quick))
    figures["engine.warm_start_render_s"] = _warm_start_s()
    return figures


def _curve(c) -> Curve:
    if not callable(c):
        raise ModelError("bench: the motor's pair carries no curves to check against")
    return c


def _motor_figures(repeats: int, quick: bool) -> dict[str, float]:
    """Render the demo scale with the motor running; one pair against the exact steps."""
    from dataclasses import replace

    import scipy.linalg

    from synth.bench.userjobs import _cache_in, _preset, _strikes
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    inst = load_instrument(_preset())
    strikes, seconds = _strikes("scale", inst.notes, quick)
    n = int(round(seconds * FS))
    with tempfile.TemporaryDirectory() as tmp, _cache_in(Path(tmp) / "cache"):
        voicer = Voicer(inst, sample_rate=FS, motor_rate_rev_per_s=3.0)
        voices = [voicer.strike_voice(note, time_s=t, velocity=vel, release_s=t)
                  for note, t, vel in strikes]
    curves = [replace(v, pairs=tuple(replace(p, modulation=None) for p in v.pairs))
              for v in voices]
    steps = sum(len(v.pairs) * (n - v.start_sample) for v in voices)

    def drain(vs) -> None:
        for _ in render_blocks(vs, n, sample_rate=FS, channels=2):
            pass

    cpu = time.thread_time
    figures = {"engine.motor_pair_steps_per_s": steps / median_time(
                   lambda: drain(voices), repeats, clock=cpu),
               "engine.motor_curve_pair_steps_per_s": steps / median_time(
                   lambda: drain(curves), 3, clock=cpu)}
    figures["engine.motor_pair_vs_curve_ratio"] = (figures["engine.motor_pair_steps_per_s"]
                                                   / figures["engine.motor_curve_pair_steps_per_s"])
    # one pair alone against scipy's exponential of each frozen step
    pair = voices[0].pairs[0]
    m = 2000 if quick else 8000
    got = render([Voice(0, ModeBank.empty(), pairs=(pair,))], m, sample_rate=FS,
                 retire_db=None)[:, 0]
    mu, w2, g2 = (_curve(c)(0, m) for c in (pair.coupling_rad_s, pair.weight_2,
                                            pair.decay_2_curve))
    s1 = complex(-pair.decay_per_s[0], 2 * math.pi * pair.frequency_hz[0])
    om2 = 2 * math.pi * pair.frequency_hz[1]
    a = np.array([pair.amplitude[0] * np.exp(1j * pair.phase_rad[0]),
                  pair.amplitude[1] * np.exp(1j * pair.phase_rad[1])])
    ref = np.empty(m)
    for j in range(m):
        ref[j] = pair.weight_1 * a[0].imag + w2[j] * a[1].imag
        a = scipy.linalg.expm(np.array([[s1, 1j * mu[j]], [1j * mu[j], complex(-g2[j], om2)]])
                              / FS) @ a
    figures["engine.motor_pair_max_error"] = float(np.max(np.abs(got - ref))
                                                   / np.max(np.abs(ref)))
    return figures
