"""Bar-model benchmark: one converged solve of an undercut bar.

With ``--quick``: medians of 7 repeats instead of 41.

Figures
-------
fe.solve_ms_median
    ``solve_bar`` of a caliper-measured undercut bar (5 vertical, 2 lateral,
    2 torsional modes, refined to 0.01 %), median wall time.  Target < 5 ms;
    the vertical field carries the axial coupling of the undercut (three fields
    per node), which the 3-D reference showed is needed for partial 3.
fe.dense_reference_ms_median
    The same model on the same two discretisations the production path solves
    (start mesh at degree 5, then 6) solved the plain way: every eigenpair of the
    assembled matrices by a full ``scipy.linalg.eigh``.
fe.dense_over_solve
    Ratio of the two (higher is better for the production path).
fe.mesh_elements
    Elements of the converged mesh of that bar (a check that the timed solve
    refined as it should).
"""

from __future__ import annotations

from synth.bench import median_time
from synth.physics.bar_fe import (
    Mesh,
    dense_reference_frequencies,
    one_blas_thread,
    solve_bar,
    start_mesh,
)
from synth.physics.geometry import BarGeometry, StationUndercut
from synth.settings.material import load_material


def bench_bar() -> BarGeometry:
    """Return the benchmark bar: 320 x 55 x 12 mm, five caliper stations."""
    return BarGeometry(0.320, 0.055, 0.012, StationUndercut(
        (0.060, 0.100, 0.160, 0.220, 0.260), (0.012, 0.0082, 0.0050, 0.0082, 0.012)))


def run(quick: bool = False) -> dict[str, float]:
    """Run the suite; see the module docstring for the figures."""
    bar = bench_bar()
    mat = load_material("aluminium-6061-t6")
    repeats = 7 if quick else 41
    converged = solve_bar(bar, mat)
    t_solve = median_time(lambda: solve_bar(bar, mat), repeats)

    final = start_mesh(bar)
    first = Mesh(final.edges_m, final.degree - 1)
    if converged.n_elements != final.n_elements:
        raise RuntimeError("the benchmark bar no longer settles on its start mesh")

    def dense():
        # Every eigenpair of every field's matrices, on the same pair of
        # discretisations the production path solves to prove convergence.
        with one_blas_thread():
            dense_reference_frequencies(bar, mat, first)
            dense_reference_frequencies(bar, mat, final)

    t_dense = median_time(dense, repeats)
    return {
        "fe.solve_ms_median": t_solve * 1e3,
        "fe.dense_reference_ms_median": t_dense * 1e3,
        "fe.dense_over_solve": t_dense / t_solve,
        "fe.mesh_elements": float(converged.n_elements),
    }
