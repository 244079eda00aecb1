"""``[tubes]`` -> :class:`~synth.physics.tube.TubeSettings`; a bar's ``tube`` override."""

from __future__ import annotations

from synth.config import Section
from synth.physics.tube import TubeSettings


def parse_tubes(sec: Section | None) -> TubeSettings | None:
    """Read a preset's ``[tubes]`` table (None without one)."""
    if sec is None:
        return None
    sec.check_keys({"inner_radius_m", "gap_m", "offset_cents", "flanged",
                    "coupling_calibration", "gap_calibration", "enabled", "ka_correction"})
    raw = sec.data.get("inner_radius_m")
    if isinstance(raw, list):
        r_low, r_high = sec.numbers("inner_radius_m", limit="tubes.inner_radius_m", length=2)
        radii = (r_low, r_high)
    else:
        r = sec.number("inner_radius_m", limit="tubes.inner_radius_m")
        radii = (r, r)
    return TubeSettings(
        inner_radius_m=radii,
        gap_m=sec.number("gap_m", limit="tubes.gap_m"),
        offset_cents=sec.number("offset_cents", 0.0, limit="tubes.offset_cents"),
        flanged=sec.boolean("flanged", False),
        coupling_calibration=sec.number("coupling_calibration", 1.0, limit="tubes.calibration"),
        gap_calibration=sec.number("gap_calibration", 1.0, limit="tubes.calibration"),
        enabled=sec.boolean("enabled", True),
        ka_correction=sec.boolean("ka_correction", True),
        given=frozenset(sec.data),
    )


def parse_tube_override(sec: Section) -> float:
    """Read a bar's own ``tube = { length_m = ... }`` table: the cut length, m."""
    sec.check_keys({"length_m"})
    return sec.number("length_m", limit="tubes.length_m")
