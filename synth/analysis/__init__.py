"""Analysis of audio arrays: partials, decays, onsets, loudness and signal checks.

Everything here takes a numpy array of samples and a sample rate and returns a
frozen dataclass; nothing knows about bars, presets or files (read audio with
:mod:`synth.io`).  Arrays are ``(n_samples,)`` or ``(n_samples, n_channels)`` in
units of full scale; integer PCM is scaled by its type's range.

Problems that make a result meaningless raise :class:`~synth.errors.AudioError`;
problems that only make it less trustworthy are listed in the result's
``warnings`` (a tuple of plain-text lines), so no number leaves without its
caveats.  Partial, decay and onset analysis use the mean of the channels (and
warn); loudness measures each channel as BS.1770-4 requires.

Main entry points
-----------------
find_partials
    Frequencies, decay rates, Q, T60, amplitudes and phases of a strike.
esprit, matrix_pencil
    Subspace estimates of damped sinusoids in one window.
fit_decay, fit_envelope_decay, band_envelope
    Log-envelope decay fit of one partial; a cheap heterodyne envelope.
schroeder_decay
    Schroeder backward integration with EDT, T20, T30.
detect_onsets, find_strike
    Where strikes begin and their attacks end.
integrated_loudness, true_peak, match_loudness
    BS.1770-4 loudness and true peak; the gain that matches two files.
check_signal
    Silence, clipping, DC offset, channel and band problems.
"""

from synth.analysis.checks import SignalReport, check_signal
from synth.analysis.decay import (
    DecayFit,
    DecayRange,
    SchroederDecay,
    band_envelope,
    fit_decay,
    fit_envelope_decay,
    schroeder_decay,
)
from synth.analysis.loudness import (
    LevelMatch,
    Loudness,
    TruePeak,
    integrated_loudness,
    match_loudness,
    true_peak,
)
from synth.analysis.onset import Onsets, StrikeOnset, detect_onsets, find_strike
from synth.analysis.partials import Partial, PartialsResult, find_partials
from synth.analysis.subspace import Pole, SubspaceFit, esprit, matrix_pencil, select_order

__all__ = [
    "DecayFit",
    "DecayRange",
    "LevelMatch",
    "Loudness",
    "Onsets",
    "Partial",
    "PartialsResult",
    "Pole",
    "SchroederDecay",
    "SignalReport",
    "StrikeOnset",
    "SubspaceFit",
    "TruePeak",
    "band_envelope",
    "check_signal",
    "detect_onsets",
    "esprit",
    "find_partials",
    "find_strike",
    "fit_decay",
    "fit_envelope_decay",
    "integrated_loudness",
    "match_loudness",
    "matrix_pencil",
    "schroeder_decay",
    "select_order",
    "true_peak",
]
