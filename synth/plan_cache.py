"""A cache on disk for voice plans: what a second render of the same instrument reuses.

Planning a note (bar solve, loss budget, tube coupling, mallet contact) costs tens
to hundreds of milliseconds; a plan depends only on frozen settings.  The voice
plan asks :func:`cached` for each piece with the settings it depends on; the key
is a SHA-256 over

* a format tag and the package version,
* the source text of the modules that compute plans (``synth/physics/*.py``, the
  readers in ``synth/settings/*.py``, ``synth/voicing.py``, ``synth/numerics.py``,
  ``synth/config.py``), so an edited model never reads a plan made by the old one,
* the pickled settings (frozen dataclasses, floats, strings, arrays): change any
  value that matters and the key changes.

Entries are pickles in ``<cache>/plans/<key>.pkl``, written atomically (a temporary
file renamed into place), so two processes planning the same note at once both
succeed.  An unreadable entry counts as a miss and is rewritten.  The folder is
``$BARWRIGHT_CACHE`` if set, else ``$XDG_CACHE_HOME/barwright``, else
``~/.cache/barwright``; ``BARWRIGHT_CACHE=off`` turns the cache off.  Entries are
read with :mod:`pickle`, so the folder must be the user's own, like any cache.
"""

from __future__ import annotations

import hashlib
import os
import pickle
import tempfile
from collections.abc import Callable
from functools import cache
from pathlib import Path
from typing import TypeVar

import synth

CACHE_ENV = "BARWRIGHT_CACHE"
"""Environment variable naming the cache folder (``off``: no cache on disk)."""

_FORMAT = "plan-1"
_PROTOCOL = 5
_SOURCES = ("physics/*.py", "settings/*.py", "voicing.py", "numerics.py", "config.py",
            "plan_cache.py")

T = TypeVar("T")


def cache_dir() -> Path | None:
    """Return the cache folder, or None when ``BARWRIGHT_CACHE=off``."""
    value = os.environ.get(CACHE_ENV)
    if value is not None and value.strip().lower() == "off":
        return None
    if value:
        return Path(value).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "barwright"


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
        Everything the plan depends on, picklable (frozen dataclasses, numbers,
        strings, tuples, arrays).
    """
    digest = hashlib.sha256()
    for part in (_FORMAT, synth.__version__, code_fingerprint(), kind):
        digest.update(part.encode())
        digest.update(b"\0")
    _feed(digest, settings)
    return digest.hexdigest()


def _feed(digest, value: object) -> None:
    """Hash ``value`` canonically: equal settings give equal bytes in every process.

    (A pickle would not do: its memo depends on which equal objects happen to be
    one object, so the same settings could pickle differently in two runs.)
    Dataclass fields with ``compare=False`` (free-text sources) are left out.
    """
    import dataclasses

    import numpy as np

    update = digest.update

    def put(tag: str, text: str | bytes = b"") -> None:
        data = text.encode() if isinstance(text, str) else text
        update(f"{tag}{len(data)}:".encode())
        update(data)

    def feed(value: object) -> None:
        if value is None or isinstance(value, bool | int | str):
            put(type(value).__name__, repr(value))
        elif isinstance(value, float):
            put("float", value.hex())
        elif isinstance(value, np.generic):
            feed(value.item())
        elif isinstance(value, np.ndarray):
            put("array", f"{value.dtype.str}{value.shape}")
            put("data", np.ascontiguousarray(value).tobytes())
        elif dataclasses.is_dataclass(value) and not isinstance(value, type):
            kind = type(value)
            names = _COMPARED_FIELDS.get(kind)
            if names is None:
                names = tuple(f.name for f in dataclasses.fields(value) if f.compare)
                _COMPARED_FIELDS[kind] = names
            put("dataclass", f"{kind.__module__}.{kind.__qualname__}")
            for name in names:
                put("field", name)
                feed(getattr(value, name))
        elif isinstance(value, tuple | list):
            put(type(value).__name__, str(len(value)))
            for item in value:
                feed(item)
        elif isinstance(value, dict):
            put("dict", str(len(value)))
            for k, v in sorted(value.items(), key=lambda kv: repr(kv[0])):
                feed(k)
                feed(v)
        elif isinstance(value, set | frozenset):
            put("set", str(len(value)))
            for item in sorted(value, key=repr):
                feed(item)
        else:
            raise TypeError(f"cannot key a plan on a {type(value).__name__}")

    feed(value)


_COMPARED_FIELDS: dict[type, tuple[str, ...]] = {}
"""Names of the compared fields of each dataclass met so far, in declaration order."""


def cached(key: str, make: Callable[[], T]) -> T:
    """Return the plan stored under ``key``, or make, store and return it.

    Parameters
    ----------
    key : str
        From :func:`plan_key`.
    make : callable
        Computes the plan when it is not stored (or the cache is off).
    """
    folder = cache_dir()
    if folder is None:
        return make()
    path = folder / "plans" / f"{key}.pkl"
    try:
        with path.open("rb") as fh:
            return pickle.load(fh)
    except (OSError, EOFError, pickle.UnpicklingError, AttributeError, ImportError,
            IndexError, TypeError, ValueError):
        pass  # a miss, or an entry left unreadable: make it again
    value = make()
    _store(path, value)
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
