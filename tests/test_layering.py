"""The package layers import only downward (design outline, DEVELOPERS.md).

bottom (errors, constants, pitch, config, numerics) <- physics; engine (generic, beside physics)
<- voicing (physics onto engine voices); io <- output (engine + io); analysis (arrays
only) <- reports <- cli.  The engine must never import physics, so it
cannot learn about bars; physics must never import audio or the engine.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "synth"

# For each layer, the synth subpackages/modules it must not import.
FORBIDDEN = {
    "errors": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "constants": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "pitch": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "config": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "numerics": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "executor": {"physics", "engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "physics": {"engine", "voicing", "io", "analysis", "reports", "cli", "bench"},
    "engine": {"physics", "voicing", "io", "output", "analysis", "reports", "cli", "bench",
               "instrument"},
    "analysis": {"physics", "engine", "voicing", "output", "reports", "cli", "bench",
                 "instrument"},
    "io": {"physics", "engine", "voicing", "output", "analysis", "reports", "cli", "bench"},
    "voicing": {"analysis", "reports", "cli", "bench", "io", "output"},
    "output": {"physics", "voicing", "analysis", "reports", "cli", "bench", "instrument"},
    "reports": {"cli", "bench"},
    "api": {"cli", "bench"},
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
    layer = _layer_of(path)
    bad = _imports(path) & FORBIDDEN.get(layer, set())
    assert not bad, f"{path.relative_to(ROOT)} ({layer}) imports {sorted(bad)}"


def test_numba_only_in_kernels() -> None:
    """Every @njit lives in synth/engine/kernels.py (style guide, section 5)."""
    offenders = [
        str(p.relative_to(ROOT))
        for p in ROOT.rglob("*.py")
        if p.name != "kernels.py" and "numba" in p.read_text(encoding="utf-8")
        and "import numba" in p.read_text(encoding="utf-8")
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
