"""``[motor]`` -> :class:`~synth.physics.motor.MotorSpec` and the per-bar disc phase step."""

from __future__ import annotations

from synth.config import Section
from synth.errors import ConfigError
from synth.physics.motor import MotorSpec


def parse_motor(sec: Section | None) -> tuple[MotorSpec, float]:
    """Read a preset's ``[motor]`` table: the shaft and the per-bar disc phase step."""
    if sec is None:
        return MotorSpec(), 0.0
    sec.check_keys({"rate_rev_per_s", "block_fraction", "resting", "spin_up_s",
                    "spin_up_law", "phase_step_deg"})
    resting = sec.data.get("resting", "open")
    if not isinstance(resting, str):
        resting = sec.number("resting", limit="motor.angle_deg")
    elif resting not in ("open", "closed"):
        raise sec.error("resting", 'must be "open", "closed" or an angle in degrees')
    try:
        spec = MotorSpec(
            rate_rev_per_s=sec.number("rate_rev_per_s", 0.0, limit="motor.rate_rev_per_s"),
            block_fraction=sec.number("block_fraction", 0.85, limit="motor.block_fraction"),
            resting=resting,
            spin_up_s=sec.number("spin_up_s", 0.0, limit="motor.spin_up_s"),
            spin_up_law=sec.string("spin_up_law", "exponential",
                                   choices=("exponential", "linear")),
        )
    except ConfigError as exc:
        raise ConfigError(exc.detail, source=sec.source, key=exc.key) from None
    return spec, sec.number("phase_step_deg", 0.0, limit="motor.angle_deg")
