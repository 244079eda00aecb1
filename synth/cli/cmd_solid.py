"""``solid``: a bar's partials from the 3-D solid model beside those of the 1-D model."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated

import numpy as np
import typer

from synth.cli import app
from synth.cli.common import (
    EXIT_MISSED,
    Progress,
    format_table,
    handle_errors,
    missed,
    print_json,
)
from synth.errors import ConfigError

if TYPE_CHECKING:  # annotations only: the 3-D modules load when a command needs them
    from synth.physics.solid_correction import CorrectionTable

ACCURACY_DEFAULT_PCT = 0.05
"""Default wanted error of the 3-D partials, percent."""

LevelOption = Annotated[int | None, typer.Option(
    min=2, max=8, help="Finest mesh level of the 3-D model (level m: about m quadratic "
                       "elements through the thickness); the two levels below it give the "
                       "error estimate. Exclusive with --accuracy.")]
AccuracyOption = Annotated[float | None, typer.Option(
    min=0.001, max=10.0, metavar="%",
    help="Refine the 3-D mesh level by level until the estimated error is below this, "
         f"percent (default {ACCURACY_DEFAULT_PCT:g}; at most level 8 and 100,000 "
         "unknowns): of vertical partials 1-3, lateral 1 and torsional 1-2 in `solid`, of "
         "the tuned partials in `tune --solid`.")]
WorkersOption = Annotated[int | None, typer.Option(
    min=1, max=256, help="Local worker processes for independent 3-D solves (default: "
                         "every core).")]
SchedulerOption = Annotated[str | None, typer.Option(
    metavar="ADDRESS", help="Run the 3-D solves on a Dask cluster, e.g. tcp://host:8786 "
                            "(default: the BARWRIGHT_SCHEDULER environment variable, else "
                            "local processes).")]
CacheOption = Annotated[bool, typer.Option(
    help="Reuse finished 3-D solves from the cache folder (BARWRIGHT_CACHE, else "
         "XDG_CACHE_HOME/barwright or ~/.cache/barwright) and store new ones there.")]


def check_level_accuracy(level: int | None, accuracy: float | None) -> float | None:
    """Return the wanted relative accuracy (None with --level); refuse both at once."""
    if level is not None and accuracy is not None:
        raise ConfigError(f"= {accuracy:g}: give --level or --accuracy, not both",
                          source="--accuracy")
    if level is not None:
        return None
    return (ACCURACY_DEFAULT_PCT if accuracy is None else accuracy) / 100.0


@app.command("solid")
@handle_errors
def solid_command(
    file: Annotated[Path, typer.Argument(help="A single-bar file or an instrument preset "
                                              "(TOML).", show_default=False)],
    note: Annotated[str | None, typer.Option(
        help="Note of the bar to solve when FILE is an instrument preset (e.g. F3, Bb5).")
    ] = None,
    level: LevelOption = None,
    accuracy: AccuracyOption = None,
    modes: Annotated[int, typer.Option(
        min=3, max=30, help="Modes solved in each symmetry family (vertical with "
                            "longitudinal; lateral with torsional).")] = 8,
    cache: CacheOption = True,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Solve a bar as a 3-D elastic solid and set its partials beside the 1-D model's.

    Quadratic hexahedra on the carved bar (flat top, the undercut below), solved on
    two or three mesh levels; each mode's estimated error is the grid-convergence
    index of the finest level (Roache 1994). Modes are named by the motion of the
    bar's sections: vertical, lateral, torsional, longitudinal, or other (plate-like
    across the width). The last column is 1-D minus 3-D in cents. A run that cannot
    reach --accuracy on the finest level the bar allows (at most 8, and 100,000
    unknowns) says so first and exits with code 3.
    """
    from synth.cli.cmd_bar import resolve_bar
    from synth.physics.solid import (
        MAX_LEVEL,
        beside_one_d,
        cached_solver,
        finest_level,
        solve_levels,
        watched_error,
    )
    from synth.settings.instrument import load_design

    wanted = check_level_accuracy(level, accuracy)
    design = load_design(file)
    label, geometry, material, _ = resolve_bar(design, note)
    total = 3 if level is not None and level > 2 else 2 if level is not None else MAX_LEVEL
    with Progress(total, "3-D levels") as step:
        result = solve_levels(geometry, material, level=level, accuracy=wanted,
                              n_modes=modes, solver=cached_solver if cache else None,
                              progress=lambda lv: step(1, f"level {lv.level}"))
    rows = beside_one_d(result, geometry, material)
    worst = watched_error(result)
    short = wanted is not None and worst > wanted
    if short and wanted is not None:
        missed(f"{label}: the 3-D estimate reached {worst * 100:.3f} % at mesh level "
               f"{result.finest.level}, not the {wanted * 100:g} % asked (level "
               f"{finest_level(geometry)} is the finest this bar may be solved on)")
    levels = [{"level": lv.level, "elements": lv.n_elements, "dof": lv.n_dof,
               "seconds": lv.seconds, "mass_kg": lv.mass_kg} for lv in result.levels]
    if json_out:
        print_json({"bar": label, "material": material.name, "levels": levels,
                    "estimated_error": worst, "partials": rows})
    else:
        _print_solid(label, geometry, material, rows, result)
    if short:
        raise typer.Exit(code=EXIT_MISSED)


def _print_solid(label: str, geometry, material, rows, result) -> None:
    typer.echo(f"{label}: {material.name}, {geometry.length_m * 1e3:.1f} x "
               f"{geometry.width_m * 1e3:.1f} x {geometry.thickness_m * 1e3:.2f} mm, "
               + (geometry.undercut.describe() if geometry.undercut else "no undercut"))
    table = [(r["kind"], r["order"], f"{r['frequency_hz']:.2f}",
              f"{r['extrapolated_hz']:.2f}", f"{r['error'] * 100:.3f}",
              "-" if r["one_d_hz"] is None else f"{r['one_d_hz']:.2f}",
              "-" if r["one_d_hz"] is None else f"{r['cents_1d_minus_3d']:+.1f}")
             for r in rows]
    typer.echo(format_table(["kind", "order", "3-D Hz", "extrap. Hz", "est. err %",
                             "1-D Hz", "1-D - 3-D c"], table, align="lrrrrrr"))
    fin = result.finest
    typer.echo(f"mesh levels {', '.join(str(lv.level) for lv in result.levels)}: finest "
               f"{fin.n_elements} quadratic hexahedra, {fin.n_dof} unknowns, "
               f"{sum(lv.seconds for lv in result.levels):.1f} s of solving")
    try:
        nodes = result.partial("vertical", 1).nodes_m
        typer.echo("vertical 1 nodes on the top face: "
                   + ", ".join(f"{x * 1e3:.1f}" for x in nodes) + " mm from the left end")
    except LookupError:
        pass


# --------------------------------------------------------------------------------------
# tune --solid
# --------------------------------------------------------------------------------------


def tune_against_solid(inst, notes: list[str], *, ratios, level: int | None,
                       accuracy: float | None, workers: int | None, scheduler: str | None,
                       cache: bool) -> tuple[list, dict]:
    """Tune ``notes`` with the 3-D defect correction, one job per bar.

    Returns the TuneResults (3-D residuals, original specs) in the order of ``notes``
    and, per note, the :class:`SolidTuneResult` (absent for a bar whose job failed: that
    bar is tuned in 1-D here and reported as missing its 3-D check, with the reason;
    :func:`report_failed_jobs` says so on stderr).
    """
    from dataclasses import replace

    from synth.executor import Job, run_jobs
    from synth.physics.solid_tuning import solid_tune_job
    from synth.physics.tuning import instrument_spec, tune_bar

    specs = [instrument_spec(inst, n, ratios) for n in notes]
    jobs = [Job(s.note, solid_tune_job, (s, level, accuracy, cache)) for s in specs]
    with Progress(len(jobs), "3-D tuning") as step:
        done = run_jobs(jobs, workers=workers, scheduler=scheduler,
                        progress=lambda r: step(1, str(r.key)))
    results, solid = [], {}
    for spec, job in zip(specs, done, strict=True):
        if job.ok:
            results.append(job.value.tune)
            solid[spec.note] = job.value
            continue
        plain = tune_bar(spec)
        results.append(replace(plain, reachable=False,
                               message=f"3-D check failed: {job.error}"))
    return results, solid


def solid_record(run) -> dict:
    """JSON record of one bar's 3-D correction."""
    return {"factors": list(run.factors), "solves_3d": run.passes,
            "estimated_error": run.estimated_error, "mesh_level": run.level}


def solid_summary(runs: dict) -> str:
    """One line on the 3-D correction of a range: factors and error estimates."""
    if not runs:
        return "3-D correction: no bar finished its 3-D solves"
    c = np.array([r.factors for r in runs.values()])
    cents = 1200.0 * np.log2(c)
    err = max(r.estimated_error for r in runs.values())
    spans = ", ".join(f"p{i + 1} {cents[:, i].min():+.1f} to {cents[:, i].max():+.1f}"
                      for i in range(c.shape[1]))
    return (f"3-D correction (3-D minus 1-D, cents): {spans}; "
            f"{sum(r.passes for r in runs.values())} 3-D solves, estimated 3-D error at most "
            f"{err * 100:.3f} %")


# --------------------------------------------------------------------------------------
# tune --correction-table, and the table applied by tune, partials and cutlist
# --------------------------------------------------------------------------------------

TABLE_PASSES = 3
"""Rounds of (1-D tune of the range, 3-D solves of the anchors) at most."""


def build_correction_table(inst, *, ratios, step: int, level: int | None,
                           accuracy: float | None, workers: int | None,
                           scheduler: str | None,
                           cache: bool) -> tuple[list, CorrectionTable | None, dict]:
    """Tune the whole range through a correction table made from 3-D anchor solves.

    Round 1 tunes in 1-D (through the preset's own table when it has one), solves the
    anchor bars in 3-D and builds a table from them; the next round re-tunes through
    that table, and so on until every anchor's 3-D partials are within tolerance.

    Returns the results (table-predicted frequencies), the final table and, per anchor,
    its 3-D residuals in cents.
    """
    from synth.executor import Job, run_jobs
    from synth.physics.solid import unknowns
    from synth.physics.solid_correction import anchor_notes, correction_of
    from synth.physics.solid_tuning import anchor_job, table_from_anchors, tune_with_table
    from synth.physics.tuning import tune_instrument
    from synth.pitch import cents

    notes = list(inst.notes)
    anchors = anchor_notes(notes, step)
    table = correction_of(inst)
    mat = inst.material.at_temperature(inst.temperature_c)
    target_ratios = np.asarray(ratios or inst.target_ratios)
    residuals: dict = {}
    for round_no in range(1, TABLE_PASSES + 1):
        with Progress(len(notes), f"tuning, round {round_no}") as step_bar:
            tick = lambda n: step_bar(1, n)  # noqa: E731
            results = (tune_instrument(inst, notes, ratios=ratios, progress=tick,
                                       workers=workers)
                       if table is None else
                       tune_with_table(inst, notes, table, ratios=ratios, progress=tick,
                                       workers=workers))
        by_note = {r.spec.note: r for r in results}
        jobs = [Job(a, anchor_job, (by_note[a].geometry, mat, level, accuracy, cache),
                    cost=float(unknowns(by_note[a].geometry, 1))) for a in anchors]
        with Progress(len(jobs), f"3-D anchors, round {round_no}") as step_bar:
            done = run_jobs(jobs, workers=workers, scheduler=scheduler,
                            progress=lambda r: step_bar(1, str(r.key)))
        failed = [j for j in done if not j.ok]
        if failed:
            from synth.errors import ModelError

            raise ModelError(f"3-D solve of anchor {failed[0].key} failed: {failed[0].error}"
                             + (f" (and {len(failed) - 1} more)" if len(failed) > 1 else ""))
        solved = [j.value for j in done]
        residuals = {}
        for a, s in zip(anchors, solved, strict=True):
            n = len(target_ratios)
            f3 = np.array([s[f"vertical_{k}"][1] for k in range(1, n + 1)])
            residuals[a] = cents(f3, inst.target_hz(a) * target_ratios)
        table = table_from_anchors(anchors, solved)
        tol = by_note[anchors[0]].spec.tolerances_cents
        if all(np.all(np.abs(r) <= tol) for r in residuals.values()):
            break
    return [_predict(r, table) for r in results], table, residuals


def _predict(result, table):
    """Re-state a result's predicted 3-D frequencies with ``table``'s factors."""
    from dataclasses import replace

    from synth.physics.bar_fe import solve_bar
    from synth.pitch import cents

    spec = result.spec
    one_d = solve_bar(result.geometry, spec.material, n_vertical=len(spec.ratios),
                      n_lateral=0, n_torsional=0)
    f1 = np.array([m.frequency_hz for m in one_d.vertical[:len(spec.ratios)]])
    predicted = f1 * np.asarray(table.vertical(spec.note, len(f1)))
    miss = cents(predicted, spec.targets_hz)
    ok = bool(np.all(np.abs(miss) <= spec.tolerances_cents))
    msg = ("on target (3-D table)" if ok else "off target after the 3-D table"
           ) if result.reachable or ok else result.message
    return replace(result, frequencies_hz=predicted, residual_cents=miss,
                   reachable=ok, message=msg)


def corrected_rows(rows: list[dict], design, label: str, reference_hz: float):
    """Apply an instrument's composed correction to `partials` rows; return its 3-D table.

    The 3-D table and the stiffness calibration of the preset's calibration file
    (:func:`synth.physics.solid_correction.model_correction`).  Returns the 3-D
    table (None without one); the stiffness calibration announces itself
    separately (:func:`synth.cli.common.say_stiffness`).
    """
    from synth.physics.instrument import Instrument
    from synth.physics.solid_correction import model_correction
    from synth.pitch import nearest_note

    if not isinstance(design, Instrument):
        return None
    correction = model_correction(design)
    if correction is None:
        return None
    table = correction.table
    for r in rows:
        r["frequency_hz"] *= correction.factor(label, r["kind"], r["order"])
        r["note"], r["cents"] = nearest_note(r["frequency_hz"], reference_hz)
    f1 = next((r["frequency_hz"] for r in rows if r["kind"] == "vertical" and r["order"] == 1),
              None)
    for r in rows:
        r["ratio"] = r["frequency_hz"] / f1 if f1 else None
    rows.sort(key=lambda r: r["frequency_hz"])
    return table


def report_failed_jobs(results: list, runs: dict) -> None:
    """Name on stderr each bar whose 3-D job failed, with the reason."""
    from synth.cli.common import warn

    for r in results:
        if r.spec.note not in runs:
            warn(f"{r.spec.note}: the 3-D job failed: "
                 f"{r.message.removeprefix('3-D check failed: ')}")
