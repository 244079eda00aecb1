"""``tubecal``: a tube's gap correction and coupling strength from measurements of one note.

The method is described in :func:`synth.reports.measure.calibrate_tube`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import format_table, handle_errors, plan_outputs, print_json, warn


@app.command("tubecal")
@handle_errors
def tubecal_command(
    preset: Annotated[Path, typer.Argument(
        help="Instrument preset whose tubes were cut (its [tubes] table and lengths).",
        show_default=False)],
    note: Annotated[str, typer.Option(help="The note measured, e.g. A4.", show_default=False)],
    bare: Annotated[Path, typer.Option(
        help="Recording of the bar struck with no tube under it (motor stopped).",
        show_default=False)],
    with_tube: Annotated[Path, typer.Option(
        help="Recording of the bar struck over its tube (motor stopped).",
        show_default=False)],
    tube_hz: Annotated[float | None, typer.Option(
        min=20.0, max=5000.0, metavar="Hz",
        help="The tube's first resonance measured with its bar in place (bar damped, tube "
             "tapped or swept), Hz; or give --tube-recording.", show_default=False)] = None,
    tube_recording: Annotated[Path | None, typer.Option(
        help="Recording of the tube excited with its bar in place and damped (tap on the "
             "tube, clap over the mouth): its resonance and Q are measured.",
        show_default=False)] = None,
    out: Annotated[Path | None, typer.Option(
        help="Write the [tubes] calibration keys to this TOML file (to copy into the "
             "preset, or to name in its [damping] calibration_file); an existing "
             "calibration file gets the [tubes] table added.", show_default=False)] = None,
    force: Annotated[bool, typer.Option(
        help="Replace the [tubes] table of --out if it holds one (its other tables, e.g. "
             "[damping] and [stiffness] from measure --calibrate, are kept either way).")
    ] = False,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Tube calibration: gap correction and coupling strength of one note's tube.

    The tube's pitch with the bar in place fixes the bar-over-mouth correction
    (gap_calibration); the bar's fundamental T60 without and with its tube then
    fixes the coupling strength (coupling_calibration) that sets every tube T60
    and gain. Copy both into the preset's [tubes] table.
    """
    from synth.reports.measure import check_tube_source, tube_calibration

    check_tube_source(tube_hz, tube_recording)
    target = None
    if out is not None:
        from synth.settings.damping import calibration_target

        target = calibration_target(out, ("tubes",), force=force)
        plan_outputs([(out, "tube calibration")], force=force or target is not None)
    cal, note, warnings = tube_calibration(preset, note, bare=bare, with_tube=with_tube,
                                           tube_hz=tube_hz, tube_recording=tube_recording,
                                           out=out, target=target, force=force)
    for w in warnings:
        warn(w)
    if json_out:
        print_json({**cal.to_dict(), "file": str(out) if out else None})
        return
    _print_calibration(cal, note, preset, out)


def _print_calibration(cal, note: str, preset: Path, out: Path | None) -> None:
    from synth.pitch import cents

    rows = [
        ("tube pitch, bar in place", f"{cal.tube_model_hz:.2f} Hz",
         f"{cal.tube_measured_hz:.2f} Hz",
         f"{float(cents(cal.tube_measured_hz, cal.tube_model_hz)):+.1f} cents",
         f"gap_calibration = {cal.gap_calibration:.4g}"),
        ("tube Q (walls, mouth)", f"{cal.tube_q:.1f}",
         "-" if cal.tube_measured_q is None else f"{cal.tube_measured_q:.1f}", "", ""),
        ("bar T60 with tube", f"{cal.model_t60_with_tube_s:.2f} s",
         f"{cal.bar_t60_with_tube_s:.2f} s", f"bare {cal.bar_t60_bare_s:.2f} s",
         f"coupling_calibration = {cal.coupling_calibration:.4g}"),
    ]
    typer.echo(format_table(["", "model (uncalibrated)", "measured", "", "fitted"], rows,
                            align="lrrrl", title=f"{note}: tube calibration ({preset.name})"))
    typer.echo(f"copy into the preset's [tubes] table: gap_calibration = "
               f"{cal.gap_calibration:.4g}, coupling_calibration = "
               f"{cal.coupling_calibration:.4g}")
    if out is not None:
        typer.echo(f"wrote {out}")
