"""Design-to-target benchmark: tune the demo range from a cold start.

Figures
-------
tuning.bars, tuning.on_target
    Bars tuned (all 37; every sixth with --quick) and how many reached their targets.
tuning.range_s
    Wall time to tune all 37 bars of the demo instrument to 1 : 4 : 10.08 with no
    starting solution (the first bar from the uniform bar's length).  Target < 30 s.
tuning.bar_ms_median, tuning.solves_per_bar_median
    Median time and median finite-element solves per bar.
tuning.worst_residual_cents
    Largest miss of any partial, from the refined re-solve.
"""

from __future__ import annotations

import statistics
import time

import numpy as np

from synth.config import presets_dir
from synth.physics.tuning import tune_instrument
from synth.settings.instrument import load_instrument


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite."""
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    notes = list(inst.notes[::6]) if quick else list(inst.notes)
    t0 = time.perf_counter()
    res = tune_instrument(inst, notes)
    total = time.perf_counter() - t0
    return {
        "tuning.bars": float(len(res)),
        "tuning.range_s": total,
        "tuning.bar_ms_median": statistics.median(r.seconds for r in res) * 1e3,
        "tuning.solves_per_bar_median": float(statistics.median(r.n_solves for r in res)),
        "tuning.worst_residual_cents": float(max(np.max(np.abs(r.residual_cents)) for r in res)),
        "tuning.on_target": float(sum(r.reachable for r in res)),
    }
