"""Bad command-line input: exit code 2, one line on stderr, no traceback, nothing written.

The rule comes from the design outline (bad input: one line naming the option, the
value and what is allowed; exit code 2, the usage-error code of click).  Each case
below was found by a corpus of bad inputs: a traceback, a silent acceptance, a NaN
in the output, or click's multi-line usage block.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from cli_helpers import DEMO, assert_one_line_error, run

REPO = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize(("args", "needles"), [
    # were tracebacks (exit 1)
    (["strike", DEMO, "A4", "--hold", "1e300"], ["--hold = 1e300", "0 to 600 seconds"]),
    (["strike", DEMO, "A4", "--gain-db", "1e4"], ["--gain-db = 1e4", "-100 to 100 dB"]),
    (["tune", DEMO, "--ratios", "1:4:nan"], ["--ratios", "'1:4:nan'", "'nan'"]),
    (["chord", DEMO, "F3 A4:1.2.3"], ["NOTES", "'A4:1.2.3'", "'1.2.3'", "0 to 1"]),
    # were accepted with exit 0
    (["sustain", DEMO, "--target-curve", "F3:nan"], ["--target-curve", "'nan'"]),
    (["sustain", DEMO, "--target-curve", "F3:inf,C5:20"], ["--target-curve", "'inf'"]),
    (["sustain", DEMO, "--target-curve", "F3:30,,C5:20"], ["--target-curve", "NOTE:T60"]),
    (["sustain", DEMO, "--min-gain", "inf"], ["--min-gain = inf", "0 to 30 dB"]),
    (["tune", DEMO, "--ratios", "1::4"], ["--ratios", "an empty field"]),
    (["tune", DEMO, "--ratios", "1:4:1e400"], ["--ratios", "'1e400'"]),
    (["chord", DEMO, "F3 A4:"], ["NOTES", "an empty field"]),
    (["chord", DEMO, "F3 A4:-inf"], ["NOTES", "'-inf'"]),
    # printed NaN ratios in its JSON
    (["measure", "take.wav", "--note", "C-99", "--json"], ["--note", "'C-99'", "octave 0-9"]),
    # click's multi-line usage block
    (["strike", DEMO, "A4", "--duration", "abc"], ["strike --duration = abc", "0.05 to 600"]),
    (["partials", DEMO, "--note", "A4", "--vertical", "99"],
     ["partials --vertical = 99", "whole number from 1 to 12"]),
    (["partials", DEMO, "--note", "A4", "--vertical=2.5"], ["--vertical = 2.5"]),
    (["strike", DEMO, "A4", "--velocity", "nan"], ["--velocity = nan", "0 to 1"]),
    (["partials", DEMO, "--no-such-option"], ["partials:", "--no-such-option", "--help"]),
    (["strike", DEMO], ["strike:", "note"]),
    (["no-such-command"], ["no-such-command"]),
])
def test_bad_option_is_one_line(tmp_path: Path, monkeypatch, args, needles) -> None:
    """Each value is refused before any work, on one line naming option and value."""
    monkeypatch.chdir(tmp_path)
    assert_one_line_error(run(*args), *needles)
    assert list(tmp_path.iterdir()) == []  # nothing written, not even a folder


@pytest.mark.parametrize("hide_rich", [False, True])
def test_console_script_prints_one_line_with_or_without_rich(tmp_path, hide_rich) -> None:
    """main() (the installed ``barwright``) gives the same line whether rich imports or not."""
    code = ("import sys\n"
            + ("sys.modules['rich'] = None\n" if hide_rich else "")
            + "sys.argv = ['barwright', 'strike', 'missing.toml', 'A4', '--hold', '1e300']\n"
              "from synth.cli import main\n"
              "main()\n")
    env = {**os.environ, "PYTHONPATH": str(REPO), "TYPER_USE_RICH": "0" if hide_rich else "1"}
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                       cwd=tmp_path, timeout=120)
    assert r.returncode == 2, r.stderr
    assert r.stderr.splitlines() == [
        "barwright: error: strike --hold = 1e300: must be a number from 0 to 600 seconds"]
    assert r.stdout == ""


def test_bare_command_prints_help() -> None:
    """``barwright`` alone prints the help with the exit codes (click's code 2)."""
    r = run()
    assert r.exit_code == 2
    assert "Exit codes" in r.stdout + r.stderr
