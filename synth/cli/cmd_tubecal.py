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
    from synth.errors import ConfigError
    from synth.reports.measure import (
        calibrate_tube,
        measure_file,
        tube_model_hz,
        tube_resonance,
    )
    from synth.settings.instrument import load_instrument

    if (tube_hz is None) == (tube_recording is None):
        raise ConfigError("give either --tube-hz or --tube-recording (one of them)",
                          source="--tube-hz")
    target = None
    if out is not None:
        from synth.settings.damping import calibration_target

        target = calibration_target(out, ("tubes",), force=force)
        plan_outputs([(out, "tube calibration")], force=force or target is not None)
    instrument = load_instrument(preset)
    note = instrument.check_note(note)
    ref = instrument.reference_pitch_hz
    tube_q = None
    extra = []
    if tube_recording is not None:
        m_t = measure_file(tube_recording, reference_hz=ref)
        extra = list(m_t.warnings)
        tube_hz, tube_q = tube_resonance(m_t, tube_model_hz(instrument, note))
    if tube_hz is None:  # not reached: the check above asks for one of the two
        raise ConfigError("give either --tube-hz or --tube-recording", source="--tube-hz")
    m_bare = measure_file(bare, note=note, reference_hz=ref)
    m_tube = measure_file(with_tube, note=note, reference_hz=ref)
    cal = calibrate_tube(instrument, note, tube_hz=tube_hz, bare=m_bare, with_tube=m_tube,
                         tube_q=tube_q)
    if out is not None:
        from synth.io import write_bytes

        text = cal.to_toml(preset.name, (str(tube_recording) if tube_recording else
                                         f"tube {tube_hz:g} Hz", str(bare), str(with_tube)),
                           target)
        write_bytes(out, text.encode("utf-8"), force=force or target is not None)
    for w in (*extra, *m_bare.warnings, *m_tube.warnings, *cal.warnings):
        warn(w)
    if json_out:
        print_json({**cal.to_dict(), "file": str(out) if out else None})
        return
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
