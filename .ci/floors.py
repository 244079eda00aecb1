"""Print a pip constraints file that pins every declared dependency to its floor.

Reads pyproject.toml: the runtime dependencies and the ``test`` extra.  Each
``name>=X`` becomes ``name==X``, so the second CI environment runs the suite on
the oldest versions the project says it supports.  The ``lint`` extra (ruff, mypy)
is left out: CI lints and type-checks in the newest environment only.
"""

import re
import sys
import tomllib
from pathlib import Path

project = tomllib.loads(Path(sys.argv[1]).read_text(encoding="utf-8"))["project"]
requirements = project["dependencies"] + project["optional-dependencies"]["test"]
for req in requirements:
    match = re.fullmatch(r"\s*([A-Za-z0-9_.\-]+)\s*>=\s*([0-9][0-9A-Za-z.]*)\s*", req)
    if match is None:
        sys.exit(f"pyproject.toml: dependency {req!r}: give a floor as name>=version")
    print(f"{match.group(1)}=={match.group(2)}")
