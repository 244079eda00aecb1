"""The ``barwright`` command line (typer).

Each submodule registers its commands on :data:`app`; they parse options, call
the library and print.  No computation lives here.
"""

from __future__ import annotations

import typer

app = typer.Typer(
    name="barwright",
    help=(
        "Design, tune, hear and measure tuned metal-bar keyboard percussion before "
        "cutting metal. Every command prints a table by default; --json gives "
        "machine-readable output on stdout. Bad input exits with code 2."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # help texts name TOML tables like [sound]: print them as written
    context_settings={"help_option_names": ["-h", "--help"]},
)

# Command modules register themselves on import.
from synth.cli import commands  # noqa: E402,F401


def main() -> None:
    """Entry point of the ``barwright`` console script."""
    app()
