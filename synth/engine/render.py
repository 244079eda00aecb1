"""Render generic voices to samples: streaming, sample-exact, guarded.

This module validates voices, allocates buffers and calls the compiled loops of
:mod:`synth.engine.kernels`.  It knows modes, coupled pairs and gain curves,
never bars or notes.

Rendering
---------
:func:`render_blocks` yields the output as consecutive float blocks of shape
``(block_size, channels)`` (the last one shorter), so a long passage never
needs more memory than one block plus the voices' state.  :func:`render`
collects the blocks into one array.  The result does not depend on the block
size: a voice re-anchors its modes on a fixed grid of its own clock
(:data:`ANCHOR_EVERY` samples), not at block edges, every coefficient is the
same whatever the block, and voices are summed in list order, so any two block
sizes give the same samples bit for bit in practice (tests allow rounding).

Voices start at ``start_sample`` and fall silent at ``stop_sample``, both
sample-exact; damping changes act from the exact sample given.  A voice whose
level has fallen below ``silence_db`` re its start (the sum of its mode
amplitudes and pair state magnitudes, decays and damping included, weights
and gain curves taken as constant) is dropped; the decision is taken on the
anchor grid, so it too is independent of the block size.

Guards
------
Every block is checked before it is handed out: a NaN, an infinity or a sample
larger than the mathematical bound of the voices sounding in it (sum of their
amplitudes times their largest gains in the block; decays are never negative,
so no correct render exceeds it) means the simulation ran away.  The block is
then muted (never yielded) and :class:`~synth.errors.ModelError` is raised,
naming the voices sounding in it (a pair whose state energy grows, which the
exact steps cannot do, is named on its own).

Gain and peak
-------------
Peak normalisation needs the peak before the first sample is written.  The
render is deterministic, so the caller runs it twice: :func:`measure_peak`
streams it once and keeps only the largest magnitude, :func:`plan_gain` turns
that peak into the gain to apply, and the second pass streams
``render_blocks(..., gain=plan.gain)`` into the file.  The second pass then
peaks exactly where the plan says.  Typical use by a command::

    plan = plan_gain(measure_peak(voices, n, sample_rate=fs), target_dbfs=-1.0)
    write_wav(path, render_blocks(voices, n, sample_rate=fs, gain=plan.gain), ...)
    # report plan.peak_dbfs and plan.gain_db; warn if plan.limited

With ``gain_db`` given, :func:`plan_gain` keeps that fixed gain, reports
``would_clip`` if the peak would pass full scale and, unless told otherwise,
lowers the gain to the target ceiling (``limited``) so nothing ever clips.

References
----------
.. [1] Smith, J. O., "Introduction to Digital Filters with Audio
   Applications", W3K Publishing, 2007, ISBN 978-0-9745607-1-7 (complex
   one-pole resonators; ISBN from memory).
.. [2] Moler, C. and Van Loan, C., "Nineteen dubious ways to compute the
   exponential of a matrix, twenty-five years later", SIAM Review 45(1), 3-49,
   2003, doi:10.1137/S00361445024180 (DOI from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Final

import numpy as np

from synth.engine import kernels
from synth.engine.voice import ModePair, Voice
from synth.errors import ConfigError, ModelError

DEFAULT_BLOCK_SIZE: Final[int] = 16384
"""Samples per streamed block (341 ms at 48 kHz; 256 kB per block in stereo)."""

ANCHOR_EVERY: Final[int] = 1024
"""Re-anchoring interval of the mode bank, samples of the voice's own clock."""

DEFAULT_SILENCE_DB: Final[float] = -140.0
"""Level re its start below which a voice is dropped, dB (below 24-bit resolution)."""

PAIR_MAX_COUPLING_PER_SAMPLE: Final[float] = 0.01
"""Largest allowed ``|mu| / sample_rate`` of a coupled pair (rad per sample)."""

PAIR_MAX_DECAY_PER_SAMPLE: Final[float] = 0.005
"""Largest allowed ``(g1 + g2) / (2 sample_rate)`` of a pair whose ``g2`` follows a curve."""

_SERIES_TOL: Final[float] = 1e-18
_RUNAWAY_MARGIN: Final[float] = 1.0 + 1e-9
_PAIR_ENERGY_MARGIN: Final[float] = 1.0 + 1e-6

Progress = Callable[[int, int], None]
"""Progress callback: ``progress(samples_done, samples_total)``."""


# --------------------------------------------------------------------------- prepared voices
class _Segments:
    """Damping schedule of one voice on its own clock (m = sample - start)."""

    def __init__(self, voice: Voice, sample_rate: float):
        start = voice.start_sample
        initial = 0.0
        later: list[tuple[int, float]] = []
        for s, e in voice.damping:
            if s <= start:
                initial = e
            else:
                later.append((s - start, e))
        starts = [0] + [m for m, _ in later]
        rates = [initial] + [e for _, e in later]
        self.start_m = np.array(starts, dtype=np.int64)
        self.end_m = np.append(self.start_m[1:], np.iinfo(np.int64).max // 2)
        self.extra_per_s = np.array(rates, dtype=np.float64)
        self.extra_per_sample = self.extra_per_s / sample_rate
        nep = np.zeros(len(starts))
        for i in range(1, len(starts)):
            nep[i] = nep[i - 1] + self.extra_per_sample[i - 1] * (starts[i] - starts[i - 1])
        self.nepers = nep

    def index(self, m: int) -> int:
        return int(np.searchsorted(self.start_m, m, side="right") - 1)

    def nepers_at(self, m):
        """Extra decay accumulated by voice clock ``m`` (scalar or array), nepers."""
        m = np.asarray(m, dtype=np.float64)
        i = np.searchsorted(self.start_m, m, side="right") - 1
        return self.nepers[i] + self.extra_per_sample[i] * (m - self.start_m[i])

    def pieces(self, m_lo: int, m_hi: int):
        """Yield (m_from, m_to, segment index) covering [m_lo, m_hi)."""
        i = self.index(m_lo)
        m = m_lo
        while m < m_hi:
            nxt = int(self.start_m[i + 1]) if i + 1 < self.start_m.size else m_hi
            end = min(nxt, m_hi)
            yield m, end, i
            m = end
            i += 1


class _PairState:
    def __init__(self, pair: ModePair, sample_rate: float, where: str,
                 extra_rates_per_s: np.ndarray):
        self.pair = pair
        self.omega = np.array([2 * math.pi * f for f in pair.frequency_hz])
        self.decay = np.array(pair.decay_per_s)
        self.damped = np.array(pair.damped, dtype=np.float64)
        self.g1, self.g2 = (float(g) for g in pair.decay_per_s)
        self.damped_1, self.damped_2 = (float(b) for b in pair.damped)
        nyq = sample_rate / 2
        if max(pair.frequency_hz) >= nyq:
            raise ModelError(
                f"{where}: coupled pair frequency {max(pair.frequency_hz):g} Hz is at or above "
                f"half the sample rate ({nyq:g} Hz); drop it or raise the sample rate"
            )
        a, p = pair.amplitude, pair.phase_rad
        self.state = np.array([a[0] * math.cos(p[0]), a[0] * math.sin(p[0]),
                               a[1] * math.cos(p[1]), a[1] * math.sin(p[1])])
        self.norm0 = math.hypot(a[0], a[1])
        self.constants: dict[float, np.ndarray] = {}
        self.dt = 1.0 / sample_rate
        # Number of series terms: enough for the largest |z| = |q dt|^2 this pair can reach,
        # |q|^2 <= |d|^2 + mu^2 over every damping segment, with |mu| dt capped.
        d_max = max(
            0.5 * abs(complex(-(g[0] - g[1]), self.omega[0] - self.omega[1]))
            for g in (self.rates(e) for e in extra_rates_per_s)
        )
        self.vary_decay_2 = pair.decay_2_curve is not None
        if self.vary_decay_2:
            # g2 follows a curve, capped so that |Re m| dt <= PAIR_MAX_DECAY_PER_SAMPLE;
            # then |Re d| dt <= that cap too.
            d_max = math.hypot(0.5 * abs(self.omega[0] - self.omega[1]),
                               PAIR_MAX_DECAY_PER_SAMPLE * sample_rate)
            x = PAIR_MAX_DECAY_PER_SAMPLE
            n_exp = 1
            while x ** n_exp / math.factorial(n_exp) >= _SERIES_TOL:
                n_exp += 1
            self.exp_coef = np.array([1.0 / math.factorial(k) for k in range(n_exp)])
        else:
            self.exp_coef = np.ones(1)
        z_bound = (d_max * self.dt) ** 2 + PAIR_MAX_COUPLING_PER_SAMPLE ** 2
        self.cosh_coef, self.sinh_coef = _series_coefficients(z_bound, where)

    def rates(self, extra_per_s: float) -> np.ndarray:
        """Decay rates of the two members with the damping schedule's extra, 1/s."""
        return self.decay + self.damped * extra_per_s


def _series_coefficients(z_bound: float, where: str) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients 1/(2k)! and 1/(2k+1)! up to the first term below the tolerance."""
    if z_bound > 1.0:
        raise ModelError(
            f"{where}: coupled pair detuning or coupling too large for the sample rate "
            f"(|q dt|^2 = {z_bound:.3g} > 1); raise the sample rate"
        )
    cosh, sinh = [1.0], [1.0]
    k = 0
    while True:
        k += 1
        cosh.append(1.0 / math.factorial(2 * k))
        sinh.append(1.0 / math.factorial(2 * k + 1))
        if z_bound ** (k + 1) / math.factorial(2 * k + 2) < _SERIES_TOL:
            break
    return np.array(cosh), np.array(sinh)


class _Prepared:
    """Validated, unpacked voice with its running state for one render."""

    def __init__(self, voice: Voice, sample_rate: float, n_channels: int, n_samples: int,
                 silence_db: float, index: int = 0):
        self.voice = voice
        self.index = index
        where = voice.where
        self.where = where
        bank = voice.modes
        nyq = sample_rate / 2
        if bank.n_modes and float(bank.frequency_hz.max()) >= nyq:
            k = int(np.argmax(bank.frequency_hz))
            raise ModelError(
                f"{where}: mode {k} at {bank.frequency_hz[k]:g} Hz is at or above half the "
                f"sample rate ({nyq:g} Hz); drop it or raise the sample rate"
            )
        if voice.n_channels == n_channels:
            self.gains = np.array(voice.channel_gains, dtype=np.float64)
        elif voice.n_channels == 1:
            self.gains = np.full(n_channels, voice.channel_gains[0])
        else:
            raise ModelError(
                f"{where}: has {voice.n_channels} channel gains, the render has {n_channels} "
                "channels"
            )
        self.max_gain = float(np.max(np.abs(self.gains)))
        self.cycles = bank.frequency_hz / sample_rate
        self.decay_per_sample = bank.decay_per_s / sample_rate
        self.amplitude = bank.amplitude
        self.phase = bank.phase_rad
        self.n_modes = bank.n_modes
        self.state = np.zeros((2, bank.n_modes))       # Re, Im of each mode
        self.clock = np.array([0, -1], dtype=np.int64)  # state's voice clock, last anchor
        self.abs_amp = np.abs(bank.amplitude)
        self.segments = _Segments(voice, sample_rate)
        self.pairs = [_PairState(p, sample_rate, where, self.segments.extra_per_s)
                      for p in voice.pairs]
        self.bank_bound = float(self.abs_amp.sum())
        self.level0 = self.bank_bound + sum(p.norm0 for p in self.pairs)
        self.start = voice.start_sample
        end = n_samples if voice.stop_sample is None else min(voice.stop_sample, n_samples)
        self.end = max(self.start, min(end, self._silent_from(end, silence_db, sample_rate)))

    # level on the voice clock; never increases, so a bisection on the grid finds the drop
    def _level(self, m: int, sample_rate: float) -> float:
        nep = float(self.segments.nepers_at(m))
        level = float(np.sum(self.abs_amp * np.exp(-self.decay_per_sample * m - nep)))
        for p in self.pairs:
            g = p.decay / sample_rate * m + p.damped * nep
            level += p.norm0 * math.exp(-float(np.min(g)))
        return level

    def _silent_from(self, end: int, silence_db: float, sample_rate: float) -> int:
        if self.level0 == 0.0:
            return self.start
        threshold = self.level0 * 10.0 ** (silence_db / 20.0)
        span = end - self.start
        hi = -(-span // ANCHOR_EVERY)  # grid points 1..hi cover the voice
        if hi < 1 or self._level(hi * ANCHOR_EVERY, sample_rate) >= threshold:
            return end
        lo = 0  # level(lo) >= threshold, level(hi) < threshold
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if self._level(mid * ANCHOR_EVERY, sample_rate) < threshold:
                hi = mid
            else:
                lo = mid
        return self.start + hi * ANCHOR_EVERY


def _curve_values(curve, first: int, n: int, what: str, where: str) -> tuple[np.ndarray, float]:
    """Evaluate a curve for ``n`` samples from ``first``; return it and its largest magnitude."""
    try:
        values = np.asarray(curve(first, n), dtype=np.float64)
    except ModelError:
        raise
    except Exception as exc:  # a caller-supplied curve failed; name it, keep the cause
        raise ModelError(f"{where}: {what} failed at sample {first}: {exc}") from exc
    if values.shape != (n,):
        raise ModelError(
            f"{where}: {what} returned shape {values.shape} for {n} samples from sample "
            f"{first}; it must return n values"
        )
    biggest = _max_abs(values)
    if not math.isfinite(biggest):  # NaN and Inf both surface in the maximum
        bad = first + int(np.flatnonzero(~np.isfinite(values))[0])
        raise ModelError(f"{where}: {what} is not finite at sample {bad}")
    return values, biggest


def _max_abs(values: np.ndarray) -> float:
    """Largest magnitude (NaN if any value is NaN), without a temporary array."""
    if not values.size:
        return 0.0
    return max(float(values.max()), -float(values.min()))


def _constant(cache: dict, value: float, n: int) -> np.ndarray:
    """Return ``n`` copies of ``value`` from a per-pair cache (the kernels only read it)."""
    arr = cache.get(value)
    if arr is None or arr.size < n:
        arr = np.full(max(n, DEFAULT_BLOCK_SIZE), value)
        cache[value] = arr
    return arr[:n]


def _channels_of(voices: Sequence[Voice], channels: int | None) -> int:
    if channels is None:
        counts = {v.n_channels for v in voices}
        channels = max(counts) if counts else 1
    if channels not in (1, 2):
        raise ConfigError(f"channels = {channels}: must be 1 (mono) or 2 (stereo)")
    return channels


def _check_common(n_samples: int, sample_rate: float, block_size: int) -> None:
    if isinstance(n_samples, bool) or not isinstance(n_samples, int | np.integer) \
            or n_samples < 0:
        raise ConfigError(f"n_samples = {n_samples!r}: must be a whole number >= 0")
    if not (isinstance(sample_rate, int | float) and math.isfinite(sample_rate)
            and sample_rate > 0):
        raise ConfigError(f"sample_rate = {sample_rate!r}: must be a positive number of Hz")
    if isinstance(block_size, bool) or not isinstance(block_size, int | np.integer) \
            or block_size < 1:
        raise ConfigError(f"block_size = {block_size!r}: must be a whole number >= 1")


# --------------------------------------------------------------------------- rendering
def render_blocks(
    voices: Sequence[Voice],
    n_samples: int,
    *,
    sample_rate: float,
    block_size: int = DEFAULT_BLOCK_SIZE,
    channels: int | None = None,
    gain: float = 1.0,
    dtype=np.float64,
    silence_db: float = DEFAULT_SILENCE_DB,
    progress: Progress | None = None,
) -> Iterator[np.ndarray]:
    """Stream the sum of ``voices`` over ``n_samples`` samples, block by block.

    Parameters
    ----------
    voices : sequence of Voice
        What to render; summed in this order.
    n_samples : int
        Length of the output in samples, >= 0.
    sample_rate : float
        Output sample rate in Hz.
    block_size : int, optional
        Samples per yielded block (the last is shorter); does not change the result.
    channels : int, optional
        1 or 2; default: the most channel gains any voice has (mono voices are
        copied to both channels of a stereo render).
    gain : float, optional
        Linear gain applied to every sample (see :func:`plan_gain`).
    dtype : numpy dtype, optional
        ``float64`` (default) or ``float32``; the engine works in float64.
    silence_db : float, optional
        A voice is dropped once its level is this far below its start, dB (< 0).
    progress : callable, optional
        Called as ``progress(samples_done, n_samples)`` after each block.

    Yields
    ------
    block : ndarray, shape (n, channels)
        The next ``n <= block_size`` output samples, a fresh array each time.

    Raises
    ------
    ModelError
        A voice is invalid for this render (mode at or above half the sample
        rate, wrong number of channel gains, coupling too fast), a curve
        returns bad values, or the output runs away (NaN, Inf or above the
        voices' amplitude bound); the offending block is not yielded.
    """
    _check_common(n_samples, sample_rate, block_size)
    dtype = np.dtype(dtype)
    if dtype not in (np.dtype(np.float32), np.dtype(np.float64)):
        raise ConfigError(f"dtype = {dtype}: must be float32 or float64")
    gain = float(gain)
    if not math.isfinite(gain):
        raise ConfigError(f"gain = {gain}: must be finite")
    if not (math.isfinite(silence_db) and silence_db < 0):
        raise ConfigError(f"silence_db = {silence_db}: must be a negative number of dB")
    voices = list(voices)
    for v in voices:
        if not isinstance(v, Voice):
            raise ModelError(f"render: expected Voice objects, got {type(v).__name__}")
    n_ch = _channels_of(voices, channels)
    n_samples = int(n_samples)
    block_size = int(block_size)
    sample_rate = float(sample_rate)
    prepared = [_Prepared(v, sample_rate, n_ch, n_samples, silence_db, i)
                for i, v in enumerate(voices)]
    prepared = sorted((p for p in prepared if p.end > p.start), key=lambda p: p.start)
    return _stream(prepared, n_samples, n_ch, block_size, gain, dtype, sample_rate, progress)


def _stream(prepared, n_samples, n_ch, block_size, gain, dtype, sample_rate, progress):
    active: list[_Prepared] = []
    nxt = 0
    for b0 in range(0, n_samples, block_size):
        b1 = min(n_samples, b0 + block_size)
        while nxt < len(prepared) and prepared[nxt].start < b1:
            active.append(prepared[nxt])
            nxt += 1
        active.sort(key=lambda p: p.index)  # sum in list order, whatever the blocks
        buf = np.zeros((b1 - b0, n_ch))
        bound = 0.0
        for p in active:
            bound += _render_voice(p, buf, b0, b1, sample_rate)
        peak = _max_abs(buf)
        if not (peak <= bound * _RUNAWAY_MARGIN):
            names = ", ".join(p.where for p in active[:4]) + (" ..." if len(active) > 4 else "")
            raise ModelError(
                f"output ran away at samples {b0}..{b1 - 1} (peak {peak:.3g}, bound "
                f"{bound:.3g}; sounding: {names}); block muted, render stopped"
            )
        active = [p for p in active if p.end > b1]
        if gain != 1.0:
            buf *= gain
        if progress is not None:
            progress(b1, n_samples)
        yield buf if dtype == np.float64 else buf.astype(dtype)
    if n_samples == 0 and progress is not None:
        progress(0, 0)


def _render_voice(p: _Prepared, buf: np.ndarray, b0: int, b1: int, sample_rate: float) -> float:
    """Add voice ``p`` to ``buf`` (output rows b0..b1) and return its amplitude bound."""
    lo = max(b0, p.start)
    hi = min(b1, p.end)
    if hi <= lo:
        return 0.0
    n = hi - lo
    o0 = lo - b0
    voice = p.voice
    if voice.gain_curve is not None:
        curve, curve_max = _curve_values(voice.gain_curve, lo, n, "gain curve", p.where)
        use_curve = True
    else:
        curve = np.ones(0)
        curve_max = 1.0
        use_curve = False
    m_lo, m_hi = lo - p.start, hi - p.start
    seg = p.segments
    if p.n_modes:
        for m_a, m_b, i in seg.pieces(m_lo, m_hi):
            j0 = m_a - m_lo
            kernels._bank_add(
                buf, o0 + j0, p.gains, curve[j0:] if use_curve else curve, use_curve,
                p.state, p.clock, p.cycles, p.decay_per_sample, p.amplitude, p.phase,
                m_a, m_b, ANCHOR_EVERY, int(seg.start_m[i]), int(seg.end_m[i]),
                float(seg.nepers[i]), float(seg.extra_per_sample[i]),
            )
    bound = p.bank_bound
    for ps in p.pairs:
        pair = ps.pair
        if callable(pair.coupling_rad_s):
            mu, mu_max = _curve_values(pair.coupling_rad_s, lo, n, "coupling curve", p.where)
        else:
            mu = _constant(ps.constants, pair.coupling_rad_s, n)
            mu_max = abs(pair.coupling_rad_s)
        if mu_max > PAIR_MAX_COUPLING_PER_SAMPLE * sample_rate:
            raise ModelError(
                f"{p.where}: coupling {mu_max:g} rad/s exceeds "
                f"{PAIR_MAX_COUPLING_PER_SAMPLE:g} x sample rate; raise the sample rate"
            )
        if callable(pair.weight_2):
            w2, w2_max = _curve_values(pair.weight_2, lo, n, "pair weight curve", p.where)
        else:
            w2 = _constant(ps.constants, pair.weight_2, n)
            w2_max = abs(pair.weight_2)
        if ps.vary_decay_2:
            g2_curve, _ = _curve_values(pair.decay_2_curve, lo, n, "decay curve", p.where)
            if float(np.min(g2_curve)) < pair.decay_per_s[1]:
                k = int(np.argmin(g2_curve))
                raise ModelError(
                    f"{p.where}: decay curve = {g2_curve[k]:g} /s at sample {lo + k} is below "
                    f"the pair's decay_per_s[1] = {pair.decay_per_s[1]:g} /s, which must bound it"
                )
        for m_a, m_b, i in seg.pieces(m_lo, m_hi):
            j0 = m_a - m_lo
            j1 = m_b - m_lo
            extra = float(seg.extra_per_s[i])
            g1 = ps.g1 + ps.damped_1 * extra
            g2 = ps.g2 + ps.damped_2 * extra
            if ps.vary_decay_2:
                decay_2 = g2_curve[j0:j1] + ps.damped_2 * extra
                worst = 0.5 * (g1 + float(np.max(decay_2))) / sample_rate
                if worst > PAIR_MAX_DECAY_PER_SAMPLE:
                    raise ModelError(
                        f"{p.where}: coupled pair decays too fast for the sample rate "
                        f"((g1 + g2) / (2 fs) = {worst:.3g} > {PAIR_MAX_DECAY_PER_SAMPLE:g})"
                    )
            else:
                decay_2 = _constant(ps.constants, g2, 1)
            kernels._pair_add(
                buf, o0 + j0, m_b - m_a, p.gains, curve[j0:] if use_curve else curve, use_curve,
                ps.state, ps.omega, g1, decay_2, ps.vary_decay_2, ps.dt, mu[j0:j1],
                pair.weight_1, w2[j0:j1], ps.cosh_coef, ps.sinh_coef, ps.exp_coef,
            )
        energy = float(np.dot(ps.state, ps.state))
        if not (energy <= ps.norm0 ** 2 * _PAIR_ENERGY_MARGIN):
            raise ModelError(
                f"{p.where}: coupled pair state grew (|a|^2 = {energy:.3g} > "
                f"{ps.norm0 ** 2:.3g} at the start) by sample {hi}; block muted, render stopped"
            )
        bound += ps.norm0 * (abs(pair.weight_1) + w2_max)
    return bound * curve_max * p.max_gain


def render(
    voices: Sequence[Voice],
    n_samples: int,
    *,
    sample_rate: float,
    block_size: int = DEFAULT_BLOCK_SIZE,
    channels: int | None = None,
    gain: float = 1.0,
    dtype=np.float64,
    silence_db: float = DEFAULT_SILENCE_DB,
    progress: Progress | None = None,
) -> np.ndarray:
    """Render ``voices`` into one array (for short renders and tests).

    Takes the parameters of :func:`render_blocks`.

    Returns
    -------
    samples : ndarray, shape (n_samples, channels)
        The summed output, in ``dtype``.
    """
    voices = list(voices)
    blocks = render_blocks(voices, n_samples, sample_rate=sample_rate, block_size=block_size,
                           channels=channels, gain=gain, dtype=dtype, silence_db=silence_db,
                           progress=progress)
    n_ch = _channels_of(voices, channels)
    out = np.empty((int(n_samples), n_ch), dtype=dtype)
    row = 0
    for block in blocks:
        out[row:row + block.shape[0]] = block
        row += block.shape[0]
    return out


# --------------------------------------------------------------------------- gain and peak
def measure_peak(
    voices: Sequence[Voice],
    n_samples: int,
    *,
    sample_rate: float,
    block_size: int = DEFAULT_BLOCK_SIZE,
    channels: int | None = None,
    silence_db: float = DEFAULT_SILENCE_DB,
    progress: Progress | None = None,
) -> float:
    """Return the largest sample magnitude of the render, without keeping it.

    The first pass of a peak-normalised render (see the module docstring); the
    parameters are those of :func:`render_blocks`.

    Returns
    -------
    peak : float
        Largest absolute sample value over all channels at unit gain.
    """
    peak = 0.0
    for block in render_blocks(voices, n_samples, sample_rate=sample_rate,
                               block_size=block_size, channels=channels,
                               silence_db=silence_db, progress=progress):
        if block.size:
            peak = max(peak, _max_abs(block))
    return peak


@dataclass(frozen=True)
class GainPlan:
    """The gain a render applies and the peak it will have.

    Attributes
    ----------
    peak : float
        Largest sample magnitude of the render at unit gain.
    gain : float
        Linear gain to pass to :func:`render_blocks`.
    gain_db : float
        The same in dB (``-inf`` never occurs: a silent render gets gain 1).
    peak_dbfs : float
        Peak after the gain, dB re full scale (``-inf`` for a silent render).
    mode : str
        ``"normalise"`` (gain chosen to put the peak at the target) or
        ``"fixed"`` (gain given by the caller).
    requested_gain_db : float or None
        The fixed gain asked for, dB (``None`` when normalising).
    would_clip : bool
        The requested fixed gain would have put the peak above full scale (0 dBFS).
    limited : bool
        The fixed gain was lowered to the target ceiling so that nothing clips.
    """

    peak: float
    gain: float
    gain_db: float
    peak_dbfs: float
    mode: str
    requested_gain_db: float | None
    would_clip: bool
    limited: bool


def _db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


def plan_gain(
    peak: float,
    *,
    target_dbfs: float = -1.0,
    gain_db: float | None = None,
    limit: bool = True,
) -> GainPlan:
    """Choose the output gain from the measured peak.

    Parameters
    ----------
    peak : float
        Largest sample magnitude at unit gain (:func:`measure_peak`), >= 0.
    target_dbfs : float, optional
        Peak after normalisation, and ceiling of a limited fixed gain, in dB
        re full scale; <= 0 (default -1 dBFS).
    gain_db : float, optional
        Keep this fixed gain (dB) instead of normalising.
    limit : bool, optional
        With a fixed gain that would clip, lower it to ``target_dbfs``
        (default).  ``False`` keeps it and only reports ``would_clip``; the WAV
        writer then refuses the clipping samples.

    Returns
    -------
    GainPlan
        The gain to apply and what it does to the peak.

    .. note:: A silent render (peak 0) gets gain 1 in normalise mode.
    """
    peak = float(peak)
    if not (math.isfinite(peak) and peak >= 0):
        raise ModelError(f"peak = {peak}: must be finite and >= 0")
    target_dbfs = float(target_dbfs)
    if not (math.isfinite(target_dbfs) and target_dbfs <= 0):
        raise ConfigError(f"target peak = {target_dbfs:g} dBFS: must be <= 0 dBFS")
    ceiling = 10.0 ** (target_dbfs / 20.0)
    if gain_db is None:
        gain = ceiling / peak if peak > 0 else 1.0
        return GainPlan(peak, gain, _db(gain), _db(peak * gain), "normalise", None, False, False)
    gain_db = float(gain_db)
    if not math.isfinite(gain_db):
        raise ConfigError(f"gain = {gain_db} dB: must be finite")
    gain = 10.0 ** (gain_db / 20.0)
    would_clip = peak * gain > 1.0
    limited = False
    if would_clip and limit:
        gain = ceiling / peak
        limited = True
    return GainPlan(peak, gain, _db(gain), _db(peak * gain), "fixed", gain_db, would_clip,
                    limited)


def ring_out_sample(voices: Sequence[Voice], *, sample_rate: float,
                    level_db: float = -90.0) -> int | None:
    """Return the first sample by which every voice is ``level_db`` below its start.

    Use it to choose a render length that lets the voices ring out.  The level
    is the one used to drop voices (see the module docstring); a voice that
    stops earlier counts until its stop.

    Parameters
    ----------
    voices : sequence of Voice
        The voices.
    sample_rate : float
        Sample rate in Hz.
    level_db : float, optional
        How far below its start each voice must have fallen, dB (< 0).

    Returns
    -------
    int or None
        The sample, or ``None`` if some voice never decays (zero decay rates
        and no damping) and has no stop.
    """
    if not (math.isfinite(level_db) and level_db < 0):
        raise ConfigError(f"level_db = {level_db}: must be a negative number of dB")
    end = 0
    for v in voices:
        horizon = v.stop_sample if v.stop_sample is not None else v.start_sample + 2 ** 62
        p = _Prepared(v, float(sample_rate), v.n_channels, horizon, level_db)
        if p.end >= v.start_sample + 2 ** 62:
            return None
        # refine the grid point to the exact sample by bisection on the level
        lo = max(p.start, p.end - ANCHOR_EVERY)
        hi = p.end
        if v.stop_sample is None or p.end < v.stop_sample:
            threshold = p.level0 * 10.0 ** (level_db / 20.0)
            while hi - lo > 1:
                mid = (lo + hi) // 2
                if p._level(mid - p.start, float(sample_rate)) < threshold:
                    hi = mid
                else:
                    lo = mid
        end = max(end, hi)
    return end
