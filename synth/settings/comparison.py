"""The blind comparison's files: the answer key (TOML) and saved answers (JSON).

The key becomes a :class:`BlindKey`; the answers a listening page saved become the
answers in trial order, checked against the key.

:mod:`synth.reports.compare` writes both kinds of file and scores the answers.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Final

from synth.config import Section, load_toml
from synth.errors import ConfigError

DEFAULT_GAP_S: Final[float] = 0.5
"""Silence between the parts of the alternating file and of a trial, s."""

DESIGNS: Final[tuple[str, str]] = ("A", "B")


@dataclass(frozen=True)
class BlindKey:
    """The answer key of a set of ABX trials (the contents of key.toml)."""

    x: tuple[str, ...]
    seed: int
    design_a: str
    design_b: str
    files: tuple[str, ...]
    gap_s: float
    source: str = ""
    run: str = ""

    @property
    def trials(self) -> int:
        """Number of trials."""
        return len(self.x)


def read_key(path: str | Path) -> BlindKey:
    """Read and check a key file written by :func:`write_blind_trials`."""
    src = str(path)
    sec = Section(load_toml(path), src)
    sec.check_keys({"run", "design_a", "design_b", "trials", "seed", "gap_s", "files", "x"})
    n = sec.integer("trials", ge=1)
    raw = sec.data.get("x")
    if not isinstance(raw, list) or not all(isinstance(v, str) for v in raw):
        raise ConfigError("missing or not a list of \"A\"/\"B\" strings", source=src, key="x")
    x = tuple(v.strip().upper() for v in raw)
    bad = [v for v in x if v not in DESIGNS]
    if bad:
        raise ConfigError(f"= {bad[0]!r}: every entry must be \"A\" or \"B\"", source=src, key="x")
    if len(x) != n:
        raise ConfigError(f"holds {len(x)} entries but trials = {n}", source=src, key="x")
    files = sec.data.get("files", [])
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise sec.error("files", "must be a list of file names")
    return BlindKey(x=x, seed=sec.integer("seed", 0, ge=0), design_a=sec.string("design_a", ""),
                    design_b=sec.string("design_b", ""), files=tuple(files),
                    gap_s=sec.number("gap_s", DEFAULT_GAP_S, gt=0.0), source=src,
                    run=sec.string("run", ""))


ANSWERS_FORMAT: Final[str] = "barwright blind answers"
"""The ``format`` value of an answers file saved by the listening page."""


MAX_ANSWERS_BYTES: Final[int] = 1 << 20
"""Largest answers file read, bytes (one answer per trial needs far less)."""


def read_answers_file(path: str | Path, key: BlindKey) -> tuple[str, ...]:
    """Read the answers a listening page saved and check them against ``key``.

    The file is JSON: ``{"format": "barwright blind answers", "version": 1,
    "run": "...", "trials": n, "answers": ["A", "B", null, ...]}`` (null: not
    answered).  Its ``run`` must be the key's (when the key has one), it must
    hold one answer per trial, and every trial must be answered.

    Raises
    ------
    ConfigError
        Naming ``--answers-file``: unreadable, not such a file, another run's
        answers, the wrong count, or unanswered trials.
    """
    src = str(path)
    p = Path(path)
    try:
        if p.stat().st_size > MAX_ANSWERS_BYTES:
            raise ConfigError(f"{src}: larger than {MAX_ANSWERS_BYTES} bytes; not an answers "
                              "file", source="--answers-file")
        data = json.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{src}: no such file", source="--answers-file") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise ConfigError(f"{src}: not a readable answers file ({exc})",
                          source="--answers-file") from None
    if not isinstance(data, dict) or data.get("format") != ANSWERS_FORMAT:
        raise ConfigError(f"{src}: not an answers file saved by the listening page (no "
                          f"\"format\": \"{ANSWERS_FORMAT}\")", source="--answers-file")
    run = data.get("run")
    if key.run and run != key.run:
        raise ConfigError(f"{src}: answers of run {run!r}, but the key is of run {key.run!r}; "
                          "give the key written with these trials", source="--answers-file")
    raw = data.get("answers")
    if not isinstance(raw, list):
        raise ConfigError(f"{src}: \"answers\" must be a list", source="--answers-file")
    if len(raw) != key.trials:
        raise ConfigError(f"{src}: holds {len(raw)} answers; the key holds {key.trials} "
                          "trials", source="--answers-file")
    missing = [k for k, a in enumerate(raw, start=1) if a is None]
    if missing:
        raise ConfigError(f"{src}: trial {missing[0]} is not answered ({len(missing)} of "
                          f"{key.trials} open); answer every trial before scoring",
                          source="--answers-file")
    out = []
    for k, a in enumerate(raw, start=1):
        if not isinstance(a, str) or a.strip().upper() not in DESIGNS:
            raise ConfigError(f"{src}: answer {k} = {a!r}: each answer must be A or B",
                              source="--answers-file")
        out.append(a.strip().upper())
    return tuple(out)
