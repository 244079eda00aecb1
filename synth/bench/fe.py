"""Bar-model benchmark: one converged solve of an undercut bar.

Figures
-------
fe.solve_ms_median
    ``solve_bar`` of a caliper-measured undercut bar (5 vertical, 2 lateral,
    2 torsional modes, mesh refined to 0.01 %), median wall time.  Target < 5 ms;
    the vertical field carries the axial coupling of the undercut (three fields
    per node), which the 3-D reference showed is needed for partial 3.
fe.dense_reference_ms_median
    The same model on the same converged mesh solved the plain way: every
    eigenpair of the assembled matrices by a full ``scipy.linalg.eigh``.
fe.dense_over_solve
    Ratio of the two (higher is better for the production path).
"""

from __future__ import annotations

from synth.bench import median_time
from synth.physics.bar_fe import (
    _start_elements,
    dense_reference_frequencies,
    one_blas_thread,
    solve_bar,
)
from synth.physics.geometry import BarGeometry, StationUndercut
from synth.physics.materials import load_material


def bench_bar() -> BarGeometry:
    """The benchmark bar: 320 x 55 x 12 mm, five caliper stations."""
    return BarGeometry(0.320, 0.055, 0.012, StationUndercut(
        (0.060, 0.100, 0.160, 0.220, 0.260), (0.012, 0.0082, 0.0050, 0.0082, 0.012)))


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; see the module docstring for the figures."""
    bar = bench_bar()
    mat = load_material("aluminium-6061-t6")
    repeats = 7 if quick else 41
    converged = solve_bar(bar, mat)
    t_solve = median_time(lambda: solve_bar(bar, mat), repeats)

    first = _start_elements(bar, 5)

    def dense():
        # Every eigenpair of every field's matrices, on the same pair of meshes the
        # production path solves to prove convergence.
        with one_blas_thread():
            dense_reference_frequencies(bar, mat, first)
            dense_reference_frequencies(bar, mat, converged.n_elements)

    t_dense = median_time(dense, repeats)
    return {
        "fe.solve_ms_median": t_solve * 1e3,
        "fe.dense_reference_ms_median": t_dense * 1e3,
        "fe.dense_over_solve": t_dense / t_solve,
        "fe.mesh_elements": float(converged.n_elements),
    }
