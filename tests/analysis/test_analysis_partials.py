"""find_partials on synthetic strikes of known frequencies, decays, amplitudes, phases.

Sources: the model of an exponentially damped partial and Q = pi f tau, T60 = tau
ln 1000 (physics note, section 6); the estimation recipe and its accuracy on the
440/1760/4435 Hz signal (physics note, section 11, after Roy & Kailath 1989 and
Hua & Sarkar 1990).  SNR here is the power of the strongest partial's initial
sine (a^2 / 2) over the noise power, stated in each test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from analysis_signals import cents, damped_sum, nearest, noise_for_snr

from synth.analysis import find_partials

FS = 48000.0


@pytest.fixture(scope="module")
def three_partials() -> tuple[np.ndarray, tuple]:
    """Return the 440/1760/4435 Hz strike at 40 dB SNR and its parameters."""
    # physics note section 11 test signal, amplitudes halved to keep the sum below
    # full scale; 0.1 s of noise before the strike, 3 s after, 40 dB SNR.
    rng = np.random.default_rng(11)
    spec = ((440.0, 1760.0, 4435.0), (2.0, 0.5, 0.1), (0.5, 0.25, 0.15), (0.4, -2.1, 1.3))
    x = damped_sum(FS, 3.0, *spec, lead_s=0.1, noise_std=noise_for_snr(0.5, 40.0), rng=rng)
    return x, spec


@pytest.mark.parametrize("method", ["esprit", "matrix_pencil"])
def test_three_partials_at_40_db(method, three_partials) -> None:
    """Frequency within 0.2 cent, Q within 3%, amplitude within 2%, phase within 0.05 rad.

    The brief's targets for f and Q; amplitude and phase at the onset follow from
    the same poles (0.1 s lead-in, so the onset must be found too).  Measured with
    this seed: <= 0.0002 cent, <= 0.19% in Q, <= 0.12% in amplitude.
    """
    x, (freqs, taus, amps, phases) = three_partials
    res = find_partials(x, FS, method=method)
    assert len(res.partials) == 3, res.warnings
    assert res.onset_s == pytest.approx(0.1, abs=2 / FS)
    for f, tau, a, ph in zip(freqs, taus, amps, phases, strict=True):
        p = nearest(res.partials, f)
        assert abs(cents(p.frequency_hz, f)) < 0.2
        q_true = math.pi * f * tau  # physics note section 6
        assert p.q == pytest.approx(q_true, rel=0.03)
        assert p.t60_s == pytest.approx(tau * math.log(1000.0), rel=0.03)
        assert p.amplitude == pytest.approx(a, rel=0.02)
        assert abs(np.angle(np.exp(1j * (p.phase_rad - ph)))) < 0.05
        assert not p.beating


def test_low_sustained_fundamental() -> None:
    """175 Hz, tau 8 s in a 10 s file (Q = 4398): the decay comes from the envelope fit.

    A window far shorter than tau leaves damping the weak estimate (physics note,
    section 11), so the long log-envelope fit must carry it: Q within 3%, f within
    0.2 cent (brief).  40 dB SNR; measured error below 0.01% in Q.
    """
    rng = np.random.default_rng(12)
    x = damped_sum(FS, 10.0, [175.0], [8.0], [0.5], [0.7], lead_s=0.05,
                   noise_std=noise_for_snr(0.5, 40.0), rng=rng)
    res = find_partials(x, FS)
    assert len(res.partials) == 1, res.warnings
    p = res.partials[0]
    assert abs(cents(p.frequency_hz, 175.0)) < 0.2
    assert p.q == pytest.approx(math.pi * 175.0 * 8.0, rel=0.03)
    assert p.decay_method == "envelope"
    assert p.envelope_range_db > 5.0


def test_eight_partials_across_the_band() -> None:
    """Eight partials from 150 Hz to 15 kHz, 5 s, 50 dB SNR: all found, each within 0.2 cent.

    Q within 3% for the seven that ring longer than 0.05 s; the 15 kHz partial
    (tau 40 ms, 30 dB below the strongest) within 6% (measured: 3.3%), since its
    band filter eats part of its short life.  Measured: < 0.01 cent, Q within 0.8%
    below 15 kHz.
    """
    rng = np.random.default_rng(13)
    freqs = [150, 600, 1500, 2900, 4100, 6800, 10400, 15000]
    taus = [6, 3, 1.2, 0.6, 0.4, 0.15, 0.08, 0.04]
    amps = [0.4, 0.2, 0.1, 0.06, 0.05, 0.03, 0.02, 0.01]
    x = damped_sum(FS, 5.0, freqs, taus, amps, rng.uniform(-3, 3, 8), lead_s=0.1,
                   noise_std=noise_for_snr(0.4, 50.0), rng=rng)
    res = find_partials(x, FS)
    assert len(res.partials) == 8, res.warnings
    for f, tau in zip(freqs, taus, strict=True):
        p = nearest(res.partials, f)
        assert abs(cents(p.frequency_hz, f)) < 0.2
        assert p.q == pytest.approx(math.pi * f * tau, rel=0.03 if tau > 0.05 else 0.06)


def test_twenty_db_snr() -> None:
    """At 20 dB SNR frequencies stay within 0.2 cent; Q within 10%.

    Physics note section 11 gives <= 8% on tau for a 100 ms window at 20 dB; the
    envelope fit over the whole decay does a little better (measured over 12 seeds:
    median 2.6%, worst 7% for the 4435 Hz partial, < 1.4% for the others; this seed
    0.7%).
    """
    rng = np.random.default_rng(14)
    freqs, taus, amps = (440.0, 1760.0, 4435.0), (2.0, 0.5, 0.1), (0.5, 0.25, 0.15)
    x = damped_sum(FS, 3.0, freqs, taus, amps, (0.0, 1.0, 2.0), lead_s=0.1,
                   noise_std=noise_for_snr(0.5, 20.0), rng=rng)
    res = find_partials(x, FS)
    assert len(res.partials) == 3, res.warnings
    for f, tau in zip(freqs, taus, strict=True):
        p = nearest(res.partials, f)
        assert abs(cents(p.frequency_hz, f)) < 0.2
        assert p.q == pytest.approx(math.pi * f * tau, rel=0.10)


def test_split_pair_reported_as_two_beating_partials() -> None:
    """Two partials 1.5 Hz apart (a split pair) come back as two, flagged as beating.

    Each keeps its own decay from the subspace estimate (physics note, section 11:
    report the curvature rather than forcing one slope).  50 dB SNR, 4 s.
    """
    rng = np.random.default_rng(15)
    freqs, taus, amps = (440.0, 441.5, 1760.0), (2.0, 1.5, 0.5), (0.3, 0.2, 0.2)
    x = damped_sum(FS, 4.0, freqs, taus, amps, (0.0, 1.0, 2.0), lead_s=0.1,
                   noise_std=noise_for_snr(0.3, 50.0), rng=rng)
    res = find_partials(x, FS)
    assert len(res.partials) == 3, res.warnings
    low = sorted(res.partials, key=lambda p: p.frequency_hz)[:2]
    for p, f, tau in zip(low, freqs[:2], taus[:2], strict=True):
        assert abs(cents(p.frequency_hz, f)) < 0.2
        assert p.q == pytest.approx(math.pi * f * tau, rel=0.03)
        assert p.beating and p.decay_method == "subspace"
    assert any("split pair" in w for w in res.warnings)


def test_partials_do_not_depend_on_sample_rate() -> None:
    """The same strike at 44.1 and 48 kHz gives the same partials (style guide, section 6).

    Within 0.01 cent and 0.5% in Q: both runs are noise-free, so the difference is
    only the different band filters and windows.
    """
    spec = ((262.0, 1048.5, 2630.0), (3.0, 1.0, 0.3), (0.4, 0.2, 0.1), (0.0, 0.5, 1.0))
    results = []
    for fs in (44100.0, 48000.0):
        x = damped_sum(fs, 3.0, *spec, lead_s=0.05)
        results.append(find_partials(x, fs).partials)
    assert len(results[0]) == len(results[1]) == 3
    for a, b in zip(*results, strict=True):
        assert abs(cents(a.frequency_hz, b.frequency_hz)) < 0.01
        assert a.q == pytest.approx(b.q, rel=0.005)
        assert a.amplitude == pytest.approx(b.amplitude, rel=0.005)


def test_stereo_uses_the_mean_and_says_so() -> None:
    """Stereo input: the channel mean is analysed (documented policy) with a warning."""
    x = damped_sum(FS, 1.0, [523.25], [0.8], [0.4], lead_s=0.05)
    st = np.stack([x, 0.5 * x], axis=1)
    res = find_partials(st, FS)
    assert any("mean of the channels" in w for w in res.warnings)
    assert res.partials[0].amplitude == pytest.approx(0.75 * 0.4, rel=0.01)


def test_max_partials_keeps_the_strongest() -> None:
    """With max_partials = 2 the weakest of three partials is left out."""
    x = damped_sum(FS, 1.0, [300.0, 900.0, 2000.0], [1.0, 1.0, 1.0], [0.4, 0.04, 0.2],
                   lead_s=0.05)
    res = find_partials(x, FS, max_partials=2)
    assert [round(p.frequency_hz) for p in res.partials] == [300, 2000]
