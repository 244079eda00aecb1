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

    Invariance test (style guide section 6): the engine is linear in its voices.
    """
    import synth
    from synth.engine.score import Score, Strike

    demo = synth.load_instrument(ROOT / "presets" / "instruments" / "tarrow-37.toml")
    plan = synth.Voicer(demo, channels=1, tubes=False)
    score = Score(strikes=(Strike(time_s=0.0, note="A4", velocity=0.5),
                           Strike(time_s=0.25, note="C5", velocity=0.8)), pedal=())
    fs = plan.sample_rate
    x = synth.render_score(plan, score, seconds=1.0, default_pedal=1.0)
    a = synth.render_strike(plan, "A4", seconds=1.0, velocity=0.5)
    c = synth.render_strike(plan, "C5", seconds=0.75, velocity=0.8)
    expected = a.copy()
    expected[int(0.25 * fs):] += c
    np.testing.assert_allclose(x, expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_bad_plan_is_one_clear_error() -> None:
    """Refuse a path where a plan belongs, naming the argument."""
    import synth

    with pytest.raises(synth.ConfigError, match="plan"):
        synth.render_strike("presets/instruments/tarrow-37.toml", "A4")
    with pytest.raises(synth.ConfigError, match="seconds"):
        synth.render_strike(
            synth.load_instrument(ROOT / "presets" / "instruments" / "tarrow-37.toml"),
            "A4", seconds=-1.0)
