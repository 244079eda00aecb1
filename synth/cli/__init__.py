"""The ``barwright`` command line (typer).

Each submodule registers its commands on :data:`app`; they parse options, call
the library and print.  No computation lives here.

The group is lazy: :data:`synth.cli.commands.COMMANDS` names each command, its
module and its one-line help, so ``barwright --help`` and a mistyped command
answer without importing the numeric stack (numba, scipy); a command's module is
imported only when that command runs or its own ``--help`` is asked for.
"""

from __future__ import annotations

import importlib
import typing

import typer
import typer.main
from typer.core import TyperGroup

from synth.cli.usage import one_line_usage_errors


class BarwrightGroup(TyperGroup):
    """The command group: every usage error becomes one line on stderr and exit code 2.

    Living on the group (not only in :func:`main`) means ``CliRunner`` invocations of
    :data:`app` behave exactly like the installed command.
    """

    # click's parameters, untyped: their annotations differ between click's versions
    def main(self, args=None, prog_name=None, complete_var=None,  # type: ignore[override]
             standalone_mode=True, **extra):
        """Run the command line; see :func:`synth.cli.usage.one_line_usage_errors`."""
        run = super().main
        if not standalone_mode:
            return run(args, prog_name, complete_var, standalone_mode=False, **extra)
        return one_line_usage_errors(
            lambda a: run(a, prog_name, complete_var, standalone_mode=False, **extra), args)

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.commands = _LazyCommands(self.commands)

    def list_commands(self, ctx) -> list[str]:
        """Every command's name, in the order of ``barwright --help``, without imports."""
        return typing.cast(_LazyCommands, self.commands).names()

    def format_commands(self, ctx, formatter) -> None:
        """Write the commands table of ``--help`` from the one-line helps, without imports."""
        from synth.cli.commands import COMMANDS

        names = self.list_commands(ctx)
        limit = formatter.width - 6 - max(len(n) for n in names)
        rows = [(name, _shorten(COMMANDS[name][1], limit) if name in COMMANDS
                 else self.commands[name].get_short_help_str(limit)) for name in names]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


class _LazyCommands(dict):
    """The group's commands, each imported from its module on first access.

    Looking a name up (``[]``, ``get``, ``in``) imports that command's module only;
    ``keys`` lists the names without imports; walking the whole mapping (``items``,
    ``values``, iteration, ``len``) imports every module.
    """

    def names(self) -> list[str]:
        from synth.cli.commands import COMMANDS

        return list(COMMANDS) + [n for n in dict.keys(self) if n not in COMMANDS]

    def _load(self, name: str) -> None:
        from synth.cli.commands import COMMANDS

        if dict.__contains__(self, name) or name not in COMMANDS:
            return
        importlib.import_module(COMMANDS[name][0])
        # The module registered its commands on ``app``: convert them as typer does.
        commands = typing.cast(dict[str, typing.Any], typer.main.get_group(app).commands)
        for key, command in dict.items(commands):
            dict.setdefault(self, key, command)

    def _load_all(self) -> None:
        for name in self.names():
            self._load(name)

    def __getitem__(self, name):
        self._load(name)
        return dict.__getitem__(self, name)

    def get(self, name, default=None):
        self._load(name)
        return dict.get(self, name, default)

    def __contains__(self, name) -> bool:
        self._load(name)
        return dict.__contains__(self, name)

    def __iter__(self):
        self._load_all()
        return dict.__iter__(self)

    def __len__(self) -> int:
        self._load_all()
        return dict.__len__(self)

    def keys(self):
        # Names only (the suggestions for a mistyped command need no import).
        return self.names()

    def values(self):
        self._load_all()
        return dict.values(self)

    def items(self):
        self._load_all()
        return dict.items(self)


def _shorten(text: str, limit: int) -> str:
    """Click's shortening of a one-line help to ``limit`` characters."""
    try:  # typer >= 0.2x carries its own copy of click
        from typer._click.utils import make_default_short_help
    except ImportError:  # the same function from click itself, under the same name
        from click.utils import make_default_short_help  # type: ignore[no-redef]
    return make_default_short_help(text, limit)


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



@app.callback()
def _root() -> None:
    # A group callback that does nothing: it makes typer build a group even before
    # any command module has registered its commands.
    pass


def main() -> None:
    """Entry point of the ``barwright`` console script."""
    app()
