"""The package layers import only downward (design outline, DEVELOPERS.md).

bottom (errors, constants, pitch, config, numerics) <- physics; engine (generic, beside physics)
<- settings (files -> physics and engine dataclasses) <- voicing (physics onto engine
voices); io <- output (engine + io); analysis (arrays only) <- reports <- cli.  The engine must never import physics, so it
cannot learn about bars; physics must never import audio or the engine.
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
    ``from numba import njit``, ``from numba.core import types``, and imports nested
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
    return lines


@pytest.mark.parametrize("snippet", [
    "import numba",
    "import numba as nb",
    "import numba.core.types",
    "import os, numba",
    "from numba import njit",
    "from numba.core import types",
    "def f():\n    from numba import prange\n    return prange",
])
def test_numba_finder_sees_every_import_form(snippet: str) -> None:
    """The checker below must not be fooled by the spelling of the import."""
    assert _numba_imports(snippet) != []


@pytest.mark.parametrize("snippet", [
    "import numbers", "from numbat import x", "x = 'import numba'", "# import numba",
    "from . import numba",
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
