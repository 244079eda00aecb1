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
size beyond rounding: every mode is re-anchored from its closed form at least
every :data:`ANCHOR_EVERY` samples and every coefficient is the same whatever the
block.  A voice rendered on its own anchors on a grid of its own clock; the
plain modes of voices without a gain curve or an unfoldable coupled pair are
rendered together, in one kernel call per stretch of a piece (between the
voices' damping changes), anchored at the call's first sample and on the output
clock's grid, so there a block edge moves an anchor and changes the samples by
rounding only (tests allow it).  A coupled pair with constant coefficients is
rendered as its two plain modes (:func:`_plain_modes`).  The pairs that follow
a rotor (``ModePair.modulation``) of every voice without a gain curve are stepped
together, one kernel call per rotor and stretch of a piece
(:func:`_render_rotor_stretches`); the kernel evaluates the rotor law itself, and
where a call begins changes the samples by rounding only.

Voices start at ``start_sample`` and fall silent at ``stop_sample``, both
sample-exact; damping changes act from the exact sample given.

Retiring voices
---------------
A long passage must not keep every voice it has started.  Every
:data:`RETIRE_EVERY` samples of the output clock the render takes an upper
bound of what each sounding voice can still add from that sample on: the sum
of its mode amplitudes times their decay so far (closed form, damping
included), plus, for each coupled pair, a bound from its present state (its
magnitude never grows: the coupling conserves it and the decays only shrink
it; member 2 stays below its own magnitude plus ``|mu| / (g2 - g1)`` times
the state's when ``g2 > g1``; a pair with constant coefficients is bounded
eigenmode by eigenmode, ``sum_j |w . V_j| |(V^-1 a)_j|``; the smallest of
these) times its output weights, all times the voice's largest channel gain
and gain-curve value.  Each of these bounds also decays at least at the
voice's slowest rate.  A voice is retired, and its state released, when that
bound, added to the bounds still owed by the voices retired before it (each
decaying at its slowest rate), stays below ``retire_db`` (default
:data:`DEFAULT_RETIRE_DB`, -100 dB) re the largest output sample so far.  The
output's final peak is at least that large, so the sum of every tail that was
dropped stays below ``retire_db`` re the output's peak at every sample: the
render differs from one that keeps every voice to the end by less than that.
Memory therefore follows the number of voices sounding at once, not the
number of strikes.  The decisions fall on the fixed grid of the output clock
and take the voices in list order, so they do not depend on the block size
either.  A voice that is not yet retirable is checked again after half the
wait its bound's decay predicts (never past its next damping change), which
only delays retirements.  A voice that stays loses its single bank modes (plain
modes and the modes of folded pairs) the same way: each mode's tail is bounded
in closed form like the bank's, the smallest go first while the sum owed stays
below the level, and each decays at least at its own rate from then on.  Upper
modes of a struck bar die long before its fundamental, so most of a long tail
is rendered with a few modes (``RETIRE_MODES = False`` retires whole voices
only).  A mode check is scheduled where the first remaining mode alone would
fit the room left, decaying at its present rate (no later than the next
damping change).  A gain curve or a pair weight or coupling curve
without a declared bound (``gain_curve_max``, ``weight_2_max``) is taken at
the largest value it has given so far.  ``retire_db=None`` keeps every voice
to its stop or the end.

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
render runs once: :mod:`synth.output` keeps the unscaled float64 samples in a
temporary file, measures the peak on the way, chooses the gain with
:func:`plan_gain` and scales the samples as it writes the WAV (the same
multiplication the engine would apply, so the file equals that of a second
render bit for bit; :func:`scale_block` applies the gain, measures the block and
converts it for the file in one pass).  With a fixed gain, :func:`peak_bound` bounds the peak in
advance from the voices alone; when the bound times the gain stays at or below
full scale nothing can clip and the samples are streamed straight into the
file.  :func:`measure_peak` (one render that keeps only the peak) remains for
callers that hold no file.  Typical use without a file::

    plan = plan_gain(measure_peak(voices, n, sample_rate=fs), target_dbfs=-1.0)
    samples = render(voices, n, sample_rate=fs, gain=plan.gain)

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
from synth.engine.voice import ModePair, PairModulation, Voice
from synth.errors import ConfigError, ModelError

DEFAULT_BLOCK_SIZE: Final[int] = 16384
"""Samples per streamed block (341 ms at 48 kHz; 256 kB per block in stereo)."""

ANCHOR_EVERY: Final[int] = 1024
"""Re-anchoring interval of the mode bank, samples of the voice's own clock."""

DEFAULT_RETIRE_DB: Final[float] = -100.0
"""Level re the output's peak below which the tails of retired voices stay, dB."""

RETIRE_EVERY: Final[int] = 16384
"""Interval of the retirement decisions, samples of the output clock (341 ms at 48 kHz;
the default block size, so a default render is not cut into more pieces)."""

_FOLD_BELOW: Final[float] = 1e-6
"""A retired tail that has decayed by this factor is kept as a constant (conservative)."""

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
        self.single = len(starts) == 1  # no damping change: one segment for ever

    def index(self, m: int) -> int:
        if self.single:
            return 0
        return int(np.searchsorted(self.start_m, m, side="right") - 1)

    def nepers_at(self, m):
        """Extra decay accumulated by voice clock ``m`` (scalar or array), nepers."""
        m = np.asarray(m, dtype=np.float64)
        i = np.searchsorted(self.start_m, m, side="right") - 1
        return self.nepers[i] + self.extra_per_sample[i] * (m - self.start_m[i])

    def pieces(self, m_lo: int, m_hi: int):
        """Yield (m_from, m_to, segment index) covering [m_lo, m_hi)."""
        if self.single:
            if m_lo < m_hi:
                yield m_lo, m_hi, 0
            return
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
        self.w2_seen = 0.0  # largest |weight_2| met so far (a curve)
        self.mu_seen = 0.0 if callable(pair.coupling_rad_s) else abs(pair.coupling_rad_s)
        self.mod = pair.modulation
        self.rotor_cols: dict[tuple, np.ndarray] = {}  # kernel columns per segment, gains
        if self.mod is not None:
            self.mu_seen = self._check_rotor(sample_rate, where, extra_rates_per_s)
        self.constants: dict[float, np.ndarray] = {}
        self.dt = 1.0 / sample_rate
        # Number of series terms: enough for the largest |z| = |q dt|^2 this pair can reach,
        # |q|^2 <= |d|^2 + mu^2 over every damping segment, with |mu| dt capped.
        d_max = max(
            0.5 * abs(complex(-(g[0] - g[1]), self.omega[0] - self.omega[1]))
            for g in (self.rates(e) for e in extra_rates_per_s)
        )
        self.vary_decay_2 = pair.decay_2_curve is not None or self.mod is not None
        mu_dt = PAIR_MAX_COUPLING_PER_SAMPLE
        if self.mod is not None:
            # the rotor's g2 and mu are known in advance: series for their own bounds
            x, d_max, mu_dt = self._rotor_series_bounds(extra_rates_per_s)
        elif self.vary_decay_2:
            # g2 follows a curve, capped so that |Re m| dt <= PAIR_MAX_DECAY_PER_SAMPLE;
            # then |Re d| dt <= that cap too.
            d_max = math.hypot(0.5 * abs(self.omega[0] - self.omega[1]),
                               PAIR_MAX_DECAY_PER_SAMPLE * sample_rate)
            x = PAIR_MAX_DECAY_PER_SAMPLE
        if self.vary_decay_2:
            n_exp = 1
            while x ** n_exp / math.factorial(n_exp) >= _SERIES_TOL:
                n_exp += 1
            self.exp_coef = np.array([1.0 / math.factorial(k) for k in range(n_exp)])
        else:
            self.exp_coef = np.ones(1)
        z_bound = (d_max * self.dt) ** 2 + mu_dt ** 2
        self.cosh_coef, self.sinh_coef = _series_coefficients(z_bound, where)
        self.modal = self._modal_form(pair, extra_rates_per_s)
        if self.mod is not None:
            self.rotor_series = self._padded_series(where)

    def _padded_series(self, where: str) -> tuple[np.ndarray, ...]:
        """Series coefficients padded with zeros to the rotor kernel's fixed term counts."""
        n_s, n_e = kernels._RP_SERIES_TERMS, kernels._RP_EXP_TERMS
        if self.cosh_coef.size > n_s or self.exp_coef.size > n_e:
            raise ModelError(
                f"{where}: rotor-modulated pair detuned too far for the sample rate (its step "
                f"series needs {self.cosh_coef.size} terms, at most {n_s}); raise the sample "
                "rate"
            )
        return tuple(np.concatenate((c, np.zeros(n - c.size))) for c, n in (
            (self.cosh_coef, n_s), (self.sinh_coef, n_s), (self.exp_coef, n_e)))

    def _modal_form(self, pair: ModePair, extra_rates_per_s: np.ndarray):
        """Eigenvectors of a pair with constant coefficients, for its output bound.

        With ``mu``, ``weight_2`` and ``g2`` constant and the damping acting on
        both members alike (or absent), ``a(t) = V exp(L t) V^-1 a(0)`` up to a
        common extra decay, so ``|w . a(t)| <= sum_j |w . V_j| |(V^-1 a(0))_j|``
        (physics.md, section 8 gives the eigenvalues).  ``None`` otherwise.
        """
        if (callable(pair.coupling_rad_s) or callable(pair.weight_2) or self.vary_decay_2
                or (pair.damped[0] != pair.damped[1] and np.any(extra_rates_per_s > 0))):
            return None
        s1 = complex(-self.g1, self.omega[0])
        s2 = complex(-self.g2, self.omega[1])
        mu = 1j * pair.coupling_rad_s
        lam, vec = np.linalg.eig(np.array([[s1, mu], [mu, s2]]))
        cond = float(np.linalg.cond(vec))
        if not (math.isfinite(cond) and cond < 1e6):  # near an exceptional point
            return None
        w = np.array([pair.weight_1, pair.weight_2])
        self.modal_rates = [max(0.0, -float(x.real)) for x in lam]
        return np.abs(w @ vec), np.linalg.inv(vec), cond * float(np.sum(np.abs(w)))

    def output_bound(self) -> float:
        """Bound of ``|w1 Im a1 + w2 Im a2|`` from the present state on (weights as bounded).

        The state's magnitude never grows and decays at least at
        ``gamma = min(g1, g2)``.  Member 2, driven by member 1 through ``mu`` and
        decaying at least at ``g2 > gamma``, obeys
        ``|a2(t0 + s)| <= (|a2(t0)| + |mu| |a(t0)| / (g2 - gamma)) exp(-gamma s)``
        (variation of constants).  A pair with constant coefficients is bounded
        mode by mode as well, each mode decaying at least at ``gamma``; the
        smaller bound is taken.  Every bound here thus also bounds the tail as
        ``bound exp(-gamma s)``, which the retired tails rely on.
        """
        st = self.state
        norm = math.sqrt(float(np.dot(st, st))) * _PAIR_ENERGY_MARGIN
        a2 = math.hypot(st[2], st[3]) * _PAIR_ENERGY_MARGIN
        gamma = min(self.g1, self.g2)
        if self.g2 > gamma:
            a2 = min(norm, a2 + self.mu_bound() / (self.g2 - gamma) * norm)
        else:
            a2 = norm
        bound = abs(self.pair.weight_1) * norm + self.weight_2_bound() * a2
        if self.modal is not None:
            w_vec, inv, scale = self.modal
            b = inv @ np.array([complex(st[0], st[1]), complex(st[2], st[3])])
            modal = float(np.sum(w_vec * np.abs(b))) * _PAIR_ENERGY_MARGIN \
                + 1e-12 * scale * norm
            bound = min(bound, modal)
        return bound

    def _check_rotor(self, sample_rate: float, where: str,
                     extra_rates_per_s: np.ndarray) -> float:
        """Check a rotor-modulated pair against the render's limits; return its ``|mu|`` bound.

        ``m`` stays within :meth:`PairModulation.factor_range`, so ``g2`` does
        within ``g2_fixed + g2_per_factor m`` at its ends (``decay_per_s[1]`` must
        bound it from below) and ``|mu| <= |mu_open| m_max``.
        """
        law = self.rotor.law
        m_lo, m_hi = self.rotor.factor_range()
        lowest = law.decay_2_fixed_per_s + law.decay_2_per_factor * m_lo
        if self.g2 > lowest * (1.0 + 1e-12):
            raise ModelError(
                f"{where}: the rotor's lowest member-2 decay {lowest:g} /s is below the pair's "
                f"decay_per_s[1] = {self.g2:g} /s, which must bound it"
            )
        mu = abs(law.coupling_open_rad_s) * m_hi
        if mu > PAIR_MAX_COUPLING_PER_SAMPLE * sample_rate:
            raise ModelError(
                f"{where}: coupling {mu:g} rad/s exceeds "
                f"{PAIR_MAX_COUPLING_PER_SAMPLE:g} x sample rate; raise the sample rate"
            )
        g2_top = law.decay_2_fixed_per_s + law.decay_2_per_factor * m_hi
        for extra in extra_rates_per_s:
            worst = 0.5 * (self.g1 + self.damped_1 * extra + g2_top
                           + self.damped_2 * extra) / sample_rate
            if worst > PAIR_MAX_DECAY_PER_SAMPLE:
                raise ModelError(
                    f"{where}: coupled pair decays too fast for the sample rate "
                    f"((g1 + g2) / (2 fs) = {worst:.3g} > {PAIR_MAX_DECAY_PER_SAMPLE:g})"
                )
        return mu

    def _rotor_series_bounds(self, extra_rates_per_s: np.ndarray) -> tuple[float, float, float]:
        """Bounds of ``|Re m| dt``, ``|d|`` and ``|mu| dt`` over every step of a rotor pair.

        ``g2 = g2_fixed + g2_per_factor m`` with ``m`` in its range, plus each damping
        segment's extra; the series of ``exp(m dt)`` and of ``cosh(q dt)``,
        ``sinh(q dt)/(q dt)`` are then summed to the same tolerance as for a curve,
        with the terms these bounds need.
        """
        law = self.rotor.law
        m_lo, m_hi = self.rotor.factor_range()
        x = d_re = 0.0
        for extra in extra_rates_per_s:
            g1 = self.g1 + self.damped_1 * extra
            for m in (m_lo, m_hi):
                g2 = law.decay_2_fixed_per_s + law.decay_2_per_factor * m + self.damped_2 * extra
                x = max(x, 0.5 * (g1 + g2) * self.dt)
                d_re = max(d_re, 0.5 * abs(g1 - g2))
        d_max = math.hypot(d_re, 0.5 * abs(self.omega[0] - self.omega[1]))
        return x, d_max, self.mu_seen * self.dt

    def rotor_columns(self, extra_per_s: float, gains: np.ndarray) -> np.ndarray:
        """Return the rotor kernel's column of this pair (``kernels._RP_*``), made once per key."""
        key = (extra_per_s, gains[0], gains[-1])
        col = self.rotor_cols.get(key)
        if col is None:
            law = self.rotor.law
            dt = self.dt
            col = np.empty(kernels._RP_FIELDS)
            m_im = 0.5 * (self.omega[0] + self.omega[1])
            col[kernels._RP_ROT_RE] = math.cos(m_im * dt)
            col[kernels._RP_ROT_IM] = math.sin(m_im * dt)
            col[kernels._RP_DDT_IM] = 0.5 * (self.omega[0] - self.omega[1]) * dt
            col[kernels._RP_G1] = self.g1 + self.damped_1 * extra_per_s
            col[kernels._RP_G2] = law.decay_2_fixed_per_s + self.damped_2 * extra_per_s
            col[kernels._RP_G2M] = law.decay_2_per_factor
            col[kernels._RP_MU] = law.coupling_open_rad_s
            col[kernels._RP_W1] = self.pair.weight_1
            col[kernels._RP_W2] = law.weight_2_open
            col[kernels._RP_DEPTH] = law.depth
            col[kernels._RP_FLOOR] = law.floor
            col[kernels._RP_COS] = math.cos(law.offset_rad)
            col[kernels._RP_SIN] = math.sin(law.offset_rad)
            col[kernels._RP_GAIN0] = gains[0]
            col[kernels._RP_GAIN1] = gains[-1]
            self.rotor_cols[key] = col
        return col

    @property
    def rotor(self) -> PairModulation:
        """The pair's rotor law (only for a rotor-modulated pair)."""
        if self.mod is None:
            raise ModelError("coupled pair: not rotor-modulated")
        return self.mod

    def mu_bound(self) -> float:
        """Bound of ``|mu|`` from here on (constant, or largest so far for a curve)."""
        return self.mu_seen

    def weight_2_bound(self) -> float:
        """Bound of ``|weight_2|`` from here on (declared, constant, or largest so far)."""
        if self.mod is not None:
            return abs(self.rotor.law.weight_2_open) * math.sqrt(self.rotor.factor_range()[1])
        if not callable(self.pair.weight_2):
            return abs(self.pair.weight_2)
        declared = self.pair.weight_2_max
        return self.w2_seen if declared is None else declared

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


FOLD_CONSTANT_PAIRS = True
"""Render a coupled pair with constant coefficients as its two plain modes (see
:func:`_plain_modes`); False keeps the per-sample coupled update (for tests)."""

_FOLD_MAX_CONDITION = 1e6
"""Largest condition number of the eigenvectors for which a pair is folded; nearer
an exceptional point the per-sample update is kept."""


def _plain_modes(pair: ModePair, extra_rates_per_s: np.ndarray, nyquist_hz: float):
    """Return the pair as two plain decaying modes, exactly, or None.

    With ``mu``, ``weight_2`` and both decays constant, ``a' = A a`` with
    ``A = [[s1, i mu], [i mu, s2]]`` has the solution ``a(t) = sum_k c_k V_k
    exp(lam_k t)``, ``c = V^-1 a(0)``.  With ``m = (s1 + s2)/2``, ``d = (s1 -
    s2)/2`` and ``q = sqrt(d^2 - mu^2)``, ``B = A - m I`` has ``B^2 = q^2 I``, so
    ``lam = m +- q`` with eigenvectors ``(d +- q, i mu)`` or, equivalently,
    ``(i mu, +-q - d)`` (the longer of the two is taken).  The output
    ``Im(w1 a1 + w2 a2) = sum_k Im(b_k exp(lam_k t))``, ``b_k = (w . V_k) c_k``, is
    then two modes of frequency ``Im lam_k / 2 pi``, decay ``-Re lam_k``,
    amplitude ``|b_k|`` and phase ``arg b_k`` (a negative frequency flips the
    signs of frequency and phase and of the amplitude).  A damping schedule that
    adds the same decay to both members shifts both eigenvalues alike, as it does
    for a plain mode.  None when a coefficient varies, the damping acts on one
    member only, the coupling is faster than a pair may be rendered at all
    (:data:`PAIR_MAX_COUPLING_PER_SAMPLE`: refused later, as for any pair), the
    eigenvectors are ill-conditioned (near an exceptional point) or a mode would
    not decay or would reach ``nyquist_hz``.

    Returns
    -------
    (frequency_hz, decay_per_s, amplitude, phase_rad) : four arrays of 2, or None
    """
    if (callable(pair.coupling_rad_s) or callable(pair.weight_2)
            or pair.decay_2_curve is not None or pair.modulation is not None
            or abs(pair.coupling_rad_s) > PAIR_MAX_COUPLING_PER_SAMPLE * 2 * nyquist_hz
            or (not (pair.damped[0] and pair.damped[1]) and np.any(extra_rates_per_s > 0))):
        return None
    s1 = complex(-pair.decay_per_s[0], 2 * math.pi * pair.frequency_hz[0])
    s2 = complex(-pair.decay_per_s[1], 2 * math.pi * pair.frequency_hz[1])
    mu = float(pair.coupling_rad_s)
    m, d = 0.5 * (s1 + s2), 0.5 * (s1 - s2)
    q = np.sqrt(complex(d * d - mu * mu))
    lam = np.array([m + q, m - q])
    vec = np.empty((2, 2), dtype=complex)
    for k, sign in enumerate((1.0, -1.0)):
        u = np.array([d + sign * q, 1j * mu])
        v = np.array([1j * mu, sign * q - d])
        best = u if np.linalg.norm(u) >= np.linalg.norm(v) else v
        norm = np.linalg.norm(best)
        if norm == 0.0:
            return None
        vec[:, k] = best / norm
    cond = float(np.linalg.cond(vec))
    if not (math.isfinite(cond) and cond < _FOLD_MAX_CONDITION):
        return None
    a0 = np.array([pair.amplitude[0] * np.exp(1j * pair.phase_rad[0]),
                   pair.amplitude[1] * np.exp(1j * pair.phase_rad[1])])
    b = (np.array([pair.weight_1, pair.weight_2]) @ vec) * np.linalg.solve(vec, a0)
    omega = lam.imag
    decay = -lam.real
    if np.any(decay < 0.0) or np.any(np.abs(omega) >= 2 * math.pi * nyquist_hz):
        return None
    flip = np.where(omega < 0.0, -1.0, 1.0)
    return (np.abs(omega) / (2 * math.pi), decay, flip * np.abs(b), flip * np.angle(b))


def _folded(pair: ModePair, extra_rates_per_s: np.ndarray, nyquist_hz: float,
            folds: dict | None):
    """:func:`_plain_modes` of ``pair``, made once per render.

    A render prepares each voice twice (checked before the first block, then
    made again when it starts); ``folds`` carries the result from the first to
    the second, keyed by the pair object (which the caller's voices keep alive)
    and the damping rates, and gives it up there.
    """
    if folds is None:
        return _plain_modes(pair, extra_rates_per_s, nyquist_hz)
    key = (id(pair), extra_rates_per_s.tobytes(), nyquist_hz)
    if key in folds:
        return folds.pop(key)
    plain = _plain_modes(pair, extra_rates_per_s, nyquist_hz)
    folds[key] = plain
    return plain


class _Prepared:
    """Validated, unpacked voice with its running state for one render."""

    def __init__(self, voice: Voice, sample_rate: float, n_channels: int, n_samples: int,
                 index: int = 0, folds: dict | None = None):
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
        self.segments = _Segments(voice, sample_rate)
        freq, decay = bank.frequency_hz, bank.decay_per_s
        amp = bank.amplitude
        phase = np.zeros_like(freq) if bank.phase_rad is None else bank.phase_rad  # ModeBank fills
        pairs = []
        # The ring-out level (``_level``) of a folded pair stays the pair's own
        # (state magnitude at its slowest member's decay), so render lengths are
        # those of the per-sample update.
        self.n_bank = bank.n_modes
        self.folded = []
        for pair in voice.pairs:
            plain = (_folded(pair, self.segments.extra_per_s, nyq, folds)
                     if FOLD_CONSTANT_PAIRS else None)
            if plain is None:
                pairs.append(pair)
            else:  # two plain modes, rendered with the bank
                self.folded.append((np.array(pair.decay_per_s, dtype=np.float64),
                                    np.array(pair.damped, dtype=np.float64),
                                    math.hypot(*pair.amplitude)))
                freq, decay, amp, phase = (np.concatenate([x, y]) for x, y in
                                           zip((freq, decay, amp, phase), plain, strict=True))
        # the bank's modes and the folded pairs' modes, one row per quantity
        self._set_bank(np.array([freq / sample_rate, decay, decay / sample_rate, amp, phase,
                                 np.abs(amp)], dtype=np.float64).reshape(6, freq.size))
        self.state = np.zeros((2, self.n_modes))       # Re, Im of each mode
        self.clock = np.array([0, -1], dtype=np.int64)  # state's voice clock, last anchor
        self.pairs = [_PairState(p, sample_rate, where, self.segments.extra_per_s)
                      for p in pairs]
        self.bank_bound = float(self.abs_amp.sum())
        # every pair follows a rotor: the pairs can join the rotor batch
        self.rotor_only = all(ps.mod is not None for ps in self.pairs)
        self.pair_bound = sum(ps.norm0 * (abs(ps.pair.weight_1) + ps.weight_2_bound())
                              for ps in self.pairs)
        self.level0 = (float(self.abs_amp[:self.n_bank].sum()) + sum(p.norm0 for p in self.pairs)
                       + sum(norm0 for _, _, norm0 in self.folded))
        # slowest decay any part of the voice can have (damping only adds to it), 1/s
        rates = list(decay) + [min(p.g1, p.g2) for p in self.pairs]
        self.slowest_per_s = float(min(rates)) if rates else 0.0
        self.batched = False   # last rendered in a batch: the bank state is stale
        self.mode_check = 0    # output sample of the next check of single modes
        self.bank_version = 0  # counts the mode retirements (the batch columns' key)
        self._columns: tuple | None = None  # (key, floats, ints) of batch_columns
        self.curve_seen = 0.0  # largest gain-curve value met so far
        self.next_check = 0    # output sample of the next retirement check
        self.last_check: tuple[int, float] | None = None  # (sample, bound) of the last one
        self.start = voice.start_sample
        end = n_samples if voice.stop_sample is None else min(voice.stop_sample, n_samples)
        self.end = self.start if self.level0 == 0.0 else max(self.start, end)
        self.onset = voice.onset
        self.onset_n = 0 if self.onset is None else int(self.onset.size)
        self.onset_bound = (0.0 if self.onset is None
                            else float(np.max(np.abs(self.onset))) * self.max_gain)
        if self.onset_n:
            self.end = max(self.end, min(self.start + self.onset_n, n_samples))

    def _set_bank(self, bank: np.ndarray) -> None:
        self._bank = bank
        (self.cycles, self.decay_per_s, self.decay_per_sample, self.amplitude, self.phase,
         self.abs_amp) = bank
        self.n_modes = bank.shape[1]

    def drop_modes(self, keep: np.ndarray) -> None:
        """Keep only the bank modes at indices ``keep`` (ascending); the rest are retired."""
        self.n_bank = int(np.count_nonzero(keep < self.n_bank))
        self._set_bank(self._bank[:, keep])
        self.state = self.state[:, keep]
        self.bank_bound = float(self.abs_amp.sum())
        self.bank_version += 1

    def batch_columns(self, i: int) -> tuple[np.ndarray, np.ndarray]:
        """Return the batch kernel's columns of this voice's modes in damping segment ``i``.

        Float rows: first and last channel gain, cycles and decay per sample,
        amplitude, phase, nepers at the segment's start, extra decay per sample;
        integer rows: start sample, segment start.  Kept until a mode retires.
        """
        key = (self.bank_version, i)
        if self._columns is None or self._columns[0] != key:
            seg = self.segments
            n = self.n_modes
            floats = np.empty((8, n))
            floats[0] = self.gains[0]
            floats[1] = self.gains[-1]
            floats[2:6] = self._bank[[0, 2, 3, 4]]
            floats[6] = seg.nepers[i]
            floats[7] = seg.extra_per_sample[i]
            ints = np.empty((2, n), dtype=np.int64)
            ints[0] = self.start
            ints[1] = seg.start_m[i]
            self._columns = (key, floats, ints)
        return self._columns[1], self._columns[2]

    def curve_bound(self) -> float:
        """Bound of the gain curve's magnitude from here on (1 without a curve)."""
        if self.voice.gain_curve is None:
            return 1.0
        declared = self.voice.gain_curve_max
        return self.curve_seen if declared is None else declared

    def remaining_bound(self, m: int) -> float:
        """Upper bound of every output sample from voice clock ``m`` on.

        Valid once the voice has been rendered up to ``m``: the bank's modes are
        taken in closed form, the pairs from their present state, whose magnitude
        never grows.
        """
        nep = float(self.segments.nepers_at(m))
        bank = float(np.sum(self.abs_amp * np.exp(-self.decay_per_sample * m - nep)))
        bound = bank * _RUNAWAY_MARGIN
        for ps in self.pairs:
            bound += ps.output_bound()
        onset = self.onset_bound if m < self.onset_n else 0.0
        return bound * self.curve_bound() * self.max_gain + onset

    # level on the voice clock re its start, for ring_out_sample; never increases
    def _level(self, m: int, sample_rate: float) -> float:
        nep = float(self.segments.nepers_at(m))
        nb = self.n_bank
        level = float(np.sum(self.abs_amp[:nb] * np.exp(-self.decay_per_sample[:nb] * m - nep)))
        for p in self.pairs:
            g = p.decay / sample_rate * m + p.damped * nep
            level += p.norm0 * math.exp(-float(np.min(g)))
        for decay, damped, norm0 in self.folded:
            g = decay / sample_rate * m + damped * nep
            level += norm0 * math.exp(-float(np.min(g)))
        return level

    def _silent_from(self, end: int, level_db: float, sample_rate: float) -> int:
        if self.level0 == 0.0:
            return self.start
        threshold = self.level0 * 10.0 ** (level_db / 20.0)
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


class _RetiredTails:
    """What the retired voices may still owe: bounds ``r exp(-rate (t - t0))`` summed.

    A tail that has decayed by :data:`_FOLD_BELOW` (or never decays) is moved to
    a constant, which only overstates the sum, so the list stays short.
    """

    def __init__(self, sample_rate: float):
        self.sample_rate = sample_rate
        self.bound = np.zeros(0)
        self.rate = np.zeros(0)
        self.t0 = np.zeros(0)
        self.constant = 0.0
        self._new: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []  # added since ``at``

    def at(self, t: int) -> float:
        """Bound of the sum of the retired tails at output sample ``t`` and later."""
        if self._new:
            bounds, rates, t0s = zip(*self._new, strict=True)
            self.bound = np.concatenate([self.bound, *bounds])
            self.rate = np.concatenate([self.rate, *rates])
            self.t0 = np.concatenate([self.t0, *t0s])
            self._new = []
        if not self.bound.size:
            return self.constant
        now = self.bound * np.exp(-self.rate * ((t - self.t0) / self.sample_rate))
        fold = now < self.bound * _FOLD_BELOW
        if np.any(fold):
            self.constant += float(np.sum(now[fold]))
            keep = ~fold
            self.bound, self.rate, self.t0 = self.bound[keep], self.rate[keep], self.t0[keep]
            now = now[keep]
        return self.constant + float(np.sum(now))

    def add(self, bound: float, rate_per_s: float, t: int) -> None:
        self.add_many(np.array([bound]), np.array([rate_per_s]), t)

    def add_many(self, bounds: np.ndarray, rates_per_s: np.ndarray, t: int) -> None:
        """Add tails ``bounds[k] exp(-rates_per_s[k] (s - t))`` from output sample ``t``."""
        still = rates_per_s <= 0.0
        if np.any(still):
            self.constant += float(np.sum(bounds[still]))
            bounds, rates_per_s = bounds[~still], rates_per_s[~still]
        self._new.append((bounds, rates_per_s, np.full(bounds.size, float(t))))


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
    biggest = max_abs(values)
    if not math.isfinite(biggest):  # NaN and Inf both surface in the maximum
        bad = first + int(np.flatnonzero(~np.isfinite(values))[0])
        raise ModelError(f"{where}: {what} is not finite at sample {bad}")
    return values, biggest


def _check_declared(biggest: float, declared: float | None, what: str, name: str, first: int,
                    where: str) -> None:
    if declared is not None and biggest > declared:
        raise ModelError(
            f"{where}: {what} reaches {biggest:g} in the block from sample {first}, above its "
            f"declared {name} = {declared:g}, which must bound it"
        )


def max_abs(values: np.ndarray) -> float:
    """Largest magnitude (NaN if any value is NaN), without a temporary array."""
    if not values.size:
        return 0.0
    return max(float(values.max()), -float(values.min()))


_CONSTANTS_KEPT: Final[int] = 256
"""Distinct constants a render keeps as arrays (about 128 kB each at most)."""


def _constant(cache: dict, value: float, n: int) -> np.ndarray:
    """Return ``n`` copies of ``value`` from a cache shared by the render (read only).

    Strikes of one note share their constants, so the cache follows the notes
    in use, not the voices sounding; it is emptied if it ever holds more than
    :data:`_CONSTANTS_KEPT` values.
    """
    arr = cache.get(value)
    if arr is None or arr.size < n:
        if arr is None and len(cache) >= _CONSTANTS_KEPT:
            cache.clear()
        arr = np.full(n, value)
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
    retire_db: float | None = DEFAULT_RETIRE_DB,
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
    retire_db : float or None, optional
        Retire voices, and single modes of sounding voices, whose remaining
        tails, summed, stay this far below the output's peak, dB (< 0; default
        -100 dB; ``None``: keep every voice and mode).
        The result differs from ``retire_db=None`` by less than this level re
        its peak (see the module docstring).
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
    if retire_db is not None and not (math.isfinite(retire_db) and retire_db < 0):
        raise ConfigError(f"retire_db = {retire_db}: must be a negative number of dB or None")
    voices = list(voices)
    for v in voices:
        if not isinstance(v, Voice):
            raise ModelError(f"render: expected Voice objects, got {type(v).__name__}")
    n_ch = _channels_of(voices, channels)
    n_samples = int(n_samples)
    block_size = int(block_size)
    sample_rate = float(sample_rate)
    # validate every voice now (errors before the first block); a render of up to
    # PREPARED_KEPT voices keeps what it made, a longer one makes the state again
    # when the voice starts, so memory follows the voices sounding
    order = []
    folds: dict = {}  # folded pairs, from this check to the voice's start
    kept: dict[int, _Prepared] | None = {} if len(voices) <= PREPARED_KEPT else None
    for i, v in enumerate(voices):
        p = _Prepared(v, sample_rate, n_ch, n_samples, i, None if kept is not None else folds)
        if p.end > p.start:
            order.append((p.start, i))
            if kept is not None:
                kept[i] = p
    order.sort()
    threshold = 0.0 if retire_db is None else 10.0 ** (retire_db / 20.0)
    return _stream(voices, order, n_samples, n_ch, block_size, gain, dtype, sample_rate,
                   threshold, progress, folds, kept)


PREPARED_KEPT: Final[int] = 256
"""Voices up to which a render keeps each voice as validated until it starts."""


def _stream(voices, order, n_samples, n_ch, block_size, gain, dtype, sample_rate, threshold,
            progress, folds, kept):
    active: list[_Prepared] = []
    constants: dict[float, np.ndarray] = {}  # constant pair coefficients, shared
    batches: dict[tuple, tuple] = {}  # kernel columns of the batches met so far
    tails = _RetiredTails(sample_rate)
    peak_so_far = 0.0
    nxt = 0
    for b0 in range(0, n_samples, block_size):
        b1 = min(n_samples, b0 + block_size)
        buf = np.zeros((b1 - b0, n_ch))
        c0 = b0
        while c0 < b1:  # pieces cut at the retirement grid
            c1 = min(b1, (c0 // RETIRE_EVERY + 1) * RETIRE_EVERY)
            started = False
            while nxt < len(order) and order[nxt][0] < c1:
                i = order[nxt][1]
                p = (kept.pop(i) if kept is not None
                     else _Prepared(voices[i], sample_rate, n_ch, n_samples, i, folds))
                for ps in p.pairs:
                    ps.constants = constants
                active.append(p)
                nxt += 1
                started = True
            if started:
                active.sort(key=lambda p: p.index)  # sum in list order, whatever the blocks
            piece = buf[c0 - b0:c1 - b0]
            bound = 0.0
            batch: dict[tuple[int, int], list[_Prepared]] = {}
            rotor_batch: dict[tuple, list[tuple[int, int, _Prepared, _PairState, int]]] = {}
            for p in active:
                lo, hi = max(c0, p.start), min(c1, p.end)
                if BATCH_BANKS and _batchable(p, lo, hi):
                    for m_a, m_b, i in p.segments.pieces(lo - p.start, hi - p.start):
                        if p.n_modes:
                            batch.setdefault((p.start + m_a, p.start + m_b), []).append(p)
                        for ps in p.pairs:
                            rotor_batch.setdefault(ps.rotor.rotor_key, []).append(
                                (p.start + m_a, p.start + m_b, p, ps, i))
                    bound += p.bank_bound + p.pair_bound * p.max_gain
                    p.batched = p.n_modes > 0
                    continue
                if p.batched:
                    _reanchor(p, max(c0, p.start) - p.start)
                    p.batched = False
                bound += _render_voice(p, piece, c0, c1, sample_rate)
            for (lo, hi), group in batch.items():
                _render_batch(group, piece, lo - c0, lo, hi, batches)
            for stretches in rotor_batch.values():
                _render_rotor_stretches(stretches, piece, c0, sample_rate)
            for p in active:
                if p.onset_n and c0 < p.start + p.onset_n:
                    bound += _add_onset(p, piece, c0, c1)
            peak = max_abs(piece)
            if not (peak <= bound * _RUNAWAY_MARGIN):
                names = ", ".join(p.where for p in active[:4]) + (" ..." if len(active) > 4
                                                                  else "")
                raise ModelError(
                    f"output ran away at samples {c0}..{c1 - 1} (peak {peak:.3g}, bound "
                    f"{bound:.3g}; sounding: {names}); block muted, render stopped"
                )
            peak_so_far = max(peak_so_far, peak)
            active = [p for p in active if p.end > c1]
            if threshold > 0.0 and active and c1 % RETIRE_EVERY == 0:
                active = _retire(active, c1, threshold * peak_so_far, tails)
            c0 = c1
        if gain != 1.0:
            buf *= gain
        if progress is not None:
            progress(b1, n_samples)
        yield buf if dtype == np.float64 else buf.astype(dtype)
    if n_samples == 0 and progress is not None:
        progress(0, 0)


def _add_onset(p: _Prepared, buf: np.ndarray, b0: int, b1: int) -> float:
    """Add the onset samples of voice ``p`` falling in output rows b0..b1; return their bound."""
    lo, hi = max(b0, p.start), min(b1, p.start + p.onset_n, p.end)
    if hi <= lo or p.onset is None:
        return 0.0
    buf[lo - b0:hi - b0] += p.onset[lo - p.start:hi - p.start, None] * p.gains[None, :]
    return p.onset_bound


def _retire(active: list[_Prepared], t: int, level: float,
            tails: _RetiredTails) -> list[_Prepared]:
    """Drop the voices (list order) whose tails from sample ``t`` keep the sum below ``level``.

    A voice that stays loses, with :data:`RETIRE_MODES`, the single bank modes
    whose tails, added smallest first, still keep the sum below ``level``
    (:func:`_retire_modes`).
    """
    owed = tails.at(t)
    if owed >= level:
        return active
    keep = []
    for p in active:
        if t >= p.next_check:
            r = p.remaining_bound(t - p.start)
            if owed + r < level:
                owed += r
                tails.add(r, p.slowest_per_s, t)
                continue
            _schedule(p, t, r, level - owed)
        if RETIRE_MODES and p.n_modes and t >= p.mode_check:
            owed = _retire_modes(p, t, level, owed, tails)
            if not (p.n_modes or p.pairs or t - p.start < p.onset_n):
                continue  # nothing left to sound
        keep.append(p)
    return keep


def _retire_modes(p: _Prepared, t: int, level: float, owed: float,
                  tails: _RetiredTails) -> float:
    """Retire bank modes of voice ``p`` at output sample ``t``; return what is owed then.

    Each mode's tail from ``t`` is bounded like the voice's bank in
    :meth:`_Prepared.remaining_bound` (closed-form amplitude, damping so far,
    the largest channel gain and gain-curve value) and decays at least at the
    mode's own rate.  The smallest tails go first, as long as their sum plus
    ``owed`` stays below ``level``; the rest keep sounding.  The next check is
    set where the first remaining mode's bound, decaying at its present rate,
    would fit the room left (whole grid steps, at least one,
    no later than the voice's next damping change).
    """
    m = t - p.start
    seg = p.segments
    i = seg.index(m)
    n = p.n_modes
    order = np.empty(n, dtype=np.int64)
    bounds = np.empty(n)
    n_keep, owed, wait = kernels._modes_to_retire(
        p.abs_amp, p.decay_per_sample, float(m), float(seg.nepers_at(m)),
        p.curve_bound() * p.max_gain * _RUNAWAY_MARGIN, owed, level,
        float(seg.extra_per_sample[i]), order, bounds)
    if n_keep < n:
        gone = order[n_keep:]
        tails.add_many(bounds[gone], p.decay_per_s[gone], t)
        p.drop_modes(order[:n_keep])
    nxt = t + RETIRE_EVERY * max(1, int(min(wait, 2.0 ** 50) // RETIRE_EVERY))
    later = seg.start_m[seg.start_m > m]
    if later.size:  # a damping change may speed the decay up
        change = p.start + int(later[0])
        nxt = min(nxt, -(-change // RETIRE_EVERY) * RETIRE_EVERY)
    p.mode_check = max(nxt, t + RETIRE_EVERY)
    return owed


def _schedule(p: _Prepared, t: int, bound: float, room: float) -> None:
    """Set when voice ``p`` is next worth checking (bounds cost more than the grid).

    The bound's decay between the last two checks predicts when it reaches the
    room left; the next check comes after half that wait (whole grid steps, at
    least one), and no later than the next damping change.  This only delays a
    retirement a little; it never retires anything early, and it depends on the
    grid alone, so the block size still changes nothing.
    """
    nxt = t + RETIRE_EVERY
    if p.last_check is not None and room > 0.0:
        t0, b0 = p.last_check
        if b0 > bound > 0.0:
            rate = math.log(b0 / bound) / (t - t0)  # nepers per sample
            wait = 0.5 * math.log(bound / room) / rate
            nxt = t + RETIRE_EVERY * max(1, int(wait // RETIRE_EVERY))
    later = p.segments.start_m[p.segments.start_m > t - p.start]
    if later.size:  # a damping change may speed the decay up
        change = p.start + int(later[0])
        nxt = min(nxt, -(-change // RETIRE_EVERY) * RETIRE_EVERY)
    p.next_check = max(nxt, t + RETIRE_EVERY)
    p.last_check = (t, bound)


RETIRE_MODES = True
"""Retire single bank modes of a sounding voice as well as whole voices
(:func:`_retire_modes`); False retires whole voices only (for tests)."""


BATCH_BANKS = True
"""Render the plain modes of every voice without a gain curve or a coupled pair in
one kernel call per stretch of a piece between damping changes
(:func:`_render_batch`); False renders each voice on its own (for tests)."""


BATCH_ROTOR_PAIRS = True
"""Render the rotor-modulated pairs of every voice without a gain curve together, one
kernel call per rotor and stretch (:func:`_render_rotor_pairs`); False renders them
voice by voice (for tests)."""


def _batchable(p: _Prepared, lo: int, hi: int) -> bool:
    """Whether voice ``p`` can join the batches for output samples ``lo .. hi-1``.

    Its modes then go into one call per stretch between its damping changes, and
    its pairs, when every one follows a rotor, into one call per rotor and stretch.
    """
    if hi <= lo or p.voice.gain_curve is not None:
        return False
    if p.pairs:
        return BATCH_ROTOR_PAIRS and p.rotor_only
    return p.n_modes > 0


def _render_rotor_stretches(stretches: list[tuple[int, int, _Prepared, _PairState, int]],
                            buf: np.ndarray, b0: int, sample_rate: float) -> None:
    """Render rotor pairs sharing one rotor, each over its own stretch (lo, hi, ...).

    The stretches are cut where any of them starts or ends, and each cut is one
    kernel call with every pair sounding through it, so a voice that starts in
    the middle of a piece joins the others from there on.
    """
    cuts = sorted({x for lo, hi, *_ in stretches for x in (lo, hi)})
    for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
        entries = [(p, ps, i) for a, b, p, ps, i in stretches if a <= lo and hi <= b]
        if entries:
            _render_rotor_pairs(entries, buf, lo - b0, lo, hi, sample_rate)


def _render_rotor_pairs(entries: list[tuple[_Prepared, _PairState, int]], buf: np.ndarray,
                        o0: int, lo: int, hi: int, sample_rate: float,
                        curve: np.ndarray | None = None) -> None:
    """Advance rotor-modulated pairs sharing one rotor over output samples ``lo .. hi-1``.

    ``entries`` holds (voice, pair, damping segment) with the segment constant
    over the stretch; one kernel call per :data:`kernels._RP_MAX` pairs adds them
    into ``buf`` from row ``o0`` (times ``curve``, one voice's gain curve, when
    given).  The pairs' states are gathered, stepped and put back, then checked:
    a state whose magnitude grew (which exact steps cannot do) stops the render.
    The pair count is padded to a multiple of 8 with silent pairs (all zero), so
    the kernel's pair loops run whole vectors.
    """
    width = kernels._RP_MAX
    a1r, a2i = kernels._RP_A1R, kernels._RP_A2I + 1
    for g0 in range(0, len(entries), width):
        group = entries[g0:g0 + width]
        n_p = len(group)
        work = np.zeros((kernels._RP_ROWS, width))
        work[:a2i, :n_p] = np.array(
            [np.concatenate((ps.rotor_columns(float(p.segments.extra_per_s[i]), p.gains),
                             ps.state)) for p, ps, i in group]).T
        # the longest series of the group (the shorter ones are the same with zeros on top)
        cosh, sinh, _ = max((ps for _, ps, _ in group),
                            key=lambda ps: ps.cosh_coef.size).rotor_series
        exp = max((ps for _, ps, _ in group), key=lambda ps: ps.exp_coef.size).rotor_series[2]
        mod = group[0][1].rotor
        rotor = np.array([sample_rate, mod.rate_rev_per_s, mod.resting_rad, mod.start_s,
                          mod.spin_up_s, mod.rotor_key[4]])
        use_curve = curve is not None
        kernels._rotor_pairs_add(buf, o0, lo + mod.shift_samples, hi - lo, rotor,
                                 curve if use_curve else np.ones(0), use_curve,
                                 work.reshape(-1), min(width, -(-n_p // 8) * 8),
                                 1.0 / sample_rate, cosh, sinh, exp)
        state = work[a1r:a2i, :n_p]
        energy = np.einsum("ij,ij->j", state, state)
        for k, (p, ps, _) in enumerate(group):
            ps.state[:] = state[:, k]
            _check_energy(p, ps, float(energy[k]), hi)


def _check_energy(p: _Prepared, ps: _PairState, energy: float, hi: int) -> None:
    """Stop the render if pair ``ps`` of voice ``p`` has grown by output sample ``hi``."""
    if not (energy <= ps.norm0 ** 2 * _PAIR_ENERGY_MARGIN):
        raise ModelError(
            f"{p.where}: coupled pair state grew (|a|^2 = {energy:.3g} > "
            f"{ps.norm0 ** 2:.3g} at the start) by sample {hi}; block muted, render stopped"
        )


_BATCHES_KEPT: Final[int] = 64
"""Distinct batches (voices and their damping segments) a render keeps the columns of."""


def _render_batch(group: list[_Prepared], buf: np.ndarray, o0: int, lo: int, hi: int,
                  kept: dict | None = None) -> None:
    """Add the modes of every voice in ``group`` for output samples ``lo .. hi-1``, one call.

    The kernel's columns depend only on the voices and their damping segments, so
    ``kept`` (shared by one render) holds them for the pieces that follow.
    """
    segments = [p.segments.index(lo - p.start) for p in group]
    key = tuple(zip([p.index for p in group], [p.bank_version for p in group], segments,
                    strict=True))
    arrays = None if kept is None else kept.get(key)
    if arrays is None:
        blocks = [p.batch_columns(i) for p, i in zip(group, segments, strict=True)]
        if len(blocks) == 1:
            floats, ints = blocks[0]
        else:
            floats = np.concatenate([f for f, _ in blocks], axis=1)
            ints = np.concatenate([n for _, n in blocks], axis=1)
        gain_first, gain_last, cycles, decay, amp, phase, nepers, extra = floats
        start, seg_start = ints
        arrays = (gain_first, gain_last, cycles, decay, amp, phase, start, seg_start, nepers,
                  extra)
        if kept is not None:
            if len(kept) >= _BATCHES_KEPT:
                kept.clear()
            kept[key] = arrays
    # mypy cannot count the ten columns in *arrays against the kernel's parameters
    kernels._banks_add(buf, o0, lo, hi, *arrays, ANCHOR_EVERY)  # type: ignore[call-arg]


def _reanchor(p: _Prepared, m: int) -> None:
    """Set the bank state of voice ``p`` to its closed form at voice clock ``m``."""
    seg = p.segments
    i = seg.index(m)
    nep = seg.nepers[i] + seg.extra_per_sample[i] * (m - seg.start_m[i])
    mag = p.amplitude * np.exp(-p.decay_per_sample * m - nep)
    cyc = p.cycles * m
    ph = 2.0 * math.pi * (cyc - np.floor(cyc)) + p.phase
    p.state[0] = mag * np.cos(ph)
    p.state[1] = mag * np.sin(ph)
    p.clock[:] = (m, m)


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
        _check_declared(curve_max, voice.gain_curve_max, "gain curve", "gain_curve_max", lo,
                        p.where)
        p.curve_seen = max(p.curve_seen, curve_max)
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
        if ps.mod is not None:
            for m_a, m_b, i in seg.pieces(m_lo, m_hi):
                j0 = m_a - m_lo
                _render_rotor_pairs([(p, ps, i)], buf, o0 + j0, lo + j0, lo + m_b - m_lo,
                                    sample_rate, curve[j0:] if use_curve else None)
            bound += ps.norm0 * (abs(pair.weight_1) + ps.weight_2_bound())
            continue
        if callable(pair.coupling_rad_s):
            mu, mu_max = _curve_values(pair.coupling_rad_s, lo, n, "coupling curve", p.where)
            ps.mu_seen = max(ps.mu_seen, mu_max)
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
            _check_declared(w2_max, pair.weight_2_max, "pair weight curve", "weight_2_max", lo,
                            p.where)
            ps.w2_seen = max(ps.w2_seen, w2_max)
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
        _check_energy(p, ps, float(np.dot(ps.state, ps.state)), hi)
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
    retire_db: float | None = DEFAULT_RETIRE_DB,
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
                           channels=channels, gain=gain, dtype=dtype, retire_db=retire_db,
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
    retire_db: float | None = DEFAULT_RETIRE_DB,
    progress: Progress | None = None,
) -> float:
    """Return the largest sample magnitude of the render, without keeping it.

    For a caller that keeps no samples (see the module docstring); the
    parameters are those of :func:`render_blocks`.

    Returns
    -------
    peak : float
        Largest absolute sample value over all channels at unit gain.
    """
    peak = 0.0
    for block in render_blocks(voices, n_samples, sample_rate=sample_rate,
                               block_size=block_size, channels=channels,
                               retire_db=retire_db, progress=progress):
        if block.size:
            peak = max(peak, max_abs(block))
    return peak


def peak_bound(
    voices: Sequence[Voice],
    n_samples: int,
    *,
    sample_rate: float,
    channels: int | None = None,
) -> float | None:
    """Return an upper bound of the render's peak taken from the voices alone.

    Each voice can add at most its largest channel gain times its gain-curve
    bound times the sum of its mode amplitudes and pair magnitudes (times their
    output weights), and every part of it decays at least at its slowest rate
    (damping and retirement only take away).  The sum of these decaying bounds
    is largest at some voice's start, where it is evaluated.  Single strikes of
    the demo instrument peak 3.4 to 6.4 dB below it (low to high notes), a
    four-note chord 6 dB below, a 20 s passage with the dampers lifted 5.6 dB
    below: use it to know in advance that a fixed gain cannot clip, never to
    normalise.

    Parameters
    ----------
    voices, n_samples, sample_rate, channels
        As for :func:`render_blocks`.

    Returns
    -------
    float or None
        The bound at unit gain, or ``None`` when a voice has a gain curve or a
        pair weight curve without a declared bound (``gain_curve_max``,
        ``weight_2_max``).
    """
    _check_common(n_samples, sample_rate, 1)
    voices = list(voices)
    n_ch = _channels_of(voices, channels)
    terms = []  # (start, amplitude bound, decay rate 1/s)
    for i, v in enumerate(voices):
        p = _Prepared(v, float(sample_rate), n_ch, int(n_samples), i)
        if p.end <= p.start:
            continue
        curve_max = 1.0 if v.gain_curve is None else v.gain_curve_max
        if curve_max is None:
            return None
        scale = p.max_gain * curve_max
        if p.onset_n:  # held as a constant: only overstates the sum
            terms.append((p.start, p.onset_bound, 0.0))
        for a, g in zip(p.abs_amp, p.decay_per_s, strict=True):
            terms.append((p.start, float(a) * scale, float(g)))
        for ps in p.pairs:
            if ps.mod is None and callable(ps.pair.weight_2) and ps.pair.weight_2_max is None:
                return None
            if ps.modal is None:
                w = abs(ps.pair.weight_1) + ps.weight_2_bound()
                terms.append((p.start, ps.norm0 * w * scale, min(ps.g1, ps.g2)))
                continue
            # constant pair: one decaying term per eigenmode, -Re(lambda_j) >= 0
            w_vec, inv, extra = ps.modal
            a0 = np.array([complex(ps.state[0], ps.state[1]), complex(ps.state[2], ps.state[3])])
            c = w_vec * np.abs(inv @ a0) * _PAIR_ENERGY_MARGIN
            c[0] += 1e-12 * extra * ps.norm0
            for cj, rj in zip(c, ps.modal_rates, strict=True):
                terms.append((p.start, float(cj) * scale, rj))
    if not terms:
        return 0.0
    terms.sort(key=lambda x: x[0])
    start = np.array([t[0] for t in terms], dtype=np.float64)
    amp = np.array([t[1] for t in terms])
    rate = np.array([t[2] for t in terms]) / float(sample_rate)
    # the sum at each start, over the terms begun by then; one pass with a running
    # sum per distinct start: S(s_j) = sum_i amp_i exp(-rate_i (s_j - s_i))
    best = 0.0
    firsts = np.flatnonzero(np.diff(start, prepend=-1.0))
    bounds = np.append(firsts[1:], start.size)
    constant = 0.0
    live_idx = np.zeros(0, dtype=np.int64)
    for lo, hi in zip(firsts, bounds, strict=True):
        live_idx = np.concatenate([live_idx, np.arange(lo, hi)])
        now = amp[live_idx] * np.exp(-rate[live_idx] * (start[lo] - start[live_idx]))
        fold = now < amp[live_idx] * _FOLD_BELOW
        if np.any(fold):  # keep a decayed term as a constant (only overstates the sum)
            constant += float(np.sum(now[fold]))
            live_idx, now = live_idx[~fold], now[~fold]
        best = max(best, constant + float(np.sum(now)))
    return best * _RUNAWAY_MARGIN


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


@dataclass(frozen=True)
class ScaledBlock:
    """What :func:`scale_block` measured in one block (rows counted from the block's start).

    Attributes
    ----------
    peak_in : float
        Largest magnitude of the block before the gain.
    peak : float
        Largest magnitude of the finite scaled samples (as written: float32 for a
        float32 output).
    tail : float
        The same over the rows from ``tail_from`` on (0 when there are none).
    first_not_finite : int or None
        First row holding a scaled sample that is NaN or infinite.
    first_beyond : int or None
        First row holding a finite scaled sample beyond full scale (magnitude > 1).
    """

    peak_in: float
    peak: float
    tail: float
    first_not_finite: int | None
    first_beyond: int | None


_NO_INT32 = np.zeros((0, 0), dtype=np.int32)
_NO_FLOAT32 = np.zeros((0, 0), dtype=np.float32)


def scale_block(block: np.ndarray, gain: float, out: np.ndarray, *,
                tail_from: int | None = None) -> ScaledBlock:
    """Scale ``block`` by ``gain`` into ``out`` and measure it, in one compiled pass.

    Each sample becomes ``v = x * gain`` in float64, the product the engine
    applies (:func:`render_blocks` with ``gain``).  An int32 ``out`` receives
    ``rint(v * 2^31)`` (ties to even), at most ``2^31 - 1``: integer samples at
    full scale ``2^31``.  A float32 ``out`` receives ``v`` rounded to float32,
    and the measures are taken on those values.  A sample that is not finite
    or beyond full scale is written as 0 and reported.

    Parameters
    ----------
    block : ndarray of float64, shape (rows, channels)
        The samples, full scale 1.0.
    gain : float
        Linear gain.
    out : ndarray of int32 or float32, shape (rows, channels)
        Where the scaled samples go (C order).
    tail_from : int, optional
        First row of the tail measured on its own (default: none).

    Returns
    -------
    ScaledBlock
        Peaks before and after the gain, the tail's peak and the first bad rows.
    """
    if block.dtype != np.float64 or block.ndim != 2:
        raise ModelError(f"samples to scale: must be float64 of shape (rows, channels), "
                         f"got {block.dtype} {block.shape}")
    if out.shape != block.shape or out.dtype not in (np.int32, np.float32) or not (
            out.flags.c_contiguous and out.flags.writeable):
        raise ModelError(f"scaled samples: must be a writable C-ordered int32 or float32 "
                         f"array of shape {block.shape}, got {out.dtype} {out.shape}")
    block = np.ascontiguousarray(block)  # the kernel reads it as one run of samples
    to_int = out.dtype == np.int32
    tail_row = block.shape[0] if tail_from is None else max(0, int(tail_from))
    peak_in, peak, tail, bad, beyond = kernels._scale_block(
        block, float(gain), to_int, out if to_int else _NO_INT32,
        _NO_FLOAT32 if to_int else out, tail_row)
    return ScaledBlock(peak_in, peak, tail, None if bad < 0 else int(bad),
                       None if beyond < 0 else int(beyond))


def pack_pcm(samples: np.ndarray, width: int, out: np.ndarray | None = None) -> np.ndarray:
    """Return int32 samples (full scale 2^31) as little-endian PCM bytes, ``width`` 2 or 3.

    Each sample keeps its top 16 or 24 bits (``value >> 16`` or ``>> 8``), as a
    WAV writer keeps them; the bytes follow the samples' C order (interleaved
    channels for a (rows, channels) block).  ``out``, a uint8 array of at least
    ``samples.size * width`` bytes, is filled and its start returned.
    """
    if samples.dtype != np.int32:
        raise ModelError(f"samples to pack: must be int32, got {samples.dtype}")
    if width not in (2, 3):
        raise ModelError(f"width = {width!r}: must be 2 or 3 bytes")
    flat = np.ascontiguousarray(samples).reshape(-1)
    n = flat.size * width
    if out is None:
        out = np.empty(n, dtype=np.uint8)
    elif out.dtype != np.uint8 or out.ndim != 1 or out.size < n or not out.flags.writeable:
        raise ModelError(f"packed samples: must be a writable uint8 array of at least {n} "
                         f"bytes, got {out.dtype} {out.shape}")
    kernels._pack_pcm(flat, out, width)
    return out[:n]


def ring_out_sample(voices: Sequence[Voice], *, sample_rate: float,
                    level_db: float = -90.0) -> int | None:
    """Return the first sample by which every voice is ``level_db`` below its start.

    Use it to choose a render length that lets the voices ring out.  The level
    of a voice is the sum of its mode amplitudes and pair magnitudes, decays
    and damping included (weights and gain curves left out); a voice that
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
        p = _Prepared(v, float(sample_rate), v.n_channels, horizon)
        p.end = max(p.start, min(p.end, p._silent_from(p.end, level_db, float(sample_rate))))
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
