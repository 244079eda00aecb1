"""Bar geometry: a rectangular blank with an optional undercut (arch) beneath.

The top face is flat; the undercut removes metal from the underside, so the local
thickness ``h(x)`` falls below the blank thickness ``h0`` where the arch is cut.
Positions ``x`` run from one end of the bar (0) to the other (``length_m``).

Undercut forms
--------------
``StationUndercut``
    A table of (x, thickness) stations as measured with calipers; thickness is
    interpolated linearly between stations (or with a monotone cubic, PCHIP, when
    ``smooth`` is set) and is the blank thickness outside the first and last
    station.
``ArchUndercut``
    A power-law arch ``h = h0 - depth (1 - u**exponent)`` for ``u = |x - c| /
    (span / 2) < 1``; exponent 2 is the parabolic arch, 4 a flatter-bottomed one.
``FlatArchUndercut``
    A flat bottom of length ``flat_m`` at depth ``depth_m``, reached by two ramps
    (straight or rounded) that together with the flat span ``span_m``.

TOML keys (inside ``[undercut]``)
---------------------------------
stations: ``x_m = [...]``, ``thickness_m = [...]``, optional ``smooth = true``.
parametric: ``family = "parabolic" | "power" | "flat"``, ``depth_m``, ``span_m``,
optional ``center_m`` (default: the middle), ``exponent`` (``power`` only),
``flat_m`` and ``ramp = "straight" | "round"`` (``flat`` only).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any

import numpy as np

from synth.config import Section
from synth.errors import ConfigError

DEFAULT_MIN_THICKNESS_M = 0.002
"""Default thinnest metal left by an undercut, m (shop default, common practice, no source)."""
MAX_STATIONS = 100_000
"""Most stations a table may hold: a scanned profile at 0.01 mm steps over a 1 m
bar.  The solver's cost no longer grows with the station count (the mesh follows
the bending waves, not the stations), but reading, checking and integrating a
table still do, linearly."""


class Undercut:
    """Base of the undercut forms: a thickness profile below a flat top."""

    def thickness(self, x: np.ndarray, blank_thickness_m: float, length_m: float) -> np.ndarray:
        """Return the local thickness at positions ``x`` (m)."""
        raise NotImplementedError

    def breakpoints(self, length_m: float) -> list[float]:
        """Return the positions where the profile's formula changes (kinks, steps).

        Integrals of section properties are split there.
        """
        raise NotImplementedError

    def kinks(self, length_m: float, blank_thickness_m: float) -> tuple[np.ndarray, np.ndarray]:
        """Return the breakpoints and the jump of the slope dh/dx at each.

        ``inf`` marks a breakpoint that always gets a mesh node (a step in h, or
        one of the few corners of a parametric form); a finite jump lets the
        mesher leave a weak kink inside an element (a densely measured profile).
        """
        pts = np.asarray(self.breakpoints(length_m), dtype=float)
        return pts, np.full(len(pts), math.inf)

    def describe(self) -> str:
        """Return a short human description."""
        raise NotImplementedError

    def to_table(self) -> dict:
        """Return the TOML table that reproduces this undercut."""
        raise NotImplementedError

    def validate(self, bar: BarGeometry, sec: Section | None = None) -> None:
        """Raise ConfigError if the undercut does not fit the bar."""


@dataclass(frozen=True)
class StationUndercut(Undercut):
    """Undercut given as measured (position, thickness) stations."""

    x_m: tuple[float, ...]
    thickness_m: tuple[float, ...]
    smooth: bool = False

    @cached_property
    def _xs(self) -> np.ndarray:
        return np.asarray(self.x_m, dtype=float)

    @cached_property
    def _hs(self) -> np.ndarray:
        return np.asarray(self.thickness_m, dtype=float)

    def thickness(self, x, blank_thickness_m, length_m):
        """Return the local thickness at positions ``x`` (m)."""
        x = np.asarray(x, dtype=float)
        xs, hs = self._xs, self._hs
        out = np.full_like(x, blank_thickness_m)
        inside = (x >= xs[0]) & (x <= xs[-1])
        if self.smooth and len(xs) >= 3:
            from scipy.interpolate import PchipInterpolator  # only smooth tables need it

            out[inside] = PchipInterpolator(xs, hs)(x[inside])
        else:
            out[inside] = np.interp(x[inside], xs, hs)
        # Outside the stations the blank is untouched; between the end station and
        # the blank the caller's table decides (a maker measures the whole cut).
        return out

    def breakpoints(self, length_m):
        """Return the positions where the profile's formula changes."""
        return [float(v) for v in self.x_m] if not self.smooth else [self.x_m[0], self.x_m[-1]]

    def kinks(self, length_m, blank_thickness_m):
        """Return the stations and the slope jump at each (inf at a step to the blank)."""
        if self.smooth or len(self.x_m) < 2:
            return super().kinks(length_m, blank_thickness_m)
        xs, hs = self._xs, self._hs
        slope = np.diff(hs) / np.diff(xs)
        jump = np.abs(np.diff(np.concatenate([[0.0], slope, [0.0]])))  # blank outside: flat
        # an end station thinner than the blank is a step: always a node
        for end in (0, -1):
            if abs(hs[end] - blank_thickness_m) > 1e-9 * blank_thickness_m:
                jump[end] = math.inf
        return xs, jump

    def describe(self):
        """Return a short human description."""
        kind = "smooth" if self.smooth else "linear"
        return f"{len(self.x_m)} stations ({kind}), thinnest {min(self.thickness_m) * 1e3:.2f} mm"

    def to_table(self):
        """Return the TOML table that reproduces this undercut."""
        table: dict[str, Any] = {"x_m": [float(v) for v in self.x_m],
                                 "thickness_m": [float(v) for v in self.thickness_m]}
        if self.smooth:
            table["smooth"] = True
        return table

    def validate(self, bar, sec=None):
        """Raise ConfigError if the undercut does not fit the bar."""
        def err(key, msg):
            if sec is not None:
                return sec.error(key, msg)
            return ConfigError(f"{key}: {msg}")

        if len(self.x_m) > MAX_STATIONS:
            raise err("x_m", f"holds {len(self.x_m)} stations; at most {MAX_STATIONS} are read")
        if len(self.x_m) != len(self.thickness_m):
            raise err("thickness_m", f"needs one value per station ({len(self.x_m)} in x_m)")
        if any(b <= a for a, b in zip(self.x_m, self.x_m[1:], strict=False)):
            raise err("x_m", "stations must be strictly increasing")
        if self.x_m[0] < 0 or self.x_m[-1] > bar.length_m:
            raise err("x_m", f"stations must lie inside the bar, 0 to {bar.length_m:g} m")
        for h in self.thickness_m:
            if h > bar.thickness_m * (1 + 1e-9):
                raise err("thickness_m", f"{h:g} m exceeds the blank thickness "
                                         f"{bar.thickness_m:g} m")
            if h <= 0:
                raise err("thickness_m", "an undercut may not cut through the bar (thickness > 0)")
            if h < bar.min_thickness_m * (1 - 1e-9):
                raise err("thickness_m", f"{h:g} m is below the minimum thickness "
                                         f"{bar.min_thickness_m:g} m (min_thickness_m)")


@dataclass(frozen=True)
class ArchUndercut(Undercut):
    """Power-law arch: ``h = h0 - depth (1 - u**exponent)``, ``u = |x - c| / (span/2)``."""

    depth_m: float
    span_m: float
    exponent: float = 2.0
    center_m: float | None = None

    def _center(self, length_m):
        return 0.5 * length_m if self.center_m is None else self.center_m

    def thickness(self, x, blank_thickness_m, length_m):
        """Return the local thickness at positions ``x`` (m)."""
        x = np.asarray(x, dtype=float)
        u = np.abs(x - self._center(length_m)) / (0.5 * self.span_m)
        cut = np.where(u < 1.0, self.depth_m * (1.0 - np.minimum(u, 1.0) ** self.exponent), 0.0)
        return blank_thickness_m - cut

    def breakpoints(self, length_m):
        """Return the positions where the profile's formula changes."""
        c = self._center(length_m)
        return [c - 0.5 * self.span_m, c, c + 0.5 * self.span_m]

    def describe(self):
        """Return a short human description."""
        name = "parabolic" if self.exponent == 2.0 else f"power {self.exponent:g}"
        return f"{name} arch, depth {self.depth_m * 1e3:.2f} mm over {self.span_m * 1e3:.1f} mm"

    def to_table(self):
        """Return the TOML table that reproduces this undercut."""
        table = {"family": "parabolic" if self.exponent == 2.0 else "power",
                 "depth_m": float(self.depth_m), "span_m": float(self.span_m)}
        if self.exponent != 2.0:
            table["exponent"] = float(self.exponent)
        if self.center_m is not None:
            table["center_m"] = float(self.center_m)
        return table

    def validate(self, bar, sec=None):
        """Raise ConfigError if the undercut does not fit the bar."""
        _validate_span(self, bar, sec, self.depth_m, self.span_m, self._center(bar.length_m))


@dataclass(frozen=True)
class FlatArchUndercut(Undercut):
    """Flat-bottomed arch: a flat of ``flat_m`` at ``depth_m`` between two ramps."""

    depth_m: float
    span_m: float
    flat_m: float
    ramp: str = "round"
    center_m: float | None = None

    def _center(self, length_m):
        return 0.5 * length_m if self.center_m is None else self.center_m

    def thickness(self, x, blank_thickness_m, length_m):
        """Return the local thickness at positions ``x`` (m)."""
        x = np.asarray(x, dtype=float)
        d = np.abs(x - self._center(length_m))
        half_flat = 0.5 * self.flat_m
        ramp_len = 0.5 * (self.span_m - self.flat_m)
        s = np.clip((0.5 * self.span_m - d) / ramp_len, 0.0, 1.0) if ramp_len > 0 else (
            (d <= 0.5 * self.span_m).astype(float))
        frac = 0.5 * (1.0 - np.cos(np.pi * s)) if self.ramp == "round" else s
        frac = np.where(d <= half_flat, 1.0, frac)
        return blank_thickness_m - self.depth_m * frac

    def breakpoints(self, length_m):
        """Return the positions where the profile's formula changes."""
        c = self._center(length_m)
        return [c - 0.5 * self.span_m, c - 0.5 * self.flat_m, c + 0.5 * self.flat_m,
                c + 0.5 * self.span_m]

    def describe(self):
        """Return a short human description."""
        return (f"flat-bottomed arch, depth {self.depth_m * 1e3:.2f} mm, flat "
                f"{self.flat_m * 1e3:.1f} of {self.span_m * 1e3:.1f} mm, {self.ramp} ramps")

    def to_table(self):
        """Return the TOML table that reproduces this undercut."""
        table = {"family": "flat", "depth_m": float(self.depth_m), "span_m": float(self.span_m),
                 "flat_m": float(self.flat_m), "ramp": self.ramp}
        if self.center_m is not None:
            table["center_m"] = float(self.center_m)
        return table

    def validate(self, bar, sec=None):
        """Raise ConfigError if the undercut does not fit the bar."""
        _validate_span(self, bar, sec, self.depth_m, self.span_m, self._center(bar.length_m))
        if not 0 <= self.flat_m < self.span_m:
            msg = f"flat_m = {self.flat_m:g}: must be >= 0 and shorter than span_m {self.span_m:g}"
            raise (sec.error(None, msg) if sec else ConfigError(msg))


def _validate_span(uc, bar, sec, depth, span, center):
    def err(key, msg):
        return sec.error(key, msg) if sec is not None else ConfigError(f"undercut.{key}: {msg}")

    if depth >= bar.thickness_m:
        raise err("depth_m", f"cuts through the bar (blank thickness {bar.thickness_m:g} m)")
    if bar.thickness_m - depth < bar.min_thickness_m * (1 - 1e-9):
        raise err("depth_m", f"leaves {bar.thickness_m - depth:g} m, below the minimum thickness "
                             f"{bar.min_thickness_m:g} m; deepest allowed "
                             f"{bar.thickness_m - bar.min_thickness_m:g} m")
    if center - 0.5 * span < -1e-12 or center + 0.5 * span > bar.length_m + 1e-12:
        raise err("span_m", f"the arch must fit inside the bar (length {bar.length_m:g} m)")


@dataclass(frozen=True)
class BarGeometry:
    """A bar blank with an optional undercut; all lengths in metres.

    Attributes
    ----------
    length_m, width_m, thickness_m : float
        Blank size (thickness is the blank's, i.e. at the ends).
    undercut : Undercut or None
        The arch under the bar.
    min_thickness_m : float
        Thinnest metal the undercut may leave.
    """

    length_m: float
    width_m: float
    thickness_m: float
    undercut: Undercut | None = None
    min_thickness_m: float = DEFAULT_MIN_THICKNESS_M

    def thickness_at(self, x) -> np.ndarray:
        """Return the local thickness h(x) in m."""
        x = np.asarray(x, dtype=float)
        if self.undercut is None:
            return np.full_like(x, self.thickness_m)
        return self.undercut.thickness(x, self.thickness_m, self.length_m)

    def breakpoints(self) -> list[float]:
        """Sorted positions in (0, L) where the profile kinks."""
        return list(self._breakpoints)

    @cached_property
    def _breakpoints(self) -> tuple[float, ...]:
        pts = [] if self.undercut is None else self.undercut.breakpoints(self.length_m)
        eps = 1e-9 * self.length_m
        return tuple(sorted({round(p, 12) for p in pts if eps < p < self.length_m - eps}))

    def kinks(self) -> tuple[np.ndarray, np.ndarray]:
        """Return the breakpoints and the slope jump at each.

        ``inf`` marks one that always gets a mesh node (see :meth:`Undercut.kinks`).
        """
        pts = self.breakpoints()
        if not pts or self.undercut is None:  # no undercut, no breakpoints
            return np.zeros(0), np.zeros(0)
        at = np.asarray(pts)
        raw, jump = self.undercut.kinks(self.length_m, self.thickness_m)
        raw = np.asarray(raw, dtype=float)
        # each raw kink to the nearest breakpoint (those were rounded to 1e-12 m)
        idx = np.clip(np.searchsorted(at, raw), 1, max(len(at) - 1, 1))
        idx = np.where(np.abs(raw - at[idx - 1]) <= np.abs(raw - at[np.minimum(idx, len(at) - 1)]),
                       idx - 1, np.minimum(idx, len(at) - 1))
        ok = np.abs(raw - at[idx]) <= 1e-11
        out = np.zeros(len(at))
        np.maximum.at(out, idx[ok], np.asarray(jump, dtype=float)[ok])
        return at, out

    def thinnest_m(self, n: int = 4001) -> float:
        """Return the thinnest section of the bar."""
        x = np.unique(np.concatenate([np.linspace(0, self.length_m, n), self.breakpoints()]))
        return float(self.thickness_at(x).min())

    def mass_kg(self, density_kg_m3: float) -> float:
        """Return the bar's mass (Gauss quadrature between breakpoints)."""
        edges = np.array([0.0, *self.breakpoints(), self.length_m])
        xg, wg = np.polynomial.legendre.leggauss(12)
        a, b = edges[:-1, None], edges[1:, None]
        h = self.thickness_at(0.5 * (b - a) * xg[None, :] + 0.5 * (a + b))
        return float(density_kg_m3 * self.width_m * np.sum(0.5 * (b - a) * wg[None, :] * h))

    def scaled(self, factor: float) -> BarGeometry:
        """Return the bar with every length scaled by ``factor`` (thermal expansion)."""
        uc = self.undercut
        if isinstance(uc, StationUndercut):
            uc = StationUndercut(tuple(v * factor for v in uc.x_m),
                                 tuple(v * factor for v in uc.thickness_m), uc.smooth)
        elif isinstance(uc, ArchUndercut | FlatArchUndercut):
            kw: dict[str, Any] = {"depth_m": uc.depth_m * factor, "span_m": uc.span_m * factor}
            if uc.center_m is not None:
                kw["center_m"] = uc.center_m * factor
            if isinstance(uc, FlatArchUndercut):
                kw["flat_m"] = uc.flat_m * factor
            uc = replace(uc, **kw)
        return BarGeometry(self.length_m * factor, self.width_m * factor,
                           self.thickness_m * factor, uc, self.min_thickness_m * factor)

    def validate(self, sec: Section | None = None) -> BarGeometry:
        """Check the undercut against the blank; return self."""
        if self.undercut is not None:
            self.undercut.validate(self, sec)
        return self

    def to_table(self) -> dict:
        """Return the TOML keys that reproduce this geometry."""
        table: dict[str, Any] = {
            "length_m": float(self.length_m), "width_m": float(self.width_m),
            "thickness_m": float(self.thickness_m),
            "min_thickness_m": float(self.min_thickness_m)}
        if self.undercut is not None:
            table["undercut"] = self.undercut.to_table()
        return table


UNDERCUT_FAMILIES = ("parabolic", "power", "flat")


GEOMETRY_KEYS = ("length_m", "width_m", "thickness_m", "min_thickness_m", "undercut")


FAMILY_KEYS = ("family", "exponent", "ramp", "flat_fraction", "span_fraction",
               "depth_fraction", "stations", "smoothness")


@dataclass(frozen=True)
class UndercutFamily:
    """An undercut shape with free size parameters, for the tuner.

    The tuner varies the bar length, the arch depth (as a fraction of the metal
    available above the minimum thickness) and the arch span (as a fraction of
    the length); the shape parameters here stay fixed.

    Attributes
    ----------
    family : {"parabolic", "power", "flat", "free"}
        ``free`` is a symmetric station profile whose thicknesses are all solved,
        held smooth by a penalty on their second differences.
    exponent : float
        Arch exponent (2 for parabolic).
    ramp : {"straight", "round"}
        Ramps of the flat-bottomed arch.
    flat_fraction : float
        Flat length over span of the flat-bottomed arch.
    span_fraction, depth_fraction : float
        Starting (or, when fewer targets than unknowns, fixed) values.
    stations : int
        Stations over half the span of a free profile (centre included).
    smoothness : float
        Weight of the free profile's smoothness penalty (larger: smoother).
    """

    family: str = "power"
    exponent: float = 4.0
    ramp: str = "round"
    flat_fraction: float = 0.3
    span_fraction: float = 0.6
    depth_fraction: float = 0.6
    stations: int = 6
    smoothness: float = 1.0

    def build(self, length_m: float, depth_m: float, span_m: float) -> Undercut:
        """Return the parametric undercut of this family at the given sizes."""
        if self.family == "flat":
            return FlatArchUndercut(depth_m, span_m, self.flat_fraction * span_m, self.ramp)
        if self.family in ("parabolic", "power"):
            return ArchUndercut(depth_m, span_m, 2.0 if self.family == "parabolic"
                                else self.exponent)
        raise ValueError(f"family {self.family!r} has no single depth/span form")

    def to_table(self) -> dict:
        """TOML table of the family."""
        table: dict = {"family": self.family, "span_fraction": self.span_fraction,
                       "depth_fraction": self.depth_fraction}
        if self.family == "power":
            table["exponent"] = self.exponent
        if self.family == "flat":
            table.update(flat_fraction=self.flat_fraction, ramp=self.ramp)
        if self.family == "free":
            table.update(stations=self.stations, smoothness=self.smoothness)
        return table


@dataclass(frozen=True)
class GroundUndercut(Undercut):
    """An undercut with extra metal ground away in flat-bottomed bands.

    Models what a tuner does at the grinder: ``grinds`` holds (centre_m,
    width_m, depth_m) bands removed from the underside on top of ``base``.
    """

    base: Undercut | None
    grinds: tuple[tuple[float, float, float], ...]

    def thickness(self, x, blank_thickness_m, length_m):
        """Return the local thickness at positions ``x`` (m)."""
        x = np.asarray(x, dtype=float)
        h = (np.full_like(x, blank_thickness_m) if self.base is None
             else self.base.thickness(x, blank_thickness_m, length_m))
        for c, w, d in self.grinds:
            h = h - np.where(np.abs(x - c) < 0.5 * w, d, 0.0)
        return h

    def breakpoints(self, length_m):
        """Return the positions where the profile's formula changes."""
        pts = [] if self.base is None else list(self.base.breakpoints(length_m))
        for c, w, _ in self.grinds:
            pts += [c - 0.5 * w, c + 0.5 * w]
        return pts

    def kinks(self, length_m, blank_thickness_m):
        """Return the base's kinks and the band edges (steps: inf)."""
        pts, jump = (np.zeros(0), np.zeros(0)) if self.base is None else self.base.kinks(
            length_m, blank_thickness_m)
        edges = [e for c, w, _ in self.grinds for e in (c - 0.5 * w, c + 0.5 * w)]
        return (np.concatenate([pts, edges]),
                np.concatenate([jump, np.full(len(edges), math.inf)]))

    def describe(self):
        """Return a short human description."""
        base = "no undercut" if self.base is None else self.base.describe()
        return f"{base}, {len(self.grinds)} ground band(s)"

    def to_table(self):
        """Return the TOML table that reproduces this undercut."""
        raise ValueError("a ground profile is written as measured stations, not as a family")
