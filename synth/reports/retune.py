"""The retune step of one cut bar: measured partials 1-3 and the plan that brings them on target.

The method is described in :mod:`synth.physics.retune`; this module picks the
measured partials (typed, or found in a recording) and runs the plan.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Final

from synth.errors import ConfigError

if TYPE_CHECKING:
    from synth.physics.geometry import BarGeometry
    from synth.physics.instrument import Instrument
    from synth.physics.retune import RetunePlan

MATCH: Final = 0.06
"""A measured partial is taken as partial n when it lies within this fraction of
its target (a cut bar is off by tens of cents, 6 % is a semitone)."""


@dataclass(frozen=True)
class RetuneStep:
    """A retune plan with what it was made from and what to say about it."""

    note: str
    instrument: Instrument
    geometry: BarGeometry
    targets: list[float]
    plan: RetunePlan
    warnings: list[str]


def check_retune_source(recording: Path | None, partials_hz: str | None) -> None:
    """Refuse unless exactly one of a recording and typed partials is given."""
    if (recording is None) == (partials_hz is None):
        raise ConfigError("give either --recording or --partials-hz (one of them)",
                          source="--recording")


def _recorded_partials(recording, note: str, targets: list[float], reference_hz: float,
                       warnings: list[str]) -> list[float]:
    from synth.reports.measure import measure_file

    m = measure_file(recording, note=note, reference_hz=reference_hz)
    warnings += list(m.warnings)
    measured = []
    for k, f_t in enumerate(targets):
        near = [p for p in m.partials if abs(p.frequency_hz / f_t - 1) <= MATCH]
        if not near:
            if k == 0:
                raise ConfigError(
                    f"no partial within {100 * MATCH:g} % of {note}'s fundamental "
                    f"{f_t:.1f} Hz in {recording} (found "
                    + ", ".join(f"{p.frequency_hz:.1f}" for p in m.partials)
                    + " Hz): wrong note, preset or file", source="--recording")
            warnings.append(f"partial {k + 1} ({f_t:.1f} Hz target) not found in the "
                            f"recording; planning partials 1-{k} only")
            break
        measured.append(min(near, key=lambda p: abs(p.frequency_hz / f_t - 1))
                        .frequency_hz)
    return measured


def retune_step(preset: Path, note: str, *, recording: Path | None,
                typed: list[float] | None, bands: int, band_mm: float,
                max_trim_mm: float | None) -> RetuneStep:
    """Plan the grinding and end trim that bring the bar's measured partials on target."""
    from synth.physics.retune import retune_plan
    from synth.physics.tuning import instrument_spec
    from synth.settings.instrument import load_instrument

    instrument = load_instrument(preset)
    note = instrument.check_note(note)
    spec = instrument_spec(instrument, note)
    targets = list(spec.targets_hz[:3])
    geometry = instrument.bar(note)
    material = spec.material
    warnings: list[str] = []
    if typed is None:
        measured = _recorded_partials(recording, note, targets,
                                      instrument.reference_pitch_hz, warnings)
    else:
        measured = typed
    targets = targets[:len(measured)]
    plan = retune_plan(geometry, material, measured, targets, n_bands=bands,
                       band_m=band_mm * 1e-3,
                       max_trim_m=None if max_trim_mm is None else max_trim_mm * 1e-3)
    return RetuneStep(note, instrument, geometry, targets, plan, warnings)


def missed_tolerance(step: RetuneStep) -> str | None:
    """Say which partial the plan leaves outside its tolerance (None: all within)."""
    plan, targets = step.plan, step.targets
    if plan.on_target:
        return None
    worst = max(range(len(targets)),
                key=lambda i: abs(plan.predicted_cents[i]) / plan.tolerances_cents[i])
    return (f"the plan does not reach the tolerance: partial {worst + 1} is predicted "
            f"{plan.predicted_cents[worst]:+.1f} cents off after the step"
            + (" (" + "; ".join(plan.limited) + ")" if plan.limited else "")
            + "; grind it, record again and plan the next step")
