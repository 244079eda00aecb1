"""Bar commands: ``partials`` (and the tuning commands that build on it)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import format_table, handle_errors, print_json
from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes, solve_bar
from synth.physics.instrument import BarFile, Instrument, load_design
from synth.pitch import nearest_note

FileArg = Annotated[Path, typer.Argument(help="A single-bar file or an instrument preset (TOML).",
                                         show_default=False)]


def resolve_bar(design: Instrument | BarFile, note: str | None):
    """Return (label, geometry, material, reference_hz) for a bar file or a preset note."""
    if isinstance(design, Instrument):
        if note is None:
            raise ConfigError(
                "is an instrument preset: name the bar with --note (range "
                f"{design.notes[0]}..{design.notes[-1]})", source=design.source)
        name = design.check_note(note)
        return name, design.bar(name), design.material, design.reference_pitch_hz
    if note is not None:
        raise ConfigError("is a single-bar file; --note applies to instrument presets only",
                          source=design.source, key="--note")
    return design.note or design.name, design.geometry, design.material, (
        design.reference_pitch_hz)


def partial_rows(result: BarModes, reference_hz: float) -> list[dict]:
    """Per-mode records for the table and the JSON output, sorted by frequency."""
    f1 = result.fundamental_hz if result.vertical else None
    rows = []
    for m in result.by_frequency():
        name, off = nearest_note(m.frequency_hz, reference_hz)
        rows.append({
            "kind": m.kind,
            "order": m.order,
            "frequency_hz": m.frequency_hz,
            "ratio": m.frequency_hz / f1 if f1 else None,
            "note": name,
            "cents": off,
            "nodes_m": list(m.nodes_m),
            "modal_mass": m.modal_mass,
        })
    return rows


@app.command("partials")
@handle_errors
def partials_command(
    file: FileArg,
    note: Annotated[str | None, typer.Option(
        help="Note of the bar to solve when FILE is an instrument preset (e.g. F3, F#4, Bb5).")
    ] = None,
    vertical: Annotated[int, typer.Option(min=1, max=12,
                                          help="Vertical bending partials to compute.")] = 5,
    lateral: Annotated[int, typer.Option(min=0, max=6,
                                         help="Lateral (sideways) bending modes.")] = 2,
    torsional: Annotated[int, typer.Option(min=0, max=6, help="Torsional modes.")] = 2,
    reference_hz: Annotated[float | None, typer.Option(
        min=380.0, max=480.0,
        help="A4 for the nearest-note column (default: the file's reference_pitch_hz, "
             "else 440 Hz per ISO 16).")] = None,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Compute a bar's partials: frequency, ratio, nearest note, cents and nodes.

    The bar is solved by 1-D finite elements (Timoshenko bending in both planes,
    St Venant torsion) on a mesh refined until every listed frequency settles to
    0.01 %. Nodes are measured from the bar's left end; the two nodes of vertical
    mode 1 are where the cord holes go.
    """
    design = load_design(file)
    label, geometry, material, ref = resolve_bar(design, note)
    ref = reference_hz or ref
    result = solve_bar(geometry, material, n_vertical=vertical, n_lateral=lateral,
                       n_torsional=torsional)
    rows = partial_rows(result, ref)
    if json_out:
        print_json({
            "bar": label,
            "material": material.name,
            "reference_pitch_hz": ref,
            "mass_kg": result.mass_kg,
            "mesh_elements": result.n_elements,
            "mesh_change": result.change,
            "partials": rows,
        })
        return
    uc = geometry.undercut.describe() if geometry.undercut else "no undercut"
    typer.echo(
        f"{label}: {material.name}, {geometry.length_m * 1e3:.1f} x {geometry.width_m * 1e3:.1f}"
        f" x {geometry.thickness_m * 1e3:.2f} mm, {uc}, mass {result.mass_kg * 1e3:.1f} g"
    )
    table = [
        (r["kind"], r["order"], f"{r['frequency_hz']:.2f}", f"{r['ratio']:.4f}", r["note"],
         f"{r['cents']:+.1f}", ", ".join(f"{x * 1e3:.1f}" for x in r["nodes_m"]))
        for r in rows
    ]
    typer.echo(format_table(
        ["kind", "order", "freq Hz", "ratio", "note", "cents", "nodes mm from left end"],
        table, align="lrrrlrl"))
    degree = result.modes[0].mesh.degree
    typer.echo(f"A4 = {ref:g} Hz; mesh {result.n_elements} elements of degree {degree}, last "
               f"refinement moved frequencies by {result.change * 100:.4f} %")
