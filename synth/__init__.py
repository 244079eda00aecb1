"""barwright: design, tune, hear and measure tuned metal-bar keyboard percussion.

The package's top level is the Python API.  Names are loaded on first use, so
``import synth`` is cheap (no numba, no scipy until a function needs them):

load_design, load_instrument
    Read a bar file or an instrument preset (every key checked).
read_events, read_audio
    Read a score (TOML event list or MIDI) or an audio file.
solve_partials
    Partials, mode shapes and nodes of one bar.
Voicer
    The frozen voice plan of an instrument (tubes, motor, mallet, sample rate).
render_strike, render_score
    One strike or a score into a numpy array.
find_partials, integrated_loudness
    Analyse a recording: array in, partials (or BS.1770-4 loudness) out.
sustain_report
    Sustain of the fundamental across the range against a target.
run_sweep, parse_vary
    Design sweeps: variants of a preset over a grid of settings, one result each.
SynthError, ConfigError, ModelError, AudioError
    The exceptions raised by the library.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_LAZY = {
    "load_design": "synth.settings.instrument",
    "load_instrument": "synth.settings.instrument",
    "read_events": "synth.settings.score",
    "read_audio": "synth.io",
    "solve_partials": "synth.api",
    "Voicer": "synth.voicing",
    "render_strike": "synth.api",
    "render_score": "synth.api",
    "find_partials": "synth.analysis",
    "integrated_loudness": "synth.analysis",
    "sustain_report": "synth.reports.sustain",
    "run_sweep": "synth.reports.sweep",
    "parse_vary": "synth.reports.sweep",
    "SynthError": "synth.errors",
    "ConfigError": "synth.errors",
    "ModelError": "synth.errors",
    "AudioError": "synth.errors",
}

__all__ = sorted(_LAZY)


def __getattr__(name: str):
    """Import a public name's module on first use (PEP 562)."""
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'synth' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    """List the public names with the module's own."""
    return sorted(set(globals()) | set(_LAZY))
