"""Design to target: bar length and undercut for target partial ratios; grind map.

Inverse design
--------------
For one note, the blank (width, thickness), the alloy, the minimum thickness and
an undercut family are given; the tuner solves the bar length and the arch's
depth and span so that vertical partials 1..n sit on ``ratios`` times the note's
frequency.  Unknowns are scaled: length in metres, depth as a fraction of the
metal above the minimum thickness, span as a fraction of the length.  With one
target only the length moves; with two, length and depth; with three, all three.
A ``free`` family solves the thickness at every station of a symmetric profile,
held smooth by a second-difference penalty.

The residuals are cents off target per partial, weighted by the tolerance of
each (1 cent for the fundamental, 3 cents above), and minimised by
``scipy.optimize.least_squares`` (trust-region reflective, with bounds).  During
the search the finite-element mesh keeps a fixed number of elements per profile
segment, so the objective is smooth; the result is then re-solved with the
automatically refined mesh and those residuals are the ones reported.

Grind map
---------
First-order (Rayleigh quotient) perturbation of each mode's eigenvalue:
``d(om^2) = v^T (dK - om^2 dM) v / (v^T M v)``.  Metal ground from the underside
changes the section's area, first moment and second moment about the blank's
mid-plane by ``dA = b dh``, ``dS = b (h0 - 2h)/2 dh``, ``dI_r = b (h0/2 - h)^2 dh``,
so per unit length (the bar model's fields w, psi and stretch u)

    d(om^2)/dh = [E (dA u'^2 - 2 dS u' psi' + dI_r psi'^2) + k G b (w' - psi)^2
                  - om^2 rho (dA (u^2 + w^2) - 2 dS u psi + dI_r psi^2)] / M_n

(torsion: ``[G dJ/dh theta'^2 - om^2 rho dI_p/dh theta^2] / M_n``).  The change of
a partial for metal removed over a band is the integral of this density times
the (negative) thickness change, converted to cents.  Removing metal where
bending strain dominates lowers a partial; where the bar mainly moves (near the
free ends) it raises it.

References
----------
Rayleigh, J. W. S. (1877). The Theory of Sound, vol. 1, section 88 (stationarity
    of the frequency; first-order perturbation).
Petrolito, J. & Legge, K. A. (1997). Optimal undercuts for the tuning of
    percussive beams. J. Acoust. Soc. Am. 102(4), 2432-2437 (FE beam undercut
    optimisation with few shape parameters).
Branch, M. A., Coleman, T. F. & Li, Y. (1999). A subspace, interior, and conjugate
    gradient method for large-scale bound-constrained minimization problems.
    SIAM J. Sci. Comput. 21(1), 1-23 (the trust-region reflective method).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import least_squares

from synth.errors import ModelError
from synth.physics.bar_fe import (
    BarModes,
    Mode,
    cowper_shear_coefficient,
    segment_counts,
    solve_bar,
    torsion_constant_rectangle,
    vertical_frequencies,
)
from synth.physics.geometry import BarGeometry, StationUndercut, UndercutFamily
from synth.physics.instrument import Instrument
from synth.physics.materials import Material
from synth.pitch import canonical_note, cents

CENTS_PER_LN = 1200.0 / math.log(2.0)
FUNDAMENTAL_TOL_CENTS = 1.0
PARTIAL_TOL_CENTS = 3.0
FUNDAMENTAL_WEIGHT = 30.0
STOP_CENTS = 2e-3
"""The search stops once every partial is this close (cents) on the search mesh."""


class _OnTarget(Exception):
    """Raised inside the residual function to end the search at a hit."""

    def __init__(self, x):
        super().__init__("on target")
        self.x = x

SEARCH_ELEMENTS = 12
"""Elements of the fixed search mesh (degree 5): 1e-6 of the converged
frequencies on the bars of this trade, i.e. below 0.002 cent."""


@dataclass(frozen=True)
class TuneSpec:
    """What one bar must do and what it is made from."""

    note: str
    fundamental_hz: float
    ratios: tuple[float, ...]
    width_m: float
    thickness_m: float
    min_thickness_m: float
    family: UndercutFamily
    material: Material

    @property
    def targets_hz(self) -> np.ndarray:
        """Target frequency of every tuned partial."""
        return self.fundamental_hz * np.asarray(self.ratios)

    @property
    def tolerances_cents(self) -> np.ndarray:
        """Allowed miss per partial: 1 cent for the fundamental, 3 above."""
        tol = np.full(len(self.ratios), PARTIAL_TOL_CENTS)
        tol[0] = FUNDAMENTAL_TOL_CENTS
        return tol


@dataclass(frozen=True)
class TuneResult:
    """The solved bar of one note.

    Attributes
    ----------
    geometry : BarGeometry
        Solved length and undercut.
    frequencies_hz, residual_cents : arrays
        Of the tuned partials, from the converged (refined) re-solve.
    reachable : bool
        Every partial within its tolerance.
    binding : tuple of str
        Constraints that sit on their bounds at the solution.
    message : str
        One line for the report.
    n_solves : int
        Finite-element solves spent (search plus verification).
    seconds : float
    params : tuple of float
        (length_m, depth_fraction, span_fraction) or the free stations.
    """

    spec: TuneSpec
    geometry: BarGeometry
    frequencies_hz: np.ndarray
    residual_cents: np.ndarray
    reachable: bool
    binding: tuple[str, ...]
    message: str
    n_solves: int
    seconds: float
    params: tuple[float, ...]

    @property
    def thinnest_m(self) -> float:
        """Thinnest metal left by the undercut."""
        return self.geometry.thinnest_m()


# --------------------------------------------------------------------------------------
# Parametrisation
# --------------------------------------------------------------------------------------


def _uniform_length(spec: TuneSpec) -> float:
    """Length of a uniform Euler-Bernoulli bar with the target fundamental (start value)."""
    m = spec.material
    c = spec.thickness_m * math.sqrt(m.youngs_modulus_pa / (12.0 * m.density_kg_m3))
    return math.sqrt(22.373285 * c / (2.0 * math.pi * spec.fundamental_hz))


class _Param:
    """Maps the unknown vector to a bar, for the parametric families."""

    names = ("length", "depth", "span")

    def __init__(self, spec: TuneSpec, n_free: int):
        self.spec = spec
        self.n_free = n_free  # how many of (length, depth, span) move
        fam = spec.family
        self.fixed = np.array([np.nan, fam.depth_fraction, fam.span_fraction])

    def full(self, x: np.ndarray) -> np.ndarray:
        p = self.fixed.copy()
        p[: self.n_free] = x
        return p

    def bar(self, x: np.ndarray) -> BarGeometry:
        length, q, s = self.full(x)
        spec = self.spec
        depth = q * (spec.thickness_m - spec.min_thickness_m)
        uc = spec.family.build(length, depth, s * length) if depth > 0 else None
        return BarGeometry(length, spec.width_m, spec.thickness_m, uc, spec.min_thickness_m)

    def bounds(self, length0: float):
        lo = np.array([0.25 * length0, 0.0, 0.2])
        hi = np.array([4.0 * length0, 1.0, 0.98])
        return lo[: self.n_free], hi[: self.n_free]

    def describe_bound(self, i: int, upper: bool) -> str:
        if i == 0:
            return "length at its search bound"
        if i == 1:
            return ("depth at its limit: the arch reaches the minimum thickness "
                    f"{self.spec.min_thickness_m * 1e3:.2f} mm" if upper else
                    "depth at zero: even the plain bar's ratios lie above these targets")
        return ("span at its limit: the arch runs almost end to end" if upper
                else "span at its lower limit (20 % of the length)")


class _FreeParam:
    """A symmetric station profile: length plus thickness at each half-station."""

    def __init__(self, spec: TuneSpec):
        self.spec = spec
        self.k = spec.family.stations  # stations over the half span, centre included

    def stations(self, length: float) -> np.ndarray:
        half = 0.5 * self.spec.family.span_fraction * length
        u = np.linspace(-1.0, 1.0, 2 * self.k - 1)
        return 0.5 * length + half * u

    def bar(self, x: np.ndarray) -> BarGeometry:
        spec = self.spec
        length = x[0]
        h0, hmin = spec.thickness_m, spec.min_thickness_m
        # x[1:] are depth fractions from the edge station inward to the centre;
        # the outermost station keeps the blank thickness.
        frac = np.concatenate([[0.0], x[1:]])
        half = h0 - frac * (h0 - hmin)
        h = np.concatenate([half, half[-2::-1]])
        return BarGeometry(length, spec.width_m, h0,
                           StationUndercut(tuple(self.stations(length)), tuple(h), smooth=True),
                           hmin)

    def bounds(self, length0: float):
        lo = np.concatenate([[0.25 * length0], np.zeros(self.k - 1)])
        hi = np.concatenate([[4.0 * length0], np.ones(self.k - 1)])
        return lo, hi

    def smooth_residuals(self, x: np.ndarray) -> np.ndarray:
        frac = np.concatenate([[0.0], x[1:], x[-2:0:-1] if self.k > 2 else []])
        d2 = np.diff(frac, 2)
        return self.spec.family.smoothness * 10.0 * d2

    def describe_bound(self, i: int, upper: bool) -> str:
        if i == 0:
            return "length at its search bound"
        return (f"station {i} at the minimum thickness" if upper
                else f"station {i} at the blank thickness")


# --------------------------------------------------------------------------------------
# Solver
# --------------------------------------------------------------------------------------


def tune_bar(spec: TuneSpec, start: tuple[float, ...] | None = None, *,
             max_evaluations: int = 200) -> TuneResult:
    """Solve one bar's length and undercut for its target partials.

    Parameters
    ----------
    spec : TuneSpec
    start : tuple, optional
        Starting parameters, e.g. a neighbouring note's ``params`` scaled with
        :func:`scale_start`.  Without it the tuner starts from the uniform bar's
        length and the family's starting fractions.
    max_evaluations : int
        Cap on finite-element solves in the search.

    Returns
    -------
    TuneResult
        Never raises for unreachable targets: ``reachable`` is False and
        ``message`` says which constraint binds.
    """
    t0 = time.perf_counter()
    n_t = len(spec.ratios)
    if n_t > 5:
        raise ModelError("at most 5 target partials can be tuned")
    free = spec.family.family == "free"
    par = _FreeParam(spec) if free else _Param(spec, min(3, n_t))
    # The length can always place the fundamental, so it is weighted far above the
    # upper partials: an unreachable design then compromises only partials 2-3.
    weights = 1.0 / spec.tolerances_cents
    weights[0] *= FUNDAMENTAL_WEIGHT
    targets = spec.targets_hz
    count = [0]

    length0 = _uniform_length(spec)
    if start is None:
        if isinstance(par, _FreeParam):  # free: the stations move
            # the power-4 arch of the family's span and depth, sampled at the stations
            u = np.linspace(-1.0, 0.0, par.k)
            x = np.concatenate([[length0], spec.family.depth_fraction * (1 - np.abs(u) ** 4)[1:]])
        else:
            x = np.array([length0, spec.family.depth_fraction, spec.family.span_fraction])[
                : par.n_free]
        x = _match_fundamental(par, x, spec, count)
    else:
        x = np.array(start, dtype=float)
    lo, hi = par.bounds(x[0])
    x = np.clip(x, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
    counts = segment_counts(par.bar(x), SEARCH_ELEMENTS)

    def residuals(xv):
        bar = par.bar(xv)
        try:
            f = vertical_frequencies(bar, spec.material, n_t, counts=counts)
        except ModelError:
            f = vertical_frequencies(bar, spec.material, n_t, n_elements=SEARCH_ELEMENTS)
        count[0] += 1
        miss = cents(f, targets)
        if not free and np.max(np.abs(miss)) < STOP_CENTS:
            raise _OnTarget(np.array(xv))
        r = miss * weights
        if isinstance(par, _FreeParam):  # free
            r = np.concatenate([r, par.smooth_residuals(xv)])
        return r

    scale = np.concatenate([[x[0]], np.ones(len(x) - 1)])
    try:
        sol = least_squares(residuals, x, bounds=(lo, hi), x_scale=scale, method="trf",
                            diff_step=1e-5, xtol=1e-12, ftol=1e-12, gtol=1e-12,
                            max_nfev=max_evaluations)
        x, active = sol.x, sol.active_mask
    except _OnTarget as done:
        x, active = done.x, np.zeros(len(x), dtype=int)
    bar = par.bar(x)
    check = solve_bar(bar, spec.material, n_vertical=max(n_t, 3), n_lateral=0, n_torsional=0)
    count[0] += 2
    freqs = np.array([m.frequency_hz for m in check.vertical[:n_t]])
    res = cents(freqs, targets)
    reachable = bool(np.all(np.abs(res) <= spec.tolerances_cents))
    # a constraint binds when the solution sits on it, or within 3 % of the range
    # of it (the reflective search stops just short of a bound it keeps pressing)
    near = 0.03 * (hi - lo)
    side = np.where(x - lo <= near, -1, np.where(hi - x <= near, 1, 0))
    side = np.where(active != 0, active, side)
    binding = tuple(par.describe_bound(i, bool(a > 0)) for i, a in enumerate(side) if a != 0)
    if reachable:
        msg = "on target"
    elif binding:
        msg = "not reachable: " + "; ".join(binding)
    else:
        msg = (f"not reachable with a {spec.family.family} undercut: the best compromise "
               "lies inside the bounds (try another family or ratios)")
    return TuneResult(spec, bar, freqs, res, reachable, binding, msg, count[0],
                      time.perf_counter() - t0, tuple(float(v) for v in x))


def _match_fundamental(par, x, spec, count, iterations: int = 3) -> np.ndarray:
    """Scale the length so the fundamental is close before the full search (f ~ 1/L^2)."""
    x = x.copy()
    for _ in range(iterations):
        f = vertical_frequencies(par.bar(x), spec.material, 1, n_elements=SEARCH_ELEMENTS)[0]
        count[0] += 1
        x[0] *= math.sqrt(f / spec.fundamental_hz)
    return x


def scale_start(previous: TuneResult, spec: TuneSpec) -> tuple[float, ...]:
    """Warm start for ``spec`` from a neighbouring note's solution.

    Keeps the undercut fractions and scales the length by ``sqrt(h f_prev / (h_prev f))``
    (a bar's frequency goes as thickness over length squared).
    """
    p = previous.spec
    factor = math.sqrt(spec.thickness_m * p.fundamental_hz / (p.thickness_m * spec.fundamental_hz))
    params = list(previous.params)
    params[0] *= factor
    return tuple(params)


# --------------------------------------------------------------------------------------
# Grind map
# --------------------------------------------------------------------------------------


def sensitivity_density(mode: Mode, geometry: BarGeometry, material: Material, x) -> np.ndarray:
    """Cents per metre of thickness added, per metre of bar, at positions ``x``.

    Integrate it against a thickness change dh(x) (negative for metal removed)
    to get the partial's change in cents, to first order.
    """
    x = np.asarray(x, dtype=float)
    h = geometry.thickness_at(x)
    b = geometry.width_m
    E, G, rho = material.youngs_modulus_pa, material.shear_modulus_pa, material.density_kg_m3
    lam = mode.angular_frequency**2
    if mode.kind == "torsional":
        th = mode.shape_at(x)
        dth = mode.shape_at(x, 1)
        eps = 1e-7 * h
        dJ = (torsion_constant_rectangle(b, h + eps) - torsion_constant_rectangle(b, h - eps)) / (
            2 * eps)
        dIp = b * (b**2 + 3 * h**2) / 12.0
        dlam = (G * dJ * dth**2 - lam * rho * dIp * th**2) / mode.modal_mass
    else:
        k = cowper_shear_coefficient(material.poisson_ratio)
        w = mode.shape_at(x)
        dw = mode.shape_at(x, 1)
        psi = mode.rotation_at(x)
        dpsi = mode.rotation_at(x, 1)
        gam = dw - psi
        d_kga = k * G * b  # d(kGA)/dh
        if mode.kind == "vertical":
            # Metal taken from the underside at z = h0 - h, the reference line at h0/2:
            # dA/dh = b, dS/dh = b (h0 - 2h)/2, dI_r/dh = b (h0/2 - h)^2.
            h0 = geometry.thickness_m
            u = mode.axial_at(x)
            du = mode.axial_at(x, 1)
            d_a, d_s, d_i = b, 0.5 * b * (h0 - 2.0 * h), b * (0.5 * h0 - h) ** 2
            strain = E * (d_a * du**2 - 2.0 * d_s * du * dpsi + d_i * dpsi**2)
            inertia = rho * (d_a * (u**2 + w**2) - 2.0 * d_s * u * psi + d_i * psi**2)
        else:  # lateral: I = h b^3/12 grows as h
            i_lat = h * b**3 / 12.0
            strain = E * i_lat / h * dpsi**2
            inertia = rho * (b * w**2 + i_lat / h * psi**2)
        dlam = (strain + d_kga * gam**2 - lam * inertia) / mode.modal_mass
    return CENTS_PER_LN * dlam / (2.0 * lam)


@dataclass(frozen=True)
class GrindMap:
    """Cents moved per ``removal_m`` of metal ground away over a band at each station.

    Attributes
    ----------
    x_m : (n_stations,) band centres
    thickness_m : (n_stations,) thickness there before grinding
    modes : list of (kind, order)
    cents : (n_stations, n_modes) change of each mode for the removal
    band_m, removal_m : the band width and removed depth
    """

    x_m: np.ndarray
    thickness_m: np.ndarray
    modes: tuple[tuple[str, int], ...]
    frequencies_hz: np.ndarray
    cents: np.ndarray
    band_m: float
    removal_m: float


def grind_map(result: BarModes, *, n_stations: int = 31, band_m: float = 0.010,
              removal_m: float = 1e-4, kinds: tuple[str, ...] = ("vertical",),
              max_order: int = 3) -> GrindMap:
    """Sensitivity of each partial to grinding at stations along the bar.

    Parameters
    ----------
    result : BarModes
        A solved bar.
    n_stations : int
        Band centres spread evenly from end to end (band kept inside the bar).
    band_m : float
        Width of the ground band along the bar (default 10 mm).
    removal_m : float
        Depth of metal removed (default 0.1 mm).
    kinds, max_order : which modes to include.
    """
    geo, mat = result.geometry, result.material
    L = geo.length_m
    if not 0 < band_m < L:
        raise ModelError(f"band width {band_m} m must be between 0 and the bar length {L} m")
    xs = np.linspace(0.5 * band_m, L - 0.5 * band_m, n_stations)
    modes = [m for m in result.modes if m.kind in kinds and m.order <= max_order]
    g, w = np.polynomial.legendre.leggauss(8)
    out = np.zeros((n_stations, len(modes)))
    # integrate each band with 4 sub-intervals of 8 Gauss points
    sub = 4
    for j, mode in enumerate(modes):
        for i, xc in enumerate(xs):
            edges = np.linspace(xc - 0.5 * band_m, xc + 0.5 * band_m, sub + 1)
            total = 0.0
            for a, b in zip(edges[:-1], edges[1:], strict=True):
                xq = 0.5 * (a + b) + 0.5 * (b - a) * g
                total += 0.5 * (b - a) * np.sum(w * sensitivity_density(mode, geo, mat, xq))
            out[i, j] = -removal_m * total
    return GrindMap(xs, geo.thickness_at(xs), tuple((m.kind, m.order) for m in modes),
                    np.array([m.frequency_hz for m in modes]), out, band_m, removal_m)


# --------------------------------------------------------------------------------------
# Temperature
# --------------------------------------------------------------------------------------


def at_temperature(geometry: BarGeometry, material: Material,
                   temperature_c: float) -> tuple[BarGeometry, Material]:
    """Return the bar at another temperature: modulus and density, and every length expanded."""
    dt = temperature_c - material.reference_temperature_c
    return (geometry.scaled(1.0 + material.thermal_expansion_per_k * dt),
            material.at_temperature(temperature_c))


def temperature_shift_cents(geometry: BarGeometry, material: Material, from_c: float,
                            to_c: float, n_modes: int = 3) -> np.ndarray:
    """Cents each vertical partial moves when the bar goes from ``from_c`` to ``to_c``.

    Both states are solved in full (modulus from its temperature coefficient,
    density and every length from the expansion coefficient).
    """
    g1, m1 = at_temperature(geometry, material, from_c)
    g2, m2 = at_temperature(geometry, material, to_c)
    f1 = vertical_frequencies(g1, m1, n_modes, n_elements=SEARCH_ELEMENTS)
    f2 = vertical_frequencies(g2, m2, n_modes, n_elements=SEARCH_ELEMENTS)
    return cents(f2, f1)



# --------------------------------------------------------------------------------------
# A whole range
# --------------------------------------------------------------------------------------


def instrument_spec(instrument: Instrument, note: str,
                    ratios: tuple[float, ...] | None = None) -> TuneSpec:
    """Return the tuning spec of one note of an instrument preset.

    The material is taken at the preset's design temperature (``temperature_c``):
    the bars are solved to be in tune there.
    """
    if instrument.blank is None:
        raise ModelError(f"{instrument.source}: blank: the tuner needs a [blank] table")
    if instrument.undercut_family is None:
        raise ModelError(f"{instrument.source}: undercut: the tuner needs an [undercut] family")
    width, thickness = instrument.blank_for(note)
    return TuneSpec(
        note=note,
        fundamental_hz=instrument.target_hz(note),
        ratios=tuple(ratios or instrument.target_ratios),
        width_m=width,
        thickness_m=thickness,
        min_thickness_m=instrument.blank.min_thickness_m,
        family=instrument.undercut_family,
        material=instrument.material.at_temperature(instrument.temperature_c),
    )


TUNE_SEGMENT = 10
"""Bars per chain of warm starts in :func:`tune_instrument`.

The range is cut into runs of this many neighbouring bars, fixed by the notes
alone (not by the number of workers), so the bars come out the same to the bit
on any number of processes.  The first bar of each run starts cold: on the
37-bar demo range (four runs) that costs 10 % more solves than one chain over
the whole range (1033 against 939) and moves the solved lengths by at most
0.6 um (residuals by at most 0.002 cents), far inside the tuning targets.  Four
runs keep two or four workers evenly busy; shorter runs would add cold starts,
longer ones leave a worker idle.
"""


def tune_instrument(instrument: Instrument, notes: list[str] | None = None, *,
                    ratios: tuple[float, ...] | None = None, progress=None,
                    aim=None, workers: int | None = 1) -> list[TuneResult]:
    """Tune every note (or ``notes``) from the lowest up, warm-starting each bar.

    Each bar starts from its lower neighbour's solution, within runs of
    :data:`TUNE_SEGMENT` neighbouring bars; the runs are independent jobs of
    :func:`synth.executor.run_jobs` on ``workers`` processes (1: here, one after
    the other; None: every core), and the results are the same on any number.
    ``progress(note)`` is called after each bar (a run's bars when the run is
    done).  ``aim(spec) -> spec``, when given, turns each bar's spec into the one
    the 1-D model is tuned to (a 3-D correction); it must be picklable (a
    module-level function or a :func:`functools.partial` of one) when
    ``workers`` is not 1.
    """
    from synth.executor import Job, run_jobs, values_or_raise

    notes = list(notes or instrument.notes)
    order = sorted(notes, key=instrument.note_fraction)
    runs = [order[k:k + TUNE_SEGMENT] for k in range(0, len(order), TUNE_SEGMENT)]
    jobs = [Job(f"{run[0]}-{run[-1]}", tune_run, (instrument, run, ratios, aim))
            for run in runs]

    def done(res) -> None:
        if progress is not None and res.ok:
            for r in res.value:
                progress(r.spec.note)

    done_runs = values_or_raise(jobs, run_jobs(jobs, workers=workers, progress=done), "tuning")
    results = {r.spec.note: r for run in done_runs for r in run}
    return [results[n] for n in notes]


def tune_run(instrument: Instrument, notes: list[str], ratios: tuple[float, ...] | None,
             aim=None) -> list[TuneResult]:
    """Tune neighbouring bars in the order given, each warm-started from the last reached.

    One job of :func:`tune_instrument` (module level, picklable).
    """
    out: list[TuneResult] = []
    previous: TuneResult | None = None
    for note in notes:
        spec = instrument_spec(instrument, note, ratios)
        if aim is not None:
            spec = aim(spec)
        start = scale_start(previous, spec) if previous is not None else None
        res = tune_bar(spec, start)
        if not res.reachable and start is not None:
            cold = tune_bar(spec)  # a poor warm start can strand the search
            if cold.reachable or np.max(np.abs(cold.residual_cents)) < np.max(
                    np.abs(res.residual_cents)):
                cold = replace(cold, n_solves=cold.n_solves + res.n_solves,
                               seconds=cold.seconds + res.seconds)
                res = cold
        out.append(res)
        if res.reachable:
            previous = res
    return out


def worst_miss(results: list[TuneResult]) -> tuple[str, int, float] | None:
    """Find the largest miss beyond tolerance over tuned bars.

    Returns
    -------
    (note, partial, cents) or None
        Note of the bar, partial number (1 = fundamental) and its residual in cents
        (signed) where the residual exceeds its tolerance most; None when every bar
        is within tolerance (``reachable``).
    """
    worst, excess = None, 0.0
    for r in results:
        over = np.abs(r.residual_cents) - r.spec.tolerances_cents
        i = int(np.argmax(over))
        if not r.reachable and (worst is None or over[i] > excess):
            worst, excess = (r.spec.note, i + 1, float(r.residual_cents[i])), float(over[i])
    return worst


def tuned_preset(instrument: Instrument, results: list[TuneResult]) -> dict:
    """Return the instrument preset as a TOML-ready table with every solved bar in [bars]."""
    import copy

    table = copy.deepcopy(instrument.raw)
    # [bars.Bb3] and [bars."A#3"] are one bar (the loader refused both): sharp spelling
    bars = {canonical_note(k): v for k, v in table.get("bars", {}).items()}
    for r in results:
        entry = dict(bars.get(r.spec.note, {}))
        geo = r.geometry.to_table()
        entry["length_m"] = round(geo["length_m"], 9)
        # width and thickness follow the blank grading; write them so a reader of
        # the file sees the whole bar.
        entry["width_m"] = round(geo["width_m"], 9)
        entry["thickness_m"] = round(geo["thickness_m"], 9)
        if "undercut" in geo:
            entry["undercut"] = {k: (round(v, 9) if isinstance(v, float) else
                                     [round(x, 9) for x in v] if isinstance(v, list) else v)
                                 for k, v in geo["undercut"].items()}
        bars[r.spec.note] = entry
    table["bars"] = {n: bars[n] for n in instrument.notes if n in bars}
    return table
