"""TOML reading with validation that names the file and the key.

Everything a user writes (bar files, instrument presets, material, mallet and event
files) is read through :class:`Section`, which checks type, range and unknown keys
and raises :class:`~synth.errors.ConfigError` with a message of the form
``file: key = value: what is wrong, what is allowed``.

The typed dataclasses built from these sections live next to the models that use
them (for example :mod:`synth.physics.geometry`); this module only knows TOML.
"""

from __future__ import annotations

import math
import os
import tomllib
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from synth.errors import ConfigError

_MISSING = object()


def presets_dir() -> Path:
    """Return the folder that holds the bundled presets.

    ``BARWRIGHT_PRESETS`` overrides the default, which is the ``presets`` folder
    next to the installed ``synth`` package (the repository root in a checkout).
    """
    env = os.environ.get("BARWRIGHT_PRESETS")
    if env:
        return Path(env)
    return Path(__file__).resolve().parent.parent / "presets"


def load_toml(path: str | os.PathLike[str]) -> dict[str, Any]:
    """Read a TOML file, turning every failure into a one-line ConfigError."""
    p = Path(path)
    try:
        text = p.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise ConfigError("file not found", source=str(p)) from None
    except IsADirectoryError:
        raise ConfigError("is a folder, expected a TOML file", source=str(p)) from None
    except UnicodeDecodeError:
        raise ConfigError("is not UTF-8 text, expected a TOML file", source=str(p)) from None
    except OSError as exc:
        raise ConfigError(f"cannot be read ({exc.strerror})", source=str(p)) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"malformed TOML: {exc}", source=str(p)) from None


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, list) and len(value) > 8:
        return "[" + ", ".join(_fmt(v) for v in value[:8]) + ", ...]"
    return repr(value)


class Section:
    """A validated view of one TOML table.

    Parameters
    ----------
    data : mapping
        The parsed table.
    source : str
        File name used in error messages.
    prefix : str, optional
        Dotted path of this table inside the file (``"undercut"``).
    """

    def __init__(self, data: Mapping[str, Any], source: str, prefix: str = ""):
        if not isinstance(data, Mapping):
            raise ConfigError(
                f"= {_fmt(data)}: must be a table", source=source, key=prefix or None
            )
        self.data = dict(data)
        self.source = source
        self.prefix = prefix

    # -- helpers -----------------------------------------------------------------
    def key(self, name: str) -> str:
        """Return the dotted key of ``name`` inside the file."""
        return f"{self.prefix}.{name}" if self.prefix else name

    def error(self, name: str | None, message: str) -> ConfigError:
        """Build a ConfigError for key ``name`` of this table."""
        key = self.key(name) if name else (self.prefix or None)
        if name is not None and name in self.data:
            message = f"= {_fmt(self.data[name])}: {message}"
        return ConfigError(message, source=self.source, key=key)

    def __contains__(self, name: str) -> bool:
        return name in self.data

    def check_keys(self, allowed: Iterable[str]) -> None:
        """Raise on any key that is not in ``allowed`` (catches typos)."""
        allowed = set(allowed)
        for name in self.data:
            if name not in allowed:
                raise ConfigError(
                    "unknown key; allowed here: " + ", ".join(sorted(allowed)),
                    source=self.source,
                    key=self.key(name),
                )

    def _get(self, name: str, default: Any) -> Any:
        if name in self.data:
            return self.data[name]
        if default is _MISSING:
            raise ConfigError("missing required key", source=self.source, key=self.key(name))
        return default

    # -- typed getters -------------------------------------------------------------
    def number(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        gt: float | None = None,
        ge: float | None = None,
        lt: float | None = None,
        le: float | None = None,
        unit: str = "",
    ) -> float:
        """Return a finite float, optionally bounded."""
        value = self._get(name, default)
        if value is None:
            return value
        return _check_number(self, name, value, gt=gt, ge=ge, lt=lt, le=le, unit=unit)

    def integer(self, name: str, default: Any = _MISSING, *, ge: int | None = None,
                le: int | None = None) -> int:
        """Return an integer, optionally bounded."""
        value = self._get(name, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(name, "must be an integer")
        if ge is not None and value < ge:
            raise self.error(name, f"must be >= {ge}")
        if le is not None and value > le:
            raise self.error(name, f"must be <= {le}")
        return value

    def string(self, name: str, default: Any = _MISSING, *,
               choices: Iterable[str] | None = None) -> str:
        """Return a string, optionally one of ``choices``."""
        value = self._get(name, default)
        if value is None:
            return value
        if not isinstance(value, str):
            raise self.error(name, "must be a string")
        if choices is not None:
            choices = list(choices)
            if value not in choices:
                raise self.error(name, "must be one of " + ", ".join(choices))
        return value

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        """Return a boolean."""
        value = self._get(name, default)
        if not isinstance(value, bool):
            raise self.error(name, "must be true or false")
        return value

    def numbers(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        gt: float | None = None,
        ge: float | None = None,
        min_len: int = 1,
        length: int | None = None,
        increasing: bool = False,
        unit: str = "",
    ) -> list[float]:
        """Return a list of finite floats."""
        value = self._get(name, default)
        if value is None:
            return value
        if not isinstance(value, list):
            raise self.error(name, "must be a list of numbers")
        if length is not None and len(value) != length:
            raise self.error(name, f"must hold exactly {length} numbers, has {len(value)}")
        if len(value) < min_len:
            raise self.error(name, f"must hold at least {min_len} numbers")
        out = [
            _check_number(self, name, v, gt=gt, ge=ge, unit=unit, index=i)
            for i, v in enumerate(value)
        ]
        if increasing and any(b <= a for a, b in zip(out, out[1:], strict=False)):
            raise self.error(name, "must be strictly increasing")
        return out

    def section(self, name: str, default: Any = _MISSING) -> Section | None:
        """Return a sub-table as a Section (``None`` if absent and default is None)."""
        value = self._get(name, default)
        if value is None:
            return None
        if not isinstance(value, Mapping):
            raise self.error(name, "must be a table")
        return Section(value, self.source, self.key(name))


def checked_number(value: Any, key: str, rule: str, ok) -> float:
    """``float(value)`` if it is finite and ``ok(value)``; else ConfigError naming ``key``.

    For arguments given in code rather than read from a file (dataclass fields of
    the physics models); ``rule`` says what is allowed, e.g. ``"> 0 m"``.
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ConfigError(f"= {value!r}: must be a number {rule}", key=key) from None
    if not (math.isfinite(v) and ok(v)):
        raise ConfigError(f"= {value!r}: must be {rule}", key=key)
    return v


def _check_number(sec: Section, name: str, value: Any, *, gt=None, ge=None, lt=None, le=None,
                  unit: str = "", index: int | None = None) -> float:
    where = f"{name}[{index}]" if index is not None else name

    def fail(rule: str) -> ConfigError:
        return ConfigError(
            f"= {_fmt(value)}: {rule}", source=sec.source, key=sec.key(where)
        )

    if isinstance(value, bool) or not isinstance(value, int | float):
        raise fail("must be a number")
    value = float(value)
    if not math.isfinite(value):
        raise fail("must be a finite number")
    u = f" {unit}" if unit else ""
    if gt is not None and not value > gt:
        raise fail(f"must be > {gt:g}{u}")
    if ge is not None and not value >= ge:
        raise fail(f"must be >= {ge:g}{u}")
    if lt is not None and not value < lt:
        raise fail(f"must be < {lt:g}{u}")
    if le is not None and not value <= le:
        raise fail(f"must be <= {le:g}{u}")
    return value
