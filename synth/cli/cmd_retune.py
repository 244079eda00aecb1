"""``retune``: grinding and end-trim plan that brings a cut bar's partials 1-3 on target.

The method is described in :mod:`synth.physics.retune`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import format_table, handle_errors, missed, print_json, warn
from synth.errors import ConfigError


def _parse_partials(text: str) -> list[float]:
    out = []
    for part in text.split(","):
        try:
            v = float(part)
        except ValueError:
            raise ConfigError(f"= {text!r}: {part.strip()!r} is not a number; give the "
                              "measured partials in Hz, e.g. 441.3,1763.8,4446",
                              source="--partials-hz") from None
        if not 20.0 <= v <= 30000.0:
            raise ConfigError(f"= {text!r}: {v:g} Hz is outside 20 to 30000 Hz",
                              source="--partials-hz")
        out.append(v)
    if not 1 <= len(out) <= 3:
        raise ConfigError(f"= {text!r}: give 1 to 3 partials (fundamental first)",
                          source="--partials-hz")
    if any(b <= a for a, b in zip(out, out[1:], strict=False)):
        raise ConfigError(f"= {text!r}: partials must rise (fundamental first)",
                          source="--partials-hz")
    return out


@app.command("retune")
@handle_errors
def retune_command(
    preset: Annotated[Path, typer.Argument(
        help="Instrument preset the bar was cut from (its design gives the sensitivities "
             "and the targets).", show_default=False)],
    note: Annotated[str, typer.Option(help="The bar's note, e.g. A4.", show_default=False)],
    recording: Annotated[Path | None, typer.Option(
        help="Recording of the cut bar struck (motor stopped); partials 1-3 are taken "
             "from it.", show_default=False)] = None,
    partials_hz: Annotated[str | None, typer.Option(
        help="Measured partials typed in instead of a recording, Hz, comma-separated, "
             "fundamental first (1 to 3).", show_default=False)] = None,
    bands: Annotated[int, typer.Option(
        min=2, max=40, help="Grinding stations from the centre out to the ends (each off "
                            "the centre is ground on both sides).")] = 8,
    band_mm: Annotated[float, typer.Option(
        min=2.0, max=60.0, metavar="mm", help="Width of a ground band along the bar, mm.")
    ] = 10.0,
    max_trim_mm: Annotated[float | None, typer.Option(
        min=0.0, max=100.0, metavar="mm",
        help="Most length to trim in total, half from each end (default 5 % of the "
             "bar).")] = None,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Retune plan: metal to grind off at which stations, and end trim, for partials 1-3.

    A bounded least-squares step on the grind-map sensitivities of the preset's
    bar, with end trim as one more unknown: depths >= 0 and never below the
    thinnest metal allowed; the predicted misses come from the model re-solved
    with the plan. Grind, record again, and run it again with the new recording.
    When the prediction misses a tolerance (1 cent fundamental, 3 cents above)
    the command says so first and exits with code 3. Wear eye, face and hearing
    protection at the grinder; keep aluminium dust apart from steel grinding.
    """
    from synth.reports.cutlist import SAFETY
    from synth.reports.retune import check_retune_source, missed_tolerance, retune_step

    check_retune_source(recording, partials_hz)
    typed = _parse_partials(partials_hz) if partials_hz is not None else None
    step = retune_step(preset, note, recording=recording, typed=typed, bands=bands,
                       band_mm=band_mm, max_trim_mm=max_trim_mm)
    miss = missed_tolerance(step)
    raise_later = missed(miss) if miss is not None else None
    for w in step.warnings:
        warn(w)
    if json_out:
        print_json({"note": step.note, **step.plan.to_dict(), "safety": SAFETY})
    else:
        _print_step(step, preset, band_mm)
    if raise_later is not None:
        raise raise_later


def _print_step(step, preset: Path, band_mm: float) -> None:
    from synth.reports.cutlist import SAFETY

    plan, note, geometry = step.plan, step.note, step.geometry
    rows = [(str(i + 1), f"{plan.measured_hz[i]:.2f}", f"{plan.target_hz[i]:.2f}",
             f"{plan.miss_cents[i]:+.1f}", f"{plan.predicted_cents[i]:+.2f}",
             f"{plan.tolerances_cents[i]:g}")
            for i in range(len(step.targets))]
    typer.echo(format_table(["partial", "measured Hz", "target Hz", "off cents",
                             "after step cents", "tolerance"], rows, align="rrrrrr",
                            title=f"{note}: retune step ({preset.name}, A4 = "
                                  f"{step.instrument.reference_pitch_hz:g} Hz)"))
    typer.echo("")
    brows = []
    for o, d in zip(plan.offsets_m, plan.depths_m, strict=True):
        if d < 1e-6:  # below a micrometre: nothing to grind
            continue
        where = "centre" if o == 0 else f"{o * 1e3:.0f} mm each side of centre"
        h = float(geometry.thickness_at(0.5 * geometry.length_m + o))
        brows.append((where, f"{d * 1e3:.3f}", f"{h * 1e3:.2f}", f"{(h - d) * 1e3:.2f}"))
    if brows:
        typer.echo(format_table(["grind band", "depth mm", "thickness mm (design)",
                                 "after mm"], brows, align="lrrr",
                                title=f"grind from the underside, bands {band_mm:g} mm "
                                      "wide along the bar"))
    else:
        typer.echo("no grinding")
    typer.echo(f"trim {plan.trim_m * 1e3 / 2:.2f} mm from each end "
               f"({plan.trim_m * 1e3:.2f} mm in total)" if plan.trim_m >= 1e-6 else
               "no end trim")
    for lim in plan.limited:
        typer.echo(f"limit: {lim}")
    typer.echo("Take a little less than planned, record again and rerun: the plan is a "
               "first-order step on the design's sensitivities.")
    typer.echo(SAFETY)
