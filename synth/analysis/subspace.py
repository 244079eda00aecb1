"""Exponentially damped sinusoids by subspace methods: ESPRIT and matrix pencil.

Model
-----
A window of samples ``x[n]``, ``n = 0 .. N-1``, taken at ``t_n = n / fs``, is
fitted as a sum of ``K`` complex exponentials ``x[n] = sum_k c_k z_k**n`` with
poles ``z_k = exp((-decay_k + i 2 pi f_k) / fs)``.  A real signal needs two
conjugate poles per sinusoid, so ``K = 2 p`` for ``p`` real partials, and each
partial is reported once as

    x(t) = A exp(-decay t) cos(2 pi f t + phase),   t = 0 at the first sample

with ``A = 2 |c_k|`` and ``phase = arg c_k``.  Complex input (a heterodyned
band) is reported pole by pole with ``A = |c_k|`` and signed frequencies.

Both methods build a Hankel matrix of the samples, keep the ``K`` dominant
singular vectors (the signal subspace) and read the poles off its shift
invariance; the amplitudes then follow from linear least squares on the
Vandermonde matrix of the poles.  With noise-free data and ``K`` right, both are
exact to rounding error; with noise they approach the Cramer-Rao bound when the
window spans a few time constants.  When the decay time far exceeds the window,
the damping is the weak estimate (frequency is fine): use a longer window or fit
the log envelope (:mod:`synth.analysis.decay`).

Cost grows as ``N**3`` (an SVD of an ``N/3 x 2N/3`` matrix): keep ``N`` to a few
thousand samples, or heterodyne and decimate first as
:func:`synth.analysis.find_partials` does.

References
----------
.. [1] Roy, R. and Kailath, T., "ESPRIT -- estimation of signal parameters via
   rotational invariance techniques", IEEE Trans. Acoust. Speech Signal Process.
   37(7), 984-995, 1989, doi:10.1109/29.32276.
.. [2] Hua, Y. and Sarkar, T. K., "Matrix pencil method for estimating parameters
   of exponentially damped/undamped sinusoids in noise", IEEE Trans. Acoust.
   Speech Signal Process. 38(5), 814-824, 1990, doi:10.1109/29.56027.
.. [3] Wax, M. and Kailath, T., "Detection of signals by information theoretic
   criteria", IEEE Trans. Acoust. Speech Signal Process. 33(2), 387-392, 1985,
   doi:10.1109/TASSP.1985.1164557 (the MDL order criterion, their Eq. 16).
.. [4] Laroche, J., "The use of the matrix pencil method for the spectrum
   analysis of musical signals", J. Acoust. Soc. Am. 94(4), 1958-1965, 1993
   (application to musical tones; volume and pages from memory).
.. [5] Meckes, M. W., "On the spectral norm of a random Toeplitz matrix",
   Electron. Commun. Probab. 12, 315-325, 2007 (the norm of a random Toeplitz or
   Hankel matrix grows as sqrt(N log N); from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Final

import numpy as np
import scipy.linalg as sl

from synth.constants import LN_1000
from synth.errors import AudioError, ConfigError

_THREADS = None


def one_blas_thread():
    """Context manager limiting BLAS to one thread.

    Small dense factorisations run faster on one thread than on two contended
    ones (design outline, performance facts).
    """
    global _THREADS
    if _THREADS is None:
        from threadpoolctl import ThreadpoolController

        _THREADS = ThreadpoolController()
    return _THREADS.limit(limits=1, user_api="blas")

NOISE_EDGE_FACTOR: Final[float] = 2.0
"""Safety factor on the largest singular value expected from noise alone in the
``"noise"`` order criterion.  The largest singular value of an ``L x M`` Hankel
matrix of white noise of standard deviation sigma stayed below
``1.12 sigma sqrt(M ln L)`` in our simulations (30 draws each, N = 100 to 1200),
consistent with the sqrt(N log N) growth shown in [5]; twice that keeps false
detections rare."""

ORDER_METHODS: Final[tuple[str, ...]] = ("mdl", "gap", "noise")


@dataclass(frozen=True)
class Pole:
    """One damped sinusoid.

    Attributes
    ----------
    frequency_hz : float
        Frequency, Hz (signed only for complex input).
    decay_per_s : float
        Amplitude decay rate, 1/s (``A(t) = A exp(-decay t)``; 1/tau).  Negative
        means growing.
    q : float
        Quality factor ``pi |f| / decay`` (physics note, section 6); ``inf`` for
        no decay.
    t60_s : float
        Time to decay by 60 dB, ``ln(1000) / decay``, s; ``inf`` for no decay.
    amplitude : float
        Peak amplitude at the reference time, units of the signal.
    phase_rad : float
        Phase at the reference time, rad, in ``(-pi, pi]``, cosine convention.
    level_db : float
        ``20 log10(amplitude)``: dB re an amplitude of 1 (full scale).
    """

    frequency_hz: float
    decay_per_s: float
    q: float
    t60_s: float
    amplitude: float
    phase_rad: float
    level_db: float

    @classmethod
    def from_parameters(
        cls, frequency_hz: float, decay_per_s: float, amplitude: float, phase_rad: float
    ) -> Pole:
        """Build a pole from frequency, decay rate, amplitude and phase.

        Parameters
        ----------
        frequency_hz : float
            Hz.
        decay_per_s : float
            Amplitude decay rate, 1/s.
        amplitude : float
            Peak amplitude, >= 0.
        phase_rad : float
            Phase, rad (wrapped into ``(-pi, pi]``).

        Returns
        -------
        Pole
            With ``q``, ``t60_s`` and ``level_db`` derived (physics note, section 6).
        """
        f = float(frequency_hz)
        d = float(decay_per_s)
        q = math.pi * abs(f) / d if d > 0 else math.inf
        t60 = LN_1000 / d if d > 0 else math.inf
        a = float(amplitude)
        level = 20.0 * math.log10(a) if a > 0 else -math.inf
        ph = float(np.angle(np.exp(1j * phase_rad)))
        return cls(f, d, q, t60, a, ph, level)


@dataclass(frozen=True)
class SubspaceFit:
    """Result of :func:`esprit` or :func:`matrix_pencil`.

    Attributes
    ----------
    poles : tuple of Pole
        Accepted poles, sorted by frequency.  Amplitudes and phases refer to the
        first sample of the window.
    rejected : tuple of Pole
        Poles found but rejected (growing, negligible amplitude, or, for real
        input, real poles at 0 Hz or Nyquist), with the reason in
        ``rejected_reasons``.
    rejected_reasons : tuple of str
        One reason per rejected pole.
    order : int
        Number of complex exponentials used (2 per real partial).
    order_method : str
        ``"fixed"`` or the criterion that chose ``order``.
    singular_values : numpy.ndarray
        Singular values of the Hankel matrix, descending.
    n_samples : int
        Window length N.
    n_rows : int
        Hankel rows L (the matrix pencil parameter).
    residual_rms : float
        RMS of data minus model over the window, units of the signal.
    method : str
        ``"esprit"`` or ``"matrix_pencil"``.
    warnings : tuple of str
        Problems worth knowing.
    """

    poles: tuple[Pole, ...]
    rejected: tuple[Pole, ...]
    rejected_reasons: tuple[str, ...]
    order: int
    order_method: str
    singular_values: np.ndarray = field(compare=False, repr=False)
    n_samples: int
    n_rows: int
    residual_rms: float
    method: str
    warnings: tuple[str, ...]


def hankel(x: np.ndarray, n_rows: int) -> np.ndarray:
    """Return the ``n_rows x (N - n_rows + 1)`` Hankel matrix ``H[i, j] = x[i + j]``.

    Parameters
    ----------
    x : numpy.ndarray, shape (N,)
        Samples (real or complex).
    n_rows : int
        Rows L, ``1 <= L <= N``.

    Returns
    -------
    numpy.ndarray, shape (L, N - L + 1)
        A copy (the strided view is not writeable).
    """
    return np.lib.stride_tricks.sliding_window_view(x, x.size - n_rows + 1).copy()


def select_order(
    singular_values: np.ndarray,
    *,
    n_columns: int,
    method: str = "mdl",
    max_order: int | None = None,
    noise_std: float | None = None,
    real: bool = False,
) -> int:
    """Choose the number of complex exponentials from Hankel singular values.

    Parameters
    ----------
    singular_values : numpy.ndarray, shape (L,)
        Singular values of the ``L x M`` Hankel matrix, descending.
    n_columns : int
        M, the number of columns (snapshots).
    method : {"mdl", "gap", "noise"}
        ``"mdl"``: minimum description length of Wax and Kailath [3] (Eq. 16)
        with eigenvalues ``s**2 / M`` (singular values below 1e-12 of the largest
        are clipped to that level as rounding noise); it assumes white noise and
        tends to pick too many poles for coloured (filtered) noise.  ``"gap"``: the largest
        ratio between consecutive singular values; simple, but a weak partial far
        below a strong one can hide behind the strong one's gap.  ``"noise"``:
        count singular values above ``NOISE_EDGE_FACTOR * noise_std *
        sqrt(M ln L)``, the level noise alone stays under (see
        :data:`NOISE_EDGE_FACTOR`); needs ``noise_std``.
    max_order : int, optional
        Upper bound; default ``L // 2``.
    noise_std : float, optional
        Standard deviation of the noise per sample (for complex data, of its
        magnitude: ``sqrt(E|n|^2)``), same units as the signal.
    real : bool, default False
        Real data: round an odd result up to even (poles come in conjugate pairs).

    Returns
    -------
    int
        Order K, at least 1 (2 for real data).

    Raises
    ------
    ConfigError
        Unknown ``method`` or ``"noise"`` without ``noise_std``.
    """
    s = np.asarray(singular_values, dtype=float)
    n_rows = s.size
    kmax = n_rows // 2 if max_order is None else max(1, min(int(max_order), n_rows - 1))
    if method == "mdl":
        # Values below 1e-12 of the largest are rounding noise of the SVD; clipping
        # them to one level keeps noise-free data from looking like many sources.
        floor = max(float(s[0]) * 1e-12, 1e-300)
        lam = np.maximum(s, floor) ** 2 / max(n_columns, 1)
        best_k, best = 0, math.inf
        for k in range(0, kmax + 1):
            tail = lam[k:]
            m = tail.size
            if m == 0:
                break
            geo = float(np.mean(np.log(tail)))
            ari = math.log(float(np.mean(tail)))
            value = -m * n_columns * (geo - ari) + 0.5 * k * (2 * n_rows - k) * math.log(n_columns)
            if value < best:
                best_k, best = k, value
        k = best_k
    elif method == "gap":
        pos = np.maximum(s[: kmax + 1], 1e-300)
        gaps = np.log(pos[:-1]) - np.log(pos[1:])
        k = int(np.argmax(gaps)) + 1 if gaps.size else 1
    elif method == "noise":
        if noise_std is None or not (noise_std >= 0):
            raise ConfigError("order method 'noise' needs noise_std >= 0")
        edge = NOISE_EDGE_FACTOR * noise_std * math.sqrt(n_columns * math.log(max(n_rows, 2)))
        k = int(np.count_nonzero(s > edge))
    else:
        raise ConfigError(f"order method = {method!r}: must be one of {', '.join(ORDER_METHODS)}")
    k = max(1, min(k, kmax))
    if real and k % 2:
        k = min(k + 1, max(kmax, 2))
    return k


def _check_window(signal, sample_rate) -> tuple[np.ndarray, float, bool]:
    x = np.asarray(signal)
    if x.ndim != 1:
        raise AudioError(f"signal has shape {x.shape}; subspace methods take one channel (N,)")
    if x.size < 8:
        raise AudioError(f"signal has {x.size} samples; subspace methods need at least 8")
    if not np.all(np.isfinite(x)):
        raise AudioError("signal holds NaN or infinite samples; expected finite values")
    fs = float(sample_rate)
    if not (math.isfinite(fs) and fs > 0):
        raise AudioError(f"sample_rate = {sample_rate!r}: must be a finite number > 0 Hz")
    real = not np.iscomplexobj(x)
    return (x.astype(np.float64) if real else x.astype(np.complex128)), fs, real


def _poles_esprit(x: np.ndarray, n_rows: int, order, order_method, max_order, noise_std,
                  real, solver):
    h = hankel(x, n_rows)
    u, s, _ = sl.svd(h, full_matrices=False, lapack_driver="gesdd", check_finite=False)
    k, how = _order(s, h.shape[1], order, order_method, max_order, noise_std, real)
    us = u[:, :k]
    u1, u2 = us[:-1], us[1:]
    if solver == "ls":
        phi = sl.lstsq(u1, u2, check_finite=False)[0]
    else:  # total least squares, Roy & Kailath [1], Sec. IV
        _, _, vh = sl.svd(np.hstack([u1, u2]), full_matrices=False, check_finite=False)
        v = vh.conj().T
        v12 = v[:k, k:]
        v22 = v[k:, k:]
        phi = -v12 @ np.linalg.inv(v22)
    return np.linalg.eigvals(phi), s, k, how


def _poles_pencil(x: np.ndarray, n_rows: int, order, order_method, max_order, noise_std,
                  real):
    # Hua & Sarkar [2]: Y has N - L rows and L + 1 columns, Y = U S V^H.
    pencil = n_rows
    y = hankel(x, x.size - pencil)  # (N - L) x (L + 1)
    _, s, vh = sl.svd(y, full_matrices=False, lapack_driver="gesdd", check_finite=False)
    k, how = _order(s, y.shape[0], order, order_method, max_order, noise_std, real)
    vkh = vh[:k]  # rows span the row space of Y, i.e. of the Vandermonde B^T
    v1h = vkh[:, :-1]  # V1'^H: drop the last column
    v2h = vkh[:, 1:]  # V2'^H: drop the first column
    # V2'^H = Psi V1'^H with Psi similar to diag(z) (Eqs. 22-27 of [2], SVD form)
    psi = v2h @ np.linalg.pinv(v1h)
    return np.linalg.eigvals(psi), s, k, how


def _order(s, n_columns, order, order_method, max_order, noise_std, real):
    if order is not None:
        k = int(order)
        if k < 1 or k >= s.size:
            raise ConfigError(f"order = {order!r}: must be between 1 and {s.size - 1}")
        return k, "fixed"
    return select_order(s, n_columns=n_columns, method=order_method, max_order=max_order,
                        noise_std=noise_std, real=real), order_method


def complex_amplitudes(x: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Least-squares amplitudes ``c`` of ``x[n] = sum_k c_k z_k**n``.

    Parameters
    ----------
    x : numpy.ndarray, shape (N,)
        Samples (real or complex).
    z : numpy.ndarray, shape (K,)
        Poles (complex).

    Returns
    -------
    numpy.ndarray, shape (K,), complex
        Amplitudes at ``n = 0``.

    Notes
    -----
    Powers are formed as ``exp(n log z)``, which stays accurate for long windows.
    """
    n = np.arange(x.size)[:, None]
    v = np.exp(n * np.log(z.astype(complex))[None, :])
    return sl.lstsq(v, x.astype(complex), check_finite=False)[0]


def _finish(x, fs, real, z, s, k, how, n_rows, method, max_growth_per_s, dynamic_range_db):
    z = np.asarray(z, dtype=complex)
    z = np.where(np.abs(z) > 0, z, 1e-300)
    c = complex_amplitudes(x, z)
    model = (np.exp(np.arange(x.size)[:, None] * np.log(z)[None, :]) @ c)
    resid = x - (model.real if real else model)
    freqs = np.angle(z) * fs / (2 * np.pi)
    decays = -np.log(np.abs(z)) * fs
    nyq = 0.5 * fs
    accepted, rejected, reasons = [], [], []
    cand = []
    for fk, dk, ck in zip(freqs, decays, c, strict=True):
        if real:
            if fk < 0:
                continue  # the conjugate twin of a positive-frequency pole
            amp = 2.0 * abs(ck)
            if fk <= 1e-9 * fs or fk >= nyq * (1 - 1e-9):
                rejected.append(Pole.from_parameters(fk, dk, abs(ck), float(np.angle(ck))))
                reasons.append("real pole (0 Hz or Nyquist): not a partial")
                continue
        else:
            amp = abs(ck)
        cand.append(Pole.from_parameters(fk, dk, amp, float(np.angle(ck))))
    # Rounding leaves undamped poles a hair outside the unit circle.
    growth = max_growth_per_s + 1e-9 * fs
    top = max((p.amplitude for p in cand if p.decay_per_s >= -growth), default=0.0)
    for p in cand:
        if p.decay_per_s < -growth:
            rejected.append(p)
            reasons.append(f"growing ({p.decay_per_s:.4g} 1/s)")
        elif top > 0 and p.amplitude < top * 10 ** (-dynamic_range_db / 20):
            rejected.append(p)
            reasons.append(f"negligible amplitude (more than {dynamic_range_db:g} dB below the "
                           "strongest pole)")
        else:
            accepted.append(p)
    accepted.sort(key=lambda p: p.frequency_hz)
    warnings = []
    if not accepted:
        warnings.append("no pole accepted: every pole found grows or is negligible")
    return SubspaceFit(
        poles=tuple(accepted),
        rejected=tuple(rejected),
        rejected_reasons=tuple(reasons),
        order=k,
        order_method=how,
        singular_values=s,
        n_samples=x.size,
        n_rows=n_rows,
        residual_rms=float(np.sqrt(np.mean(np.abs(resid) ** 2))),
        method=method,
        warnings=tuple(warnings),
    )


def _common_args(x, n_rows, max_order):
    n = x.size
    rows = n // 3 if n_rows is None else int(n_rows)
    if not 2 <= rows <= n - 2:
        raise ConfigError(f"n_rows = {n_rows!r}: must be between 2 and {n - 2} for {n} samples")
    if max_order is not None and max_order < 1:
        raise ConfigError(f"max_order = {max_order!r}: must be >= 1")
    return rows


def esprit(
    signal,
    sample_rate: float,
    *,
    order: int | None = None,
    order_method: str = "mdl",
    max_order: int | None = None,
    noise_std: float | None = None,
    n_rows: int | None = None,
    solver: str = "ls",
    max_growth_per_s: float = 0.0,
    dynamic_range_db: float = 100.0,
) -> SubspaceFit:
    """Estimate damped sinusoids by ESPRIT [1].

    Parameters
    ----------
    signal : array_like, shape (N,)
        One window, real or complex, ``N >= 8``.  Analyse after the attack: the
        model has no room for a mallet's contact transient.
    sample_rate : float
        Hz, > 0.
    order : int, optional
        Number of complex exponentials K (2 per real partial).  Default: chosen
        by ``order_method``.
    order_method : {"mdl", "gap", "noise"}, default "mdl"
        See :func:`select_order`.
    max_order : int, optional
        Upper bound on the chosen order; default ``n_rows // 2``.
    noise_std : float, optional
        Noise standard deviation per sample (needed by ``"noise"``).
    n_rows : int, optional
        Hankel rows L; default ``N // 3`` (physics note, section 11).
    solver : {"ls", "tls"}, default "ls"
        Least-squares or total-least-squares solution of the shift invariance.
    max_growth_per_s : float, default 0.0
        Poles growing faster than this (decay rate below its negative) are
        rejected, 1/s; 1e-9 x the sample rate is added for rounding, so
        undamped tones pass.
    dynamic_range_db : float, default 100.0
        Poles weaker than the strongest accepted pole by more than this are
        rejected, dB.

    Returns
    -------
    SubspaceFit
        Accepted and rejected poles, order, singular values, residual.

    Raises
    ------
    AudioError
        Not one channel, fewer than 8 samples, NaN/Inf, bad sample rate.
    ConfigError
        Bad ``order``, ``n_rows``, ``solver`` or ``order_method``.

    Notes
    -----
    Hankel matrix ``H`` (L x M, ``M = N - L + 1``) with ``H[i, j] = x[i + j]``;
    its column space is spanned by the Vandermonde vectors ``(1, z, .., z^(L-1))``.
    With ``U_s`` the first K left singular vectors, ``U_s[1:] = U_s[:-1] Phi`` and
    the eigenvalues of ``Phi`` are the poles ([1], Sec. III).  ``f = arg(z) fs /
    (2 pi)``, ``decay = -fs ln|z|``.

    References
    ----------
    .. [1] Roy, R. and Kailath, T., IEEE Trans. ASSP 37(7), 984-995, 1989.
    """
    x, fs, real = _check_window(signal, sample_rate)
    rows = _common_args(x, n_rows, max_order)
    if solver not in ("ls", "tls"):
        raise ConfigError(f"solver = {solver!r}: must be 'ls' or 'tls'")
    with one_blas_thread():
        z, s, k, how = _poles_esprit(x, rows, order, order_method, max_order, noise_std, real,
                                     solver)
        return _finish(x, fs, real, z, s, k, how, rows, "esprit", max_growth_per_s,
                       dynamic_range_db)


def matrix_pencil(
    signal,
    sample_rate: float,
    *,
    order: int | None = None,
    order_method: str = "mdl",
    max_order: int | None = None,
    noise_std: float | None = None,
    n_rows: int | None = None,
    max_growth_per_s: float = 0.0,
    dynamic_range_db: float = 100.0,
) -> SubspaceFit:
    """Estimate damped sinusoids by the matrix pencil method [2].

    Parameters
    ----------
    signal : array_like, shape (N,)
        One window, real or complex, ``N >= 8``; analyse after the attack.
    sample_rate : float
        Hz, > 0.
    order : int, optional
        Number of complex exponentials K (2 per real partial).  Default: chosen
        by ``order_method``.
    order_method : {"mdl", "gap", "noise"}, default "mdl"
        See :func:`select_order`.
    max_order : int, optional
        Upper bound on the chosen order.
    noise_std : float, optional
        Noise standard deviation per sample (needed by ``"noise"``).
    n_rows : int, optional
        Pencil parameter L; default ``N // 3`` ([2] finds ``N/3 <= L <= N/2``
        least sensitive to noise).
    max_growth_per_s : float, default 0.0
        Poles growing faster than this are rejected, 1/s (plus 1e-9 x the
        sample rate for rounding).
    dynamic_range_db : float, default 100.0
        Poles weaker than the strongest accepted one by more than this are
        rejected, dB.

    Returns
    -------
    SubspaceFit
        As :func:`esprit`, with ``method = "matrix_pencil"``.

    Raises
    ------
    AudioError
        Not one channel, fewer than 8 samples, NaN/Inf, bad sample rate.
    ConfigError
        Bad ``order``, ``n_rows`` or ``order_method``.

    Notes
    -----
    ``Y`` is the ``(N - L) x (L + 1)`` Hankel matrix of the samples, ``Y1`` and
    ``Y2`` drop its last and first column.  With ``Y = U S V^H`` truncated to K
    terms, ``V1'`` and ``V2'`` are ``V'`` without its last and first row; the
    poles are the eigenvalues of ``V2'^H (V1'^H)^+`` (the SVD-truncated pencil of
    [2], Sec. III-B).

    References
    ----------
    .. [2] Hua, Y. and Sarkar, T. K., IEEE Trans. ASSP 38(5), 814-824, 1990.
    """
    x, fs, real = _check_window(signal, sample_rate)
    rows = _common_args(x, n_rows, max_order)
    with one_blas_thread():
        z, s, k, how = _poles_pencil(x, rows, order, order_method, max_order, noise_std, real)
        return _finish(x, fs, real, z, s, k, how, rows, "matrix_pencil", max_growth_per_s,
                       dynamic_range_db)
