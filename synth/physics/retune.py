"""Retune plan: where to grind and how much to trim to bring a cut bar's partials on target.

A cut bar is measured (partials 1-3); its design (the preset's bar) gives the
sensitivities: the grind map (:func:`synth.physics.tuning.grind_map`, cents per
depth removed in a band at each station, first-order Rayleigh quotient) and an
end-trim column (cents per metre trimmed, equal parts from both ends, by a
central finite difference of two bar solves).  Grinding is planned in
symmetric pairs of bands (a station and its mirror image), so the bar stays
symmetric and its nodes stay where the cord holes are.  The step solves

    minimise || W (S x - d) ||^2 + lambda^2 || x / x_scale ||^2
    subject to 0 <= depth_i <= h_i - h_min,  0 <= trim <= max_trim

by bounded least squares (:func:`scipy.optimize.lsq_linear`), where ``d`` is
each partial's miss in cents (target over measured), ``W`` weights each
partial by the inverse of its tolerance (1 cent for the fundamental, 3 above),
and the small ``lambda`` picks the least metal among plans that meet the
targets (three partials, many stations).  Metal can only come off, so a bar
whose partials all need to go down in ways no removal gives is reported as
such (the predicted misses stay large).

The prediction after the step applies the plan to the design and re-solves it:
each partial's predicted frequency is the measured one times the model's ratio
(after over before), which keeps the model's nonlinearity in depth and trim.
The plan is a step: grind, record again, plan again.

References
----------
.. [1] physics.md section 3 (sensitivity to local thickness, Rayleigh quotient;
   raise a bar at the ends or by shortening it, lower it from the middle).
.. [2] Stark, P. B. and Parker, R. L., "Bounded-variable least-squares: an
   algorithm and applications", Computational Statistics 10, 129-141, 1995 (the
   method of scipy.optimize.lsq_linear; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synth.errors import ModelError
from synth.physics.bar_fe import solve_bar
from synth.physics.geometry import BarGeometry, GroundUndercut, StationUndercut
from synth.physics.materials import Material
from synth.pitch import cents

TRIM_STEP_M = 2e-4
"""Length change for the finite-difference trim column, m (0.2 mm: far above the
solver's 1e-4 relative convergence in frequency, far below a planned trim)."""

_TRIM_STATIONS = 801


@dataclass(frozen=True)
class RetunePlan:
    """One retuning step.

    Attributes
    ----------
    offsets_m : ndarray
        Band centres as distances from the bar's centre, m (each band is ground
        at ``+offset`` and ``-offset``; 0 is one band at the centre).
    depths_m : ndarray
        Depth to remove at each, m (>= 0).
    band_m : float
        Band width along the bar, m.
    trim_m : float
        Total length to remove, half from each end, m.
    measured_hz, target_hz : ndarray
        Partials 1-3 as measured and as wanted, Hz.
    miss_cents : ndarray
        Measured minus target, cents.
    predicted_cents : ndarray
        Predicted miss after the step (model re-solved with the plan), cents.
    linear_cents : ndarray
        The same from the linear sensitivities alone, cents.
    tolerances_cents : ndarray
    limited : tuple of str
        Stations held at a bound (thinnest metal) and the trim at its limit.
    """

    offsets_m: np.ndarray
    depths_m: np.ndarray
    band_m: float
    trim_m: float
    measured_hz: np.ndarray
    target_hz: np.ndarray
    miss_cents: np.ndarray
    predicted_cents: np.ndarray
    linear_cents: np.ndarray
    tolerances_cents: np.ndarray
    limited: tuple[str, ...]

    @property
    def on_target(self) -> bool:
        """Every predicted miss within its tolerance."""
        return bool(np.all(np.abs(self.predicted_cents) <= self.tolerances_cents))

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return {
            "bands": [{"offset_from_centre_m": float(o), "depth_m": float(d)}
                      for o, d in zip(self.offsets_m, self.depths_m, strict=True) if d > 0],
            "band_m": self.band_m, "trim_total_m": self.trim_m,
            "measured_hz": self.measured_hz.tolist(), "target_hz": self.target_hz.tolist(),
            "miss_cents": self.miss_cents.tolist(),
            "predicted_cents": self.predicted_cents.tolist(),
            "linear_cents": self.linear_cents.tolist(),
            "tolerances_cents": self.tolerances_cents.tolist(),
            "on_target": self.on_target, "limited": list(self.limited),
        }


def trimmed(geometry: BarGeometry, trim_m: float) -> BarGeometry:
    """Return the bar with ``trim_m`` cut off in total, half from each end.

    The thickness profile keeps its place on the metal: the new bar's profile
    is the old one sampled from ``trim/2`` to ``L - trim/2``.
    """
    if trim_m == 0.0:
        return geometry
    L = geometry.length_m
    new_l = L - trim_m
    if not 0.5 * L < new_l < 2.0 * L:
        raise ModelError(f"trim {trim_m * 1e3:g} mm leaves less than half the bar")
    xs = np.linspace(0.0, new_l, _TRIM_STATIONS)
    hs = geometry.thickness_at(xs + 0.5 * trim_m)
    und = None if np.allclose(hs, geometry.thickness_m, rtol=0, atol=1e-12) else \
        StationUndercut(tuple(xs), tuple(hs))
    return BarGeometry(length_m=new_l, width_m=geometry.width_m,
                       thickness_m=geometry.thickness_m, undercut=und,
                       min_thickness_m=geometry.min_thickness_m)


def apply_plan(geometry: BarGeometry, offsets_m, depths_m, band_m: float,
               trim_m: float) -> BarGeometry:
    """Return the bar after trimming its ends and grinding the symmetric bands."""
    g = trimmed(geometry, trim_m)
    c = 0.5 * g.length_m
    bands = []
    for o, d in zip(offsets_m, depths_m, strict=True):
        if d <= 0:
            continue
        if abs(o) < 0.5 * band_m:  # one band across the centre
            bands.append((c, band_m, float(d)))
        else:
            bands += [(c - o, band_m, float(d)), (c + o, band_m, float(d))]
    if not bands:
        return g
    return BarGeometry(length_m=g.length_m, width_m=g.width_m, thickness_m=g.thickness_m,
                       undercut=GroundUndercut(g.undercut, tuple(bands)),
                       min_thickness_m=g.min_thickness_m)


def _vertical(geometry: BarGeometry, material: Material, n: int) -> np.ndarray:
    res = solve_bar(geometry, material, n_vertical=n, n_lateral=0, n_torsional=0)
    return np.array([m.frequency_hz for m in res.vertical[:n]])


def retune_plan(geometry: BarGeometry, material: Material, measured_hz, target_hz, *,
                tolerances_cents=(1.0, 3.0, 3.0), n_bands: int = 8, band_m: float = 0.010,
                max_trim_m: float | None = None, min_thickness_m: float | None = None,
                regularisation: float = 1e-3) -> RetunePlan:
    """Plan one grinding and trimming step for a cut bar.

    Parameters
    ----------
    geometry : BarGeometry
        The bar as designed (or as last measured), which gives the sensitivities.
    material : Material
    measured_hz, target_hz : array_like, shape (n,)
        Partials 1..n (n <= 3 typically) as measured and as wanted, Hz.
    tolerances_cents : sequence of float
        Allowed miss per partial (weights of the fit).
    n_bands : int
        Symmetric band pairs from the centre out to the ends (>= 2).
    band_m : float
        Band width along the bar, m.
    max_trim_m : float, optional
        Largest total trim (default 5 % of the length).
    min_thickness_m : float, optional
        Thinnest metal a band may leave (default the bar's own minimum).
    regularisation : float
        Weight of the least-metal term (relative to a 1-tolerance miss per 0.1 mm).

    Returns
    -------
    RetunePlan
    """
    from scipy.optimize import lsq_linear

    from synth.physics.tuning import grind_map

    f_meas = np.asarray(measured_hz, dtype=float)
    f_tgt = np.asarray(target_hz, dtype=float)
    n = f_tgt.size
    if f_meas.shape != f_tgt.shape or n < 1:
        raise ModelError("measured and target partials must be the same count (>= 1)")
    tol = np.asarray(tolerances_cents, dtype=float)[:n]
    if n_bands < 2:
        raise ModelError(f"n_bands = {n_bands}: need at least 2")
    L = geometry.length_m
    h_min = geometry.min_thickness_m if min_thickness_m is None else min_thickness_m
    max_trim = 0.05 * L if max_trim_m is None else max_trim_m
    res = solve_bar(geometry, material, n_vertical=n, n_lateral=0, n_torsional=0)
    # grind-map stations: 2 n_bands - 1 bands evenly from end to end, symmetric
    # about the centre; a pair (station and mirror) is one unknown
    removal = 1e-4
    gm = grind_map(res, n_stations=2 * n_bands - 1, band_m=band_m, removal_m=removal,
                   max_order=n)
    mid = n_bands - 1
    per_m = gm.cents / removal  # cents per metre of depth, (stations, modes)
    cols = np.zeros((n, n_bands))
    for i in range(n_bands):
        cols[:, i] = per_m[mid + i] + (per_m[mid - i] if i else 0.0)
    xs = gm.x_m[mid:]
    offsets = np.concatenate([[0.0], xs[1:] - 0.5 * L])  # the centre band exactly at 0
    f0 = np.array([m.frequency_hz for m in res.vertical[:n]])
    # trim column: cents per metre trimmed, central difference of two solves
    f_up = _vertical(trimmed(geometry, TRIM_STEP_M), material, n)
    f_dn = _vertical(trimmed(geometry, -TRIM_STEP_M), material, n)
    trim_col = np.asarray(cents(f_up, f_dn), dtype=float) / (2 * TRIM_STEP_M)
    depth_scale, trim_scale = 1e-4, 1e-3  # unknowns in 0.1 mm and in mm
    A = np.column_stack([cols * depth_scale, trim_col * trim_scale])
    d = np.asarray(cents(f_tgt, f_meas), dtype=float)
    W = 1.0 / tol
    h_band = np.array([float(np.min(geometry.thickness_at(np.linspace(c - 0.5 * band_m,
                                                                     c + 0.5 * band_m, 21))))
                       for c in xs])
    upper = np.concatenate([np.maximum(h_band - h_min, 0.0) / depth_scale,
                            [max_trim / trim_scale]])
    k = A.shape[1]
    A_fit = np.vstack([A * W[:, None], regularisation * np.eye(k)])
    b_fit = np.concatenate([d * W, np.zeros(k)])
    free = upper > 0
    x = np.zeros(k)
    if free.any():
        sol = lsq_linear(A_fit[:, free], b_fit, bounds=(np.zeros(free.sum()), upper[free]),
                         method="bvls", tol=1e-12)
        x[free] = sol.x
    x = np.clip(x, 0.0, upper)  # rounding in the solver may leave -1e-22
    depths = x[:n_bands] * depth_scale
    trim = float(x[-1] * trim_scale)
    linear = -(d - A @ x)
    after = apply_plan(geometry, offsets, depths, band_m, trim)
    f_after = f_meas * (_vertical(after, material, n) / f0)
    predicted = np.asarray(cents(f_after, f_tgt), dtype=float)
    limited = [f"band at +-{o * 1e3:.0f} mm from the centre: thinnest metal reached"
               for o, xv, u in zip(offsets, x[:n_bands], upper[:n_bands], strict=True)
               if u > 0 and xv >= u * (1 - 1e-6)]
    if x[-1] >= upper[-1] * (1 - 1e-6):
        limited.append(f"trim at its limit {max_trim * 1e3:.1f} mm")
    return RetunePlan(offsets_m=offsets, depths_m=depths, band_m=band_m, trim_m=trim,
                      measured_hz=f_meas, target_hz=f_tgt, miss_cents=-d,
                      predicted_cents=predicted, linear_cents=linear, tolerances_cents=tol,
                      limited=tuple(limited))
