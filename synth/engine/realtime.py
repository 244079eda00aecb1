"""A real-time voice pool: planned voices rendered block by block for a live stream.

The offline renderer (:mod:`synth.engine.render`) knows every event in advance.
A live stream does not: strikes, key releases, damper moves and rotor changes
arrive while it plays.  This module holds a fixed pool of voices in arrays
allocated once, before the stream starts, and renders it block by block with
one compiled call (:func:`synth.engine.kernels._rt_block`) that allocates
nothing and touches no Python object.  It knows modes, coupled pairs, a damper
and a rotor, never bars or notes.

Plans
-----
Everything that can sound is planned before the stream starts: a list of
:class:`LiveVoice` templates, each a generic :class:`~synth.engine.voice.Voice`
(its mode bank, coupled pairs and channel gains; start sample 0) plus, per
pair, an optional :class:`RotorLaw`.  A strike names a template by its index.

Events
------
:meth:`VoicePool.start`, :meth:`~VoicePool.release`, :meth:`~VoicePool.lift`,
:meth:`~VoicePool.rotor_rate` and :meth:`~VoicePool.set_gain` put an event into
a ring (preallocated; one producer thread, the audio callback the one consumer)
with the stream sample at which it acts.  The next :meth:`VoicePool.process`
whose block holds that sample applies it at that very sample (an event already
in the past acts at the block's first sample):

* ``start(template, tag)``: a voice starts at its template's state.  When every
  voice of the pool sounds, the quietest one (smallest bound of what it can
  still add, from its present state) is taken over.
* ``release(tag)``: the voices started with ``tag`` and not yet released are
  released: from now on their modes (and the pair members flagged ``damped``)
  decay faster by ``release_decay_per_s (1 - lift)``.
* ``lift(value)``: the damper lift, 0..1; every released voice takes the new
  extra decay from this sample on (``lift = 1``: the dampers are off, released
  voices ring; in between, half damping).
* ``rotor_rate(rate)``: the rotor approaches the new rate from its present angle
  and rate, by the rotor's own law (:class:`Rotor`), without a jump in angle.
* ``set_gain(gain)``: the output gain moves to ``gain`` in a linear ramp.

These are the rules the offline voice plan writes into a voice's damping
schedule, applied as the events come; with the same events at the same samples
the pool gives the offline render's samples to rounding (the tests compare them
at 1e-9 of full scale).

Rotor
-----
One rotor drives every modulated pair: its angle ``theta(t)`` starts at rest at
``resting_rad``, spins up to ``rate_rev_per_s`` (exponential or linear law with
``spin_up_s``), and a pair's :class:`RotorLaw` gives, with
``m = max(1 - depth |cos(theta + offset_rad)|, floor)``, its coupling
``mu_open m`` (``theta`` taken half a step later: the coupling acts over the
step), member-2 weight ``w2_open sqrt(m)`` and member-2 decay
``g2_fixed + g2_per_factor m``.

Output safety
-------------
The voices' sum is multiplied by the output gain (ramped over ``ramp_s``), then
held under ``ceiling`` (default -1 dBFS) by a limiter that lowers its gain at
once and recovers over ``recover_s``; a last clamp makes the ceiling hard.  A
NaN, an infinity or a sum above the bound of the sounding voices (their start
amplitudes: decays never add) mutes the pool for good and sets
:attr:`VoicePool.fault`.  A voice whose bound times the gain falls below
``retire_dbfs`` is freed.

Allocation
----------
:meth:`VoicePool.process` calls the kernel once with arrays made in
``__init__`` and the caller's output buffer; the kernel allocates nothing.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final

import numpy as np

from synth.engine import kernels
from synth.engine.render import (
    ANCHOR_EVERY,
    PAIR_MAX_COUPLING_PER_SAMPLE,
    PAIR_MAX_DECAY_PER_SAMPLE,
    _series_coefficients,
)
from synth.engine.voice import RotorLaw, Voice
from synth.errors import ConfigError, ModelError

DEFAULT_VOICES: Final[int] = 64
"""Voices in the pool (enough for three octaves sounding at once, with room for repeats)."""

DEFAULT_CEILING_DBFS: Final[float] = -1.0
"""Largest output level, dBFS (physics.md section 14: peaks at or below -1 dBTP)."""

DEFAULT_RETIRE_DBFS: Final[float] = -150.0
"""A voice that can add no more than this (after the gain) is freed, dBFS (below the
last bit of 24-bit audio, -144 dBFS)."""

MAX_BLOCK: Final[int] = 8192
"""Largest block :meth:`VoicePool.process` accepts, samples."""

_INT_FIELDS = 6
_FLT_FIELDS = 3


@dataclass(frozen=True)
class Rotor:
    """The shared rotor that drives modulated pairs.

    Parameters
    ----------
    resting_rad : float
        Angle at rest, rad.
    rate_rev_per_s : float
        Rate it spins up to from sample 0, rev/s (>= 0; 0 = at rest).
    spin_up_s : float
        Time constant (``"exponential"``) or ramp time (``"linear"``) of a rate
        change, s (>= 0; 0 = at once).
    law : str
        ``"exponential"``: ``f = f_to + (f_from - f_to) exp(-u / spin_up_s)``;
        ``"linear"``: ``f`` moves from ``f_from`` to ``f_to`` in ``spin_up_s``.
    """

    resting_rad: float = 0.0
    rate_rev_per_s: float = 0.0
    spin_up_s: float = 0.0
    law: str = "exponential"

    def __post_init__(self) -> None:
        for name in ("resting_rad", "rate_rev_per_s", "spin_up_s"):
            v = float(getattr(self, name))
            if not math.isfinite(v) or (name != "resting_rad" and v < 0):
                raise ConfigError(f"rotor {name} = {v}: must be finite"
                                  + (" and >= 0" if name != "resting_rad" else ""))
        if self.law not in ("exponential", "linear"):
            raise ConfigError(f"rotor law = {self.law!r}: must be exponential or linear")


@dataclass(frozen=True)
class LiveVoice:
    """A voice template: a generic voice and, per coupled pair, its rotor law or None.

    ``voice.start_sample``, ``stop_sample`` and ``damping`` are ignored (the
    events decide them); a pair's curves are replaced by its law, so a pair with
    a curve needs one (a rotor-modulated pair's own ``modulation.law`` serves
    when none is given; its angle law is the pool's :class:`Rotor`).
    ``release_decay_per_s`` is the extra decay a released voice takes with the
    dampers fully down, 1/s.
    """

    voice: Voice
    laws: tuple[RotorLaw | None, ...] = ()
    release_decay_per_s: float = 0.0


class VoicePool:
    """Fixed pool of voices for a live stream (see the module docstring).

    Parameters
    ----------
    templates : sequence of LiveVoice
        Everything a strike may start, indexed by position.
    sample_rate : float
        Hz.
    channels : int
        1 or 2 (mono templates go to both channels of a stereo pool).
    n_voices : int
        Voices that can sound at once.
    gain : float
        Output gain at the start (linear); :meth:`set_gain` ramps it.
    ceiling : float
        Largest output magnitude (linear, <= 1).
    lift : float
        Damper lift at the start, 0..1.
    rotor : Rotor
        The rotor and the rate it spins up to from sample 0.
    ramp_s, recover_s : float
        Gain ramp time (full scale per ``ramp_s``) and limiter recovery time constant, s.
    retire_dbfs : float
        Level after the gain below which a voice is freed, dBFS.
    event_capacity : int
        Size of the event ring.
    """

    def __init__(self, templates: Sequence[LiveVoice], *, sample_rate: float, channels: int = 2,
                 n_voices: int = DEFAULT_VOICES, gain: float = 1.0,
                 ceiling: float = 10.0 ** (DEFAULT_CEILING_DBFS / 20.0), lift: float = 1.0,
                 rotor: Rotor = Rotor(), ramp_s: float = 0.05, recover_s: float = 0.2,
                 retire_dbfs: float = DEFAULT_RETIRE_DBFS, event_capacity: int = 4096):
        fs = float(sample_rate)
        if not (math.isfinite(fs) and fs > 0):
            raise ConfigError(f"sample_rate = {sample_rate!r}: must be a positive number of Hz")
        if channels not in (1, 2):
            raise ConfigError(f"channels = {channels}: must be 1 or 2")
        if not templates:
            raise ConfigError("a voice pool needs at least one voice template")
        if not (isinstance(n_voices, int) and 1 <= n_voices <= 4096):
            raise ConfigError(f"n_voices = {n_voices!r}: must be 1 to 4096")
        if not (0.0 < ceiling <= 1.0 and math.isfinite(gain) and gain >= 0):
            raise ConfigError(f"ceiling = {ceiling}, gain = {gain}: need 0 < ceiling <= 1, "
                              "gain >= 0")
        if not 0.0 <= lift <= 1.0:
            raise ConfigError(f"lift = {lift}: must be between 0 and 1")
        self.sample_rate = fs
        self.channels = channels
        self.n_templates = len(templates)
        self._plan(list(templates), fs, channels)
        n_k = self.p_cyc.shape[1]
        n_q = self.p_pair.shape[1]
        self.v_int = np.zeros((n_voices, _INT_FIELDS), dtype=np.int64)
        self.v_flt = np.zeros((n_voices, _FLT_FIELDS))
        self.v_re = np.zeros((n_voices, n_k))
        self.v_im = np.zeros((n_voices, n_k))
        self.v_pair = np.zeros((n_voices, n_q, 4))
        self.mix = np.zeros((MAX_BLOCK, channels))
        self.theta_n = np.zeros(MAX_BLOCK)
        self.theta_h = np.zeros(MAX_BLOCK)
        self.gain_row = np.zeros(MAX_BLOCK)
        self.pole_re = np.zeros(n_k)
        self.pole_im = np.zeros(n_k)
        cap = int(event_capacity)
        self.ev_kind = np.zeros(cap, dtype=np.int64)
        self.ev_sample = np.zeros(cap, dtype=np.int64)
        self.ev_int = np.zeros(cap, dtype=np.int64)
        self.ev_int2 = np.zeros(cap, dtype=np.int64)
        self.ev_val = np.zeros(cap)
        self.ctl = np.zeros(9, dtype=np.int64)
        self.ctl[kernels._C_CAP] = cap
        self.fctl = np.zeros(17)
        f = self.fctl
        f[kernels._F_LIFT] = lift
        f[kernels._F_R_T0] = 0.0
        f[kernels._F_R_THETA0] = rotor.resting_rad
        f[kernels._F_R_FROM] = 0.0
        f[kernels._F_R_TO] = rotor.rate_rev_per_s
        f[kernels._F_R_TAU] = rotor.spin_up_s
        f[kernels._F_R_LAW] = 0.0 if rotor.law == "exponential" else 1.0
        f[kernels._F_GAIN] = gain
        f[kernels._F_GAIN_TO] = gain
        f[kernels._F_GAIN_STEP] = 1.0 / max(ramp_s * fs, 1.0)
        f[kernels._F_LIMIT] = 1.0
        f[kernels._F_CEILING] = ceiling
        f[kernels._F_RECOVER] = -math.expm1(-1.0 / max(recover_s * fs, 1.0))
        f[kernels._F_RETIRE] = 10.0 ** (retire_dbfs / 20.0)
        f[kernels._F_RATE] = fs
        self.dropped_events = 0

    # ------------------------------------------------------------------ planning
    def _plan(self, templates: list[LiveVoice], fs: float, n_ch: int) -> None:
        n_p = len(templates)
        n_k = max(1, max(t.voice.modes.n_modes for t in templates))
        n_q = max(1, max(len(t.voice.pairs) for t in templates))
        self.p_nmodes = np.zeros(n_p, dtype=np.int64)
        self.p_cyc = np.zeros((n_p, n_k))
        self.p_dec = np.zeros((n_p, n_k))
        self.p_amp = np.zeros((n_p, n_k))
        self.p_ph = np.zeros((n_p, n_k))
        self.p_gain = np.zeros((n_p, n_ch))
        self.p_npairs = np.zeros(n_p, dtype=np.int64)
        self.p_pair = np.zeros((n_p, n_q, kernels._Q_FIELDS))
        self.p_w2max = np.zeros((n_p, n_q))
        self.p_gmax = np.zeros(n_p)
        self.p_damp = np.zeros(n_p)
        nyq = 0.5 * fs
        z_bound = PAIR_MAX_COUPLING_PER_SAMPLE ** 2
        for i, t in enumerate(templates):
            if not isinstance(t, LiveVoice) or not isinstance(t.voice, Voice):
                raise ModelError(f"voice template {i}: must be a LiveVoice holding a Voice")
            v = t.voice
            where = f"voice template {i} ({v.where})"
            bank = v.modes
            if bank.n_modes and float(bank.frequency_hz.max()) >= nyq:
                raise ModelError(f"{where}: a mode at or above half the sample rate")
            k = bank.n_modes
            self.p_nmodes[i] = k
            self.p_cyc[i, :k] = bank.frequency_hz / fs
            self.p_dec[i, :k] = bank.decay_per_s / fs
            self.p_amp[i, :k] = bank.amplitude
            self.p_ph[i, :k] = bank.phase_rad
            if v.n_channels == n_ch:
                self.p_gain[i] = v.channel_gains
            elif v.n_channels == 1:
                self.p_gain[i] = v.channel_gains[0]
            else:
                raise ModelError(f"{where}: {v.n_channels} channel gains for a "
                                 f"{n_ch}-channel pool")
            self.p_gmax[i] = float(np.max(np.abs(self.p_gain[i])))
            rel = float(t.release_decay_per_s)
            if not (math.isfinite(rel) and rel >= 0):
                raise ModelError(f"{where}: release_decay_per_s = {rel}: must be >= 0")
            self.p_damp[i] = rel
            laws = tuple(t.laws) + (None,) * (len(v.pairs) - len(t.laws))
            self.p_npairs[i] = len(v.pairs)
            for q, (pair, law) in enumerate(zip(v.pairs, laws, strict=False)):
                z_bound = max(z_bound, self._plan_pair(i, q, pair, law, fs, rel, where))
        self.cosh_coef, self.sinh_coef = _series_coefficients(z_bound, "voice pool")

    def _plan_pair(self, i, q, pair, law, fs, release, where) -> float:
        if max(pair.frequency_hz) >= 0.5 * fs:
            raise ModelError(f"{where}: a coupled pair at or above half the sample rate")
        row = self.p_pair[i, q]
        a, ph = pair.amplitude, pair.phase_rad
        row[kernels._Q_OM1] = 2 * math.pi * pair.frequency_hz[0]
        row[kernels._Q_OM2] = 2 * math.pi * pair.frequency_hz[1]
        row[kernels._Q_G1] = pair.decay_per_s[0]
        row[kernels._Q_A1R] = a[0] * math.cos(ph[0])
        row[kernels._Q_A1I] = a[0] * math.sin(ph[0])
        row[kernels._Q_A2R] = a[1] * math.cos(ph[1])
        row[kernels._Q_A2I] = a[1] * math.sin(ph[1])
        row[kernels._Q_W1] = pair.weight_1
        row[kernels._Q_D1] = float(pair.damped[0])
        row[kernels._Q_D2] = float(pair.damped[1])
        if law is None and pair.modulation is not None:
            law = pair.modulation.law  # the pool's own rotor gives the angle
        if law is None:
            if callable(pair.coupling_rad_s) or callable(pair.weight_2) \
                    or pair.decay_2_curve is not None:
                raise ModelError(f"{where}: a coupled pair with curves needs a rotor law in a "
                                 "live pool")
            row[kernels._Q_G2] = pair.decay_per_s[1]
            row[kernels._Q_MU] = pair.coupling_rad_s
            row[kernels._Q_W2] = pair.weight_2
            mu_max, g2_max = abs(pair.coupling_rad_s), pair.decay_per_s[1]
            self.p_w2max[i, q] = abs(pair.weight_2)
        else:
            if not isinstance(law, RotorLaw):
                raise ModelError(f"{where}: laws must be RotorLaw objects or None")
            row[kernels._Q_MOD] = 1.0
            row[kernels._Q_G2] = law.decay_2_fixed_per_s
            row[kernels._Q_G2RAD] = law.decay_2_per_factor
            row[kernels._Q_MU] = law.coupling_open_rad_s
            row[kernels._Q_W2] = law.weight_2_open
            row[kernels._Q_DEPTH] = law.depth
            row[kernels._Q_FLOOR] = law.floor
            row[kernels._Q_OFFSET] = law.offset_rad
            top = max(1.0, law.floor)
            mu_max = abs(law.coupling_open_rad_s) * top
            g2_max = law.decay_2_fixed_per_s + law.decay_2_per_factor * top
            self.p_w2max[i, q] = abs(law.weight_2_open) * math.sqrt(top)
        if mu_max > PAIR_MAX_COUPLING_PER_SAMPLE * fs:
            raise ModelError(f"{where}: coupling {mu_max:g} rad/s too fast for the sample rate")
        g1_max = pair.decay_per_s[0] + release
        if 0.5 * (g1_max + g2_max + release) / fs > PAIR_MAX_DECAY_PER_SAMPLE:
            raise ModelError(f"{where}: coupled pair decays too fast for the sample rate")
        d = 0.5 * abs(complex(g1_max + g2_max + release,
                              row[kernels._Q_OM1] - row[kernels._Q_OM2]))
        return (d / fs) ** 2 + (mu_max / fs) ** 2

    # ------------------------------------------------------------------ events
    def _push(self, kind: int, sample: int, ia: int = 0, ib: int = 0, val: float = 0.0) -> bool:
        ctl = self.ctl
        w = int(ctl[kernels._C_WRITE])
        cap = int(ctl[kernels._C_CAP])
        if w - int(ctl[kernels._C_READ]) >= cap:
            self.dropped_events += 1
            return False
        e = w % cap
        self.ev_kind[e] = kind
        self.ev_sample[e] = sample
        self.ev_int[e] = ia
        self.ev_int2[e] = ib
        self.ev_val[e] = val
        ctl[kernels._C_WRITE] = w + 1   # published last: the consumer sees a whole event
        return True

    def start(self, template: int, tag: int, sample: int) -> bool:
        """Start template ``template`` at stream sample ``sample``, tagged ``tag``.

        Events must be given in non-decreasing sample order.  Returns False when
        the ring was full and the event was dropped.
        """
        if not 0 <= template < self.n_templates:
            raise ConfigError(f"template {template}: must be 0 to {self.n_templates - 1}")
        return self._push(kernels._E_START, sample, template, tag)

    def release(self, tag: int, sample: int) -> bool:
        """Release the sounding, unreleased voices tagged ``tag`` at ``sample``."""
        return self._push(kernels._E_RELEASE, sample, tag)

    def lift(self, value: float, sample: int) -> bool:
        """Set the damper lift (0..1) at ``sample``."""
        value = float(value)
        if not 0.0 <= value <= 1.0:
            raise ConfigError(f"lift = {value}: must be between 0 and 1")
        return self._push(kernels._E_LIFT, sample, val=value)

    def rotor_rate(self, rate_rev_per_s: float, sample: int) -> bool:
        """Set the rate the rotor approaches from ``sample`` on, rev/s (>= 0)."""
        rate = float(rate_rev_per_s)
        if not (math.isfinite(rate) and rate >= 0):
            raise ConfigError(f"rotor rate = {rate}: must be >= 0 rev/s")
        return self._push(kernels._E_ROTOR, sample, val=rate)

    def set_gain(self, gain: float, sample: int) -> bool:
        """Ramp the output gain (linear, >= 0) towards ``gain`` from ``sample`` on."""
        gain = float(gain)
        if not (math.isfinite(gain) and gain >= 0):
            raise ConfigError(f"gain = {gain}: must be finite and >= 0")
        return self._push(kernels._E_GAIN, sample, val=gain)

    # ------------------------------------------------------------------ rendering
    def process(self, out: np.ndarray) -> None:
        """Render the next ``len(out)`` samples into ``out`` (shape (n, channels), float).

        The audio callback's body: one compiled call, no allocation.
        """
        kernels._rt_block(
            out, out.shape[0], self.ctl, self.fctl, self.ev_kind, self.ev_sample, self.ev_int,
            self.ev_int2, self.ev_val, self.v_int, self.v_flt, self.v_re, self.v_im,
            self.v_pair, self.p_nmodes, self.p_cyc, self.p_dec, self.p_amp, self.p_ph,
            self.p_gain, self.p_npairs, self.p_pair, self.p_w2max, self.p_gmax, self.p_damp,
            self.mix, self.theta_n, self.theta_h, self.gain_row, self.pole_re, self.pole_im,
            self.cosh_coef, self.sinh_coef, ANCHOR_EVERY)

    def check_block(self, out: np.ndarray) -> None:
        """Refuse an output buffer :meth:`process` cannot fill (call before the stream)."""
        if out.ndim != 2 or out.shape[1] != self.channels or not 0 < out.shape[0] <= MAX_BLOCK:
            raise ConfigError(f"output block of shape {out.shape}: need (1..{MAX_BLOCK}, "
                              f"{self.channels})")

    def warm_up(self) -> None:
        """Compile (or load) the kernels with the stream's types before it starts."""
        state = (self.ctl.copy(), self.fctl.copy(), self.v_int.copy(), self.v_flt.copy())
        for dtype in (np.float32, np.float64):
            self.process(np.zeros((16, self.channels), dtype=dtype))
        self.ctl[:], self.fctl[:], self.v_int[:], self.v_flt[:] = state

    # ------------------------------------------------------------------ status
    @property
    def now(self) -> int:
        """Stream sample at which the next block starts."""
        return int(self.ctl[kernels._C_NOW])

    @property
    def sounding(self) -> int:
        """Voices sounding after the last block."""
        return int(self.ctl[kernels._C_ACTIVE])

    @property
    def steals(self) -> int:
        """Voices taken over so far because the pool was full."""
        return int(self.ctl[kernels._C_STEALS])

    @property
    def limited_blocks(self) -> int:
        """Blocks in which the ceiling lowered the gain."""
        return int(self.ctl[kernels._C_LIMITED])

    @property
    def fault(self) -> str | None:
        """Why the pool muted itself (``None`` while it plays)."""
        code = int(self.ctl[kernels._C_FAULT])
        return {0: None, 1: "NaN or infinity in the output",
                2: "output above the bound of the sounding voices"}.get(code, "fault")

    @property
    def lift_value(self) -> float:
        """Damper lift now."""
        return float(self.fctl[kernels._F_LIFT])

    @property
    def rotor_target(self) -> float:
        """Rate the rotor approaches, rev/s."""
        return float(self.fctl[kernels._F_R_TO])

    @property
    def gain(self) -> float:
        """Output gain now (linear, before the limiter)."""
        return float(self.fctl[kernels._F_GAIN])

    @property
    def last_peak(self) -> float:
        """Largest output magnitude of the last block."""
        return float(self.fctl[kernels._F_PEAK])

    def voice_bounds(self) -> np.ndarray:
        """Bound of what each voice can still add (0 for a free voice), unit gain."""
        out = np.zeros(self.v_int.shape[0])
        for v in range(out.size):
            if self.v_int[v, 0]:
                out[v] = kernels._rt_voice_bound(
                    v, self.v_int, self.v_flt, self.v_re, self.v_im, self.v_pair,
                    self.p_nmodes, self.p_amp, self.p_dec, self.p_npairs, self.p_pair,
                    self.p_w2max, self.p_gmax)
        return out

    def voice_templates(self) -> np.ndarray:
        """Template of each voice (-1 for a free voice)."""
        return np.where(self.v_int[:, 0] == 1, self.v_int[:, 1], -1)
