"""TOML primitives with validation that names the file and the key.

Everything a user writes (bar files, instrument presets, material, mallet and event
files) is read by the settings layer (:mod:`synth.settings`, the only caller of
:func:`load_toml`) through :class:`Section`, which checks type, range and unknown keys
and raises :class:`~synth.errors.ConfigError` with one line of the form
``file: key = value: what is wrong; allowed: lo to hi unit``.

Every number a file may hold has its physical range in :data:`LIMITS`, stated once
with its unit and where the bound comes from; readers name the range they apply
(``sec.number("length_m", limit="bar.length_m")``).

The typed dataclasses built from these sections live next to the models that use
them (for example :mod:`synth.physics.geometry`), the readers that build them in
:mod:`synth.settings`; this module only knows TOML.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Final, overload

from synth.errors import ConfigError

_MISSING = object()

MAX_FILE_BYTES: Final[int] = 16 * 1024 * 1024
"""Largest input file read (16 MiB): presets and event lists are a few kB."""

MAX_DEPTH: Final[int] = 16
"""Deepest nesting of tables and arrays in a TOML input (presets use 4)."""

MAX_STRING_CHARS: Final[int] = 2000
"""Longest text value (names, descriptions, sources)."""

MAX_SCORE_S: Final[float] = 4 * 3600.0
"""Longest passage: event times, releases and render lengths end within 4 hours."""

MAX_EVENTS: Final[int] = 20_000
"""Most note and pedal events in one event list or MIDI file."""

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")
_BARE_KEY_RE = re.compile(r"^[A-Za-z0-9_.#\[\]-]{1,64}$")


@dataclass(frozen=True)
class Limit:
    """The allowed range of one setting: ``lo <= value <= hi`` in ``unit``.

    ``lo_open`` / ``hi_open`` exclude the end itself (a length of exactly 0, a
    Poisson ratio of exactly 0.5).
    """

    lo: float
    hi: float
    unit: str = ""
    lo_open: bool = False
    hi_open: bool = False

    def allows(self, value: float) -> bool:
        """Tell whether ``value`` lies in the range."""
        above = value > self.lo if self.lo_open else value >= self.lo
        below = value < self.hi if self.hi_open else value <= self.hi
        return above and below

    def text(self) -> str:
        """Return the range as written in messages: ``0.02 to 3 m``."""
        lo = f"{self.lo:g}" + (" (excluded)" if self.lo_open else "")
        hi = f"{self.hi:g}" + (" (excluded)" if self.hi_open else "")
        return f"{lo} to {hi}" + (f" {self.unit}" if self.unit else "")

    def problem(self, value: float) -> str:
        """Say what is wrong with a value outside the range."""
        too_small = value < self.lo or (self.lo_open and value == self.lo)
        return "too small" if too_small else "too large"


# Every range is generous but finite: wide enough for any real bar, tube, mallet or
# passage, narrow enough that no model overflows or runs without end.  Where a bound
# is a property of matter it comes from handbook tables of engineering solids (from
# memory: ASM Handbook Vols. 1-2 and materials tables of the Kaye & Laby kind); the
# rest are common practice of the trade, no source, widened by a factor of several.
LIMITS: Final[dict[str, Limit]] = {
    # -- bars (bar files, [bars.*], [blank]): from a glockenspiel's 2 cm to a bass
    # bar's 1.5 m, widened; common practice, no source
    "bar.length_m": Limit(0.02, 3.0, "m"),
    "bar.width_m": Limit(0.005, 0.5, "m"),
    "bar.thickness_m": Limit(0.001, 0.2, "m"),
    "bar.min_thickness_m": Limit(0.0001, 0.2, "m"),
    # arch undercuts: sizes of the same bars (the fit to the bar is checked after)
    "undercut.depth_m": Limit(0.0, 0.2, "m", lo_open=True),
    "undercut.span_m": Limit(0.0, 3.0, "m", lo_open=True),
    "undercut.center_m": Limit(0.0, 3.0, "m", lo_open=True),
    "undercut.flat_m": Limit(0.0, 3.0, "m"),
    "undercut.exponent": Limit(1.0, 12.0),
    # the tuner's undercut family (fractions of the bar)
    "family.flat_fraction": Limit(0.0, 0.95, hi_open=True),
    "family.span_fraction": Limit(0.1, 0.98, lo_open=True),
    "family.depth_fraction": Limit(0.0, 1.0, lo_open=True),
    "family.smoothness": Limit(0.0, 1e6),
    # -- tuning: A4 between 380 and 480 Hz covers baroque to the sharpest orchestras;
    # the shop between -20 and 50 C (common practice, no source)
    "reference_pitch_hz": Limit(380.0, 480.0, "Hz"),
    "temperature_c": Limit(-20.0, 50.0, "C"),
    # overtone ratios of the first few vertical partials (uniform bar: 2.76, 5.40, ...)
    "target_ratio": Limit(1.0, 100.0),
    # -- materials: engineering solids, metals and the like (handbook tables, from
    # memory): moduli from soft polymers' 1 GPa to diamond's 1.2 TPa, densities from
    # light woods to osmium's 22.6 t/m3, Poisson 0 to the incompressible 0.5,
    # expansion up to polymers' 2e-4 per K, conductivity up to silver's 429 W/(m K),
    # specific heat from lead's 129 to beryllium's 1825 J/(kg K), loss factors from
    # fused silica to rubbery polymers
    "material.youngs_modulus_pa": Limit(1e9, 1.2e12, "Pa"),
    "material.density_kg_m3": Limit(500.0, 25000.0, "kg/m3"),
    "material.poisson_ratio": Limit(0.0, 0.5, hi_open=True),
    "material.thermal_expansion_per_k": Limit(0.0, 2e-4, "1/K"),
    "material.thermal_conductivity_w_m_k": Limit(0.1, 500.0, "W/(m K)"),
    "material.specific_heat_j_kg_k": Limit(100.0, 2500.0, "J/(kg K)"),
    "material.modulus_temperature_coefficient_per_k": Limit(-2e-3, 1e-3, "1/K"),
    "material.loss_factor": Limit(1e-7, 0.1),
    # -- mallets: heads from a gram to a 2 kg hammer; stiffness K of F = K d^p for
    # 1 mN to 10 kN at 0.1 mm to 1 m compression over every allowed p (its unit
    # depends on p); Hunt & Crossley lambda as in the literature (0.1-1 s/m, from
    # memory), widened
    "mallet.mass_kg": Limit(0.001, 2.0, "kg"),
    "mallet.stiffness": Limit(1e-3, 1e24, "N/m^p"),
    "mallet.exponent": Limit(1.0, 5.0),
    "mallet.loss_s_per_m": Limit(0.0, 10.0, "s/m"),
    "mallet.speed_m_s": Limit(0.01, 20.0, "m/s"),
    # -- how a bar is struck and heard ([sound], [[strike]])
    "strike.position": Limit(0.0, 1.0),
    "strike.across": Limit(-0.5, 0.5),
    "strike.velocity": Limit(0.0, 1.0),
    "sound.damper_t60_s": Limit(0.001, 30.0, "s"),
    "sound.pan_width": Limit(0.0, 1.0),
    "sound.listening_distance_m": Limit(0.1, 100.0, "m"),
    # -- supports: cords through the nodes (common practice, no source)
    "supports.cord_loss_n_s_m": Limit(0.0, 100.0, "N s/m"),
    "supports.fraction": Limit(0.0, 0.5, lo_open=True, hi_open=True),
    "supports.offset_m": Limit(-0.05, 0.05, "m", lo_open=True, hi_open=True),
    # -- damping calibration
    "damping.factor": Limit(0.0, 1e4),
    "damping.order": Limit(1, 50),
    "damping.q": Limit(1.0, 1e8, lo_open=True),
    # -- tubes: radii of real resonators are 5 mm to 15 cm (common practice, no
    # source), widened
    "tubes.inner_radius_m": Limit(0.002, 0.3, "m"),
    "tubes.gap_m": Limit(0.0, 0.2, "m", lo_open=True),
    "tubes.offset_cents": Limit(-600.0, 600.0, "cents"),
    "tubes.calibration": Limit(0.0, 100.0),
    "tubes.length_m": Limit(0.01, 5.0, "m"),
    # -- motor: discs turn a few revolutions a second (common practice, no source)
    "motor.rate_rev_per_s": Limit(0.0, 50.0, "rev/s"),
    "motor.block_fraction": Limit(0.0, 1.0, hi_open=True),
    "motor.angle_deg": Limit(-360.0, 360.0, "degrees"),
    "motor.spin_up_s": Limit(0.0, 60.0, "s"),
    # -- [solid_correction]: 3-D over 1-D frequency of a mode. The 1-D model misses
    # tuned partials by tens of cents and untuned lateral and torsional modes of wide
    # bars by up to a few semitones (measured here: lateral 1 of the demo's F6 -220
    # cents); a factor of 2 either way is far outside any sound 1-D model
    "solid.factor": Limit(0.5, 2.0),
    "solid.mesh_level": Limit(1, 8),
    "solid.estimated_error": Limit(0.0, 0.1),
    # -- stiffness calibration from a prototype bar ([stiffness] of a calibration file):
    # handbook moduli of one alloy differ by a few percent between batches (from
    # memory); a factor of 2 in E is another alloy, not a calibration.  What the
    # modulus leaves per partial is a model gap of a few tens of cents at most (the
    # 1-D vs 3-D gaps, physics.md); 0.8-1.25 (about +-390 cents) is far outside it
    "stiffness.scale": Limit(0.5, 2.0),
    "stiffness.factor": Limit(0.8, 1.25),
    "stiffness.uncertainty": Limit(0.0, 1.0),
    "stiffness.frequency_hz": Limit(1.0, 1e5, "Hz"),
    "stiffness.tolerance_hz": Limit(0.0, 1e3, "Hz"),
    "stiffness.residual_cents": Limit(-400.0, 400.0, "cents"),
    # -- event lists: a passage of at most MAX_SCORE_S
    "score.time_s": Limit(0.0, MAX_SCORE_S, "s"),
    "score.beat": Limit(0.0, 1e6, "beats"),
    "score.tempo_bpm": Limit(10.0, 1000.0, "bpm"),
    "score.length_s": Limit(0.01, MAX_SCORE_S, "s"),
    "score.duration_s": Limit(0.0, MAX_SCORE_S, "s", lo_open=True),
    "score.duration_beats": Limit(0.0, 1e6, "beats", lo_open=True),
    "score.pedal": Limit(0.0, 1.0),
}


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
    """Read a TOML file, turning every failure into a one-line ConfigError.

    Refuses files over :data:`MAX_FILE_BYTES` and nesting deeper than
    :data:`MAX_DEPTH`, so no later reader can run out of memory or recursion.
    """
    return load_toml_digest(path)[0]


def load_toml_digest(path: str | os.PathLike[str]) -> tuple[dict[str, Any], str]:
    """Read a TOML file as :func:`load_toml` does; also return the SHA-256 of its bytes."""
    p = Path(path)
    try:
        if p.is_file() and p.stat().st_size > MAX_FILE_BYTES:
            raise ConfigError(f"is {p.stat().st_size} bytes; allowed: up to {MAX_FILE_BYTES} "
                              "bytes", source=str(p))
        raw = p.read_bytes()
        text = raw.decode("utf-8")
    except FileNotFoundError:
        raise ConfigError("file not found", source=str(p)) from None
    except IsADirectoryError:
        raise ConfigError("is a folder, expected a TOML file", source=str(p)) from None
    except UnicodeDecodeError:
        raise ConfigError("is not UTF-8 text, expected a TOML file", source=str(p)) from None
    except OSError as exc:
        raise ConfigError(f"cannot be read ({exc.strerror})", source=str(p)) from None
    except ValueError:   # a NUL byte in the name
        raise ConfigError("is not a usable file name", source=repr(str(p))) from None
    return parse_toml(text, str(p)), hashlib.sha256(raw).hexdigest()


def parse_toml(text: str, source: str) -> dict[str, Any]:
    """Parse TOML text read from ``source``; every failure is a one-line ConfigError."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"malformed TOML: {one_line(str(exc))}", source=source) from None
    except RecursionError:
        raise ConfigError(f"nested too deeply; allowed: up to {MAX_DEPTH} levels of tables "
                          "and arrays", source=source) from None
    _check_depth(data, source)
    return data


def _check_depth(data: Any, source: str) -> None:
    stack = [(data, 0)]
    while stack:
        value, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise ConfigError(f"nested more than {MAX_DEPTH} levels deep; allowed: up to "
                              f"{MAX_DEPTH} levels of tables and arrays", source=source)
        if isinstance(value, dict):
            stack.extend((v, depth + 1) for v in value.values())
        elif isinstance(value, list):
            stack.extend((v, depth + 1) for v in value)


def one_line(text: str, limit: int = 200) -> str:
    """``text`` with line breaks replaced and cut to ``limit`` characters."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def key_text(name: Any) -> str:
    """Return a key as shown in messages: bare keys as they are, others quoted, cut short."""
    name = str(name)
    if _BARE_KEY_RE.match(name):
        return name
    return one_line(repr(name), 40)


def check_name(value: Any, source: str | None, key: str, what: str) -> str:
    """Return ``value`` if it is a preset name (letters, digits, ``-``, ``_``; 1-64).

    Checked before a name becomes part of a file path, so a long or odd name is
    refused in one line instead of failing in the file system.
    """
    if not isinstance(value, str) or not _NAME_RE.match(value):
        raise ConfigError(f"= {_fmt(value)}: not a {what} name; allowed: 1 to 64 letters, "
                          "digits, '-' and '_', starting with a letter or digit",
                          source=source or None, key=key)
    return value


def find_preset(spec: str, folder: str) -> Path | None:
    """Return the file a preset name or a TOML path stands for, or None if none.

    A name (see :func:`check_name`) is looked up in ``presets/<folder>``; anything
    else must be the path of an existing ``.toml`` file.  A name is checked for its
    form before it becomes part of a path, and no file-system error escapes.
    """
    try:
        if is_name(spec):
            path = presets_dir() / folder / f"{spec}.toml"
            if path.is_file():
                return path
        path = Path(spec)
        if spec.endswith(".toml") and len(spec) <= 4096 and path.is_file():
            return path
    except (OSError, ValueError):  # a name too long for the file system, a NUL byte
        pass
    return None


def is_name(value: Any) -> bool:
    """Tell whether ``value`` has the form of a preset name (see :func:`check_name`)."""
    return isinstance(value, str) and bool(_NAME_RE.match(value))


def _fmt(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, int):
        return str(value) if abs(value) < 10**15 else f"{'-' if value < 0 else ''}" \
            f"{str(abs(value))[0]}e+{len(str(abs(value))) - 1}"
    if isinstance(value, str):
        return one_line(repr(value), 60)
    if isinstance(value, list):
        return "[...]" if len(value) > 8 else one_line("[" + ", ".join(_fmt(v) for v in value)
                                                       + "]", 80)
    if isinstance(value, dict):
        return "{...}" if value else "{}"
    return one_line(repr(value), 60)


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
        name = key_text(name)
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
                    f"= {_fmt(self.data[name])}: unknown key; allowed here: "
                    + ", ".join(sorted(allowed)),
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
    # A None default is given back when the key is absent: typed Optional there only.
    @overload
    def number(self, name: str, default: None, *, limit: str | Limit | None = ...,
               gt: float | None = ..., ge: float | None = ..., lt: float | None = ...,
               le: float | None = ..., unit: str = ...) -> float | None: ...
    @overload
    def number(self, name: str, default: float = ..., *, limit: str | Limit | None = ...,
               gt: float | None = ..., ge: float | None = ..., lt: float | None = ...,
               le: float | None = ..., unit: str = ...) -> float: ...
    def number(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        limit: str | Limit | None = None,
        gt: float | None = None,
        ge: float | None = None,
        lt: float | None = None,
        le: float | None = None,
        unit: str = "",
    ) -> float | None:
        """Return a finite float in the named range ``limit`` (a key of LIMITS).

        ``gt``/``ge``/``lt``/``le`` are the older one-off bounds, kept for tables
        that have no named range yet.
        """
        value = self._get(name, default)
        if value is None:
            return value
        return _check_number(self, name, value, limit=_limit(limit), gt=gt, ge=ge, lt=lt,
                             le=le, unit=unit)

    def integer(self, name: str, default: Any = _MISSING, *, limit: str | Limit | None = None,
                ge: int | None = None, le: int | None = None) -> int:
        """Return an integer, in the named range ``limit`` or between ``ge`` and ``le``."""
        value = self._get(name, default)
        lim = _limit(limit)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(name, "must be a whole number"
                             + (f"; allowed: {lim.text()}" if lim is not None else ""))
        if lim is not None and not lim.allows(value):
            raise self.error(name, f"{lim.problem(value)}; allowed: {lim.text()}")
        if ge is not None and value < ge:
            raise self.error(name, f"must be >= {ge}")
        if le is not None and value > le:
            raise self.error(name, f"must be <= {le}")
        return value

    @overload
    def string(self, name: str, default: None, *,
               choices: Iterable[str] | None = ...) -> str | None: ...
    @overload
    def string(self, name: str, default: str = ..., *,
               choices: Iterable[str] | None = ...) -> str: ...
    def string(self, name: str, default: Any = _MISSING, *,
               choices: Iterable[str] | None = None) -> str | None:
        """Return a string, optionally one of ``choices``."""
        value = self._get(name, default)
        if value is None:
            return value
        if not isinstance(value, str):
            raise self.error(name, "must be a string")
        if len(value) > MAX_STRING_CHARS:
            raise self.error(name, f"is {len(value)} characters long; allowed: up to "
                                   f"{MAX_STRING_CHARS}")
        if choices is not None:
            choices = list(choices)
            if value not in choices:
                raise self.error(name, "not a choice; allowed: " + ", ".join(choices))
        return value

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        """Return a boolean."""
        value = self._get(name, default)
        if not isinstance(value, bool):
            raise self.error(name, "must be true or false")
        return value

    @overload
    def numbers(self, name: str, default: None, *, limit: str | Limit | None = ...,
                gt: float | None = ..., ge: float | None = ..., min_len: int = ...,
                max_len: int = ..., length: int | None = ..., increasing: bool = ...,
                unit: str = ...) -> list[float] | None: ...
    @overload
    def numbers(self, name: str, default: list[float] = ..., *,
                limit: str | Limit | None = ..., gt: float | None = ...,
                ge: float | None = ..., min_len: int = ..., max_len: int = ...,
                length: int | None = ..., increasing: bool = ...,
                unit: str = ...) -> list[float]: ...
    def numbers(
        self,
        name: str,
        default: Any = _MISSING,
        *,
        limit: str | Limit | None = None,
        gt: float | None = None,
        ge: float | None = None,
        min_len: int = 1,
        max_len: int = 1000,
        length: int | None = None,
        increasing: bool = False,
        unit: str = "",
    ) -> list[float] | None:
        """Return a list of finite floats, each in the named range ``limit``."""
        value = self._get(name, default)
        if value is None:
            return value
        if not isinstance(value, list):
            raise self.error(name, "must be a list of numbers")
        if length is not None and len(value) != length:
            raise self.error(name, f"must hold exactly {length} numbers, has {len(value)}")
        if len(value) < min_len:
            raise self.error(name, f"must hold at least {min_len} numbers")
        if len(value) > max_len:
            raise self.error(name, f"holds {len(value)} numbers; allowed: up to {max_len}")
        lim = _limit(limit)
        out = [
            _check_number(self, name, v, limit=lim, gt=gt, ge=ge, unit=unit, index=i)
            for i, v in enumerate(value)
        ]
        if increasing and any(b <= a for a, b in zip(out, out[1:], strict=False)):
            raise self.error(name, "must be strictly increasing")
        return out

    @overload
    def section(self, name: str, default: None) -> Section | None: ...
    @overload
    def section(self, name: str) -> Section: ...
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
    except (TypeError, ValueError, OverflowError):
        raise ConfigError(f"= {value!r}: must be a number {rule}", key=key) from None
    if not (math.isfinite(v) and ok(v)):
        raise ConfigError(f"= {value!r}: must be {rule}", key=key)
    return v


def _limit(limit: str | Limit | None) -> Limit | None:
    if limit is None or isinstance(limit, Limit):
        return limit
    return LIMITS[limit]


def _check_number(sec: Section, name: str, value: Any, *, limit: Limit | None = None, gt=None,
                  ge=None, lt=None, le=None, unit: str = "", index: int | None = None) -> float:
    where = f"{name}[{index}]" if index is not None else name
    allowed = f"; allowed: {limit.text()}" if limit is not None else ""

    def fail(rule: str) -> ConfigError:
        return ConfigError(
            f"= {_fmt(value)}: {rule}", source=sec.source, key=sec.key(where)
        )

    if isinstance(value, bool) or not isinstance(value, int | float):
        raise fail("must be a number" + allowed)
    try:
        value = float(value)
    except OverflowError:
        raise fail("too large" + allowed) from None
    if not math.isfinite(value):
        raise fail("must be a finite number" + allowed)
    if limit is not None and not limit.allows(value):
        raise fail(limit.problem(value) + allowed)
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


def require_sources(sec: Section, source: Mapping[str, str], keys: Iterable[str],
                    what: str) -> None:
    """Refuse a preset whose ``[source]`` table leaves any of ``keys`` unsourced.

    ``what`` names the values in the message ("every value", "every property").
    """
    missing = [k for k in keys if k not in source]
    if missing:
        raise ConfigError(f"{what} needs its source; missing for " + ", ".join(missing),
                          source=sec.source, key=sec.key("source"))

