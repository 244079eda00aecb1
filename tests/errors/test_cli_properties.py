"""Bad files through the command line: exit code 2, one stderr line, nothing written.

The demo files are mutated with values no key accepts (see ``mutate.py``) and
handed to ``partials``, ``strike`` and ``render`` through typer's CliRunner.  The
promise checked is the project's rule for bad input (no outside source): exit
code 2, exactly one line on stderr naming the file, no traceback, and no output
file left behind.  Every case fails at load, so nothing is solved or rendered.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import mutate
from hypothesis import HealthCheck, given, settings
from typer.testing import CliRunner

from synth.cli import app

CASES = settings(max_examples=60, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                        HealthCheck.filter_too_much])

_DIR = Path(tempfile.mkdtemp(prefix="cli-props-"))
PRESET_FILE = mutate.PRESETS / "instruments" / "lantern-street-bars.toml"
BAR = mutate.load("bars/parabolic-example.toml")
PRESET = mutate.load("instruments/lantern-street-bars.toml")
EVENTS = mutate.load("events/harbour-waltz.toml")


def _surely_bad(change) -> bool:
    return change[2]


def _refused(args: list[str], source: Path) -> None:
    out = _DIR / "out.wav"
    out.unlink(missing_ok=True)
    before = sorted(p.name for p in _DIR.iterdir())
    result = CliRunner().invoke(app, args)
    assert result.exit_code == 2, (result.exit_code, result.output, result.exception)
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    assert str(source) in lines[0], lines[0]
    assert "Traceback" not in result.output + result.stderr
    assert sorted(p.name for p in _DIR.iterdir()) == before  # no file written
    assert not out.exists()


@CASES
@given(mutate.mutation(BAR).filter(_surely_bad))
def test_partials_refuses_bad_bar_files(change) -> None:
    file = mutate.write(_DIR / "bar.toml", change[0])
    _refused(["partials", str(file), "--no-losses"], file)


@CASES
@given(mutate.mutation(PRESET).filter(_surely_bad))
def test_strike_refuses_bad_presets(change) -> None:
    file = mutate.write(_DIR / "preset.toml", change[0])
    _refused(["strike", str(file), "A4", "--out", str(_DIR / "out.wav")], file)


@CASES
@given(mutate.mutation(EVENTS).filter(_surely_bad))
def test_render_refuses_bad_event_lists(change) -> None:
    file = mutate.write(_DIR / "events.toml", change[0])
    _refused(["render", str(PRESET_FILE), str(file), "--out", str(_DIR / "out.wav")], file)


@CASES
@given(mutate.midi_bytes())
def test_render_reads_or_refuses_midi(data: bytes) -> None:
    """Drawn MIDI bytes the reader refuses are refused in one line by the command too."""
    from synth.errors import ConfigError
    from synth.settings.score import read_midi

    file = _DIR / "passage.mid"
    file.write_bytes(data)
    try:
        read_midi(file)
    except ConfigError:
        _refused(["render", str(PRESET_FILE), str(file), "--out", str(_DIR / "out.wav")], file)
