"""The ``barwright`` command line (typer).

Each submodule registers its commands on :data:`app`; they parse options, call
the library and print.  No computation lives here.
"""

from __future__ import annotations

import typer
from typer.core import TyperGroup

from synth.cli.usage import one_line_usage_errors


class BarwrightGroup(TyperGroup):
    """The command group: every usage error becomes one line on stderr and exit code 2.

    Living on the group (not only in :func:`main`) means ``CliRunner`` invocations of
    :data:`app` behave exactly like the installed command.
    """

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True,
             **extra):
        """Run the command line; see :func:`synth.cli.usage.one_line_usage_errors`."""
        run = super().main
        if not standalone_mode:
            return run(args, prog_name, complete_var, standalone_mode=False, **extra)
        return one_line_usage_errors(
            lambda a: run(a, prog_name, complete_var, standalone_mode=False, **extra), args)


app = typer.Typer(
    name="barwright",
    cls=BarwrightGroup,
    help=(
        "Design, tune, hear and measure tuned metal-bar keyboard percussion before "
        "cutting metal. Every command prints a table by default; --json gives "
        "machine-readable output (and nothing else) on stdout.\n\n"
        "\b\n"
        "Exit codes:\n"
        "  0    done\n"
        "  1    internal error (a bug: please report it with the command line)\n"
        "  2    bad input: one line on stderr names the option or file, the value\n"
        "       and what is allowed; nothing is written\n"
        "  3    the job ran but missed what was asked (tune: a bar outside its\n"
        "       tolerance; measure --calibrate: no loss factor identifiable); the\n"
        "       first line on stderr says so, and the output is written only when\n"
        "       asked (--keep-best, --keep-overrides)\n"
        "  130  interrupted"
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
