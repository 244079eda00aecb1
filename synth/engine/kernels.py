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

import numpy as np
from numba import njit

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
