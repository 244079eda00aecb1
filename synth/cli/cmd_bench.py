"""``barwright bench``: speed and memory figures as ratios against in-run references."""

from __future__ import annotations

from typing import Annotated

import typer

from synth import bench
from synth.cli import app
from synth.cli.common import format_table, handle_errors, info, print_json


@app.command("bench")
@handle_errors
def bench_command(
    only: Annotated[
        str | None,
        typer.Option(help="Comma-separated suites to run (default: all). "
                          "See the list printed by a full run."),
    ] = None,
    quick: Annotated[
        bool, typer.Option(help="Fewer repeats and smaller cases: a smoke run, noisier figures.")
    ] = False,
    json_out: Annotated[
        bool, typer.Option("--json", help="Print the figures as one JSON object keyed by name.")
    ] = False,
) -> None:
    """Measure speed: medians over repeats and ratios against references run alongside."""
    names = bench.suite_names()
    if only:
        wanted = [s.strip() for s in only.split(",") if s.strip()]
        unknown = [s for s in wanted if s not in names]
        if unknown:
            from synth.errors import ConfigError

            raise ConfigError(
                f"unknown suite {unknown[0]!r}; available: " + ", ".join(names), source="--only"
            )
        names = wanted
    figures: dict[str, float] = {}
    for name in names:
        info(f"bench: running {name} ...")
        figures.update(bench.run_suite(name, quick=quick))
    if json_out:
        print_json(figures)
        return
    rows = [(k, _fmt(v)) for k, v in figures.items()]
    typer.echo(format_table(["figure", "value"], rows, align="lr"))


def _fmt(v) -> str:
    if isinstance(v, bool) or not isinstance(v, int | float):
        return str(v)
    if v == 0 or 1e-3 <= abs(v) < 1e6:
        return f"{v:.4g}"
    return f"{v:.3e}"
