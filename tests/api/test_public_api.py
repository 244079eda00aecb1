"""The public Python API: a cheap ``import synth`` and a README example that runs.

Sources
-------
- The README's "From Python" example is executed as written (the style guide's
  rule that documented examples are run by the tests).
- Partials of a render found by the analysis module agree with the plan that
  made them (an independent path: ESPRIT on the samples against the modal
  frequencies the plan gave the engine).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from synth.reports.demo import demo_preset_path

ROOT = Path(__file__).resolve().parents[2]


def test_import_synth_loads_neither_numba_nor_scipy() -> None:
    """Import the package in a fresh interpreter and list the heavy modules it loaded."""
    code = ("import sys, json, synth; "
            "print(json.dumps(sorted(m for m in sys.modules "
            "if m.split('.')[0] in ('numba', 'scipy', 'matplotlib', 'distributed', "
            "'numpy', 'synth'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    loaded = json.loads(out.stdout)
    assert loaded == ["synth"]


def test_every_public_name_resolves() -> None:
    """Resolve each name of ``synth.__all__`` and each name of the stub."""
    import synth

    stub = (ROOT / "synth" / "__init__.pyi").read_text(encoding="utf-8")
    stub_names = set(re.findall(r" as (\w+)$", stub, flags=re.M))
    assert stub_names == set(synth.__all__)
    for name in synth.__all__:
        assert getattr(synth, name) is not None
    with pytest.raises(AttributeError):
        synth.no_such_name  # noqa: B018


def _readme_example() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## From Python", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1
    return blocks[0]


def test_readme_example_runs_and_its_numbers_agree(monkeypatch) -> None:
    """Execute the README example; check what it prints against the plan."""
    monkeypatch.chdir(ROOT)
    out = io.StringIO()
    scope: dict = {}
    with contextlib.redirect_stdout(out):
        exec(compile(_readme_example(), "README.md", "exec"), scope)  # noqa: S102
    lines = out.getvalue().splitlines()
    assert len(lines) == 3
    plan, found = scope["plan"], scope["found"]
    f1, _, t60_tube = plan.fundamental("A4")
    t60_bare = scope["bare"].fundamental("A4")[2]
    assert t60_tube < t60_bare   # the tube shortens the ring (common practice, no source)
    # the strongest partials of the render sit on the plan's modes: 0.5 cent
    # (ESPRIT on a 1 s noiseless render resolves far better; the margin covers
    # the coupled pair's two poles near the fundamental)
    planned = [f1] + [b.frequency_hz for b in plan.model("A4").budget[1:]]
    for p in scope["found"].partials[:3]:
        nearest = min(planned, key=lambda f: abs(math.log2(p.frequency_hz / f)))
        assert 1200 * abs(math.log2(p.frequency_hz / nearest)) < 0.5
    assert len(found.partials) >= 3


def test_render_score_is_the_sum_of_its_strikes(tmp_path) -> None:
    """A score of two strikes equals the sum of the two strikes rendered alone.

    Invariance test (style guide section 6): the engine is linear in its voices,
    up to what each render retires (tails summed below -100 dB re its own peak,
    the bound proved in :mod:`synth.engine.render`) and rounding (1e-9 of the peak).
    """
    import synth
    from synth.engine.score import Score, Strike

    demo = synth.load_instrument(demo_preset_path())
    plan = synth.Voicer(demo, channels=1, tubes=False)
    score = Score(strikes=(Strike(time_s=0.0, note="A4", velocity=0.5),
                           Strike(time_s=0.25, note="C5", velocity=0.8)), pedal=())
    fs = plan.sample_rate
    x = synth.render_score(plan, score, seconds=1.0, default_pedal=1.0)
    a = synth.render_strike(plan, "A4", seconds=1.0, velocity=0.5)
    c = synth.render_strike(plan, "C5", seconds=0.75, velocity=0.8)
    expected = a.copy()
    expected[int(0.25 * fs):] += c
    retired = 1e-5 * sum(float(np.abs(y).max()) for y in (x, a, c))
    np.testing.assert_allclose(x, expected, rtol=0,
                               atol=retired + 1e-9 * np.abs(expected).max())


def test_bad_plan_is_one_clear_error() -> None:
    """Refuse a path where a plan belongs, naming the argument."""
    import synth

    with pytest.raises(synth.ConfigError, match="plan"):
        synth.render_strike(str(demo_preset_path()), "A4")
    with pytest.raises(synth.ConfigError, match="seconds"):
        synth.render_strike(
            synth.load_instrument(demo_preset_path()),
            "A4", seconds=-1.0)


UNIFORM_BAR = """\
material = "aluminium-6061-t6"
length_m = 0.400
width_m = 0.040
thickness_m = 0.006
"""


def test_solve_partials_of_a_uniform_bar_against_euler_bernoulli(tmp_path) -> None:
    """Solve a slender uniform bar from a file; compare with the free-free beam roots.

    Source: R. D. Blevins, Formulas for Natural Frequency and Mode Shape (1979),
    free-free beam, lambda_1 = 4.73004, lambda_2 = 7.85320;
    f = lambda^2 / (2 pi L^2) sqrt(E I / (rho A)).  The 1-D model includes shear
    and rotary inertia, which lower the modes of this bar (thickness/length 0.015)
    by about 0.1 % (mode 1) and 0.25 % (mode 2, measured here): tolerances 0.3 %
    and 0.6 %, and the model must lie below the thin-beam value.
    """
    import synth

    path = tmp_path / "uniform.toml"
    path.write_text(UNIFORM_BAR, encoding="utf-8")
    design = synth.load_design(path)
    modes = synth.solve_partials(design, n_lateral=0, n_torsional=0)
    mat = design.material.at_temperature(design.temperature_c)
    length, width, thick = 0.400, 0.040, 0.006
    ei = mat.youngs_modulus_pa * width * thick**3 / 12.0
    rho_a = mat.density_kg_m3 * width * thick
    expected = [lam**2 / (2 * math.pi * length**2) * math.sqrt(ei / rho_a)
                for lam in (4.73004, 7.85320)]
    got = [m.frequency_hz for m in modes.vertical[:2]]
    assert got[0] == pytest.approx(expected[0], rel=0.003) and got[0] < expected[0]
    assert got[1] == pytest.approx(expected[1], rel=0.006) and got[1] < expected[1]
    with pytest.raises(synth.ConfigError, match="note"):
        synth.solve_partials(design, "A4")
    demo = synth.load_instrument(demo_preset_path())
    with pytest.raises(synth.ConfigError, match="name the bar"):
        synth.solve_partials(demo)
