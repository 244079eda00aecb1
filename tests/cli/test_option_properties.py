"""Property test: no value of any numeric option gets past the parser untidily.

For every numeric option of every command that takes one, generated values (huge,
tiny, negative, NaN, infinite, boundary, garbage text) must give exit code 2 with
exactly one stderr line, no traceback and no file written.  The invocations name a
preset (or recording) that does not exist, so a value the option accepts stops at the
file with one line about the file, and a value it refuses stops at the parser with one
line naming the option.  The oracle is independent of the command line's parser: a
plain decimal number inside the bounds the option declares is accepted, anything
Python's ``float`` cannot read, NaN, infinity and numbers outside the bounds are
refused (the one-line rule is the design outline's; the bounds are each option's own).
Compound values (``--ratios``, ``--target-curve``, chord notes) get the same check.

Seeded (``derandomize``) and without the example database, so every run draws the same
cases; 200 cases per option group.
"""

from __future__ import annotations

import math
import os
import re
from pathlib import Path

import pytest
import typer.main
import typer.testing
from cli_helpers import run, stderr_lines
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from synth.cli import app
from synth.cli.usage import number_kind, option_bounds
from synth.io import SAMPLE_RATES_HZ

CASES = settings(max_examples=200, derandomize=True, database=None, deadline=None,
                 suppress_health_check=[HealthCheck.too_slow])

# Each command with arguments that stop at a missing file once the options parse.
BASE = {
    "partials": ["missing.toml", "--note", "A4"],
    "tune": ["missing.toml"],
    "grind": ["missing.toml"],
    "solid": ["missing.toml", "--note", "A4"],
    "strike": ["missing.toml", "A4"],
    "chord": ["missing.toml", "A4"],
    "render": ["missing.toml", "missing-events.toml"],
    "sustain": ["missing.toml"],
    "compare": ["missing-a.toml", "missing-b.toml", "--blind", "4"],
    "measure": ["missing.wav"],
    "sweep": ["missing.toml", "--vary", "tubes.offset_cents=0"],
}
GROUPS = {"bar": ("partials", "tune", "grind", "solid"), "sound": ("strike", "chord", "render"),
          "reports": ("sustain", "compare", "measure", "sweep")}


def numeric_options() -> dict[str, list[tuple[str, str, str, float, float]]]:
    """(command, option, kind, lo, hi) of every numeric option, by group."""
    root = typer.main.get_command(app)
    found: dict[str, list] = {g: [] for g in GROUPS}
    for group, commands in GROUPS.items():
        for name in commands:
            for p in root.commands[name].params:
                kind = number_kind(p)
                if kind is not None and getattr(p, "param_type_name", "") == "option":
                    lo, hi = option_bounds(p)
                    found[group].append((name, max(p.opts, key=len), kind, lo, hi))
    return found


OPTIONS = numeric_options()


def test_every_numeric_option_is_bounded() -> None:
    """No numeric option of any command is left without both bounds."""
    root = typer.main.get_command(app)
    loose = [(name, p.opts) for name, cmd in root.commands.items() for p in cmd.params
             if number_kind(p) is not None and None in option_bounds(p)]
    assert loose == []
    assert sum(len(v) for v in OPTIONS.values()) >= 40  # the groups cover the commands


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    """Work in an empty folder; build the command tree once, for speed."""
    folder = tmp_path_factory.mktemp("work")
    old = Path.cwd()
    os.chdir(folder)
    built = typer.main.get_command(app)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(typer.testing, "_get_command", lambda _app: built, raising=False)
        yield folder
    os.chdir(old)


def number_texts(lo: float, hi: float) -> st.SearchStrategy[str]:
    """Values as a user (or a script gone wrong) might type them."""
    edges = [lo, hi, math.nextafter(lo, -math.inf), math.nextafter(hi, math.inf),
             (lo + hi) / 2, -hi, hi * 10, lo - 1]
    return st.one_of(
        st.floats(allow_nan=True, allow_infinity=True).map(repr),
        st.floats(min_value=lo, max_value=hi).map(repr),
        st.integers(min_value=-10**30, max_value=10**30).map(str),
        st.integers(min_value=math.floor(lo), max_value=math.ceil(hi)).map(str),
        st.sampled_from(edges).map(repr),
        st.sampled_from(["nan", "-nan", "inf", "-inf", "Infinity", "1e400", "-1e400", "1e-400",
                         "", " ", "abc", "1,5", "1..2", "0x10", "1e", "--", "-", "2 3",
                         "1_0", "٣", "½", "1\n2", "\x00", "None", "true"]),
        st.text(max_size=6),
    )


_PLAIN = {"number": re.compile(r"[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?"),
          "whole number": re.compile(r"[+-]?[0-9]+")}


def verdict(text: str, kind: str, lo: float, hi: float) -> str:
    """``"accept"``, ``"refuse"`` or ``"either"`` by the rule, not by the parser."""
    try:
        value = float(text)
    except ValueError:
        return "refuse"
    if not math.isfinite(value) or not lo <= value <= hi:
        return "refuse"
    return "accept" if _PLAIN[kind].fullmatch(text) else "either"


def check(result, folder: Path, option: str, expect: str) -> None:
    """Check the one-line rule, and which line it is: the option's or the missing file's."""
    assert result.exit_code == 2, (result.exit_code, result.stderr, result.exception)
    lines = stderr_lines(result)
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("barwright: error: ")
    assert "Traceback" not in result.stderr and result.stdout == ""
    assert list(folder.iterdir()) == []
    if expect == "accept":
        assert "not found" in lines[0] and option not in lines[0], lines[0]
    elif expect == "refuse":
        assert f"{option} = " in lines[0] and "must" in lines[0], lines[0]


def option_case(group: str):
    """Draw an option of the group and a value for it."""
    return st.sampled_from(OPTIONS[group]).flatmap(
        lambda o: st.tuples(st.just(o), number_texts(o[3], o[4])))


@pytest.mark.parametrize("group", list(GROUPS))
def test_numeric_options(workdir: Path, group: str) -> None:
    """200 generated values per group of commands (see the module docstring)."""

    @CASES
    @given(case=option_case(group))
    def one(case) -> None:
        (command, option, kind, lo, hi), text = case
        result = run(command, *BASE[command], f"{option}={text}")
        expect = verdict(text, kind, lo, hi)
        if option == "--sample-rate" and expect == "accept":
            expect = "accept" if int(text) in SAMPLE_RATES_HZ else "refuse"  # a set, not a range
        check(result, workdir, option, expect)

    one()


FIELD = st.one_of(number_texts(0.0, 1.0), st.floats(0.0, 1.0).map(repr))


def field_verdict(fields: list[str], lo: float, hi: float) -> str:
    """Combine the verdicts of the fields of a compound value."""
    return ("accept" if all(verdict(f, "number", lo, hi) == "accept" for f in fields)
            else "refuse" if any(verdict(f, "number", lo, hi) == "refuse" for f in fields)
            else "either")


@CASES
@given(which=st.sampled_from(["ratios", "curve", "chord"]), a=FIELD, b=FIELD)
def test_compound_values(workdir: Path, which: str, a: str, b: str) -> None:
    """Ratios 1:a:b, curves F3:a,C5:b and chords A4:a C5:b: each field a finite number."""
    if which == "ratios":  # accepted fields become increasing ratios, 2..3 and 4..5
        a, b = (repr(base + float(x)) if verdict(x, "number", 0, 1) == "accept" else x
                for base, x in ((2.0, a), (4.0, b)))
        text = f"1:{a}:{b}"
        r = run("tune", "missing.toml", "--ratios", text)
        expect = field_verdict([a, b], 1.0, 50.0)
        if expect == "accept" and not 1.0 < float(a) < float(b):
            expect = "refuse"  # ratios must increase
        check(r, workdir, "--ratios", expect)
    elif which == "curve":
        fields = [repr(1 + 59 * float(x)) if verdict(x, "number", 0, 1) == "accept" else x
                  for x in (a, b)]  # accepted fields become T60s of 1-60 s
        text = f"F3:{fields[0]},C5:{fields[1]}"
        r = run("sustain", "missing.toml", "--target-curve", text)
        check(r, workdir, "--target-curve", field_verdict(fields, 0.01, 600.0))
    else:
        text = f"A4:{a} C5:{b}"
        r = run("chord", "missing.toml", text)
        if any(c in a + b for c in " ,\t\n\r\x0b\x0c\x1c\x1d\x1e\x1f\x85\xa0"):
            expect = "either"  # a separator inside a field splits it into other items
        else:
            expect = field_verdict([a, b], 0.0, 1.0)
        check(r, workdir, "NOTES", expect)
