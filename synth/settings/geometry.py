"""Bar sizes, ``[undercut]`` tables and the undercut family.

The table formats and the dataclasses built here are in :mod:`synth.physics.geometry`.
"""

from __future__ import annotations

from synth.config import Section
from synth.physics.geometry import (
    DEFAULT_MIN_THICKNESS_M,
    FAMILY_KEYS,
    MAX_STATIONS,
    UNDERCUT_FAMILIES,
    ArchUndercut,
    BarGeometry,
    FlatArchUndercut,
    StationUndercut,
    Undercut,
    UndercutFamily,
)


def parse_undercut(sec: Section) -> Undercut:
    """Build an Undercut from an ``[undercut]`` table (formats: :mod:`synth.physics.geometry`)."""
    if "family" not in sec:
        sec.check_keys({"x_m", "thickness_m", "smooth"})
        x = sec.numbers("x_m", ge=0, min_len=2, max_len=MAX_STATIONS, increasing=True,
                        unit="m")
        h = sec.numbers("thickness_m", gt=0, length=len(x), max_len=MAX_STATIONS, unit="m")
        return StationUndercut(tuple(x), tuple(h), sec.boolean("smooth", False))
    family = sec.string("family", choices=UNDERCUT_FAMILIES)
    center = sec.number("center_m", None, limit="undercut.center_m")
    if family in ("parabolic", "power"):
        sec.check_keys({"family", "depth_m", "span_m", "center_m", "exponent"})
        exponent = 2.0 if family == "parabolic" else sec.number("exponent",
                                                                limit="undercut.exponent")
        if family == "parabolic" and "exponent" in sec:
            raise sec.error("exponent", "only with family = \"power\"; a parabolic arch has 2")
        return ArchUndercut(sec.number("depth_m", limit="undercut.depth_m"),
                            sec.number("span_m", limit="undercut.span_m"), exponent, center)
    sec.check_keys({"family", "depth_m", "span_m", "center_m", "flat_m", "ramp"})
    return FlatArchUndercut(sec.number("depth_m", limit="undercut.depth_m"),
                            sec.number("span_m", limit="undercut.span_m"),
                            sec.number("flat_m", limit="undercut.flat_m"),
                            sec.string("ramp", "round", choices=("straight", "round")), center)


def parse_geometry(sec: Section, defaults: dict | None = None) -> BarGeometry:
    """Build and validate a BarGeometry from a bar table (keys in GEOMETRY_KEYS).

    ``defaults`` supplies values for keys the table leaves out (an instrument's
    graduated blank, for instance).
    """
    defaults = defaults or {}

    def num(key):
        if key in sec or key not in defaults:
            return sec.number(key, limit=f"bar.{key}")
        return defaults[key]

    length = num("length_m")
    width = num("width_m")
    thick = num("thickness_m")
    min_t = sec.number("min_thickness_m", defaults.get("min_thickness_m",
                                                       DEFAULT_MIN_THICKNESS_M),
                       limit="bar.min_thickness_m")
    if min_t >= thick:
        raise sec.error("min_thickness_m", f"must be below the blank thickness {thick:g} m")
    uc_sec = sec.section("undercut", None)
    uc: Undercut | None
    if uc_sec is not None:
        uc = parse_undercut(uc_sec)
    else:
        uc = defaults.get("undercut")
    bar = BarGeometry(length, width, thick, uc, min_t)
    return bar.validate(uc_sec)


def parse_family(sec: Section) -> UndercutFamily:
    """Read an instrument's ``[undercut]`` family table."""
    sec.check_keys(FAMILY_KEYS)
    family = sec.string("family", "power", choices=(*UNDERCUT_FAMILIES, "free"))
    if family != "power" and "exponent" in sec:
        raise sec.error("exponent", 'only with family = "power"')
    return UndercutFamily(
        family=family,
        exponent=sec.number("exponent", 4.0, limit="undercut.exponent"),
        ramp=sec.string("ramp", "round", choices=("straight", "round")),
        flat_fraction=sec.number("flat_fraction", 0.3, limit="family.flat_fraction"),
        span_fraction=sec.number("span_fraction", 0.6, limit="family.span_fraction"),
        depth_fraction=sec.number("depth_fraction", 0.6, limit="family.depth_fraction"),
        stations=sec.integer("stations", 6, ge=3, le=24),
        smoothness=sec.number("smoothness", 1.0, limit="family.smoothness"),
    )
