"""Compiled inner loops of the sound engine (every numba function of barwright).

Each function here is private, takes float64 arrays and scalars, writes into
arrays the caller allocated and keeps no state of its own.  The wrappers in
:mod:`synth.engine.render` validate, allocate, split the work at sample-exact
boundaries and call these.  Nothing here knows about voices, notes or bars.

Two kernels do the work:

``_bank_add``
    A bank of exponentially decaying modes.  Mode k carries the complex state
    ``y_k[m] = a_k exp(-(g_k m dt + E(m))) exp(i (2 pi f_k m dt + phi_k))`` where
    ``m`` counts samples since the voice started and ``E(m)`` is the extra
    decay (nepers) that a damping schedule has added so far.  Between anchors
    the state advances by one complex multiplication per sample by the pole
    ``z_k = exp((-g_k - e + i 2 pi f_k) dt)`` (a complex one-pole recursion);
    its imaginary part is the output.  Every ``anchor_every`` samples of the
    voice's own clock (and at every damping change) the state is recomputed
    from the closed form above, so rounding never accumulates over more than
    one anchor interval: a minute-long tail keeps its frequency and decay rate
    to rounding level.  The loop over modes is innermost, with the state in
    separate real and imaginary arrays, so the compiler vectorises it, and
    each pass over the modes advances four samples (groups aligned on the
    voice's clock), which halves the loads and stores per mode-sample.

``_pair_add``
    Two complex modes coupled in rotating-wave form,
    ``d/dt [a1, a2] = A(t) [a1, a2]``, ``A = [[s1, i mu], [i mu, s2]]``,
    ``s_j = i om_j - g_j``.  Each sample step applies the exact matrix
    exponential of the coefficients frozen over that step.  With
    ``m = (s1 + s2)/2``, ``d = (s1 - s2)/2`` and ``B = A - m I`` one has
    ``B^2 = q^2 I`` with ``q^2 = d^2 - mu^2``, hence (Cayley-Hamilton)

        exp(A dt) = exp(m dt) [cosh(q dt) I + (sinh(q dt)/q) B]

    where ``cosh(q dt)`` and ``sinh(q dt)/q`` are entire functions of
    ``z = q^2 dt^2``, summed here as truncated power series (the caller picks
    the number of terms so that the first omitted term is below 1e-18).
    ``mu`` may change every step, and so may ``g2`` (then ``exp(m dt)`` is
    summed as a Taylor series too, its argument being kept small).  The
    coefficients of each sample do not depend on the state, so they are
    computed for a chunk of samples first (vectorised over samples) and then
    applied in one short dependent loop.

References
----------
.. [1] Moler, C. and Van Loan, C., "Nineteen dubious ways to compute the
   exponential of a matrix, twenty-five years later", SIAM Review 45(1), 3-49,
   2003, doi:10.1137/S00361445024180 (DOI from memory; section 3: the 2x2
   case and Cayley-Hamilton methods).
.. [2] Smith, J. O., "Introduction to Digital Filters with Audio
   Applications", W3K Publishing, 2007, ISBN 978-0-9745607-1-7 (complex
   one-pole resonators; ISBN from memory).
"""

from __future__ import annotations

import math
import os

import numpy as np
from numba import njit

CACHE_LOCK_NAME = ".save.lock"
"""File in numba's cache folder that one process at a time holds while it adds a kernel."""


def _one_cache_writer() -> None:
    """Let one process at a time add an entry to numba's cache of compiled kernels.

    numba writes each cache file whole (a temporary file renamed into place) but
    picks the data file of a new signature from the index it read just before: two
    processes compiling two signatures of one kernel at once (``_rt_block`` for
    float32 and float64 output, ``_bank_add`` with and without a gain curve) on an
    empty cache can both take ``...-1.nbc``, and the index can end up naming one
    signature's file filled with the other's code, which a later process would
    load and run.  Worker pools and two commands run at once meet exactly that on
    a fresh install.  A lock file in the cache folder (``flock``, released when the
    process dies) makes numba's read-index, write-index, write-data step whole.
    Without ``fcntl`` (not POSIX) or with a numba that moved its cache, nothing is
    guarded.
    """
    try:
        import fcntl

        from numba.core.caching import IndexDataCacheFile
    except ImportError:
        return
    save = IndexDataCacheFile.save
    if getattr(save, "one_writer", False):
        return

    def locked_save(self, key, data):
        try:
            lock = open(os.path.join(self._cache_path, CACHE_LOCK_NAME), "a")
        except OSError:  # a folder numba cannot write either: its own error handling
            return save(self, key, data)
        with lock:
            fcntl.flock(lock, fcntl.LOCK_EX)
            return save(self, key, data)

    locked_save.one_writer = True  # type: ignore[attr-defined]
    setattr(IndexDataCacheFile, "save", locked_save)  # noqa: B010 (mypy refuses a method assignment)


_one_cache_writer()


def _signals_wait_for_numba() -> None:
    """Let SIGINT and SIGTERM wait while numba loads or compiles a kernel; they act after.

    numba reads a cached kernel through LLVM, which calls back into Python
    through ctypes; an exception a signal handler raises inside such a callback
    is printed and dropped, and LLVM goes on with a broken buffer.  A Ctrl-C or a
    SIGTERM landing while a kernel loads (the first call of each kernel in a
    process, while a render may already be writing its file) was then lost or
    killed the process without its cleanup.  While numba's ``Dispatcher.compile``
    runs in the main thread, the two signals' handlers only note the signal; as
    it returns the former handlers come back and act on what was noted (raise
    where barwright's cleanup sees it, or the default action).  A signal the
    process ignored stays ignored.  A compile from an empty cache delays the
    signal by that compile (seconds).  (Masking the signals would not do: another
    thread, such as a BLAS worker, would take them.)
    """
    try:
        import signal
        import threading

        from numba.core.dispatcher import Dispatcher
    except ImportError:
        return
    compile_ = Dispatcher.compile
    if getattr(compile_, "signals_wait", False):
        return
    kinds = (signal.SIGINT, signal.SIGTERM)

    def waiting(self, sig):
        if threading.current_thread() is not threading.main_thread():
            return compile_(self, sig)
        noted: list = []  # (signal number, frame)

        def note(signum, frame):
            noted.append((signum, frame))

        former: dict = {}
        for kind in kinds:
            handler = signal.getsignal(kind)
            if handler is not signal.SIG_IGN and handler is not None:
                former[kind] = signal.signal(kind, note)
        try:
            return compile_(self, sig)
        finally:
            for kind, handler in former.items():
                signal.signal(kind, handler)
            for signum, frame in noted:
                handler = former[signum]
                if callable(handler):
                    handler(signum, frame)
                else:  # the default action: send it again, now unhandled
                    os.kill(os.getpid(), signum)

    waiting.signals_wait = True  # type: ignore[attr-defined]
    setattr(Dispatcher, "compile", waiting)  # noqa: B010 (mypy refuses a method assignment)


_signals_wait_for_numba()


def _numba_without_blas_probe() -> None:
    """Load numba's array functions without importing scipy.linalg for them.

    numba loads its implementations of numpy functions on the first call of any
    kernel, even one read from its cache; one of them (``numba.np.arraymath``)
    imports ``scipy.linalg.cython_blas`` on import only to learn whether BLAS is
    there for the inner products of ``np.correlate`` and ``np.convolve``.  No
    kernel here calls those, but that import (scipy.linalg and what it pulls in)
    was about 0.2 s of the 0.5-0.6 s a new process spent before its first
    sample.  So, when neither is loaded yet and no other thread could be
    importing, ``scipy.linalg`` is answered as absent while that one module
    loads (numba then takes its plain loop for those two functions), and
    ``import scipy.linalg`` works as always afterwards.  A process that already
    holds scipy.linalg is left as it is.
    """
    import sys
    import threading

    if ("numba.np.arraymath" in sys.modules or "scipy.linalg" in sys.modules
            or threading.active_count() > 1):
        return
    sys.modules["scipy.linalg"] = None  # type: ignore[assignment]
    try:
        import numba.np.arraymath  # noqa: F401
    except ImportError:  # a numba that needs scipy.linalg there: load it as usual
        pass
    finally:
        if sys.modules.get("scipy.linalg", 0) is None:
            del sys.modules["scipy.linalg"]


_numba_without_blas_probe()

_TWO_PI = 2.0 * math.pi
_PAIR_CHUNK = 256


@njit(cache=True, fastmath=True)
def _bank_add(out, o0, channel_gain, curve, use_curve, state, clock,
              cycles_per_sample, decay_per_sample, amplitude, phase_rad,
              m0, m1, anchor_every, seg_start, seg_end, seg_nepers, extra_per_sample):
    """Add voice-clock samples ``m0 .. m1-1`` of a mode bank into ``out[o0:, :]``.

    The state advances in groups of four samples that start at an anchor
    point (a damping change or a multiple of ``anchor_every``).  A group cut by
    the end of a call is computed in full, only its samples inside the call
    are written, and the state stays at the group start, so the next call
    recomputes the same group identically: the output does not depend on how
    the caller splits the voice into calls.

    Parameters
    ----------
    out : float64[:, :]
        Output block, (samples, channels); added to.  Row ``o0`` is ``m0``.
    o0 : int
        Row of ``out`` that receives voice-clock sample ``m0``.
    channel_gain : float64[:]
        Gain per output channel.
    curve : float64[:]
        Per-sample gain for ``m0 .. m1-1`` (ignored unless ``use_curve``).
    use_curve : bool
        Whether to multiply by ``curve``.
    state : float64[2, :]
        Real and imaginary part of each mode at voice clock ``clock[0]``.
    clock : int64[2]
        ``clock[0]``: voice clock of ``state`` (a group start);
        ``clock[1]``: voice clock of the last anchoring (-1 before the first).
    cycles_per_sample, decay_per_sample, amplitude, phase_rad : float64[:]
        Per mode: f/fs, g/fs (nepers per sample), initial amplitude, phase.
    m0, m1 : int
        Voice-clock range to add, inside the current damping segment.
    anchor_every : int
        Re-anchor whenever the voice clock is a multiple of this (a multiple of 4).
    seg_start, seg_end : int
        Voice clock at which the current damping segment begins and ends.
    seg_nepers : float
        Extra decay accumulated by the damping schedule up to ``seg_start``.
    extra_per_sample : float
        Extra decay rate of the current segment, nepers per sample.
    """
    n_modes = cycles_per_sample.shape[0]
    n_ch = channel_gain.shape[0]
    pole_re = np.empty(n_modes)
    pole_im = np.empty(n_modes)
    for k in range(n_modes):
        r = math.exp(-(decay_per_sample[k] + extra_per_sample))
        th = _TWO_PI * cycles_per_sample[k]
        pole_re[k] = r * math.cos(th)
        pole_im[k] = r * math.sin(th)
    cur_re = state[0].copy()
    cur_im = state[1].copy()
    nxt_re = np.empty(n_modes)
    nxt_im = np.empty(n_modes)
    m_state = clock[0]
    m_anchor = clock[1]
    acc = np.zeros(4)
    m = m0
    while m < m1:
        if (m == seg_start or m % anchor_every == 0) and m_anchor != m:
            nep = seg_nepers + extra_per_sample * (m - seg_start)
            for k in range(n_modes):
                cur_re[k], cur_im[k] = _closed_form(amplitude[k], decay_per_sample[k],
                                                    cycles_per_sample[k], phase_rad[k], m, nep)
            m_state = m
            m_anchor = m
        # run of groups from the state up to the next anchor point (one division per run)
        next_anchor = min(seg_end, (m_state // anchor_every + 1) * anchor_every)
        gs = m_state
        while m < m1:
            ge = min(gs + 4, next_anchor)
            # The two loops below must stay identical but for where the state goes.
            # (A shared inner function or swapping the arrays costs a factor 2-3 in numba.)
            if ge <= m1:   # complete group: advance the state in place
                a0 = 0.0
                a1 = 0.0
                a2 = 0.0
                a3 = 0.0
                for k in range(n_modes):
                    x = cur_re[k]
                    y = cur_im[k]
                    c = pole_re[k]
                    s = pole_im[k]
                    a0 += y
                    x1 = x * c - y * s
                    y1 = x * s + y * c
                    a1 += y1
                    x2 = x1 * c - y1 * s
                    y2 = x1 * s + y1 * c
                    a2 += y2
                    x3 = x2 * c - y2 * s
                    y3 = x2 * s + y2 * c
                    a3 += y3
                    cur_re[k] = x3 * c - y3 * s
                    cur_im[k] = x3 * s + y3 * c
            else:          # cut by the end of the call: keep the state at the group start
                a0 = 0.0
                a1 = 0.0
                a2 = 0.0
                a3 = 0.0
                for k in range(n_modes):
                    x = cur_re[k]
                    y = cur_im[k]
                    c = pole_re[k]
                    s = pole_im[k]
                    a0 += y
                    x1 = x * c - y * s
                    y1 = x * s + y * c
                    a1 += y1
                    x2 = x1 * c - y1 * s
                    y2 = x1 * s + y1 * c
                    a2 += y2
                    x3 = x2 * c - y2 * s
                    y3 = x2 * s + y2 * c
                    a3 += y3
                    nxt_re[k] = x3 * c - y3 * s
                    nxt_im[k] = x3 * s + y3 * c
            acc[0] = a0
            acc[1] = a1
            acc[2] = a2
            acc[3] = a3
            hi = min(ge, m1)
            for mm in range(m, hi):
                v = acc[mm - gs]
                if use_curve:
                    v *= curve[mm - m0]
                row = o0 + mm - m0
                for ch in range(n_ch):
                    out[row, ch] += channel_gain[ch] * v
            m = hi
            if hi < ge:
                break
            gs += 4
            m_state = gs
            if ge == next_anchor:
                break
    state[0, :] = cur_re
    state[1, :] = cur_im
    clock[0] = m_state
    clock[1] = m_anchor


@njit(cache=True, fastmath=True)
def _pair_add(out, o0, n, channel_gain, curve, use_curve, state,
              omega_rad_s, decay_1, decay_2, vary_decay_2, dt, mu_rad_s, weight_1, weight_2,
              cosh_coef, sinh_coef, exp_coef):
    """Advance a coupled pair ``n`` samples and add its output into ``out``.

    The output of sample ``j`` is ``w1 Im(a1[j]) + w2[j] Im(a2[j])`` from the
    state at that sample; then the state steps to ``j + 1`` with the exact
    exponential of the system frozen at ``mu[j]`` (and ``g2[j]``).

    Parameters
    ----------
    out : float64[:, :]
        Output block, (samples, channels); added to.
    o0, n : int
        First row of ``out`` and number of samples.
    channel_gain : float64[:]
        Gain per channel.
    curve : float64[:]
        Per-sample gain (ignored unless ``use_curve``).
    use_curve : bool
        Whether to multiply by ``curve``.
    state : float64[4]
        ``Re a1, Im a1, Re a2, Im a2``, updated in place.
    omega_rad_s : float64[2]
        Angular frequency of each member, rad/s.
    decay_1 : float
        Amplitude decay rate of member 1 (damping included), 1/s.
    decay_2 : float64[:]
        Amplitude decay rate of member 2 per step (damping included), 1/s; only
        ``decay_2[0]`` is read unless ``vary_decay_2``.
    vary_decay_2 : bool
        Whether ``decay_2`` changes from step to step.
    dt : float
        Sample period in s.
    mu_rad_s : float64[:]
        Coupling rate of each step, rad/s (length ``n``).
    weight_1 : float
        Output weight of member 1.
    weight_2 : float64[:]
        Output weight of member 2 per sample (length ``n``).
    cosh_coef, sinh_coef : float64[:]
        ``1/(2k)!`` and ``1/(2k+1)!`` for k = 0 .. K (series of cosh and sinh/q).
    exp_coef : float64[:]
        ``1/k!`` for the Taylor series of ``exp(m dt)`` when ``vary_decay_2``
        (the caller keeps ``|Re m dt|`` small enough for it to be exact).
    """
    n_ch = channel_gain.shape[0]
    n_terms = cosh_coef.shape[0]
    n_exp = exp_coef.shape[0]
    # m = (s1 + s2)/2, d = (s1 - s2)/2 with s_j = -g_j + i om_j (Moler & Van Loan, sec. 3)
    m_im = 0.5 * (omega_rad_s[0] + omega_rad_s[1])
    d_im = 0.5 * (omega_rad_s[0] - omega_rad_s[1])
    rot_re = math.cos(m_im * dt)
    rot_im = math.sin(m_im * dt)
    dt2 = dt * dt
    ddt_im = d_im * dt
    em_re = np.empty(_PAIR_CHUNK)
    em_im = np.empty(_PAIR_CHUNK)
    ddt_re = np.empty(_PAIR_CHUNK)
    zr = np.empty(_PAIR_CHUNK)
    zi = np.empty(_PAIR_CHUNK)
    cr = np.empty(_PAIR_CHUNK)
    ci = np.empty(_PAIR_CHUNK)
    sr = np.empty(_PAIR_CHUNK)
    si = np.empty(_PAIR_CHUNK)
    p_re = np.empty(_PAIR_CHUNK)
    p_im = np.empty(_PAIR_CHUNK)
    q_re = np.empty(_PAIR_CHUNK)
    q_im = np.empty(_PAIR_CHUNK)
    r_re = np.empty(_PAIR_CHUNK)
    r_im = np.empty(_PAIR_CHUNK)
    if not vary_decay_2:  # constant coefficients but mu: fill once
        d_re = -0.5 * (decay_1 - decay_2[0])
        em_mag = math.exp(-0.5 * (decay_1 + decay_2[0]) * dt)
        for j in range(_PAIR_CHUNK):
            em_re[j] = em_mag * rot_re
            em_im[j] = em_mag * rot_im
            ddt_re[j] = d_re * dt
            zi[j] = 2.0 * d_re * d_im * dt2
    a1r = state[0]
    a1i = state[1]
    a2r = state[2]
    a2i = state[3]
    for c0 in range(0, n, _PAIR_CHUNK):
        nc = min(_PAIR_CHUNK, n - c0)
        # Pass 1, vectorised over samples.
        if vary_decay_2:
            # exp(Re(m) dt) by its Taylor series, terms outer so that samples vectorise;
            # em_im holds x = Re(m) dt until the rotation is applied.
            for j in range(nc):
                g2 = decay_2[c0 + j]
                em_im[j] = -0.5 * (decay_1 + g2) * dt
                em_re[j] = exp_coef[n_exp - 1]
                d_re = -0.5 * (decay_1 - g2)
                ddt_re[j] = d_re * dt
                zi[j] = 2.0 * d_re * d_im * dt2
            for t in range(n_exp - 2, -1, -1):
                ct = exp_coef[t]
                for j in range(nc):
                    em_re[j] = em_re[j] * em_im[j] + ct
            for j in range(nc):
                e = em_re[j]
                em_re[j] = e * rot_re
                em_im[j] = e * rot_im
        for j in range(nc):
            mu = mu_rad_s[c0 + j]
            dr = ddt_re[j]
            zr[j] = dr * dr - ddt_im * ddt_im - mu * mu * dt2   # z = (d^2 - mu^2) dt^2
            cr[j] = cosh_coef[n_terms - 1]
            ci[j] = 0.0
            sr[j] = sinh_coef[n_terms - 1]
            si[j] = 0.0
        for t in range(n_terms - 2, -1, -1):   # Horner: cosh(q dt), sinh(q dt)/(q dt)
            ck = cosh_coef[t]
            sk = sinh_coef[t]
            for j in range(nc):
                x = cr[j] * zr[j] - ci[j] * zi[j] + ck
                ci[j] = cr[j] * zi[j] + ci[j] * zr[j]
                cr[j] = x
                y = sr[j] * zr[j] - si[j] * zi[j] + sk
                si[j] = sr[j] * zi[j] + si[j] * zr[j]
                sr[j] = y
        # exp(A dt) = em [C I + S (B dt)], B = [[d, i mu], [i mu, -d]], S = sinh(q dt)/(q dt)
        for j in range(nc):
            mdt = mu_rad_s[c0 + j] * dt
            sd_re = sr[j] * ddt_re[j] - si[j] * ddt_im     # S d dt
            sd_im = sr[j] * ddt_im + si[j] * ddt_re[j]
            u_re = cr[j] + sd_re
            u_im = ci[j] + sd_im
            v_re = cr[j] - sd_re
            v_im = ci[j] - sd_im
            w_re = -si[j] * mdt                            # i S mu dt
            w_im = sr[j] * mdt
            er = em_re[j]
            ei = em_im[j]
            p_re[j] = er * u_re - ei * u_im
            p_im[j] = er * u_im + ei * u_re
            q_re[j] = er * v_re - ei * v_im
            q_im[j] = er * v_im + ei * v_re
            r_re[j] = er * w_re - ei * w_im
            r_im[j] = er * w_im + ei * w_re
        # Pass 2: output then step, one short dependent chain per sample.
        for j in range(nc):
            jj = c0 + j
            y = weight_1 * a1i + weight_2[jj] * a2i
            if use_curve:
                y *= curve[jj]
            row = o0 + jj
            for c in range(n_ch):
                out[row, c] += channel_gain[c] * y
            b1r = p_re[j] * a1r - p_im[j] * a1i + r_re[j] * a2r - r_im[j] * a2i
            b1i = p_re[j] * a1i + p_im[j] * a1r + r_re[j] * a2i + r_im[j] * a2r
            b2r = r_re[j] * a1r - r_im[j] * a1i + q_re[j] * a2r - q_im[j] * a2i
            b2i = r_re[j] * a1i + r_im[j] * a1r + q_re[j] * a2i + q_im[j] * a2r
            a1r = b1r
            a1i = b1i
            a2r = b2r
            a2i = b2i
    state[0] = a1r
    state[1] = a1i
    state[2] = a2r
    state[3] = a2i


# =========================================================================== real-time pool
# Kernels of the real-time voice pool (:mod:`synth.engine.realtime`).  They take
# only arrays the pool allocated once, before the stream starts, and allocate
# nothing themselves: every scratch array is passed in.  The arithmetic follows the
# offline kernels above (closed-form anchoring of the mode bank on the voice's own
# clock and at every damping change; the exact 2x2 matrix exponential of a coupled
# pair per sample step), so the pool reproduces an offline render to rounding.
#
# Layout of the packed arrays (indices named in realtime.py, which fills them):
#   ctl   int64:   stream clock, event read/write counters, pool statistics, fault flag
#   fctl  float64: damper lift, rotor segment, output gain and limiter state, limits
#   v_int int64[V, 6]:   active, plan, tag, released, voice clock, damping segment start
#   v_flt float64[V, 3]: nepers at the segment start, extra decay per sample, anchor flag
#   p_pair float64[P, Q, 18]: one coupled pair (fields _Q_* below)

_C_NOW = 0        # stream sample at the start of the next block
_C_READ = 1       # events consumed
_C_WRITE = 2      # events written (by the producer)
_C_SERIAL = 3     # strikes started so far
_C_FAULT = 4      # 0 = running; 1 = NaN/Inf; 2 = runaway; output muted from then on
_C_STEALS = 5     # voices stolen so far
_C_ACTIVE = 6     # voices sounding after the last block
_C_LIMITED = 7    # blocks in which the ceiling lowered the gain
_C_CAP = 8        # capacity of the event ring

_F_LIFT = 0       # damper lift 0..1 (1 = dampers off the bars)
_F_STOLEN = 1     # start amplitudes of the voices stolen in this block (for the guard)
_F_R_T0 = 2       # rotor segment: start time, s
_F_R_THETA0 = 3   # angle at the segment start, rad
_F_R_FROM = 4     # rate at the segment start, rev/s
_F_R_TO = 5       # rate the segment approaches, rev/s
_F_R_TAU = 6      # spin-up time constant (law 0) or ramp time (law 1), s
_F_R_LAW = 7      # 0 exponential, 1 linear
_F_GAIN = 8       # output gain now
_F_GAIN_TO = 9    # output gain aimed at
_F_GAIN_STEP = 10  # largest gain change per sample (ramp)
_F_LIMIT = 11     # limiter gain now (<= 1)
_F_CEILING = 12   # largest output magnitude
_F_RECOVER = 13   # limiter recovery per sample (fraction of the distance to 1)
_F_RETIRE = 14    # a voice whose bound times the gain falls below this is freed
_F_RATE = 15      # sample rate, Hz
_F_PEAK = 16      # largest output magnitude of the last block (after gain and ceiling)

_E_START = 1      # (plan, tag): start a voice
_E_RELEASE = 2    # (tag): the key is up; dampers act as the lift allows
_E_LIFT = 3       # (value): damper lift
_E_ROTOR = 4      # (value): rotor rate, rev/s
_E_GAIN = 5       # (value): output gain aimed at

_Q_OM1 = 0
_Q_OM2 = 1
_Q_G1 = 2
_Q_G2 = 3         # member 2 decay when not modulated
_Q_A1R = 4
_Q_A1I = 5
_Q_A2R = 6
_Q_A2I = 7
_Q_MU = 8         # coupling (constant) or with the mouth open (modulated), rad/s
_Q_W1 = 9
_Q_W2 = 10        # member 2 weight (constant) or open (modulated)
_Q_D1 = 11        # damped flags
_Q_D2 = 12
_Q_MOD = 13       # 1: modulated by the rotor
_Q_DEPTH = 14     # m = max(1 - depth |cos(theta + offset)|, floor)
_Q_FLOOR = 15
_Q_OFFSET = 16
_Q_G2RAD = 17     # modulated decay of member 2: g2 + g2rad m (g2 then the fixed part)
_Q_FIELDS = 18


@njit(cache=True)
def _rt_rotor(fctl, t):
    """Rotor angle (rad) and rate (rev/s) at time ``t`` s: closed form of the present segment.

    The rate approaches ``f_to`` from ``f_from`` (at the segment start) as
    ``f_to + (f_from - f_to) exp(-u / tau)`` (law 0) or linearly over ``tau``
    (law 1); the angle is its integral from the segment's start angle.
    """
    u = t - fctl[_F_R_T0]
    if u < 0.0:
        u = 0.0
    f0 = fctl[_F_R_FROM]
    f1 = fctl[_F_R_TO]
    tau = fctl[_F_R_TAU]
    if tau == 0.0 or f0 == f1:
        turns = f1 * u
        rate = f1
    elif fctl[_F_R_LAW] == 0.0:
        if f0 == 0.0:   # from rest: the form the offline streams evaluate
            turns = f1 * (u + tau * math.expm1(-u / tau))
        else:
            turns = f1 * u - (f1 - f0) * tau * (-math.expm1(-u / tau))
        rate = f1 + (f0 - f1) * math.exp(-u / tau)
    else:
        if u < tau:
            turns = f0 * u + (f1 - f0) * (u * u / (2.0 * tau))
        else:
            turns = f0 * u + (f1 - f0) * (u - 0.5 * tau)
        rate = f0 + (f1 - f0) * min(u / tau, 1.0)
    return fctl[_F_R_THETA0] + _TWO_PI * turns, rate


@njit(cache=True)
def _rt_voice_bound(v, v_int, v_flt, v_re, v_im, v_pair, p_nmodes, p_amp, p_dec, p_npairs,
                    p_pair, p_w2max, p_gmax):
    """Bound of what voice ``v`` can still add, from its present state (unit gain)."""
    p = v_int[v, 1]
    m = v_int[v, 4]
    nep = v_flt[v, 0] + v_flt[v, 1] * (m - v_int[v, 5])
    b = 0.0
    for k in range(p_nmodes[p]):
        b += abs(p_amp[p, k]) * math.exp(-p_dec[p, k] * m - nep)
    for q in range(p_npairs[p]):
        s = v_pair[v, q]
        norm = math.sqrt(s[0] * s[0] + s[1] * s[1] + s[2] * s[2] + s[3] * s[3])
        b += norm * (abs(p_pair[p, q, _Q_W1]) + p_w2max[p, q])
    return b * p_gmax[p]


@njit(cache=True)
def _rt_damping(v, v_int, v_flt, extra_per_sample):
    """Change voice ``v``'s extra decay from its present clock on (a new segment)."""
    if v_flt[v, 1] == extra_per_sample:
        return
    m = v_int[v, 4]
    v_flt[v, 0] += v_flt[v, 1] * (m - v_int[v, 5])
    v_int[v, 5] = m
    v_flt[v, 1] = extra_per_sample
    v_flt[v, 2] = 1.0


@njit(cache=True)
def _rt_event(kind, ia, ib, val, ctl, fctl, v_int, v_flt, v_re, v_im, v_pair,
              p_nmodes, p_amp, p_dec, p_npairs, p_pair, p_w2max, p_gmax, p_damp, t_now):
    """Apply one event at the present sample (time ``t_now`` s)."""
    n_v = v_int.shape[0]
    fs = fctl[_F_RATE]
    if kind == _E_START:
        v = -1
        for i in range(n_v):
            if v_int[i, 0] == 0:
                v = i
                break
        if v < 0:   # steal the quietest
            best = math.inf
            for i in range(n_v):
                b = _rt_voice_bound(i, v_int, v_flt, v_re, v_im, v_pair, p_nmodes, p_amp,
                                    p_dec, p_npairs, p_pair, p_w2max, p_gmax)
                if b < best:
                    best = b
                    v = i
            ctl[_C_STEALS] += 1
            fctl[_F_STOLEN] += _rt_plan_bound(v_int[v, 1], p_nmodes, p_amp, p_npairs, p_pair,
                                              p_w2max, p_gmax)
        p = ia
        v_int[v, 0] = 1
        v_int[v, 1] = p
        v_int[v, 2] = ib
        v_int[v, 3] = 0
        v_int[v, 4] = 0
        v_int[v, 5] = 0
        v_flt[v, 0] = 0.0
        v_flt[v, 1] = 0.0
        v_flt[v, 2] = 1.0
        for q in range(p_npairs[p]):
            v_pair[v, q, 0] = p_pair[p, q, _Q_A1R]
            v_pair[v, q, 1] = p_pair[p, q, _Q_A1I]
            v_pair[v, q, 2] = p_pair[p, q, _Q_A2R]
            v_pair[v, q, 3] = p_pair[p, q, _Q_A2I]
        ctl[_C_SERIAL] += 1
    elif kind == _E_RELEASE:
        for v in range(n_v):
            if v_int[v, 0] == 1 and v_int[v, 3] == 0 and v_int[v, 2] == ia:
                v_int[v, 3] = 1
                extra = p_damp[v_int[v, 1]] * (1.0 - fctl[_F_LIFT]) / fs
                _rt_damping(v, v_int, v_flt, extra)
    elif kind == _E_LIFT:
        fctl[_F_LIFT] = val
        for v in range(n_v):
            if v_int[v, 0] == 1 and v_int[v, 3] == 1:
                extra = p_damp[v_int[v, 1]] * (1.0 - val) / fs
                _rt_damping(v, v_int, v_flt, extra)
    elif kind == _E_ROTOR:
        theta, rate = _rt_rotor(fctl, t_now)
        fctl[_F_R_THETA0] = theta
        fctl[_F_R_FROM] = rate
        fctl[_F_R_TO] = val
        fctl[_F_R_T0] = t_now
    elif kind == _E_GAIN:
        fctl[_F_GAIN_TO] = val


@njit(cache=True, fastmath=True)
def _rt_bank(mix, j0, j1, v, p, v_int, v_flt, v_re, v_im, p_nmodes, p_cyc, p_dec, p_amp,
             p_ph, p_gain, pole_re, pole_im, anchor_every):
    """Add the mode bank of voice ``v`` for block rows ``j0 .. j1-1``; advance its state."""
    n_k = p_nmodes[p]
    n_ch = mix.shape[1]
    extra = v_flt[v, 1]
    for k in range(n_k):
        r = math.exp(-(p_dec[p, k] + extra))
        th = _TWO_PI * p_cyc[p, k]
        pole_re[k] = r * math.cos(th)
        pole_im[k] = r * math.sin(th)
    m = v_int[v, 4]
    for j in range(j0, j1):
        if v_flt[v, 2] != 0.0 or m % anchor_every == 0:
            nep = v_flt[v, 0] + extra * (m - v_int[v, 5])
            for k in range(n_k):
                mag = p_amp[p, k] * math.exp(-p_dec[p, k] * m - nep)
                cyc = p_cyc[p, k] * m
                ph = _TWO_PI * (cyc - math.floor(cyc)) + p_ph[p, k]
                v_re[v, k] = mag * math.cos(ph)
                v_im[v, k] = mag * math.sin(ph)
            v_flt[v, 2] = 0.0
        y = 0.0
        for k in range(n_k):
            x = v_re[v, k]
            z = v_im[v, k]
            y += z
            v_re[v, k] = x * pole_re[k] - z * pole_im[k]
            v_im[v, k] = x * pole_im[k] + z * pole_re[k]
        for c in range(n_ch):
            mix[j, c] += p_gain[p, c] * y
        m += 1


@njit(cache=True, inline="always")
def _step_series(zr, zi, cosh_coef, sinh_coef, n_terms):
    """Horner sums of ``cosh(q dt)`` and ``sinh(q dt)/(q dt)`` in ``z = (q dt)^2 = zr + i zi``.

    From a zero start over all ``n_terms`` coefficients (the first step gives the
    top coefficient exactly, so zeros padded on top change no bit).
    """
    cr = 0.0
    ci = 0.0
    sr = 0.0
    si = 0.0
    for t in range(n_terms - 1, -1, -1):
        x = cr * zr - ci * zi + cosh_coef[t]
        ci = cr * zi + ci * zr
        cr = x
        x = sr * zr - si * zi + sinh_coef[t]
        si = sr * zi + si * zr
        sr = x
    return cr, ci, sr, si


@njit(cache=True, inline="always")
def _exact_step(cr, ci, sr, si, dr, ddt_im, mdt, er, ei, a1r, a1i, a2r, a2i):
    """Apply ``exp(A dt) = em [C I + S (B dt)]`` to the state; return the new state.

    ``C = cr + i ci``, ``S = sr + i si`` (:func:`_step_series`), ``B dt = [[d dt, i
    mu dt], [i mu dt, -d dt]]`` with ``d dt = dr + i ddt_im``, ``mdt = mu dt`` and
    ``em = er + i ei = exp(m dt)`` (Moler & Van Loan, section 3).
    """
    sd_re = sr * dr - si * ddt_im
    sd_im = sr * ddt_im + si * dr
    u_re = cr + sd_re
    u_im = ci + sd_im
    w_re = cr - sd_re
    w_im = ci - sd_im
    c_re = -si * mdt
    c_im = sr * mdt
    p_re = er * u_re - ei * u_im
    p_im = er * u_im + ei * u_re
    q_re = er * w_re - ei * w_im
    q_im = er * w_im + ei * w_re
    r_re = er * c_re - ei * c_im
    r_im = er * c_im + ei * c_re
    return (p_re * a1r - p_im * a1i + r_re * a2r - r_im * a2i,
            p_re * a1i + p_im * a1r + r_re * a2i + r_im * a2r,
            r_re * a1r - r_im * a1i + q_re * a2r - q_im * a2i,
            r_re * a1i + r_im * a1r + q_re * a2i + q_im * a2r)


@njit(cache=True, fastmath=True)
def _rt_pair(mix, j0, j1, v, p, q, v_flt, v_pair, p_pair, p_gain, theta_n, theta_h, dt,
             cosh_coef, sinh_coef):
    """Add coupled pair ``q`` of voice ``v`` for block rows ``j0 .. j1-1``; step its state.

    ``theta_n[j]``, ``theta_h[j]``: rotor angle at row ``j`` and half a step later.
    Each step applies ``exp(A dt) = exp(m dt) [cosh(q dt) I + sinh(q dt)/(q dt) B dt]``
    with the coefficients of that step (see ``_pair_add``).
    """
    n_ch = mix.shape[1]
    n_terms = cosh_coef.shape[0]
    pp = p_pair[p, q]
    extra = v_flt[v, 1] * (1.0 / dt)
    g1 = pp[_Q_G1] + pp[_Q_D1] * extra
    d_im = 0.5 * (pp[_Q_OM1] - pp[_Q_OM2])
    m_im = 0.5 * (pp[_Q_OM1] + pp[_Q_OM2])
    rot_re = math.cos(m_im * dt)
    rot_im = math.sin(m_im * dt)
    ddt_im = d_im * dt
    dt2 = dt * dt
    w1 = pp[_Q_W1]
    modulated = pp[_Q_MOD] != 0.0
    depth = pp[_Q_DEPTH]
    floor_ = pp[_Q_FLOOR]
    offset = pp[_Q_OFFSET]
    st = v_pair[v, q]
    a1r = st[0]
    a1i = st[1]
    a2r = st[2]
    a2i = st[3]
    for j in range(j0, j1):
        if modulated:
            fm = 1.0 - depth * abs(math.cos(theta_n[j] + offset))
            if fm < floor_:
                fm = floor_
            fh = 1.0 - depth * abs(math.cos(theta_h[j] + offset))
            if fh < floor_:
                fh = floor_
            mu = pp[_Q_MU] * fh
            w2 = pp[_Q_W2] * math.sqrt(fm)
            g2 = pp[_Q_G2] + pp[_Q_G2RAD] * fm + pp[_Q_D2] * extra
        else:
            mu = pp[_Q_MU]
            w2 = pp[_Q_W2]
            g2 = pp[_Q_G2] + pp[_Q_D2] * extra
        y = w1 * a1i + w2 * a2i
        for c in range(n_ch):
            mix[j, c] += p_gain[p, c] * y
        e = math.exp(-0.5 * (g1 + g2) * dt)
        er = e * rot_re
        ei = e * rot_im
        dr = -0.5 * (g1 - g2) * dt
        zr = dr * dr - ddt_im * ddt_im - mu * mu * dt2
        zi = 2.0 * dr * ddt_im
        cr, ci, sr, si = _step_series(zr, zi, cosh_coef, sinh_coef, n_terms)
        a1r, a1i, a2r, a2i = _exact_step(cr, ci, sr, si, dr, ddt_im, mu * dt, er, ei,
                                         a1r, a1i, a2r, a2i)
    st[0] = a1r
    st[1] = a1i
    st[2] = a2r
    st[3] = a2i


@njit(cache=True)
def _rt_block(out, n, ctl, fctl, ev_kind, ev_sample, ev_int, ev_int2, ev_val,
              v_int, v_flt, v_re, v_im, v_pair,
              p_nmodes, p_cyc, p_dec, p_amp, p_ph, p_gain, p_npairs, p_pair, p_w2max,
              p_gmax, p_damp, mix, theta_n, theta_h, gain_row, pole_re, pole_im, cosh_coef,
              sinh_coef, anchor_every):
    """Render the next ``n`` samples of the pool into ``out[:n, :]`` (overwritten).

    Events of the ring whose sample falls before the block's end are applied at
    their own sample (earlier ones at the block's first sample), in ring order.
    The voices are summed into ``mix``, then scaled by the output gain (ramped
    towards its target), held under the ceiling by a limiter that lowers its gain
    at once and recovers slowly, and checked: a NaN, an infinity or a sum above
    the sounding voices' bound mutes the output from then on (``ctl[_C_FAULT]``).
    """
    n_ch = out.shape[1]
    n_v = v_int.shape[0]
    fs = fctl[_F_RATE]
    dt = 1.0 / fs
    now = ctl[_C_NOW]
    cap = ctl[_C_CAP]
    for j in range(n):
        for c in range(n_ch):
            mix[j, c] = 0.0
    j0 = 0
    fctl[_F_STOLEN] = 0.0
    while j0 < n:
        # events due at row j0
        while ctl[_C_READ] < ctl[_C_WRITE]:
            e = ctl[_C_READ] % cap
            if ev_sample[e] > now + j0:
                break
            _rt_event(ev_kind[e], ev_int[e], ev_int2[e], ev_val[e], ctl, fctl, v_int, v_flt,
                      v_re, v_im, v_pair, p_nmodes, p_amp, p_dec, p_npairs, p_pair, p_w2max,
                      p_gmax, p_damp, (now + j0) * dt)
            ctl[_C_READ] += 1
        j1 = n
        if ctl[_C_READ] < ctl[_C_WRITE]:
            e = ctl[_C_READ] % cap
            nxt = ev_sample[e] - now
            if nxt < j1:
                j1 = nxt
        # rotor angles of the rows (the same closed form the offline streams evaluate)
        for j in range(j0, j1):
            theta_n[j] = _rt_rotor(fctl, (float(now + j) + 0.0) / fs)[0]
            theta_h[j] = _rt_rotor(fctl, (float(now + j) + 0.5) / fs)[0]
            gain_row[j] = fctl[_F_GAIN_TO]
        for v in range(n_v):
            if v_int[v, 0] == 0:
                continue
            p = v_int[v, 1]
            if p_nmodes[p] > 0:
                _rt_bank(mix, j0, j1, v, p, v_int, v_flt, v_re, v_im, p_nmodes, p_cyc, p_dec,
                         p_amp, p_ph, p_gain, pole_re, pole_im, anchor_every)
            for q in range(p_npairs[p]):
                _rt_pair(mix, j0, j1, v, p, q, v_flt, v_pair, p_pair, p_gain, theta_n,
                         theta_h, dt, cosh_coef, sinh_coef)
            v_int[v, 4] += j1 - j0
        j0 = j1
    # bound of the block: every voice sounding in it, at its start amplitude
    n_active = 0
    bound = fctl[_F_STOLEN]
    for v in range(n_v):
        if v_int[v, 0] == 1:
            bound += _rt_plan_bound(v_int[v, 1], p_nmodes, p_amp, p_npairs, p_pair, p_w2max,
                                p_gmax)
    # guard, gain ramp, ceiling
    peak = 0.0
    fault = ctl[_C_FAULT]
    for j in range(n):
        for c in range(n_ch):
            x = mix[j, c]
            if not math.isfinite(x):
                fault = 1
            elif abs(x) > peak:
                peak = abs(x)
    if fault == 0 and peak > bound * (1.0 + 1e-9) + 1e-300:
        fault = 2
    if fault != 0:
        ctl[_C_FAULT] = fault
        for v in range(n_v):
            v_int[v, 0] = 0
        for j in range(n):
            for c in range(n_ch):
                out[j, c] = 0.0
        ctl[_C_ACTIVE] = 0
        fctl[_F_PEAK] = 0.0
        ctl[_C_NOW] = now + n
        return
    gain = fctl[_F_GAIN]
    step = fctl[_F_GAIN_STEP]
    lim = fctl[_F_LIMIT]
    ceiling = fctl[_F_CEILING]
    recover = fctl[_F_RECOVER]
    limited = False
    out_peak = 0.0
    for j in range(n):
        target = gain_row[j]
        if gain < target:
            gain = min(target, gain + step)
        elif gain > target:
            gain = max(target, gain - step)
        biggest = 0.0
        for c in range(n_ch):
            a = abs(mix[j, c]) * gain
            if a > biggest:
                biggest = a
        if lim < 1.0:
            lim += (1.0 - lim) * recover
        if biggest * lim > ceiling:
            lim = ceiling / biggest
            limited = True
        g = gain * lim
        for c in range(n_ch):
            y = mix[j, c] * g
            if y > ceiling:
                y = ceiling
            elif y < -ceiling:
                y = -ceiling
            out[j, c] = y
            if abs(y) > out_peak:
                out_peak = abs(y)
    fctl[_F_GAIN] = gain
    fctl[_F_LIMIT] = lim
    fctl[_F_PEAK] = out_peak
    if limited:
        ctl[_C_LIMITED] += 1
    # retire voices that can no longer be heard
    retire = fctl[_F_RETIRE]
    for v in range(n_v):
        if v_int[v, 0] == 1:
            b = _rt_voice_bound(v, v_int, v_flt, v_re, v_im, v_pair, p_nmodes, p_amp, p_dec,
                                p_npairs, p_pair, p_w2max, p_gmax)
            if b * gain < retire:
                v_int[v, 0] = 0
            else:
                n_active += 1
    ctl[_C_ACTIVE] = n_active
    ctl[_C_NOW] = now + n


@njit(cache=True)
def _rt_plan_bound(p, p_nmodes, p_amp, p_npairs, p_pair, p_w2max, p_gmax):
    """Largest output a voice of plan ``p`` can ever give (its start amplitudes)."""
    b = 0.0
    for k in range(p_nmodes[p]):
        b += abs(p_amp[p, k])
    for q in range(p_npairs[p]):
        pp = p_pair[p, q]
        norm = math.sqrt(pp[_Q_A1R] ** 2 + pp[_Q_A1I] ** 2 + pp[_Q_A2R] ** 2 + pp[_Q_A2I] ** 2)
        b += norm * (abs(pp[_Q_W1]) + p_w2max[p, q])
    return b * p_gmax[p]


# ======================================================================================
# Impact of a point mass on a modal system (the contact loop of
# synth.engine.contact.run_contact).  No fastmath: the arithmetic follows the
# reference loop in numpy step for step, so the two agree to rounding.
#
# State s: [y, v, e_contact, e_damp, impulse, q_1..q_N, q'_1..q'_N].
# coeffs: [K, p, lambda, 1/m].  modal rows: phi, phi/M, om^2, 2 g, 2 g M, |phi|,
# damped angular frequency, decay rate g.
# status (int64): [step, event, in_contact, n_contacts, ended]; peak: [max compression].
# ======================================================================================


@njit(cache=True)
def _contact_compression(s, modal, n):
    dq = 0.0
    dv = 0.0
    for j in range(n):
        dq += modal[0, j] * s[5 + j]
        dv += modal[0, j] * s[5 + n + j]
    return s[0] - dq, s[1] - dv


@njit(cache=True)
def _contact_rhs(s, out, coeffs, modal, n):
    d, dd = _contact_compression(s, modal, n)
    f = 0.0
    power = 0.0
    if d > 0.0:
        elastic = coeffs[0] * d ** coeffs[1]
        f = elastic * (1.0 + coeffs[2] * dd)
        if f < 0.0:
            f = 0.0
        power = (f - elastic) * dd
    out[0] = s[1]
    out[1] = -f * coeffs[3]
    out[2] = power
    e = 0.0
    for j in range(n):
        e += modal[4, j] * (s[5 + n + j] * s[5 + n + j])
    out[3] = e
    out[4] = f
    for j in range(n):
        qd = s[5 + n + j]
        out[5 + j] = qd
        out[5 + n + j] = modal[1, j] * f - modal[3, j] * qd - modal[2, j] * s[5 + j]
    return f


@njit(cache=True)
def _contact_step(s, h, s_out, work, coeffs, modal, n):
    k1, k2, k3, k4, tmp = work[0], work[1], work[2], work[3], work[4]
    m = s.size
    half = 0.5 * h
    f0 = _contact_rhs(s, k1, coeffs, modal, n)
    for i in range(m):
        tmp[i] = s[i] + half * k1[i]
    _contact_rhs(tmp, k2, coeffs, modal, n)
    for i in range(m):
        tmp[i] = s[i] + half * k2[i]
    _contact_rhs(tmp, k3, coeffs, modal, n)
    for i in range(m):
        tmp[i] = s[i] + h * k3[i]
    _contact_rhs(tmp, k4, coeffs, modal, n)
    sixth = h / 6.0
    for i in range(m):
        s_out[i] = s[i] + sixth * (((k1[i] + 2.0 * k2[i]) + 2.0 * k3[i]) + k4[i])
    return f0


@njit(cache=True)
def _contact_run(s, s_new, work, forces, status, peak, dt, max_steps, coeffs, modal):
    """Step until the head separates (event 1), is clear for good (2) or time is up (3).

    On event 1, ``s`` is the state before the step and ``s_new`` after it; otherwise
    ``s`` is the last state.  ``forces[i]`` is the force at the start of step ``i``.
    """
    n = modal.shape[1]
    in_contact = status[2] != 0
    ended = status[4] != 0
    n_contacts = status[3]
    for i in range(status[0], max_steps):
        forces[i] = _contact_step(s, dt, s_new, work, coeffs, modal, n)
        d_new, _ = _contact_compression(s_new, modal, n)
        if d_new > peak[0]:
            peak[0] = d_new
        if in_contact and d_new <= 0.0:
            status[0] = i
            status[1] = 1
            status[2] = 1
            status[3] = n_contacts
            return
        if not in_contact and d_new > 0.0:
            in_contact = True
            n_contacts += 1
        for k in range(s.size):
            s[k] = s_new[k]
        if not in_contact and ended and s[1] < 0.0:
            env = 0.0
            for j in range(n):
                q = s[5 + j]
                amp = np.hypot(q, (s[5 + n + j] + modal[7, j] * q) / modal[6, j])
                env += modal[5, j] * amp
            if s[0] < -env:
                status[0] = i
                status[1] = 2
                status[2] = 0
                status[3] = n_contacts
                return
    status[0] = max_steps
    status[1] = 3
    status[2] = 1 if in_contact else 0
    status[3] = n_contacts


# ======================================================================================
# Many voices' plain modes in one call (render.py, "batched banks").  Stateless:
# every mode is anchored from its closed form at the call's first sample and at
# every multiple of ``anchor_every`` of the output clock, so a call needs no state
# from the one before.  Mode k started at output sample ``start[k]``; its voice's
# damping segment (constant over the call) began at voice clock ``seg_start[k]``
# with ``seg_nepers[k]`` nepers accumulated and adds ``extra[k]`` nepers per sample.
# The first output channel receives ``gain_first[k]`` times the mode, the second
# (if any) ``gain_last[k]``.
# ======================================================================================


@njit(cache=True, fastmath=True)
def _closed_form(amplitude, decay_per_sample, cycles_per_sample, phase_rad, m, nep):
    """Real and imaginary part of one mode at voice clock ``m`` (the anchor value).

    Shared by ``_bank_add`` and ``_banks_add``.
    """
    mag = amplitude * math.exp(-decay_per_sample * m - nep)
    cyc = cycles_per_sample * m
    ph = _TWO_PI * (cyc - math.floor(cyc)) + phase_rad
    return mag * math.cos(ph), mag * math.sin(ph)


@njit(cache=True, fastmath=True)
def _banks_add(out, o0, t0, t1, gain_first, gain_last, cycles_per_sample, decay_per_sample,
               amplitude, phase_rad, start, seg_start, seg_nepers, extra, anchor_every):
    n_modes = cycles_per_sample.shape[0]
    n_ch = out.shape[1]
    pole_re = np.empty(n_modes)
    pole_im = np.empty(n_modes)
    for k in range(n_modes):
        r = math.exp(-(decay_per_sample[k] + extra[k]))
        th = _TWO_PI * cycles_per_sample[k]
        pole_re[k] = r * math.cos(th)
        pole_im[k] = r * math.sin(th)
    cur_re = np.empty(n_modes)
    cur_im = np.empty(n_modes)
    acc = np.zeros((4, 2))
    ta = t0
    while ta < t1:
        tb = min(t1, (ta // anchor_every + 1) * anchor_every)
        for k in range(n_modes):
            m = ta - start[k]
            nep = seg_nepers[k] + extra[k] * (m - seg_start[k])
            cur_re[k], cur_im[k] = _closed_form(amplitude[k], decay_per_sample[k],
                                                cycles_per_sample[k], phase_rad[k], m, nep)
        t = ta
        while t < tb:
            # two accumulators per sample: channel 0 and the last channel (the same
            # one in mono), scalars so the loop over modes vectorises
            l0 = l1 = l2 = l3 = 0.0
            r0 = r1 = r2 = r3 = 0.0
            for k in range(n_modes):
                x = cur_re[k]
                y = cur_im[k]
                c_ = pole_re[k]
                s = pole_im[k]
                x1 = x * c_ - y * s
                y1 = x * s + y * c_
                x2 = x1 * c_ - y1 * s
                y2 = x1 * s + y1 * c_
                x3 = x2 * c_ - y2 * s
                y3 = x2 * s + y2 * c_
                cur_re[k] = x3 * c_ - y3 * s
                cur_im[k] = x3 * s + y3 * c_
                gl = gain_first[k]
                gr = gain_last[k]
                l0 += gl * y
                l1 += gl * y1
                l2 += gl * y2
                l3 += gl * y3
                r0 += gr * y
                r1 += gr * y1
                r2 += gr * y2
                r3 += gr * y3
            acc[0, 0] = l0
            acc[1, 0] = l1
            acc[2, 0] = l2
            acc[3, 0] = l3
            acc[0, 1] = r0
            acc[1, 1] = r1
            acc[2, 1] = r2
            acc[3, 1] = r3
            hi = min(t + 4, tb)
            for tt in range(t, hi):
                row = o0 + tt - t0
                out[row, 0] += acc[tt - t, 0]
                if n_ch == 2:
                    out[row, 1] += acc[tt - t, 1]
            t = hi
        ta = tb


# ======================================================================================
# Retiring single modes (``_modes_to_retire``): the tail bound of each mode of a bank
# at voice clock ``m``, ``|a_k| exp(-g_k m - nep) scale``; the smallest go, in
# ascending order, while ``owed`` plus their sum stays below ``level``.
# ======================================================================================


@njit(cache=True)
def _modes_to_retire(abs_amp, decay_per_sample, m, nep, scale, owed, level, extra, order,
                     bounds):
    """Choose the modes to retire; return (modes kept, owed after, samples to wait).

    ``bounds`` receives every mode's tail bound; ``order`` the kept modes'
    indices in ascending order, then the retired ones.  The wait is the
    soonest a kept mode, decaying at ``decay_per_sample + extra``, alone falls
    below the room left (``level`` less what is owed); infinite if none decays,
    0 when no room is left.
    """
    n = abs_amp.shape[0]
    for k in range(n):
        bounds[k] = abs_amp[k] * math.exp(-decay_per_sample[k] * m - nep) * scale
    ranked = np.argsort(bounds, kind="mergesort")
    gone = np.zeros(n, dtype=np.bool_)
    total = owed
    n_gone = 0
    for j in range(n):
        b = bounds[ranked[j]]
        if not total + b < level:
            break
        total += b
        gone[ranked[j]] = True
        n_gone += 1
    room = level - total
    wait = math.inf if room > 0.0 else 0.0  # no room left: look again at the next check
    n_keep = 0
    n_put = 0
    for k in range(n):
        if gone[k]:
            order[n - n_gone + n_put] = k
            n_put += 1
            continue
        order[n_keep] = k
        n_keep += 1
        rate = decay_per_sample[k] + extra
        if rate > 0.0 and room > 0.0:
            wait = min(wait, math.log(bounds[k] / room) / rate)
    return n_keep, total, max(wait, 0.0)


# ======================================================================================
# Rotor-modulated coupled pairs, many at once (render.py, "rotor pairs").  Every pair
# of one call follows the same rotor angle theta(t) (synth.engine.voice,
# "Rotor-modulated pair"); per sample step the kernel evaluates the rotor once,
# then, with the pairs in the inner loops (independent pairs' dependent chains
# interleave and the loops vectorise), each pair's factor
# m = max(1 - depth |cos(theta + offset)|, floor), its mu (half a step later), w2
# and g2, and applies the exact exponential of the frozen step as ``_pair_add``
# does (the same series and coefficients).  cos(theta + offset) is taken as
# cos(theta) cos(offset) - sin(theta) sin(offset), so theta's sine and cosine are
# computed once per half step for all pairs, by Cody-Waite reduction with pi/2 in
# three parts and the Taylor series on |r| <= pi/4 (loops that vectorise, unlike
# the library's cos).
#
# rotor float64[6]: sample rate, rate (rev/s), resting angle (rad), start time (s),
#   spin-up time (s), law (0 exponential, 1 linear).
# work float64[_RP_ROWS * _RP_MAX]: row k of pair p at k * _RP_MAX + p (fields _RP_*
#   below, then the state Re a1, Im a1, Re a2, Im a2, updated in place).
# ======================================================================================

_RP_ROT_RE = 0     # cos, sin of Im((s1 + s2)/2) dt
_RP_ROT_IM = 1
_RP_DDT_IM = 2     # Im((s1 - s2)/2) dt
_RP_G1 = 3         # member 1 decay, damping included, 1/s
_RP_G2 = 4         # fixed part of member 2's decay, damping included, 1/s
_RP_G2M = 5        # member 2 decay per unit of m, 1/s
_RP_MU = 6         # coupling at m = 1, rad/s
_RP_W1 = 7
_RP_W2 = 8         # member 2 weight at m = 1
_RP_DEPTH = 9
_RP_FLOOR = 10
_RP_COS = 11       # cos, sin of the pair's offset on the rotor
_RP_SIN = 12
_RP_GAIN0 = 13     # gain into the first and the last output channel
_RP_GAIN1 = 14
_RP_FIELDS = 15    # the rows the caller fills per pair
_RP_A1R = 15       # state: Re a1, Im a1, Re a2, Im a2 (the caller's in, the kernel's out)
_RP_A1I = 16
_RP_A2R = 17
_RP_A2I = 18
_RP_ROWS = 19
_RP_MAX = 64       # pairs per call: the row length, a constant so that every row of
                   # ``work`` lies at a known distance from the others and the pair
                   # loops vectorise without run-time overlap checks
_RP_EXP_TERMS = 7      # Taylor terms of exp: (g1 + g2) dt / 2 <= 0.005 needs 7 for 1e-18
_RP_SERIES_TERMS = 6   # terms of cosh(q dt), sinh(q dt)/(q dt): |q dt|^2 <= 0.028 for 1e-18

_ROTOR_CHUNK = 128


def _half_pi_parts() -> tuple[float, float, float]:
    """pi/2 as three doubles of 33, 33 and 53 bits (k * part exact for |k| < 2^20)."""
    from fractions import Fraction
    # pi to 50 decimals (common practice, no source)
    rest = Fraction("3.14159265358979323846264338327950288419716939937510") / 2
    parts = []
    for bits in (33, 33, 53):
        mant, exp = math.frexp(float(rest))
        x = math.ldexp(math.floor(mant * 2.0 ** bits) / 2.0 ** bits, exp)
        parts.append(x)
        rest -= Fraction(x)
    return parts[0], parts[1], parts[2]


_PIO2_A, _PIO2_B, _PIO2_C = _half_pi_parts()
_TWO_OVER_PI = 2.0 / math.pi


# Taylor coefficients from the highest: 1/17!, 1/15!, ..., 1/3! and 1/18!, ..., 1/2!
_SIN_TAYLOR = tuple(1.0 / math.factorial(k) for k in range(17, 2, -2))
_COS_TAYLOR = tuple(1.0 / math.factorial(k) for k in range(18, 1, -2))


@njit(cache=True, inline="always")
def _alternating(r2, coefs):
    """Horner sum ``c_0 - c_1 r2 + c_2 r2^2 - ...`` of ``coefs`` given from the highest power."""
    acc = 0.0
    for ck in coefs:
        acc = acc * -r2 + ck
    return acc


@njit(cache=True, inline="always")
def _sin_cos(x):
    """sin(x) and cos(x) to about one unit in the last place for |x| < 1e6 (no branches).

    ``x = k pi/2 + r`` with ``|r| <= pi/4`` (Cody-Waite: pi/2 in three parts, so
    ``k pi/2`` is subtracted exactly); Taylor series of sin and cos in ``r`` to
    ``r^17`` and ``r^18`` (first omitted terms below 1e-19); the quadrant ``k mod
    4`` picks and signs the two.  Not compiled with fastmath: the reduction
    relies on the order of its subtractions.
    """
    k = math.floor(x * _TWO_OVER_PI + 0.5)
    r = ((x - k * _PIO2_A) - k * _PIO2_B) - k * _PIO2_C
    r2 = r * r
    s = r - r * r2 * _alternating(r2, _SIN_TAYLOR)
    c = 1.0 - r2 * _alternating(r2, _COS_TAYLOR)
    q = k - 4.0 * math.floor(0.25 * k)   # 0, 1, 2, 3: selects, no branches
    odd = (q == 1.0) | (q == 3.0)
    a = c if odd else s
    b = s if odd else c
    sin_x = -a if q >= 2.0 else a
    cos_x = -b if (q == 1.0) | (q == 2.0) else b
    return sin_x, cos_x


@njit(cache=True)
def _rotor_sin_cos(rotor, s_first, nc, half, ptab, out_cos, out_sin):
    """Fill the cos and sin of the rotor angle at output samples ``s_first + j (+ 1/2 if half)``.

    The turns follow the closed forms of ``PairModulation`` (engine/voice.py) with ``t = (s +
    offset) / fs``, ``u = max(t - t0, 0)``; the exponential law's ``exp(-u/tau)``
    is ``exp(-u_0/tau) ptab[j]`` from the chunk's first time ``u_0`` (``ptab[j] =
    exp(-j / (fs tau))``) where the chunk starts after ``t0``, so the loops
    vectorise.  Not compiled with fastmath (see ``_sin_cos``).
    """
    fs = rotor[0]
    fr = rotor[1]
    rest = rotor[2]
    t0 = rotor[3]
    tau = rotor[4]
    off = 0.5 if half else 0.0
    base = float(s_first) + off
    t_first = base / fs
    if fr == 0.0:
        for j in range(nc):
            out_sin[j], out_cos[j] = _sin_cos(rest)
        return
    if tau == 0.0:
        for j in range(nc):
            u = (float(j) + base) / fs - t0
            u = u if u > 0.0 else 0.0
            out_sin[j], out_cos[j] = _sin_cos(rest + _TWO_PI * (fr * u))
    elif rotor[5] == 0.0:
        if t_first >= t0:
            e0 = math.exp(-(t_first - t0) / tau)
            for j in range(nc):
                u = (float(j) + base) / fs - t0
                turns = fr * (u + tau * (e0 * ptab[j] - 1.0))
                out_sin[j], out_cos[j] = _sin_cos(rest + _TWO_PI * turns)
        else:
            for j in range(nc):
                u = (float(j) + base) / fs - t0
                u = u if u > 0.0 else 0.0
                turns = fr * (u + tau * math.expm1(-u / tau))
                out_sin[j], out_cos[j] = _sin_cos(rest + _TWO_PI * turns)
    else:
        for j in range(nc):
            u = (float(j) + base) / fs - t0
            u = u if u > 0.0 else 0.0
            turns = fr * (u * u / (2.0 * tau)) if u < tau else fr * (u - 0.5 * tau)
            out_sin[j], out_cos[j] = _sin_cos(rest + _TWO_PI * turns)


@njit(cache=True, fastmath=True)
def _rotor_pairs_add(out, o0, s0, n, rotor, curve, use_curve, work, n_p, dt,
                     cosh_coef, sinh_coef, exp_coef):
    """Advance the ``n_p`` pairs of ``work`` ``n`` samples under one rotor; add into ``out``.

    ``work`` is flat, ``_RP_ROWS`` rows of ``_RP_MAX`` values (row ``k`` of pair
    ``p`` at ``k * _RP_MAX + p``): the caller's fields and states, the kernel's
    scratch.  Output rows ``o0 .. o0 + n - 1`` are the output samples ``s0 ..``
    on the rotor's clock.  The output of sample ``j`` is ``sum_p gain_p (w1 Im a1
    + w2[j] Im a2)`` (times ``curve[j]`` if ``use_curve``), from the state at that
    sample; then each state steps to ``j + 1`` with the exponential of its system
    frozen at ``mu`` (rotor half a step later) and ``g2`` (rotor at the sample),
    as in ``_pair_add``.  The series have ``_RP_EXP_TERMS`` and
    ``_RP_SERIES_TERMS`` coefficients (a shorter series padded with zeros at the
    top gives the same bits: Horner's steps through zeros stay exactly zero), a
    constant count, so the loops over terms unroll and the loop over pairs is
    innermost; the caller keeps ``(g1 + g2) dt / 2`` and ``|q dt|^2`` within them.
    """
    M = _RP_MAX
    n_ch = out.shape[1]
    w = work
    cos_n = np.empty(_ROTOR_CHUNK)
    sin_n = np.empty(_ROTOR_CHUNK)
    cos_h = np.empty(_ROTOR_CHUNK)
    sin_h = np.empty(_ROTOR_CHUNK)
    ptab = np.ones(_ROTOR_CHUNK)
    if rotor[4] > 0.0:
        for j in range(_ROTOR_CHUNK):
            ptab[j] = math.exp(-float(j) / (rotor[0] * rotor[4]))
    dt2 = dt * dt
    for c0 in range(0, n, _ROTOR_CHUNK):
        nc = min(_ROTOR_CHUNK, n - c0)
        _rotor_sin_cos(rotor, s0 + c0, nc, False, ptab, cos_n, sin_n)
        _rotor_sin_cos(rotor, s0 + c0, nc, True, ptab, cos_h, sin_h)
        for j in range(nc):
            ca = cos_n[j]
            sa = sin_n[j]
            cb = cos_h[j]
            sb = sin_h[j]
            acc0 = 0.0
            acc1 = 0.0
            for p in range(n_p):
                depth = w[_RP_DEPTH * M + p]
                floor_ = w[_RP_FLOOR * M + p]
                co = w[_RP_COS * M + p]
                so = w[_RP_SIN * M + p]
                fm = 1.0 - depth * abs(ca * co - sa * so)
                fm = fm if fm > floor_ else floor_
                fh = 1.0 - depth * abs(cb * co - sb * so)
                fh = fh if fh > floor_ else floor_
                mu = w[_RP_MU * M + p] * fh
                g1 = w[_RP_G1 * M + p]
                g2 = w[_RP_G2 * M + p] + w[_RP_G2M * M + p] * fm
                a1i = w[_RP_A1I * M + p]
                a2i = w[_RP_A2I * M + p]
                y = w[_RP_W1 * M + p] * a1i + (w[_RP_W2 * M + p] * math.sqrt(fm)) * a2i
                acc0 += w[_RP_GAIN0 * M + p] * y
                acc1 += w[_RP_GAIN1 * M + p] * y
                ddt_im = w[_RP_DDT_IM * M + p]
                x = -0.5 * (g1 + g2) * dt
                d = -0.5 * (g1 - g2) * dt
                zr = d * d - ddt_im * ddt_im - mu * mu * dt2
                zi = 2.0 * d * ddt_im
                em = 0.0   # exp(Re(m) dt), Taylor
                for t in range(_RP_EXP_TERMS - 1, -1, -1):
                    em = em * x + exp_coef[t]
                cr, ci, sr, si = _step_series(zr, zi, cosh_coef, sinh_coef,
                                              _RP_SERIES_TERMS)
                a1r, a1i, a2r, a2i = _exact_step(
                    cr, ci, sr, si, d, ddt_im, mu * dt, em * w[_RP_ROT_RE * M + p],
                    em * w[_RP_ROT_IM * M + p], w[_RP_A1R * M + p], a1i, w[_RP_A2R * M + p],
                    a2i)
                w[_RP_A1R * M + p] = a1r
                w[_RP_A1I * M + p] = a1i
                w[_RP_A2R * M + p] = a2r
                w[_RP_A2I * M + p] = a2i
            if use_curve:
                acc0 *= curve[c0 + j]
                acc1 *= curve[c0 + j]
            row = o0 + c0 + j
            out[row, 0] += acc0
            if n_ch == 2:
                out[row, 1] += acc1


# ======================================================================================
# Output samples: a block scaled by a gain, measured and converted for the file in one
# pass (render.py, "scale_block").  Each sample is ``v = x * gain`` in float64, as the
# engine scales; for a float32 file ``v`` is then rounded to float32 and measured as
# such.  For an integer file the kernel writes ``rint(v * 2^31)`` (nearest, ties to
# even), at most 2^31 - 1, as int32: the integer at full scale 2^31 that libsndfile
# itself derives from a double in [-1, 1] before it keeps the top 24 or 16 bits
# (its clipping conversion, which soundfile switches on).  No fastmath: the
# comparisons must see NaN, and the rounding must be the one asked for.
#
# Returned, for the block: the largest |x|, the largest |v| and that of rows
# ``tail_from ..`` (over finite samples), the first row holding a sample that is not
# finite, and the first row holding a finite |v| > 1 (-1: none).  Such a sample's
# output is 0.
#
# The common case takes one loop that vectorises: the largest |x| is the largest of
# the samples' bit patterns with the sign bit cleared (integers order non-negative
# doubles as their values, and every NaN above infinity), and for gain > 0 the
# largest |v| is the largest |x| times the gain, rounded (rounding to nearest never
# reverses an order; float32 rounding neither).  Only a block whose largest |v|
# passes full scale, or is not finite, is taken again sample by sample.
# ======================================================================================

_INT32_FULL_SCALE = 2147483648.0   # 2^31
_INT32_TOP = 2147483647.0          # 2^31 - 1
_MAGNITUDE_BITS = 0x7FFFFFFFFFFFFFFF


@njit(cache=True)
def _scale_run(flat, bits, gain, to_int, out_int, out_f32, k0, k1):
    """Scale ``flat[k0:k1]`` into the flat output; return the largest magnitude's bits.

    Samples that are not finite or beyond full scale get some output here (the
    caller takes their block again with :func:`_scale_checked`).
    """
    top = 0
    for k in range(k0, k1):
        b = bits[k] & _MAGNITUDE_BITS
        top = b if b > top else top
        v = flat[k] * gain
        if to_int:
            r = np.rint(v * _INT32_FULL_SCALE)
            r = r if r < _INT32_TOP else _INT32_TOP
            r = r if r > -_INT32_FULL_SCALE else -_INT32_FULL_SCALE  # NaN went to the top
            out_int[k] = np.int32(r)
        else:
            out_f32[k] = np.float32(v)
    return top


@njit(cache=True)
def _scale_checked(block, gain, to_int, out_int, out_f32, tail_from):
    """Sample by sample: :func:`_scale_block`'s result for any block."""
    n, n_ch = block.shape
    peak_in = 0.0
    peak = 0.0
    tail = 0.0
    first_not_finite = -1
    first_beyond = -1
    for i in range(n):
        for c in range(n_ch):
            x = block[i, c]
            ax = abs(x)
            if ax > peak_in:
                peak_in = ax
            v = x * gain
            if not to_int:
                f = np.float32(v)
                out_f32[i, c] = f
                v = float(f)
            a = abs(v)
            if a <= 1.0:
                if a > peak:
                    peak = a
                if i >= tail_from and a > tail:
                    tail = a
                if to_int:
                    r = np.rint(v * _INT32_FULL_SCALE)
                    out_int[i, c] = np.int32(r if r < _INT32_TOP else _INT32_TOP)
                continue
            if a - a != 0.0:  # NaN or infinite
                if first_not_finite < 0:
                    first_not_finite = i
            else:
                if a > peak:
                    peak = a
                if i >= tail_from and a > tail:
                    tail = a
                if first_beyond < 0:
                    first_beyond = i
            if to_int:
                out_int[i, c] = 0
            else:
                out_f32[i, c] = 0.0
    return peak_in, peak, tail, first_not_finite, first_beyond


@njit(cache=True)
def _scale_block(block, gain, to_int, out_int, out_f32, tail_from):
    """Scale ``block`` (rows, channels; C order) by ``gain`` into ``out_int`` or ``out_f32``.

    ``to_int``: write int32 at full scale 2^31 into ``out_int``; otherwise
    float32 into ``out_f32`` (the other array is not touched); both C order, the
    block's shape.  Returns ``(peak_in, peak, tail, first_not_finite,
    first_beyond)``, see the section comment above.
    """
    n, n_ch = block.shape
    size = n * n_ch
    flat = block.reshape(size)
    bits = flat.view(np.int64)
    flat_int = out_int.reshape(out_int.size)
    flat_f32 = out_f32.reshape(out_f32.size)
    t0 = min(max(tail_from, 0), n) * n_ch
    head = _scale_run(flat, bits, gain, to_int, flat_int, flat_f32, 0, t0)
    rest = _scale_run(flat, bits, gain, to_int, flat_int, flat_f32, t0, size)
    found = np.array([max(head, rest), rest], dtype=np.int64).view(np.float64)
    peak_in = found[0]
    peak = peak_in * gain
    tail = found[1] * gain
    if not to_int:
        peak = float(np.float32(peak))
        tail = float(np.float32(tail))
    if gain > 0.0 and peak <= 1.0:  # every |v| within full scale (none is NaN)
        return peak_in, peak, tail, -1, -1
    return _scale_checked(block, gain, to_int, out_int, out_f32, tail_from)


# ======================================================================================
# Packing integer samples (``_pack_pcm``): int32 samples at full scale 2^31 become
# little-endian PCM bytes of ``width`` 2 or 3, the top 16 or 24 bits of each (what
# libsndfile keeps of an int32 it writes at that width: ``value >> 16`` or ``>> 8``).
# ======================================================================================


@njit(cache=True)
def _pack_pcm(flat, out, width):
    """Write the top ``width`` bytes of each int32 of ``flat`` into ``out``, little-endian."""
    n = flat.shape[0]
    if width == 2:
        for k in range(n):
            v = flat[k] >> 16
            out[2 * k] = v & 255
            out[2 * k + 1] = (v >> 8) & 255
    else:
        for k in range(n):
            v = flat[k] >> 8
            out[3 * k] = v & 255
            out[3 * k + 1] = (v >> 8) & 255
            out[3 * k + 2] = (v >> 16) & 255
