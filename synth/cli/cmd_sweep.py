"""The ``sweep`` command: variants of a preset over a grid, one row each."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, cast

import typer

from synth.cli import app
from synth.cli.common import (
    Progress,
    commit_outputs,
    default_output,
    format_table,
    handle_errors,
    json_text,
    missed,
    plan_outputs,
    print_json,
    warn,
)

MAX_WORKERS = 1024
"""Most local worker processes --workers may ask for."""

WorkersOpt = Annotated[int | None, typer.Option(
    min=1, max=MAX_WORKERS, metavar="processes",
    help="Local worker processes (default: one per core; 1 runs every job in this "
         "process). Ignored with --scheduler.")]
SchedulerOpt = Annotated[str | None, typer.Option(
    help="Address of a running Dask scheduler, e.g. tcp://host:8786, to run the jobs on "
         "its cluster (needs the cluster extra; default: the BARWRIGHT_SCHEDULER "
         "environment variable, else the local pool).")]


@app.command("sweep")
@handle_errors
def sweep_command(
    preset: Annotated[Path, typer.Argument(
        help="Instrument preset with solved [bars], [blank] and [undercut].",
        show_default=False)],
    vary: Annotated[list[str], typer.Option(
        metavar="KEY=V1,V2,...",
        help="A preset key by its dotted name and the values to try, e.g. "
             "tubes.offset_cents=0,20,40 or sound.mallet=soft,hard; a list value as "
             "0.013:0.011. Repeat for a grid of every combination.",
        show_default=False)],
    workers: WorkersOpt = None,
    scheduler: SchedulerOpt = None,
    out: Annotated[Path | None, typer.Option(
        help="Folder for sweep.csv, sweep.json and sweep.png (default renders/<preset>/).")
    ] = None,
    force: Annotated[bool, typer.Option(help="Overwrite existing files.")] = False,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Design sweep: tuning reach, T60 and tube gain per register, evenness, loudness.

    Each variant is the preset with the varied keys set, checked by the preset
    reader. Registers are the lowest, middle and highest notes; evenness is the
    spread of T60 about a smooth trend across the range; loudness is BS.1770-4
    integrated loudness of a short phrase. A variant that fails is reported and
    the others complete (exit code 3).
    """
    from synth.reports.sweep import failure_lines, parse_vary, run_variants, variant_tables

    varies = [parse_vary(v) for v in vary]
    tables = variant_tables(preset, varies)  # every variant read before any work
    count = len(tables)
    folder = out or default_output(preset, "")
    paths = {"csv": folder / "sweep.csv", "json": folder / "sweep.json",
             "png": folder / "sweep.png"}
    plan_outputs([(paths["csv"], "table"), (paths["json"], "report"), (paths["png"], "plot")],
                 force=force)
    with Progress(count, "sweep") as step:
        report = run_variants(preset, varies, tables, workers=workers, scheduler=scheduler,
                              progress=lambda r: step(1, f"variant {cast(int, r.key) + 1}"))
    record = _write(report, paths, preset, force)
    failures = failure_lines(report)
    if failures:
        exit_missed = missed(f"{len(failures)} of {count} variants failed; the others are "
                             "reported")
        for line in failures:
            warn(line)
    _print(report, record, paths, json_out)
    if failures:
        raise exit_missed


def _write(report, paths: dict[str, Path], preset: Path, force: bool) -> dict:
    """Write the CSV, JSON and plot of a sweep; return the JSON record."""
    from synth import io
    from synth.reports.sweep import sweep_csv, sweep_png, sweep_record

    record = sweep_record(report)
    record.update({key: str(p) for key, p in paths.items()})
    io.write_bytes(paths["csv"], sweep_csv(report).encode("utf-8"), force=force)
    io.write_bytes(paths["json"], (json_text(record) + "\n").encode("utf-8"), force=force)
    io.write_bytes(paths["png"], sweep_png(report, f"{Path(preset).name}: design sweep"),
                   force=force)
    commit_outputs()
    return record


def _print(report, record: dict, paths: dict[str, Path], json_out: bool) -> None:
    from synth.reports.sweep import sweep_rows

    if json_out:
        print_json(record)
        return
    headers, rows = sweep_rows(report)
    typer.echo(format_table(headers, rows, align="r" * len(headers)))
    typer.echo(f"{len(rows)} variants on {report.engine}; wrote {paths['csv']}, "
               f"{paths['json']} and {paths['png']}")
