"""Make the 3-D reference model importable as ``solid3d`` from tests in this folder.

``tests/`` holds no ``__init__.py`` files, so each test module is imported by its own
name; putting this folder on ``sys.path`` lets ``from solid3d import ...`` work from any
test here.
"""

from __future__ import annotations

import sys
from pathlib import Path

_HERE = str(Path(__file__).resolve().parent)
if _HERE not in sys.path:
    sys.path.insert(0, _HERE)
