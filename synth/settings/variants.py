"""Preset variants: a preset file with some of its keys set to other values.

A design sweep names keys by their dotted path in the preset (``tubes.offset_cents``,
``blank.thickness_m``, ``sound.mallet``); each variant is the preset's table with
those values set, read by the same reader as a file
(:func:`synth.settings.instrument.design_from_table`), so every range check applies.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from pathlib import Path

from synth.config import load_toml
from synth.errors import ConfigError
from synth.physics.instrument import BarFile, Instrument
from synth.settings.instrument import design_from_table


def _set(data: dict, key: str, value, source: str) -> None:
    *parents, last = key.split(".")
    table = data
    for i, name in enumerate(parents):
        table = table.setdefault(name, {})
        if not isinstance(table, dict):
            raise ConfigError(f"= {value!r}: {'.'.join(parents[:i + 1])} is not a table",
                              source=source, key=key)
    old = table.get(last)
    if isinstance(old, dict):
        raise ConfigError(f"= {value!r}: is a table; vary one of its keys",
                          source=source, key=key)
    if isinstance(old, list) and not isinstance(value, list):
        value = [value] * len(old)
    table[last] = value


def read_variants(preset: str | Path, grid: Sequence[tuple[tuple[str, object], ...]]
                  ) -> list[Instrument | BarFile]:
    """Read a preset once per variant, each with its ``(dotted key, value)`` pairs set.

    Raises
    ------
    ConfigError
        A bad key or value, naming the variant (before any variant is returned).
    """
    base = load_toml(preset)
    out = []
    for settings in grid:
        data = copy.deepcopy(base)
        for key, value in settings:
            _set(data, key, value, str(preset))
        try:
            out.append(design_from_table(data, str(preset)))
        except ConfigError as exc:
            label = ", ".join(f"{k}={v}" for k, v in settings)
            raise ConfigError(f"variant {label}: {exc}", source="--vary") from None
    return out
