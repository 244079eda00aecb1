"""Design-sweep benchmark: variants of the demo instrument, in this process and on a pool.

Figures
-------
sweep.variants
    Variants timed (tube offsets; two with ``--quick``, four without).
sweep.variant_s
    Wall time per variant run in this process (``workers=1``), after one warm-up
    variant (numba's kernels loaded, bar solves not shared: each variant moves the
    tubes, so every plan is new).  Target < 5 s per variant.
sweep.pool_s
    Wall time of the same variants on a local pool of two processes, start-up included.
sweep.failed
    Variants that failed in either run (0 when the timed work did its job).
sweep.pool_speedup
    Wall time in this process over wall time on a local pool of two processes,
    same variants, pool start-up included: about 2 on two free cores; less when
    the machine is shared.
"""

from __future__ import annotations

import time

from synth.reports.demo import demo_preset_path
from synth.reports.sweep import parse_vary, run_sweep


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite."""
    preset = demo_preset_path()
    run_sweep(preset, [parse_vary("tubes.offset_cents=25")], workers=1)   # warm-up
    offsets = (0, 30) if quick else (0, 20, 40, 60)
    vary = [parse_vary("tubes.offset_cents=" + ",".join(str(c) for c in offsets))]
    t0 = time.perf_counter()
    here = run_sweep(preset, vary, workers=1)
    serial = time.perf_counter() - t0
    t0 = time.perf_counter()
    pooled = run_sweep(preset, vary, workers=2)
    pool = time.perf_counter() - t0
    failed = len(here.failed) + len(pooled.failed)
    return {"sweep.variants": float(len(offsets)), "sweep.variant_s": serial / len(offsets),
            "sweep.pool_s": pool, "sweep.pool_speedup": serial / pool,
            "sweep.failed": float(failed)}
