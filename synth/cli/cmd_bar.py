"""Bar commands: ``partials`` (and the tuning commands that build on it)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any

import numpy as np
import typer

from synth.cli import app
from synth.cli.cmd_solid import (
    AccuracyOption,
    CacheOption,
    LevelOption,
    SchedulerOption,
    build_correction_table,
    check_level_accuracy,
    corrected_rows,
    report_failed_jobs,
    solid_record,
    solid_summary,
    tune_against_solid,
)
from synth.cli.common import (
    EXIT_MISSED,
    commit_outputs,
    default_output,
    file_label,
    format_table,
    handle_errors,
    missed,
    plan_outputs,
    print_json,
    say_correction,
    say_stiffness,
    stiffness_in_use,
    stiffness_record,
)
from synth.cli.options import workers_option
from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes, solve_bar
from synth.physics.instrument import BarFile, Instrument
from synth.physics.solid_correction import (
    corrected_frequencies,
    correction_of,
    correction_record,
    model_correction,
)
from synth.pitch import nearest_note
from synth.settings.instrument import load_design
from synth.voicing import design_budget

FileArg = Annotated[Path, typer.Argument(help="A single-bar file or an instrument preset (TOML).",
                                         show_default=False)]


def resolve_bar(design: Instrument | BarFile, note: str | None):
    """Return (label, geometry, material, reference_hz) for a bar file or a preset note.

    The material is taken at the file's ``temperature_c`` (default 20 C).
    """
    if isinstance(design, Instrument):
        if note is None:
            raise ConfigError(
                "is an instrument preset: name the bar with --note (range "
                f"{design.notes[0]}..{design.notes[-1]})", source=design.source)
        name = design.check_note(note)
        return (name, design.bar(name), design.material.at_temperature(design.temperature_c),
                design.reference_pitch_hz)
    if note is not None:
        raise ConfigError("is a single-bar file; --note applies to instrument presets only",
                          source=design.source, key="--note")
    return (design.note or design.name, design.geometry,
            design.material.at_temperature(design.temperature_c), design.reference_pitch_hz)


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
        min=380.0, max=480.0, metavar="Hz",
        help="A4 for the nearest-note column (default: the file's reference_pitch_hz, "
             "else 440 Hz per ISO 16).")] = None,
    losses: Annotated[bool, typer.Option(
        help="Also show each mode's Q by loss term (alloy, thermoelastic, radiation, cords, "
             "air, tube) and its T60.")] = True,
    plot: Annotated[bool, typer.Option(
        help="Also draw the mode shapes with their nodes to a PNG (default "
             "renders/<file>/partials-<bar>.png).")] = False,
    out: Annotated[Path | None, typer.Option(
        help="PNG path for the mode-shape plot (implies --plot).")] = None,
    force: Annotated[bool, typer.Option(help="Overwrite the PNG if it exists.")] = False,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Compute a bar's partials: frequency, ratio, nearest note, cents and nodes.

    The bar is solved by 1-D finite elements (Timoshenko bending in both planes,
    the vertical one coupled to stretching where the undercut moves the section's
    centre; torsion with the section's warping), refined until the vertical
    partials settle to 0.01 %; the lateral and torsional modes, smoother, are solved
    on that mesh. Nodes are measured from the bar's left end; the two nodes of
    vertical mode 1 are where the cord holes go. A preset's frequencies are
    multiplied by its [solid_correction] table and by the stiffness calibration of
    the calibration file it names (each said in a line of its own).
    """
    from synth import io

    design = load_design(file)
    label, geometry, material, ref = resolve_bar(design, note)
    ref = reference_hz or ref
    png = None
    if plot or out is not None:
        png = out or default_output(file, f"partials-{file_label(label)}.png")
        plan_outputs([(png, "plot")], force=force)
    result = solve_bar(geometry, material, n_vertical=vertical, n_lateral=lateral,
                       n_torsional=torsional)
    if png is not None:
        from synth.reports.plots import mode_shapes_png

        io.write_bytes(png, mode_shapes_png(result, title=f"{label}: mode shapes",
                                            reference_hz=ref), force=force)
        commit_outputs()
    rows = partial_rows(result, ref)
    corrected = corrected_rows(rows, design, label, ref)
    if json_out:
        _print_partials_json(design, label, material, ref, result, rows, corrected, png,
                             losses=losses)
        return
    _print_partials(design, label, geometry, material, ref, result, rows, corrected, png,
                    losses=losses)


def _print_partials_json(design, label, material, ref, result, rows, corrected, png, *,
                         losses: bool) -> None:
    if losses:
        budget, _ = design_budget(design, label, result)
        by_mode = {(b.kind, b.order): b for b in budget}
        for r in rows:
            b = by_mode[(r["kind"], r["order"])]
            r.update({"q": b.q, "t60_s": b.t60_s, "loss_factors": dict(b.terms)})
    print_json({
        "bar": label,
        "material": material.name,
        "reference_pitch_hz": ref,
        "mass_kg": result.mass_kg,
        "mesh_elements": result.n_elements,
        "mesh_change": result.change,
        "partials": rows,
        "solid_correction": correction_record(corrected),
        "stiffness_calibration": stiffness_record(stiffness_in_use(design)),
        **({"plot": str(png)} if png is not None else {}),
    })


def _print_partials(design, label, geometry, material, ref, result, rows, corrected, png, *,
                    losses: bool) -> None:
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
    change = result.change * 100
    moved = "by less than 0.0001 %" if change < 1e-4 else f"by {change:.4f} %"
    typer.echo(f"A4 = {ref:g} Hz; mesh {result.n_elements} elements of degree {degree}, last "
               f"refinement moved the vertical partials {moved}")
    say_correction(correction_record(corrected))
    say_stiffness(stiffness_in_use(design))
    if losses:
        budget, note_txt = design_budget(design, label, result)
        typer.echo("")
        typer.echo(format_table(
            ["kind", "order", "Q", "T60 s", *[f"Q {t}" for t in TERMS_SHOWN]],
            [(b.kind, b.order, f"{b.q:.0f}", f"{b.t60_s:.2f}",
              *[_q_cell(b, t) for t in TERMS_SHOWN]) for b in budget],
            title="losses by term (Q of each term alone; 1/Q adds over terms)"))
        typer.echo(note_txt)
    if png is not None:
        typer.echo(f"plot: {png}")


# --------------------------------------------------------------------------------------
# tune
# --------------------------------------------------------------------------------------


MAX_RATIO = 50.0
"""Highest target ratio --ratios takes (partial 5 of a plain bar sits near 33)."""


def _changes_table(changes) -> str:
    """Per bar: calibrated minus uncalibrated length, undercut depth and thinnest section."""
    rows = [(c.note, f"{c.before.geometry.length_m * 1e3:.1f}",
             f"{c.after.geometry.length_m * 1e3:.1f}", f"{c.length_mm:+.2f}",
             "-" if np.isnan(c.depth_mm) else f"{c.depth_mm:+.3f}", f"{c.thinnest_mm:+.3f}")
            for c in changes]
    return format_table(["note", "length mm uncal.", "length mm cal.", "length change mm",
                         "depth change mm", "thinnest change mm"], rows, align="lrrrrr",
                        title="what the stiffness calibration changes (calibrated minus "
                              "uncalibrated design)")


def _parse_ratios(text: str | None) -> tuple[float, ...] | None:
    if text is None:
        return None
    from synth.cli.common import parse_field

    fields = text.replace(",", ":").split(":")
    vals = tuple(parse_field(f, option="--ratios", value=text, lo=1.0, hi=MAX_RATIO,
                             example="1:4:10") for f in fields)
    if abs(vals[0] - 1) > 1e-12 or any(b <= a for a, b in zip(vals, vals[1:], strict=False)):
        raise ConfigError(f"= {text!r}: must start at 1 and increase, e.g. 1:4:10",
                          source="--ratios")
    if len(vals) > 5:
        raise ConfigError(f"= {text!r}: at most 5 partials", source="--ratios")
    return vals


@app.command("tune")
@handle_errors
def tune_command(
    preset: Annotated[Path, typer.Argument(help="Instrument preset (TOML) with [blank] and "
                                                "[undercut] tables.", show_default=False)],
    out: Annotated[Path | None, typer.Option(
        help="Write the tuned instrument (the preset with every solved bar in [bars]) here.")
    ] = None,
    note: Annotated[list[str] | None, typer.Option(
        help="Tune only this note (repeat for several). Default: the whole range.")] = None,
    ratios: Annotated[str | None, typer.Option(
        help="Target ratios of vertical partials 1..n, e.g. 1:4:10, 1:3:6 or 1:4:10.08 "
             "(default: the preset's target_ratios).")] = None,
    family: Annotated[str | None, typer.Option(
        help="Undercut family to solve, overriding the preset's [undercut]: parabolic, power, "
             "flat or free.")] = None,
    venue_c: Annotated[float | None, typer.Option(
        min=-30, max=60, metavar="C", help="Temperature where the instrument must be in tune, C "
                              "(default: the preset's temperature_c).")] = None,
    shop_c: Annotated[float | None, typer.Option(
        min=-30, max=60, metavar="C",
        help="Shop temperature while tuning, C: reports what each bar must "
             "read there to be in tune at the venue temperature.")] = None,
    force: Annotated[bool, typer.Option(help="Overwrite --out if it exists.")] = False,
    keep_best: Annotated[bool, typer.Option(
        "--keep-best", help="When a bar misses its targets, still write --out with the best "
                            "design found (the exit code is 3 either way).")] = False,
    solid: Annotated[bool, typer.Option(
        "--solid", help="Correct each bar against the 3-D solid model: solve the tuned bar "
                        "in 3-D, re-tune the 1-D model to target / (3-D / 1-D), repeat until "
                        "the 3-D partials are within tolerance (at most 3 solves per bar).")
    ] = False,
    correction_table: Annotated[bool, typer.Option(
        "--correction-table", help="Build the preset's 3-D correction table: solve anchor "
                                   "bars in 3-D, interpolate f_3D / f_1D along the range, "
                                   "re-tune every bar through it, and store it in --out "
                                   "as [solid_correction]. Tunes the whole range.")
    ] = False,
    calibration: Annotated[Path | None, typer.Option(
        help="Calibration file with a [stiffness] table (measure --calibrate): re-tune with "
             "its effective Young's modulus and vertical 1-3 factors, on top of the 3-D "
             "table, and show per bar the change in mm of length and undercut depth against "
             "the uncalibrated design. Default: the file the preset's [damping] "
             "calibration_file names, when it holds [stiffness].", show_default=False)
    ] = None,
    anchor_step: Annotated[int, typer.Option(
        min=1, max=24, metavar="SEMITONES",
        help="Anchor spacing of --correction-table (both ends are always anchors).")] = 6,
    level: LevelOption = None,
    accuracy: AccuracyOption = None,
    workers: int | None = workers_option(
        "the runs of neighbouring bars (1-D) and the 3-D solves"),
    scheduler: SchedulerOption = None,
    cache: CacheOption = True,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Solve every bar's length and undercut so partials 1-3 land on the target ratios.

    Each bar is tuned by least squares (scipy, with bounds) on cents off target,
    warm-started from its lower neighbour, then re-solved on a refined mesh; the
    residuals shown are from that re-solve. Targets: +-1 cent for the fundamental,
    +-3 cents above. A bar that cannot reach its targets is reported with the
    constraint that binds; the command then says so first and exits with code 3,
    and writes --out only with --keep-best. Bars are warm-started in runs of ten
    neighbours, the runs spread over --workers processes (the same bars on any
    number). With --solid the residuals are those of
    the 3-D model (Richardson-extrapolated over its mesh levels); --level, --accuracy,
    --scheduler and --cache apply to the 3-D solves of --solid and
    --correction-table. A preset with a [solid_correction] table is tuned through it
    (1-D targets divided by the interpolated 3-D/1-D factors), and the residuals are
    the table's predictions; the command says so. With a stiffness calibration
    (--calibration FILE, or the [stiffness] table of the calibration file the
    preset names) every bar is tuned to target / (3-D factor x sqrt(E_eff/E) x
    partial factor), and a second table says what that changed per bar against
    the uncalibrated design: mm of length and of undercut depth.
    """
    import time

    from synth.physics.tuning import worst_miss
    from synth.reports import tune as rt
    from synth.settings.instrument import load_instrument

    target = _parse_ratios(ratios)
    inst = _override(load_instrument(preset), family, venue_c)
    notes = [inst.check_note(n) for n in note] if note else list(inst.notes)
    if out is not None:
        plan_outputs([(out, "tuned preset")], force=force)
    t0 = time.perf_counter()
    wanted = check_level_accuracy(level, accuracy)
    stiffness = rt.check_tune_options(inst, calibration, solid=solid,
                                      correction_table=correction_table, note=note)
    results, table, anchor_miss, changes, solid_runs = _tune(
        inst, notes, target, stiffness, solid=solid, correction_table=correction_table,
        anchor_step=anchor_step, level=level, wanted=wanted, workers=workers,
        scheduler=scheduler, cache=cache)
    elapsed = time.perf_counter() - t0
    drift, shop = rt.temperature_readings(inst, results, shop_c)
    worst = worst_miss(results)
    write = out is not None and (worst is None or keep_best)
    if worst is not None:
        _say_missed(results, worst, out, write)
    if solid:
        report_failed_jobs(results, solid_runs)
    if write and out is not None:
        rt.write_tuned_preset(out, inst, preset, results, stiffness=stiffness, force=force,
                              calibration=calibration, table=None if solid else table)
        commit_outputs()
    records = rt.tune_records(results, drift, shop,
                              {n: solid_record(run) for n, run in solid_runs.items()})
    tuned = _Tuned(results, records, drift, shop, table, anchor_miss, changes, stiffness,
                   solid_runs, solid)
    if json_out:
        _print_tune_json(tuned, elapsed, out if write else None)
    else:
        _print_tune(tuned, inst, elapsed, shop_c, out if write else None)
    _exit_if_missed(worst)


@dataclass(frozen=True)
class _Tuned:
    """What one tune run found, for printing."""

    results: list
    records: list[dict[str, Any]]
    drift: dict[str, float]
    shop: dict[str, Any]
    table: Any
    anchor_miss: Any
    changes: Any
    stiffness: Any
    solid_runs: dict[str, Any]
    solid: bool


def _tune(inst, notes, target, stiffness, *, solid, correction_table, anchor_step, level,
          wanted, workers, scheduler, cache):
    """Tune the bars the way the options ask; (results, table, anchors, changes, 3-D runs)."""
    from synth.cli.common import Progress
    from synth.physics.tuning import tune_instrument

    solid_runs: dict[str, Any] = {}
    table, anchor_miss = correction_of(inst), None
    changes = None
    if stiffness is not None:
        from synth.physics.solid_tuning import tune_calibrated

        with Progress(2 * len(notes), "tuning") as step:
            results, changes = tune_calibrated(inst, notes, table, stiffness, ratios=target,
                                               progress=lambda n: step(1, n), workers=workers)
    elif correction_table:
        results, table, anchor_miss = build_correction_table(
            inst, ratios=target, step=anchor_step, level=level, accuracy=wanted,
            workers=workers, scheduler=scheduler, cache=cache)
    elif table is not None and not solid:
        from synth.physics.solid_tuning import tune_with_table

        with Progress(len(notes), "tuning") as step:
            results = tune_with_table(inst, notes, table, ratios=target,
                                      progress=lambda n: step(1, n), workers=workers)
    elif solid:
        results, solid_runs = tune_against_solid(
            inst, notes, ratios=target, level=level, accuracy=wanted, workers=workers,
            scheduler=scheduler, cache=cache)
    else:
        with Progress(len(notes), "tuning") as step:
            results = tune_instrument(inst, notes, ratios=target,
                                      progress=lambda n: step(1, n), workers=workers)
    return results, table, anchor_miss, changes, solid_runs


def _say_missed(results, worst, out, write: bool) -> None:
    n_missed = sum(not r.reachable for r in results)
    what = ("" if out is None else f"; wrote {out} anyway (--keep-best)" if write
            else "; nothing written (use --keep-best to write the best found)")
    missed(f"{n_missed} of {len(results)} bars missed their targets (worst: partial "
           f"{worst[1]} {worst[2]:+.0f} cents at {worst[0]}){what}")


def _print_tune_json(t: _Tuned, elapsed: float, written: Path | None) -> None:
    stiffness, changes, anchor_miss = t.stiffness, t.changes, t.anchor_miss
    n_missed = sum(not r.reachable for r in t.results)
    print_json({"bars": t.records, "seconds": elapsed, "out": str(written) if written else None,
                "missed": n_missed,
                "solid_correction": None if t.solid else correction_record(t.table),
                **({"anchor_residual_cents": {a: list(v) for a, v in anchor_miss.items()}}
                   if anchor_miss else {}),
                **({"stiffness_calibration": {
                    "source": stiffness.source, "youngs_modulus_scale": stiffness.youngs_scale,
                    "factors": list(stiffness.factors),
                    "changes": [c.to_dict() for c in changes]}}
                   if changes and stiffness is not None else {})})


def _print_tune(t: _Tuned, inst, elapsed: float, shop_c: float | None,
                written: Path | None) -> None:
    import statistics

    results, records, drift, shop = t.results, t.records, t.drift, t.shop
    stiffness, changes, table, anchor_miss = t.stiffness, t.changes, t.table, t.anchor_miss
    n_p = max(len(r.spec.ratios) for r in results)
    heads = ["note", "target Hz", "length mm", "depth mm", "span mm", "thinnest mm"]
    heads += [f"p{i + 1} cents" for i in range(n_p)]
    heads.append("c/K")
    if shop:
        heads.append(f"at {shop_c:g} C p1")
    heads.append("status")
    rows = []
    for r, rec in zip(results, records, strict=True):
        uc = r.geometry.undercut
        depth = getattr(uc, "depth_m", None)
        span = getattr(uc, "span_m", None)
        row = [rec["note"], f"{rec['target_hz']:.2f}", f"{rec['length_m'] * 1e3:.1f}",
               "-" if depth is None else f"{depth * 1e3:.2f}",
               "-" if span is None else f"{span * 1e3:.1f}", f"{rec['thinnest_m'] * 1e3:.2f}"]
        row += [f"{c + 0.0:+.2f}" for c in np.round(r.residual_cents, 2)]
        row += [""] * (n_p - len(r.residual_cents))
        row.append(f"{drift[r.spec.note]:+.3f}")
        if shop:
            row.append(f"{shop[r.spec.note][0]:+.2f}")
        row.append(r.message)
        rows.append(row)
    typer.echo(format_table(heads, rows, align="l" + "r" * (len(heads) - 2) + "l"))
    bad = sum(not r.reachable for r in results)
    typer.echo(
        f"{len(results)} bars in {elapsed:.2f} s (median "
        f"{statistics.median(r.seconds for r in results) * 1e3:.0f} ms"
        f" and {statistics.median(r.n_solves for r in results):.0f} solves per bar); "
        f"{len(results) - bad} on target, {bad} not reachable; A4 = {inst.reference_pitch_hz:g} Hz "
        f"at {inst.temperature_c:g} C")
    if shop:
        typer.echo(f"'at {shop_c:g} C': what partial 1 reads in the shop when the bar is in tune "
                   f"at {inst.temperature_c:g} C.")
    if changes and stiffness is not None:
        typer.echo("")
        typer.echo(_changes_table(changes))
        text = stiffness.describe()
        typer.echo(text[:1].upper() + text[1:] + ".")
    if t.solid:
        typer.echo(solid_summary(t.solid_runs))
    elif table is not None:
        say_correction(correction_record(table))
        if anchor_miss:
            typer.echo("anchors in 3-D, cents off target: " + "; ".join(
                f"{a} " + " ".join(f"{c:+.1f}" for c in v) for a, v in anchor_miss.items()))
    if written:
        typer.echo(f"wrote {written}")


def _exit_if_missed(worst) -> None:
    if worst is not None:
        raise typer.Exit(code=EXIT_MISSED)


# --------------------------------------------------------------------------------------
# grind
# --------------------------------------------------------------------------------------


@app.command("grind")
@handle_errors
def grind_command(
    file: FileArg,
    note: Annotated[str | None, typer.Option(help="Note of the bar in an instrument preset.")
                    ] = None,
    stations: Annotated[int, typer.Option(min=5, max=201, help="Band centres along the bar."
                                          )] = 21,
    band_mm: Annotated[float, typer.Option(min=1.0, max=100.0, metavar="mm",
                                           help="Width of the ground band, mm.")] = 10.0,
    removal_mm: Annotated[float, typer.Option(min=0.001, max=2.0, metavar="mm",
                                              help="Depth of metal removed, mm.")] = 0.1,
    partials: Annotated[int, typer.Option(min=1, max=5, help="Vertical partials to show.")] = 3,
    torsion: Annotated[bool, typer.Option(help="Also show torsional mode 1.")] = False,
    out: Annotated[Path | None, typer.Option(
        help="PNG plot path (default renders/<file>/grind-<bar>.png).")] = None,
    force: Annotated[bool, typer.Option(help="Overwrite the PNG if it exists.")] = False,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Grind map: cents each partial moves per 0.1 mm removed in a band at each station.

    Negative: that partial goes flat (metal removed where the bar bends most);
    positive: it goes sharp (metal removed where it mainly moves, near the ends).
    First-order Rayleigh-quotient sensitivities of the finite-element modes. A preset
    with a [solid_correction] table gives the 3-D-corrected frequencies (the command
    says so); the cents are the 1-D model's, the table's factor being constant over a
    grind this small.
    Wear eye, face and hearing protection at the grinder; keep aluminium dust apart
    from steel grinding.
    """
    from synth import io
    from synth.physics.tuning import grind_map
    from synth.reports.plots import grind_map_png

    design = load_design(file)
    label, geometry, material, _ = resolve_bar(design, note)
    png = out or default_output(file, f"grind-{file_label(label)}.png")
    plan_outputs([(png, "plot")], force=force)
    res = solve_bar(geometry, material, n_vertical=max(3, partials), n_lateral=0,
                    n_torsional=1 if torsion else 0)
    kinds = ("vertical", "torsional") if torsion else ("vertical",)
    gm = grind_map(res, n_stations=stations, band_m=band_mm * 1e-3, removal_m=removal_mm * 1e-3,
                   kinds=kinds, max_order=partials)
    table, freqs = _grind_frequencies(design, label, gm)
    keep = [j for j, (k, o) in enumerate(gm.modes) if k == "vertical" or o == 1]
    stiffness = stiffness_in_use(design)
    io.write_bytes(png, grind_map_png(gm, geometry, title=f"{label}: grind map",
                                      cord_holes_m=res.vertical[0].nodes_m), force=force)
    commit_outputs()
    if json_out:
        print_json({"bar": label, "band_m": gm.band_m, "removal_m": gm.removal_m,
                    "modes": [{"kind": gm.modes[j][0], "order": gm.modes[j][1],
                               "frequency_hz": float(freqs[j])} for j in keep],
                    "solid_correction": correction_record(table),
                    "stiffness_calibration": stiffness_record(stiffness),
                    "stations": [{"x_m": x, "thickness_m": t,
                                  "cents": [gm.cents[i, j] for j in keep]}
                                 for i, (x, t) in enumerate(zip(gm.x_m, gm.thickness_m,
                                                                 strict=True))],
                    "plot": str(png)})
        return
    heads = ["x mm", "thick mm"] + [f"{gm.modes[j][0][:4]} {gm.modes[j][1]} c" for j in keep]
    rows = [[f"{x * 1e3:.1f}", f"{t * 1e3:.2f}", *[f"{gm.cents[i, j]:+.3f}" for j in keep]]
            for i, (x, t) in enumerate(zip(gm.x_m, gm.thickness_m, strict=True))]
    typer.echo(f"{label}: cents per {removal_mm:g} mm removed over a {band_mm:g} mm band; "
               + ", ".join(f"{gm.modes[j][0]} {gm.modes[j][1]} {freqs[j]:.2f} Hz" for j in keep))
    typer.echo(format_table(heads, rows))
    say_correction(correction_record(table))
    say_stiffness(stiffness)
    typer.echo(f"plot: {png}")


# --------------------------------------------------------------------------------------
# cutlist
# --------------------------------------------------------------------------------------


def _grind_frequencies(design, label: str, gm):
    """Return the preset's 3-D table (or None) and the grind map's predicted frequencies.

    They carry the preset's composed correction (3-D table x stiffness calibration);
    the cents per mm are relative changes, which a constant factor on a mode's
    frequency leaves as they are.
    """
    if not isinstance(design, Instrument):
        return None, gm.frequencies_hz
    return correction_of(design), corrected_frequencies(model_correction(design), label,
                                                        gm.modes, gm.frequencies_hz)


@app.command("cutlist")
@handle_errors
def cutlist_command(
    preset: Annotated[Path, typer.Argument(help="Tuned instrument preset (with [bars]).",
                                           show_default=False)],
    out: Annotated[Path | None, typer.Option(
        help="Folder for cutlist.csv, profiles.png and templates.pdf (default "
             "renders/<preset>/).")] = None,
    force: Annotated[bool, typer.Option(help="Overwrite existing files.")] = False,
    templates: Annotated[bool, typer.Option(
        "--templates", help="Also write templates.pdf: every bar's side profile at 1:1 for "
        "printing and cutting (long bars over several overlapping pages with alignment "
        "marks; a 100 mm check bar on every page).")] = False,
    paper: Annotated[str, typer.Option(
        metavar="a4|letter", help="Paper of --templates, printed landscape.")] = "a4",
    workers: int | None = workers_option(
        "the bars' solves"),
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Write the build sheet: length, undercut stations and cord holes for every bar.

    Cord holes sit at the nodes of vertical mode 1 of the actual undercut bar.
    Station thicknesses are every 10 % of the length from the left end. The
    predicted partials (JSON partials_hz) carry the preset's 3-D table and the
    stiffness calibration of the file it names.
    """
    from synth.cli.common import Progress
    from synth.reports.cutlist import cut_rows, write_build_sheet
    from synth.reports.templates import printable_mm
    from synth.settings.instrument import load_instrument

    printable_mm(paper)   # a bad --paper stops before any file is read
    inst = load_instrument(preset)
    folder = out or default_output(preset, "")
    csv_path, png_path = folder / "cutlist.csv", folder / "profiles.png"
    pdf_path = folder / "templates.pdf" if templates else None
    plan_outputs([(csv_path, "cut list"), (png_path, "profile sheet")]
                 + ([(pdf_path, "cutting templates")] if pdf_path else []), force=force)
    missing = [n for n in inst.notes if n not in inst.bars]
    if missing:
        raise ConfigError(f"bars.{missing[0]}: {len(missing)} bar(s) have no geometry; run "
                          "`barwright tune` with --out first", source=inst.source)
    with Progress(len(inst.notes), "solving") as step:
        rows = cut_rows(inst, progress=lambda n: step(1, n), tubes=True, workers=workers)
    write_build_sheet(inst, rows, csv_path, png_path, pdf_path, paper=paper, force=force)
    commit_outputs()
    from synth.physics.tube import with_file_calibration

    ts = with_file_calibration(inst.tables.tubes, inst.tables.damping)
    gap_open = ts is not None and "gap_calibration" in ts.uncalibrated()
    table = correction_of(inst)
    if json_out:
        print_json({"bars": [r.__dict__ for r in rows], "csv": str(csv_path),
                    "png": str(png_path), "solid_correction": correction_record(table),
                    "stiffness_calibration": stiffness_record(stiffness_in_use(inst)),
                    "pdf": None if pdf_path is None else str(pdf_path),
                    "uncalibrated": {"tube_length_m": ["gap_calibration"] if gap_open else []}})
        return
    _print_cutlist(rows, inst, table, gap_open, csv_path, png_path, pdf_path, paper)


def _print_cutlist(rows, inst, table, gap_open: bool, csv_path: Path, png_path: Path,
                   pdf_path: Path | None, paper: str) -> None:
    from synth.reports.cutlist import SAFETY
    from synth.reports.templates import PRINT_AT_SIZE

    heads = ["note", "length mm", "w x t mm", "thinnest", "t@20%", "t@30%", "t@40%", "t@50%",
             "cord holes mm from each end", "cord %L", "mass g",
             "tube mm ~" if gap_open else "tube mm"]
    sheet = []
    for r in rows:
        st = r.station_thickness_m
        sheet.append([
            r.note, f"{r.length_m * 1e3:.1f}",
            f"{r.width_m * 1e3:.1f} x {r.thickness_m * 1e3:.2f}", f"{r.thinnest_m * 1e3:.2f}",
            *[f"{st[i] * 1e3:.2f}" for i in (2, 3, 4, 5)],
            f"{r.cord_holes_m[0] * 1e3:.1f} / {(r.length_m - r.cord_holes_m[-1]) * 1e3:.1f}",
            f"{r.cord_fraction * 100:.2f}", f"{r.mass_kg * 1e3:.0f}",
            "-" if r.tube_length_m is None else f"{r.tube_length_m * 1e3:.1f}",
        ])
    typer.echo(format_table(heads, sheet))
    say_correction(correction_record(table))
    say_stiffness(stiffness_in_use(inst))
    typer.echo(f"wrote {csv_path} and {png_path}")
    if pdf_path is not None:
        typer.echo(f"wrote {pdf_path} (cutting templates on {paper}: {PRINT_AT_SIZE})")
    if any(r.tube_length_m is not None for r in rows):
        typer.echo(f"tube lengths: closed end to mouth rim, for the [tubes] offset at "
                   f"{inst.temperature_c:g} C with the bar in place; cut long and trim to pitch.")
        if gap_open:
            typer.echo("~ uncalibrated: the bar-over-mouth correction is derived, not measured "
                       "(tens of cents of tube pitch); fit gap_calibration with "
                       "`barwright tubecal` before cutting the whole set")
    typer.echo(SAFETY)


TERMS_SHOWN = ("internal", "thermoelastic", "radiation", "cords", "air", "tube")


def _q_cell(b, term: str) -> str:
    q = b.q_of(term)
    if q == float("inf"):
        return "-"
    return f"{q:.3g}" if q < 1e7 else ">1e7"


def _override(inst, family: str | None, venue_c: float | None):
    """Return the preset with a command-line family or venue temperature (raw table too)."""
    from dataclasses import replace

    from synth.physics.geometry import UNDERCUT_FAMILIES, UndercutFamily

    raw = dict(inst.raw)
    if family is not None:
        allowed = (*UNDERCUT_FAMILIES, "free")
        if family not in allowed:
            raise ConfigError(f"= {family!r}: must be one of " + ", ".join(allowed),
                              source="--family")
        fam = replace(inst.undercut_family or UndercutFamily(), family=family)
        raw["undercut"] = fam.to_table()
        inst = replace(inst, undercut_family=fam)
    if venue_c is not None:
        raw["temperature_c"] = venue_c
        inst = replace(inst, temperature_c=venue_c)
    return replace(inst, raw=raw)
