"""Signals and shared checks for the measure tests.

Renders of the demo preset are made here, in the tests, with the voice plan
(:class:`synth.voicing.Voicer`) and the engine (:func:`synth.engine.render.render`),
and written with :func:`synth.io.write_wav`, so every figure the tests check
has a known origin: the plan's mode frequencies and Qs.  Closed-form strikes
(sums of exponentially decaying sinusoids) are built with numpy.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir
from synth.engine.render import render
from synth.io import write_wav
from synth.physics.losses import Calibration
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer

FS = 48000
PRESET = presets_dir() / "instruments" / "lantern-street-bars.toml"
HIDDEN = {"internal": 1.6, "cords": 0.7, "radiation": 1.3}
"""The hidden calibration of the recovery tests (the issue's example)."""


def demo():
    """Load the demo instrument preset (bars solved, tubes, no [damping] table)."""
    return load_instrument(PRESET)


def render_strike(note: str, *, calibration: dict | None = None, tubes: bool = True,
                  position: float = 0.4, across: float = 0.3, seconds: float = 4.0,
                  lead_in_s: float = 0.1, peak: float = 0.5, noise_dbfs: float | None = None,
                  seed: int = 0) -> np.ndarray:
    """Render one hard-mallet strike in mono, peak-normalised, with optional noise."""
    cal = None if calibration is None else Calibration(dict(calibration))
    v = Voicer(demo(), sample_rate=FS, tubes=tubes, channels=1, calibration=cal)
    voice = v.strike_voice(note, mallet="hard", position=position, across=across,
                           time_s=lead_in_s)
    x = render([voice], int(round(seconds * FS)), sample_rate=FS)[:, 0]
    x = peak * x / np.max(np.abs(x))
    if noise_dbfs is not None:
        x = x + 10 ** (noise_dbfs / 20) * np.random.default_rng(seed).standard_normal(x.size)
    return x


def fundamental_hz(note: str) -> float:
    """Return the model's sounding fundamental: the bar-like pole of the coupled pair."""
    model = Voicer(demo(), sample_rate=FS, tubes=True, channels=1).model(note)
    return model.coupling.pair.modes().frequency_hz[0]


def cents_between(f_hz: float, ref_hz: float) -> float:
    """Return ``1200 log2(f / ref)``."""
    return 1200.0 * math.log2(f_hz / ref_hz)


def damped_sines(freqs_hz, taus_s, amps, *, seconds: float = 2.0, lead_in_s: float = 0.05,
                 rate: int = FS) -> np.ndarray:
    """Build a sum of ``a exp(-t/tau) sin(2 pi f t)`` after a silent lead-in."""
    t = np.arange(int(round(seconds * rate))) / rate
    x = np.zeros_like(t)
    for f, tau, a in zip(freqs_hz, taus_s, amps, strict=True):
        x += a * np.exp(-t / tau) * np.sin(2 * math.pi * f * t)
    return np.concatenate([np.zeros(int(round(lead_in_s * rate))), x])


def wav(path: Path, samples: np.ndarray, **kwargs) -> Path:
    """Write samples with the project's WAV writer (24-bit PCM unless told)."""
    write_wav(path, samples, sample_rate=kwargs.pop("sample_rate", FS), force=True, **kwargs)
    return path


def run(*args):
    """Invoke ``barwright`` in-process; stdout and stderr apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


def run_json(*args) -> dict:
    """Invoke ``barwright ... --json``, require success and parse stdout."""
    r = run(*args, "--json")
    assert r.exit_code == 0, (r.stdout, r.stderr)
    return json.loads(r.stdout)


def assert_one_line_error(result, *needles: str) -> str:
    """Exit code 2, exactly one stderr line, no traceback, containing every needle."""
    assert result.exit_code == 2, (result.stdout, result.stderr)
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stdout + result.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])
    return lines[0]


def warning_lines(result) -> list[str]:
    """Return the ``barwright: warning:`` lines on stderr."""
    return [ln for ln in result.stderr.splitlines() if ln.startswith("barwright: warning:")]


def nearest(partials: list[dict], frequency_hz: float) -> dict:
    """Return the measured partial nearest a frequency."""
    return min(partials, key=lambda p: abs(p["frequency_hz"] - frequency_hz))
