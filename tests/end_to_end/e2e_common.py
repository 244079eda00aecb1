"""Shared pieces of the end-to-end tests: the demo presets and a checked command run."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir

DEMO = presets_dir() / "instruments" / "lantern-street-bars.toml"
DEMO_7075 = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def run(*args) -> object:
    """Invoke ``barwright`` in-process; stdout and stderr are kept apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


def run_ok(*args) -> object:
    """Run a command that must succeed; fail with its output otherwise."""
    r = run(*args)
    assert r.exit_code == 0, (r.exit_code, r.stdout[-2000:], r.stderr[-2000:])
    assert "Traceback" not in r.stdout + r.stderr
    return r


def run_json(*args) -> dict:
    """Run a command with ``--json`` and parse its stdout."""
    return json.loads(run_ok(*args, "--json").stdout)


def read_csv(path: Path) -> list[dict[str, str]]:
    """Rows of a CSV file as dictionaries keyed by the header."""
    return list(csv.DictReader(io.StringIO(path.read_text(encoding="utf-8"))))


def assert_png(path: Path, *, min_side: int = 200) -> np.ndarray:
    """Check that the file is a PNG that decodes to a picture with something drawn."""
    from matplotlib import image

    assert path.read_bytes()[:8] == PNG_SIGNATURE, path
    picture = image.imread(path)
    assert picture.ndim == 3 and min(picture.shape[:2]) >= min_side, picture.shape
    assert float(np.ptp(picture[..., :3])) > 0.5, f"{path.name} is blank"
    return picture
