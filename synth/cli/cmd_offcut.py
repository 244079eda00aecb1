"""``offcut``: Young's modulus, shear modulus and Poisson's ratio of a batch from a tapped offcut.

The method, its formulas and the material file are described in
:mod:`synth.reports.offcut`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import format_table, handle_errors, plan_outputs, print_json, warn


@app.command("offcut")
@handle_errors
def offcut_command(
    recording: Annotated[Path, typer.Argument(
        help="Recording of the tapped offcut, hung at its flexural nodes (0.224 L from "
             "each end): a tap at a corner rings the first flexural and torsional modes.",
        show_default=False)],
    length_mm: Annotated[float, typer.Option(
        min=20.0, max=3000.0, metavar="mm", help="Offcut length, mm.", show_default=False)],
    width_mm: Annotated[float, typer.Option(
        min=2.0, max=500.0, metavar="mm", help="Offcut width (the wider side), mm.",
        show_default=False)],
    thickness_mm: Annotated[float, typer.Option(
        min=0.5, max=200.0, metavar="mm", help="Offcut thickness, mm.", show_default=False)],
    mass_g: Annotated[float, typer.Option(
        min=0.1, max=100000.0, metavar="g", help="Offcut mass, g.", show_default=False)],
    torsion_recording: Annotated[Path | None, typer.Option(
        help="A second recording, tapped at a corner, when the first does not ring the "
             "torsional mode.", show_default=False)] = None,
    length_tol_mm: Annotated[float, typer.Option(
        min=0.0, max=10.0, metavar="mm", help="Tolerance of the length measurement, mm.")
    ] = 0.5,
    caliper_tol_mm: Annotated[float, typer.Option(
        min=0.0, max=1.0, metavar="mm",
        help="Tolerance of the width and thickness (caliper), mm.")] = 0.02,
    mass_tol_g: Annotated[float, typer.Option(
        min=0.0, max=100.0, metavar="g", help="Tolerance of the scale, g.")] = 0.1,
    alloy: Annotated[str, typer.Option(
        help="Base alloy preset: its handbook values say where to look for the modes, and "
             "its other properties go into --out.")] = "aluminium-6061-t6",
    out: Annotated[Path | None, typer.Option(
        help="Material file to write for this batch (TOML), usable as an instrument's "
             "alloy.", show_default=False)] = None,
    force: Annotated[bool, typer.Option(help="Overwrite --out if it exists.")] = False,
    channel: Annotated[int | None, typer.Option(
        min=1, max=64, help="Analyse this channel only (1 = first); default: the mean of all.")
    ] = None,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Alloy stiffness from a tapped offcut: E, G and Poisson's ratio (impulse excitation).

    Finds the offcut's first flexural and torsional frequencies in the recording,
    applies the ASTM E1876 formulas (Pickett's T1 and the torsional factor R),
    propagates the frequency resolution and the size and mass tolerances into a
    worst-case uncertainty, checks the result against the 1-D bar model, and
    with --out writes a material file for the batch.
    """
    from synth.reports.offcut import OffcutInputs, offcut_from_files

    if out is not None:
        plan_outputs([(out, "material file")], force=force)
    inputs = OffcutInputs(
        length_m=length_mm * 1e-3, width_m=width_mm * 1e-3, thickness_m=thickness_mm * 1e-3,
        mass_kg=mass_g * 1e-3, length_tol_m=length_tol_mm * 1e-3,
        width_tol_m=caliper_tol_mm * 1e-3, thickness_tol_m=caliper_tol_mm * 1e-3,
        mass_tol_kg=mass_tol_g * 1e-3)
    result, warnings = offcut_from_files(recording, torsion_recording, inputs, alloy=alloy,
                                         channel=channel, out=out, force=force)
    for w in warnings:
        warn(w)
    if json_out:
        print_json({**result.to_dict(), "file": str(out) if out else None})
        return
    _print_offcut(result, f"{length_mm:g} x {width_mm:g} x {thickness_mm:g} mm, {mass_g:g} g",
                  out)


def _print_offcut(result, size: str, out: Path | None) -> None:
    typer.echo(f"offcut {size} "
               f"(density {result.density_kg_m3:.0f} kg/m3 +- "
               f"{100 * result.density_rel_tol:.2f} %); base alloy {result.base_alloy}")
    rows = [
        ("flexural 1", f"{result.predicted_flexural_hz:.2f}", f"{result.flexural_hz:.2f}",
         f"{result.flexural_tol_hz:.2f}", f"{result.model_flexural_hz:.2f}",
         f"{100 * result.model_flexural_error:+.3f}"),
        ("torsional 1", f"{result.predicted_torsional_hz:.2f}", f"{result.torsional_hz:.2f}",
         f"{result.torsional_tol_hz:.2f}", f"{result.model_torsional_hz:.2f}",
         f"{100 * result.model_torsional_error:+.3f}"),
    ]
    typer.echo(format_table(["mode", "handbook Hz", "measured Hz", "+- Hz", "1-D model Hz",
                             "model %"], rows, align="lrrrrr"))
    c = result.contributions
    typer.echo("")
    typer.echo(format_table(
        ["", "value", "+- (worst case)", "f", "L", "b", "t", "m"],
        [("E", f"{result.youngs_modulus_pa / 1e9:.3f} GPa", f"{100 * result.e_rel_tol:.2f} %",
          *(f"{100 * c['E'][k]:.2f}" for k in ("flexural_hz", "length_m", "width_m",
                                                 "thickness_m", "mass_kg"))),
         ("G", f"{result.shear_modulus_pa / 1e9:.3f} GPa", f"{100 * result.g_rel_tol:.2f} %",
          *(f"{100 * c['G'][k]:.2f}" for k in ("torsional_hz", "length_m", "width_m",
                                                 "thickness_m", "mass_kg"))),
         ("nu", f"{result.poisson_ratio:.4f}", f"{result.nu_tol:.4f}", "", "", "", "", "")],
        align="lrrrrrrr", title="impulse excitation (ASTM E1876 formulas); terms of the "
                                "uncertainty in % (nu: absolute)"))
    typer.echo("1-D model: our uniform Timoshenko bar with the fitted E, nu and density; "
               "model % = model over measured frequency, minus 1")
    if out is not None:
        typer.echo(f"wrote {out}; use it as an instrument's alloy (material = \"{out}\")")
