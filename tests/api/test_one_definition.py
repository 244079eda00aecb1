"""One definition of each thing: constants, converters, class names, shared options.

These read the source (``ast``) and the command line's own parameter lists; the
rules are the project's (DEVELOPERS.md, "Map of the code" and the style guide's
one-place rules), no outside source.
"""

from __future__ import annotations

import ast
import collections
import dataclasses
import math
from pathlib import Path

import typer.main

from synth.cli import app
from synth.cli.options import RenderOptions
from synth.constants import LN_1000

ROOT = Path(__file__).resolve().parents[2] / "synth"


def _trees():
    for path in sorted(ROOT.rglob("*.py")):
        yield path, ast.parse(path.read_text(encoding="utf-8"))


def test_no_two_classes_share_a_name() -> None:
    """Give every class of the package its own name (two CoupledPair, two Strike before)."""
    seen = collections.defaultdict(list)
    for path, tree in _trees():
        for node in ast.walk(tree):
            if isinstance(node, ast.ClassDef):
                seen[node.name].append(str(path.relative_to(ROOT)))
    assert {k: v for k, v in seen.items() if len(v) > 1} == {}


def test_ln_1000_and_cents_to_ratio_are_written_once() -> None:
    """Define ln 1000 only in constants.py and 2^(c/1200) only in pitch.py."""
    logs, powers = [], []
    for path, tree in _trees():
        rel = str(path.relative_to(ROOT))
        for node in ast.walk(tree):
            if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                    and node.func.attr == "log" and len(node.args) == 1
                    and isinstance(node.args[0], ast.Constant) and node.args[0].value == 1000):
                logs.append(rel)
            if (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Pow)
                    and isinstance(node.left, ast.Constant) and node.left.value == 2
                    and "1200" in ast.unparse(node.right)):
                powers.append(rel)
    assert logs == ["constants.py"]
    assert powers == []   # pitch.cents_to_ratio writes it with CENTS_PER_OCTAVE
    assert math.log(1000.0) == LN_1000


def test_sound_commands_share_one_definition_of_their_options() -> None:
    """Give strike, chord and render the same shared options, declared once."""
    root = typer.main.get_command(app)
    shared = {f.name for f in dataclasses.fields(RenderOptions)}
    found = {}
    for name in ("strike", "chord", "render"):
        params = {p.name: p for p in root.commands[name].params}
        assert shared <= set(params)
        found[name] = {n: (tuple(params[n].opts), params[n].help, params[n].default)
                       for n in shared}
    assert found["strike"] == found["chord"] == found["render"]


def test_demo_and_sound_commands_are_short() -> None:
    """Keep every function of cmd_demo and cmd_sound within 40 lines."""
    long = []
    for name in ("cmd_demo.py", "cmd_sound.py"):
        tree = ast.parse((ROOT / "cli" / name).read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef) and node.end_lineno - node.lineno >= 40:
                long.append((name, node.name, node.end_lineno - node.lineno + 1))
    assert long == []


MAX_COMMAND_BODY = 40
"""Most lines a command function's body may hold (its docstring and options not counted):
the command parses, calls the library and prints through helpers (issue 11, item 4)."""


def _command_bodies(source: str) -> dict[str, int]:
    """Body lines of every ``*_command`` function in ``source``, docstring left out."""
    out = {}
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.FunctionDef) and node.name.endswith("_command"):
            body = node.body
            if (len(body) > 1 and isinstance(body[0], ast.Expr)
                    and isinstance(body[0].value, ast.Constant)):
                body = body[1:]
            out[node.name] = node.end_lineno - body[0].lineno + 1
    return out


def test_every_command_function_is_short() -> None:
    """Keep the body of every ``*_command`` in cli/cmd_*.py within 40 lines."""
    files = sorted((ROOT / "cli").glob("cmd_*.py"))
    bodies = {(path.name, name): n for path in files
              for name, n in _command_bodies(path.read_text(encoding="utf-8")).items()}
    assert len(bodies) >= 15   # every command module was read
    assert {k: n for k, n in bodies.items() if n > MAX_COMMAND_BODY} == {}


def test_the_command_length_check_sees_a_long_body() -> None:
    """Count a 41-line body as too long and a 40-line one, with its docstring, as short."""
    def source(n: int) -> str:
        return ('def x_command(a: int = 1) -> None:\n    """Doc."""\n'
                + "    a += 1\n" * n + "\n\ndef helper():\n    pass\n")

    assert _command_bodies(source(41)) == {"x_command": 41}
    assert _command_bodies(source(40)) == {"x_command": 40}
