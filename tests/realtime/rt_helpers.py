"""Drive a live player offline, block by block, and render the same events offline."""

from __future__ import annotations

import numpy as np

EPS = np.finfo(np.float64).eps


def blocks_of(scheme, n: int, seed: int = 0):
    """Block sizes covering ``n`` samples: a fixed size, or ``"random"`` (32 to 1024)."""
    rng = np.random.default_rng(seed)
    sizes = []
    done = 0
    while done < n:
        b = int(rng.integers(32, 1025)) if scheme == "random" else int(scheme)
        b = min(b, n - done)
        sizes.append(b)
        done += b
    return sizes


def run_pool(pool, n: int, scheme, *, dtype=np.float64) -> np.ndarray:
    """Return what the audio callback would have written over ``n`` samples."""
    out = np.zeros((n, pool.channels), dtype=dtype)
    row = 0
    for b in blocks_of(scheme, n):
        pool.process(out[row:row + b])
        row += b
    return out


def set_gain_now(pool, gain: float) -> None:
    """Put the pool's gain at ``gain`` at once (no ramp), before the first block."""
    from synth.engine import kernels

    pool.fctl[kernels._F_GAIN] = gain
    pool.fctl[kernels._F_GAIN_TO] = gain


def rounding_bound(pool, n: int, gain: float, templates, steps_per_sample: int = 8) -> float:
    """Return the rounding bound of the pool against the offline render, full scale.

    Both sides advance every mode and pair by one multiplication per sample
    from a closed-form anchor (the modes every 1024 samples, the pairs from
    the strike): each step adds at most ``steps_per_sample`` roundings of the
    state, so after ``n`` samples the difference stays below
    ``steps_per_sample n eps sum|a|`` with ``sum|a|`` the start amplitudes of the
    struck ``templates`` (one entry per strike) times the gain.  A complex rotation
    of a state rounds each part twice; a pair step forms its coefficients
    (a few roundings of numbers of size 1) and applies them (four products
    per part): 8 roundings of the state's size per sample in all.
    """
    from synth.engine import kernels

    total = sum(kernels._rt_plan_bound(p, pool.p_nmodes, pool.p_amp, pool.p_npairs,
                                       pool.p_pair, pool.p_w2max, pool.p_gmax)
                for p in templates)
    return steps_per_sample * n * EPS * total * gain
