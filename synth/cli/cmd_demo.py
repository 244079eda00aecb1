"""``barwright demo``: the whole job on the bundled demo instrument.

The demo itself is :func:`synth.reports.demo.run_demo`; this command plans its
files, runs it with the ``compare`` and ``measure`` commands as its steps 6 and
7, and says where every file went.  The demo writes only into its output folder
(default ``renders/demo/``) and replaces the files it wrote there on an earlier
run.  Every file is planned before the first is written and all appear together
at the end; a demo that fails or is stopped leaves none of them.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import Progress, commit_outputs, handle_errors, info, plan_outputs
from synth.cli.options import workers_option
from synth.reports.demo import (  # noqa: F401  (the demo's names, for callers of this module)
    DEMO_PRESET,
    DEMO_TRIALS,
    DEMO_WAVS,
    demo_outputs,
    demo_preset_path,
)


@app.command("demo")
@handle_errors
def demo_command(
    out: Annotated[Path, typer.Option(help="Folder for the demo's files (replaced on each run).")
                   ] = Path("renders/demo"),
    workers: int | None = workers_option(
        "the tuning runs, bar solves, strikes and sustain notes"),
) -> None:
    """Run the main job on the bundled demo instrument and say where every file went."""
    from synth.reports.demo import run_demo

    plan_outputs(demo_outputs(out), force=True)
    run_demo(out, say=typer.echo, compare=_compare, calibrate=_calibrate, steps=Progress,
             workers=workers)
    commit_outputs()
    info(f"demo done: files in {out}")


def _compare(design_a: Path, design_b: Path, folder: Path) -> None:
    from synth.cli.cmd_compare import compare_command

    compare_command(design_a=design_a, design_b=design_b, out=folder, blind=DEMO_TRIALS,
                    seed=37, force=True, page=True)


def _calibrate(recording: Path, preset: Path, calibration: Path) -> None:
    from synth.cli.cmd_measure import measure_command

    measure_command(recording=recording, note="A4", calibrate=preset, out=calibration,
                    force=True)
