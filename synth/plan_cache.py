"""A cache on disk for voice plans: what a second render of the same instrument reuses.

Planning a note (bar solve, loss budget, tube coupling, mallet contact) costs tens
to hundreds of milliseconds; a plan depends only on frozen settings.  The voice
plan asks :func:`cached` for each piece with the settings it depends on; the key
is a SHA-256 over

* a format tag and the package version,
* the source text of the modules that compute plans (``synth/physics/*.py``, the
  readers in ``synth/settings/*.py``, ``synth/voicing.py``, ``synth/numerics.py``,
  ``synth/config.py``, this module), so an edited model never reads a plan made by
  the old one (a plan that also runs through other modules puts their
  :func:`source_fingerprint` among its settings),
* the kind of plan and the canonical form of the settings (:func:`canonical_bytes`:
  frozen dataclasses by their compared fields, floats by their 8 bytes, strings,
  numbers, tuples, lists, dicts and sets, numeric arrays by dtype, shape and
  data): change any value that matters and the key changes.

The form is one byte string hashed once: each item starts with a tag byte, and its
length where it has no fixed size, so no two different settings share it.  Nothing
in it depends on the process (no addresses, no salted hashes: dicts and sets are
sorted).  A frozen dataclass whose compared fields can never change (numbers,
strings, tuples and such dataclasses; no array, list or dict) has its form kept in
memory by identity, holding the object so that its id is not reused: a mallet or a
motor met again costs one lookup.

The voice plan (:mod:`synth.voicing`) stores per note its model (``note-model``)
and per strike its mallet contact (``contact``) and, unless discs turn in the
tube mouths, the finished strike (``strike``: modes, pairs and onset, keyed by
the note's settings, the strike, the sample rate, the motor, ``attack`` and the
engine's source), so a warm strike reads one entry.  Under turning discs a
strike is assembled from its pieces each time (its pair follows the rotor's
curves); :func:`synth.voicing.contact_onset` keeps the free form of a voice
without curves as an entry of its own (``onset-free-form``).

Entries are pickles in ``<cache>/plans/<key>.pkl``, written atomically (a temporary
file renamed into place), so two processes planning the same note at once both
succeed.  An unreadable entry counts as a miss and is rewritten.  The folder is
``$BARWRIGHT_CACHE`` if set, else ``$XDG_CACHE_HOME/barwright``, else
``~/.cache/barwright``; ``BARWRIGHT_CACHE=off`` turns the cache off.  Entries are
read with :mod:`pickle`, so the folder must be the user's own, like any cache.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import pickle
import struct
import tempfile
from collections.abc import Callable
from functools import cache
from pathlib import Path
from typing import TypeVar

import numpy as np

import synth

CACHE_ENV = "BARWRIGHT_CACHE"
"""Environment variable naming the cache folder (``off``: no cache on disk)."""

_FORMAT = "plan-2"
_PROTOCOL = 5
_SOURCES = ("physics/*.py", "settings/*.py", "voicing.py", "numerics.py", "config.py",
            "plan_cache.py")

T = TypeVar("T")


def cache_dir() -> Path | None:
    """Return the cache folder, or None when ``BARWRIGHT_CACHE=off``."""
    folder = _plans_folder_now()
    return None if folder is None else Path(folder).parent


def _plans_folder_now() -> str | None:
    env = os.environ
    return _plans_folder(env.get(CACHE_ENV), env.get("XDG_CACHE_HOME"), env.get("HOME"))


@cache
def _plans_folder(value: str | None, xdg: str | None, home: str | None) -> str | None:
    """Return the plans' folder for these values of the variables (read at every call).

    ``home`` is only part of the memo's key: :meth:`pathlib.Path.home` reads it.
    """
    if value is not None and value.strip().lower() == "off":
        return None
    if value:
        base = Path(value).expanduser()
    else:
        base = Path(xdg or Path.home() / ".cache") / "barwright"
    return os.fspath(base / "plans")


def code_fingerprint() -> str:
    """Return a hash of the source of every module that computes a plan."""
    return source_fingerprint(_SOURCES)


@cache
def source_fingerprint(patterns: tuple[str, ...]) -> str:
    """Return a hash of the source of the package modules matching ``patterns``.

    A plan that also depends on modules outside the planning set (the engine's
    render, a loudness measure) puts their fingerprint among its settings.
    """
    root = Path(__file__).resolve().parent
    digest = hashlib.sha256()
    for pattern in patterns:
        for path in sorted(root.glob(pattern)):
            digest.update(path.relative_to(root).as_posix().encode())
            digest.update(path.read_bytes())
    return digest.hexdigest()


def plan_key(kind: str, *settings: object) -> str:
    """Return the key of a plan of ``kind`` made from ``settings`` (hex SHA-256).

    Parameters
    ----------
    kind : str
        What is cached (e.g. ``"note-model"``), so two kinds never share a key.
    *settings
        Everything the plan depends on: frozen dataclasses, numbers, strings,
        tuples, lists, dicts, sets and numeric arrays (module docstring).

    Raises
    ------
    TypeError
        A value that has no canonical form here (a function, an object array).
    """
    out = [_prefix(), canonical_bytes(kind)]
    encode = _encode
    for value in settings:
        encode(value, out)
    return hashlib.sha256(b"".join(out)).hexdigest()


@cache
def _prefix() -> bytes:
    """Return the part of every key fixed in one process: format, version, code."""
    return b"".join(canonical_bytes(part) for part in
                    (_FORMAT, synth.__version__, code_fingerprint()))


def canonical_bytes(value: object) -> bytes:
    """Return the canonical byte form of ``value`` that :func:`plan_key` hashes.

    Equal settings give equal bytes in every process (a pickle would not do: its
    memo depends on which equal objects happen to be one object).  Each item
    starts with a tag byte, and its length where it has no fixed size, so no two
    different values share a form.  Dataclass fields with ``compare=False``
    (free-text sources) are left out.
    """
    out: list[bytes] = []
    _encode(value, out)
    return b"".join(out)


def _encode(value: object, out: list[bytes]) -> bool:
    """Append the form of ``value`` to ``out``; return True if it can never change."""
    enc = _BY_TYPE.get(type(value))
    if enc is not None:
        return enc(value, out)
    if isinstance(value, np.generic):
        return _encode(value.item(), out)
    if isinstance(value, np.ndarray):
        return _encode_array(value, out)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _encode_dataclass(value, out)
    # subclasses of the plain types (an IntEnum, a named tuple): their name, then the
    # value; never memoised (a subclass may hold more than its value)
    for base in (int, float, str, bytes, tuple, list, dict, frozenset, set):
        if isinstance(value, base):
            kind = type(value)
            name = f"{kind.__module__}.{kind.__qualname__}".encode()
            out.append(b"c%d:" % len(name))
            out.append(name)
            _BY_TYPE[base](value, out)
            return False
    raise TypeError(f"cannot key a plan on a {type(value).__name__}")


def _encode_none(value, out) -> bool:
    out.append(b"N")
    return True


def _encode_bool(value, out) -> bool:
    out.append(b"T" if value else b"F")
    return True


def _encode_int(value, out) -> bool:
    out.append(b"i%d;" % value)
    return True


def _encode_float(value, out) -> bool:
    out.append(b"f" + _DOUBLE.pack(value))    # the bits: -0.0 and 0.0 differ
    return True


def _encode_str(value, out) -> bool:
    data = value.encode("utf-8", "surrogatepass")
    out.append(b"s%d:" % len(data))
    out.append(data)
    return True


def _encode_bytes(value, out) -> bool:
    out.append(b"b%d:" % len(value))
    out.append(bytes(value))
    return True


def _encode_sequence(value, out) -> bool:
    frozen = isinstance(value, tuple)
    out.append((b"(%d:" if frozen else b"[%d:") % len(value))
    for item in value:
        frozen = _encode(item, out) and frozen
    return frozen


def _encode_dict(value, out) -> bool:
    out.append(b"{%d:" % len(value))
    for form, v in sorted(((canonical_bytes(k), v) for k, v in value.items()),
                          key=lambda item: item[0]):   # by the keys' forms, never by hashes
        out.append(form)
        _encode(v, out)
    return False


def _encode_set(value, out) -> bool:
    out.append(b"<%d:" % len(value))
    frozen = isinstance(value, frozenset)
    forms = []
    for item in value:    # in the order of their forms, never of their salted hashes
        own: list[bytes] = []
        frozen = _encode(item, own) and frozen
        forms.append(b"".join(own))
    out.extend(sorted(forms))
    return frozen


def _encode_array(value, out) -> bool:
    if value.dtype.hasobject:
        raise TypeError("cannot key a plan on an array of objects")
    data = np.ascontiguousarray(value).tobytes()
    head = f"{value.dtype.str}{value.shape}".encode()
    out.append(b"a%d:" % len(head))
    out.append(head)
    out.append(b"%d:" % len(data))
    out.append(data)
    return False   # an array can be written through another view of its memory


def _encode_dataclass(value, out) -> bool:
    memo = _MEMO.get(id(value))
    if memo is not None and memo[0] is value:
        out.append(memo[1])
        return True
    kind = type(value)
    layout = _LAYOUT.get(kind)
    if layout is None:
        layout = _layout(kind)
    head, names, frozen = layout
    own: list[bytes] = [head]
    for name, tag in names:
        own.append(tag)
        frozen = _encode(getattr(value, name), own) and frozen
    data = b"".join(own)
    out.append(data)
    if frozen:   # a frozen dataclass of values that cannot change: its form neither
        if len(_MEMO) >= _MEMO_SIZE:
            _MEMO.clear()
        _MEMO[id(value)] = (value, data)   # the object held, so its id stays its own
    return frozen


def _layout(kind: type) -> tuple[bytes, tuple[tuple[str, bytes], ...], bool]:
    """Header, (field name, field tag) of each compared field, and whether frozen."""
    name = f"{kind.__module__}.{kind.__qualname__}".encode()
    fields = tuple((f.name, b"=%d:" % len(f.name.encode()) + f.name.encode())
                   for f in dataclasses.fields(kind) if f.compare)
    frozen = bool(getattr(getattr(kind, "__dataclass_params__", None), "frozen", False))
    layout = (b"d%d:" % len(name) + name + b"%d:" % len(fields), fields, frozen)
    _LAYOUT[kind] = layout
    return layout


_DOUBLE = struct.Struct("<d")
_BY_TYPE: dict[type, Callable[[object, list[bytes]], bool]] = {
    type(None): _encode_none, bool: _encode_bool, int: _encode_int,
    float: _encode_float, str: _encode_str, bytes: _encode_bytes,
    tuple: _encode_sequence, list: _encode_sequence, dict: _encode_dict,
    set: _encode_set, frozenset: _encode_set, np.ndarray: _encode_array,
}
"""Encoder of each plain type, looked up by the exact type (the common case)."""

_LAYOUT: dict[type, tuple[bytes, tuple[tuple[str, bytes], ...], bool]] = {}
"""Per dataclass type: its header, its compared fields and whether it is frozen."""

_MEMO: dict[int, tuple[object, bytes]] = {}
"""Form of each frozen dataclass met so far whose compared values cannot change
(scalars, strings, tuples and such dataclasses, no array, list or dict), by id,
holding the object itself so that the id is not reused while the entry lives."""

_MEMO_SIZE = 4096


def cached(key: str, make: Callable[[], T]) -> T:
    """Return the plan stored under ``key``, or make, store and return it.

    Parameters
    ----------
    key : str
        From :func:`plan_key`.
    make : callable
        Computes the plan when it is not stored (or the cache is off).
    """
    folder = _plans_folder_now()
    if folder is None:
        return make()
    path = os.path.join(folder, key + ".pkl")
    try:
        with open(path, "rb") as fh:
            return pickle.load(fh)
    except (OSError, EOFError, pickle.UnpicklingError, AttributeError, ImportError,
            IndexError, TypeError, ValueError):
        pass  # a miss, or an entry left unreadable: make it again
    value = make()
    _store(Path(path), value)
    return value


def _store(path: Path, value: object) -> None:
    """Write ``value`` to ``path`` atomically; a cache that cannot be written is skipped."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".pkl")
        try:
            with os.fdopen(fd, "wb") as fh:
                pickle.dump(value, fh, protocol=_PROTOCOL)
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
    except OSError:
        pass
