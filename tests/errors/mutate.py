"""Mutations of the demo files for the property tests of the readers.

A document is a parsed TOML file.  A *path* is a tuple of keys and list indices
that leads to one value.  The strategies here pick a path of a demo file and put
another value there (or delete it, or add a key nobody reads), and say whether
the result is certainly bad: a value of no key's type and range (NaN, infinity,
1e300, a 3000-character text, a table where a value belongs, ...).
"""

from __future__ import annotations

import copy
import io
import re
import tomllib
from pathlib import Path
from typing import Any

import mido
import tomli_w
from hypothesis import strategies as st

ROOT = Path(__file__).resolve().parents[2]
PRESETS = ROOT / "presets"

_BARE = re.compile(r"^[A-Za-z0-9_.#\[\]-]{1,64}$")


def load(relative: str) -> dict:
    """Parse a demo file of ``presets/``."""
    return tomllib.loads((PRESETS / relative).read_text(encoding="utf-8"))


def paths(doc: Any, prefix: tuple = ()) -> list[tuple]:
    """Every path in ``doc`` (tables, lists and leaves), depth first, in file order."""
    out = []
    if isinstance(doc, dict):
        for k, v in doc.items():
            out.append((*prefix, k))
            out.extend(paths(v, (*prefix, k)))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            out.append((*prefix, i))
            out.extend(paths(v, (*prefix, i)))
    return out


def key_of(path: tuple) -> str:
    """Return the dotted key a message uses for ``path``: ``strike[2].velocity``."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            shown = part if _BARE.match(part) else repr(part)
            text += f".{shown}" if text else shown
    return text


def put(doc: dict, path: tuple, value: Any) -> dict:
    """Return a copy of ``doc`` with ``value`` at ``path`` (``DELETE`` removes it)."""
    out = copy.deepcopy(doc)
    node = out
    for part in path[:-1]:
        node = node[part]
    if value is DELETE:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return out


DELETE = object()


def nested(depth: int) -> dict:
    """Return a table nested ``depth`` deep."""
    value: Any = 1.0
    for _ in range(depth):
        value = {"t": value}
    return value


# Values that no key of any reader accepts: each must be refused naming its key.
SURELY_BAD = st.sampled_from([
    float("nan"), float("inf"), float("-inf"), 1e300, -1e300, 10**30, -(10**30),
    "x" * 3000, {"not_a_key": 1.0}, [float("nan")], [1e300, 1e300], [["a"], {"b": 1}],
])

# Anything at all: ordinary, tiny, huge and odd numbers, text, booleans, lists, tables.
ANY_VALUE = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-1e3, max_value=1e3),
    st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.sampled_from([0, 1, -1, 1e-300, -1e-300, 5e-324, 1e308, 0.5, 440.0, 0.001]),
    st.text(max_size=40),
    st.sampled_from(["A4", "Bb3", "A#3", "H4", "C9", "C-1", "F6", "*", "open", "medium",
                     "m" * 300, "aluminium-6061-t6", "../../etc/passwd.toml", "x\ny"]),
    st.booleans(),
    st.lists(st.floats(allow_nan=False, allow_infinity=False, width=32), max_size=4),
    st.builds(nested, st.integers(min_value=1, max_value=24)),
    st.dictionaries(st.sampled_from(["length_m", "lenght_m", "q", "note", "x"]),
                    st.floats(min_value=-1.0, max_value=1.0), max_size=2),
)


@st.composite
def mutation(draw, doc: dict):
    """(document, path, surely_bad) with one change made to ``doc``."""
    every = paths(doc)
    kind = draw(st.sampled_from(["bad", "bad", "any", "scale", "delete", "unknown"]))
    path = draw(st.sampled_from(every))
    if kind == "bad":
        return put(doc, path, draw(SURELY_BAD)), path, True
    if kind == "any":
        return put(doc, path, draw(ANY_VALUE)), path, False
    if kind == "scale":
        numeric = [p for p in every if _number(doc, p)]
        path = draw(st.sampled_from(numeric))
        factor = draw(st.sampled_from([-1.0, 0.0, 1e-6, 0.5, 0.99, 1.01, 2.0, 1e6, 1e300]))
        return put(doc, path, _at(doc, path) * factor), path, False
    if kind == "delete":
        return put(doc, path, DELETE), path, False
    tables = [()] + [p for p in every if isinstance(_at(doc, p), dict)]
    table = draw(st.sampled_from(tables))
    name = draw(st.sampled_from(["lenght_m", "unknown", "Tube", "x" * 300, "a\nb"]))
    return put(doc, (*table, name), 1.0), (*table, name), True


def _at(doc: Any, path: tuple) -> Any:
    for part in path:
        doc = doc[part]
    return doc


def _number(doc: dict, path: tuple) -> bool:
    v = _at(doc, path)
    return isinstance(v, int | float) and not isinstance(v, bool)


def write(path: Path, doc: dict) -> Path:
    """Write ``doc`` as TOML (tomli_w quotes odd keys and writes nan and inf)."""
    path.write_text(tomli_w.dumps(doc), encoding="utf-8")
    return path


def check_error(exc: BaseException, source: Path, path: tuple, surely_bad: bool) -> None:
    """Check the reader's promise for one refused file: one line, the file, the key."""
    text = str(exc)
    assert "\n" not in text and "\r" not in text, text
    assert len(text) < 600, text
    assert text.startswith(str(source)), text
    if surely_bad and "nested" not in text:
        # a list may be refused whole ("x_m = [...]: must be strictly increasing")
        while path and isinstance(path[-1], int) and len(path) > 1:
            if key_of(path) in text:
                return
            path = path[:-1]
        # an odd key is shown quoted and cut short: its first 30 characters
        assert key_of(path) in text or key_of(path)[:30] in text, (key_of(path), text)


# --------------------------------------------------------------------------- MIDI
_MESSAGES = st.one_of(
    st.builds(lambda n, v, t: mido.Message("note_on", note=n, velocity=v, time=t),
              st.integers(0, 127), st.integers(0, 127), st.integers(0, 0x0FFFFFFF)),
    st.builds(lambda n, t: mido.Message("note_off", note=n, time=t),
              st.integers(0, 127), st.integers(0, 5000)),
    st.builds(lambda v, t: mido.Message("control_change", control=64, value=v, time=t),
              st.integers(0, 127), st.integers(0, 5000)),
    st.builds(lambda us, t: mido.MetaMessage("set_tempo", tempo=us, time=t),
              st.integers(0, 0xFFFFFF), st.integers(0, 5000)),
)


@st.composite
def midi_bytes(draw) -> bytes:
    """Draw a MIDI file: built by mido from drawn messages, then perhaps damaged."""
    midi = mido.MidiFile(type=draw(st.sampled_from([0, 1])),
                         ticks_per_beat=draw(st.sampled_from([1, 96, 480, 0x7FFF])))
    track = mido.MidiTrack(draw(st.lists(_MESSAGES, max_size=12)))
    midi.tracks.append(track)
    buf = io.BytesIO()
    midi.save(file=buf)
    data = bytearray(buf.getvalue())
    how = draw(st.sampled_from(["keep", "type", "flip", "cut", "junk"]))
    if how == "type":
        data[8:10] = draw(st.integers(0, 0xFFFF)).to_bytes(2, "big")
    elif how == "flip" and data:
        i = draw(st.integers(0, len(data) - 1))
        data[i] = draw(st.integers(0, 255))
    elif how == "cut":
        data = data[: draw(st.integers(0, len(data)))]
    elif how == "junk":
        data = bytearray(draw(st.binary(max_size=64)))
    return bytes(data)
