"""The package layers import only downward (design outline, DEVELOPERS.md).

bottom (errors, constants, pitch, config, numerics) <- physics; engine (generic, beside
physics) <- settings (files -> physics and engine dataclasses) <- voicing (physics onto
engine voices); io <- output (engine + io); analysis (arrays only) <- reports <- cli.
The engine must never import physics, so it cannot learn about bars; physics must never
import audio or the engine; only settings reads preset, event and MIDI files.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "synth"

# For each layer, the synth subpackages/modules it must not import.
FORBIDDEN = {
    "errors": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
               "bench"},
    "defaults": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
                 "bench"},
    "constants": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports",
                  "cli", "bench"},
    "pitch": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
              "bench"},
    "config": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
               "bench"},
    "numerics": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
                 "bench"},
    "executor": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports", "cli",
                 "bench"},
    "plan_cache": {"physics", "engine", "settings", "voicing", "io", "analysis", "reports",
                   "cli", "bench"},
    "physics": {"engine", "settings", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "engine": {"physics", "settings", "voicing", "io", "output", "analysis", "reports", "cli",
               "bench"},
    "settings": {"voicing", "io", "output", "analysis", "reports", "live", "api", "cli",
                 "bench"},
    "analysis": {"physics", "engine", "settings", "voicing", "output", "reports", "cli",
                 "bench"},
    "io": {"physics", "engine", "settings", "voicing", "output", "analysis", "reports", "cli",
           "bench"},
    "voicing": {"analysis", "reports", "cli", "bench", "io", "output"},
    "output": {"physics", "settings", "voicing", "analysis", "reports", "cli", "bench"},
    "reports": {"cli", "bench"},
    "api": {"cli", "bench"},
    "live": {"cli", "bench"},
}


def _layer_of(path: Path) -> str:
    rel = path.relative_to(ROOT)
    return rel.parts[0].removesuffix(".py")


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("synth."):
                    found.add(alias.name.split(".")[1])
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module.startswith("synth."):
                found.add(node.module.split(".")[1])
            elif node.module == "synth":
                found.update(a.name for a in node.names)
    return found


@pytest.mark.parametrize("path", sorted(ROOT.rglob("*.py")), ids=lambda p: str(p.relative_to(ROOT)))
def test_imports_point_downward(path: Path) -> None:
    """No module imports a layer above its own."""
    layer = _layer_of(path)
    bad = _imports(path) & FORBIDDEN.get(layer, set())
    assert not bad, f"{path.relative_to(ROOT)} ({layer}) imports {sorted(bad)}"


KERNELS = ROOT / "engine" / "kernels.py"


def _numba_imports(source: str) -> list[int]:
    """Line numbers where ``source`` imports numba in any form.

    Catches ``import numba``, ``import numba as nb``, ``import numba.core.types``,
    ``from numba import njit``, ``from numba.core import types``,
    ``importlib.import_module("numba")``, ``__import__("numba")``, and imports nested
    inside functions (``ast.walk`` visits every node).
    """
    lines = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            if any(a.name == "numba" or a.name.startswith("numba.") for a in node.names):
                lines.append(node.lineno)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module and (
                node.module == "numba" or node.module.startswith("numba.")):
            lines.append(node.lineno)
        elif isinstance(node, ast.Call) and (getattr(node.func, "attr", None) == "import_module"
                                             or getattr(node.func, "id", None) in (
                                                 "__import__", "import_module")):
            arg = node.args[0] if node.args else None
            if isinstance(arg, ast.Constant) and isinstance(arg.value, str) and (
                    arg.value == "numba" or arg.value.startswith("numba.")):
                lines.append(node.lineno)
    return lines


@pytest.mark.parametrize("snippet", [
    "import numba",
    "import numba as nb",
    "import numba.core.types",
    "import os, numba",
    "from numba import njit",
    "from numba.core import types",
    "def f():\n    from numba import prange\n    return prange",
    "import importlib\nnb = importlib.import_module('numba')",
    "nb = __import__('numba.core')",
])
def test_numba_finder_sees_every_import_form(snippet: str) -> None:
    """The checker below must not be fooled by the spelling of the import."""
    assert _numba_imports(snippet) != []


@pytest.mark.parametrize("snippet", [
    "import numbers", "from numbat import x", "x = 'import numba'", "# import numba",
    "from . import numba", "importlib.import_module('numbat')",
])
def test_numba_finder_ignores_lookalikes(snippet: str) -> None:
    """Names that merely contain "numba", text and relative imports are not numba."""
    assert _numba_imports(snippet) == []


def test_numba_only_in_kernels() -> None:
    """Every @njit lives in synth/engine/kernels.py (style guide, section 5)."""
    assert _numba_imports(KERNELS.read_text(encoding="utf-8")), "kernels.py lost its numba"
    offenders = [
        f"{p.relative_to(ROOT)}:{line}"
        for p in sorted(ROOT.rglob("*.py")) if p != KERNELS
        for line in _numba_imports(p.read_text(encoding="utf-8"))
    ]
    assert offenders == []


def test_only_cli_prints() -> None:
    """Library code returns data or logs; only synth/cli prints (style guide, section 7)."""
    offenders = []
    for p in ROOT.rglob("*.py"):
        if p.relative_to(ROOT).parts[0] == "cli":
            continue
        tree = ast.parse(p.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "print":
                offenders.append(f"{p.relative_to(ROOT)}:{node.lineno}")
    assert offenders == []


# ----------------------------------------------------------------------- file readers
# Only the settings layer reads preset files, event lists and MIDI files (DEVELOPERS.md,
# "Layers"); config.py holds the TOML primitives it uses, and the command line may
# parse its own arguments.
READER_HOMES = ("settings/", "config.py", "cli/")
TOML_MODULES = ("tomllib", "tomli")
CONFIG_READERS = {"load_toml", "parse_toml", "find_preset"}


def _file_reading(source: str) -> list[str]:
    """Return what ``source`` does that belongs to the settings layer (``line: what``).

    Finds TOML libraries imported in any form (``import tomllib``, ``import tomli as
    t``, ``from tomllib import loads``, nested in functions), the reading functions of
    ``synth.config`` imported or called through the module (``config.load_toml``), and
    MIDI files opened with mido (``mido.MidiFile(path)``, ``MidiFile(filename=...)``,
    ``mido.read_syx_file``).  Building an empty ``MidiFile(type=0)`` to write is not
    reading.
    """
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            found += [f"{node.lineno}: import {a.name}" for a in node.names
                      if a.name.split(".")[0] in TOML_MODULES]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            if node.module.split(".")[0] in TOML_MODULES:
                found.append(f"{node.lineno}: from {node.module} import")
            elif node.module == "synth.config":
                found += [f"{node.lineno}: synth.config.{a.name}" for a in node.names
                          if a.name in CONFIG_READERS]
        elif isinstance(node, ast.Attribute) and node.attr in CONFIG_READERS:
            found.append(f"{node.lineno}: .{node.attr}")
        elif isinstance(node, ast.Call):
            name = getattr(node.func, "attr", None) or getattr(node.func, "id", None)
            if name == "read_syx_file" or (name == "MidiFile" and (node.args or any(
                    k.arg in ("filename", "file") for k in node.keywords))):
                found.append(f"{node.lineno}: {name}(...)")
    return found


@pytest.mark.parametrize("snippet", [
    "import tomllib",
    "import tomli as t",
    "import os, tomllib",
    "from tomllib import loads",
    "def f():\n    import tomllib\n    return tomllib",
    "from synth.config import load_toml",
    "from synth.config import Section, parse_toml",
    "from synth.config import find_preset",
    "from synth import config\nconfig.load_toml('x.toml')",
    "import mido\nmido.MidiFile('x.mid')",
    "import mido\nmido.MidiFile(filename=p)",
    "from mido import MidiFile\nMidiFile(p)",
    "import mido\nmido.read_syx_file(p)",
])
def test_reader_finder_sees_every_form(snippet: str) -> None:
    """The checker below must not be fooled by the spelling of the import or call."""
    assert _file_reading(snippet) != []


@pytest.mark.parametrize("snippet", [
    "import tomli_w", "from synth.config import LIMITS, Section, presets_dir",
    "x = 'import tomllib'", "# load_toml(p)",
    "import mido\nmido.MidiFile(type=0, ticks_per_beat=480)",
    "import mido\nmido.open_input(name)", "from . import tomllib",
])
def test_reader_finder_ignores_writers_and_lookalikes(snippet: str) -> None:
    """Writing TOML or MIDI, ports, text and relative imports are not reading files."""
    assert _file_reading(snippet) == []


def test_only_settings_reads_toml_and_midi_files() -> None:
    """TOML, event lists and MIDI files are read only in synth/settings (issue 11)."""
    offenders = [
        f"{p.relative_to(ROOT)}:{hit}"
        for p in sorted(ROOT.rglob("*.py"))
        if not str(p.relative_to(ROOT).as_posix()).startswith(READER_HOMES)
        for hit in _file_reading(p.read_text(encoding="utf-8"))
    ]
    assert offenders == []


# Modules that open files themselves, each for a reason of its own; everything a user
# writes (presets, event lists, MIDI, calibration and answers files) goes through
# synth/settings instead.
OPENS_FILES = {
    "io.py": "audio and JSON input and output",
    "engine/kernels.py": "the lock file of numba's cache writes",
    "plan_cache.py": "its own cache files",
    "physics/solid.py": "its own cache of finished 3-D level solves",
    "reports/page.py": "the listening page's assets, package data",
}


def _opens(source: str) -> list[int]:
    """Return the lines that open a file.

    Calls of ``open(...)``, ``x.open(...)``, ``read_text``, ``read_bytes``, ``fdopen``
    and ``json.load``.
    """
    lines = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Call):
            f = node.func
            if (isinstance(f, ast.Name) and f.id == "open") or (
                    isinstance(f, ast.Attribute) and f.attr in (
                        "open", "read_text", "read_bytes", "fdopen")) or (
                    isinstance(f, ast.Attribute) and f.attr == "load"
                    and getattr(f.value, "id", None) == "json"):
                lines.append(node.lineno)
    return lines


@pytest.mark.parametrize("snippet, found", [
    ("open(p)", True), ("p.open('rb')", True), ("p.read_text(encoding='utf-8')", True),
    ("p.read_bytes()", True), ("json.load(fh)", True), ("os.fdopen(fd, 'wb')", True),
    ("json.loads(text)", False), ("mido.open_input(name)", False), ("x = 'open(p)'", False),
])
def test_open_finder(snippet: str, found: bool) -> None:
    """The checker below sees every way of opening a file, and nothing else."""
    assert bool(_opens(snippet)) == found


def test_files_are_opened_only_by_settings_and_the_listed_modules() -> None:
    """No module outside synth/settings, config, cli and OPENS_FILES opens a file."""
    offenders = []
    for p in sorted(ROOT.rglob("*.py")):
        rel = p.relative_to(ROOT).as_posix()
        if rel.startswith(READER_HOMES) or rel in OPENS_FILES:
            continue
        offenders += [f"{rel}:{line}" for line in _opens(p.read_text(encoding="utf-8"))]
    assert offenders == []
