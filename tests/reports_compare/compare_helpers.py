"""Shared constants and helpers of the comparison tests."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir

DESIGN_A = presets_dir() / "instruments" / "lantern-street-bars.toml"
DESIGN_B = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
RATE = 48000
GAP_S = 0.5
TRIALS = 4


def run(*args):
    """Invoke ``barwright`` in-process; stdout and stderr are kept apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


def read(path: Path) -> np.ndarray:
    """Read a WAV as float64 samples, shape (n, channels)."""
    x, fs = sf.read(path, dtype="float64", always_2d=True)
    assert fs == RATE
    return x


def assert_one_line_error(result, *needles: str) -> None:
    """Exit code 2, exactly one non-empty stderr line holding every needle, no traceback."""
    assert result.exit_code == 2, (result.stdout, result.stderr)
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stdout + result.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])


@dataclass(frozen=True)
class Written:
    """What the fixture's comparison wrote."""

    folder: Path
    stdout: str
    stderr: str
    key: dict

    def wav(self, name: str) -> np.ndarray:
        """Read one written WAV."""
        return read(self.folder / name)
