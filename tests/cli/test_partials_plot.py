"""`barwright partials --plot/--out`: the mode-shape PNG is written whole, named in
the JSON, and never overwritten unasked (exit 2, one line, file untouched).
"""

from __future__ import annotations

import json
from pathlib import Path

from matplotlib import image
from typer.testing import CliRunner

from synth.cli import app

BAR = """
material = "aluminium-6061-t6"
length_m = 0.400
width_m = 0.050
thickness_m = 0.010
"""


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_plot_written_named_and_kept(tmp_path: Path) -> None:
    bar = tmp_path / "bar.toml"
    bar.write_text(BAR, encoding="utf-8")
    png = tmp_path / "shapes.png"
    r = run("partials", bar, "--out", png, "--json")
    assert r.exit_code == 0, r.output
    data = json.loads(r.stdout)
    assert data["plot"] == str(png)
    picture = image.imread(png)
    assert picture.ndim == 3 and picture.shape[0] > 400 and picture.shape[1] > 600
    # the plot's mode 1 nodes are the table's: 0.2242 L from each end for a uniform bar
    # (Blevins, Formulas for Natural Frequency and Mode Shape, free-free beam)
    nodes = data["partials"][0]["nodes_m"]
    assert abs(nodes[0] / 0.4 - 0.2242) < 1e-4
    before = png.read_bytes()
    again = run("partials", bar, "--out", png)
    assert again.exit_code == 2
    lines = [ln for ln in again.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "already exists" in lines[0] and "Traceback" not in again.output
    assert png.read_bytes() == before
    forced = run("partials", bar, "--out", png, "--force", "--no-losses")
    assert forced.exit_code == 0, forced.output
    assert f"plot: {png}" in forced.stdout
