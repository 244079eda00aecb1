"""Sound benchmarks on the demo instrument.

A strike from the command line, and the sustain report against the rendering it
analyses.  With ``--quick``: one timed strike instead of the median of 3, and the
sustain report on every fourth note.

Figures
-------
sound.strike_wall_s
    Start-to-WAV wall time of ``barwright strike`` (5 s strike) in a new process,
    second run, so numba's kernels come from its cache.  Target < 1.5 s.
sound.strike_first_wall_s
    The first run of the same (may compile and fill the cache).
sustain.notes
    Notes in that report (all 37; every fourth with --quick).
sustain.seconds
    ``sustain_report`` on those notes with tubes and the motor running.
sustain.render_s, sustain.analysis_s, sustain.analysis_over_render
    Time spent rendering the strikes it measures and analysing them; the ratio
    should stay at or below 1 (analysis no dearer than the rendering).
sustain.audio_s
    Seconds of audio rendered and analysed for the report.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

from synth.config import presets_dir
from synth.reports.sustain import sustain_report
from synth.settings.instrument import load_instrument
from synth.voicing import Voicer


def _strike_once(out: Path) -> float:
    preset = presets_dir() / "instruments" / "lantern-street-bars.toml"
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "synth", "strike", str(preset), "A4", "--duration",
                    "5", "--out", str(out), "--force"], check=True, capture_output=True)
    return time.perf_counter() - t0


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite."""
    figures: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "a4.wav"
        figures["sound.strike_first_wall_s"] = _strike_once(out)
        runs = [_strike_once(out) for _ in range(1 if quick else 3)]
        figures["sound.strike_wall_s"] = sorted(runs)[len(runs) // 2]
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    v = Voicer(inst, sample_rate=48000.0, channels=1, motor_rate_rev_per_s=3.0)
    notes = list(inst.notes[::4]) if quick else list(inst.notes)
    t0 = time.perf_counter()
    rep = sustain_report(v, notes)
    figures["sustain.notes"] = float(len(notes))
    figures["sustain.seconds"] = time.perf_counter() - t0
    figures["sustain.render_s"] = rep.render_seconds
    figures["sustain.analysis_s"] = rep.analysis_seconds
    figures["sustain.analysis_over_render"] = rep.analysis_seconds / rep.render_seconds
    figures["sustain.audio_s"] = rep.audio_seconds
    return figures
