"""Property tests of every file reader: any content gives an object or one clean error.

Each reader gets the demo files mutated at random (hypothesis, a fixed derandomised
run so CI repeats it): one value replaced by something huge, tiny, negative, NaN,
infinite, of the wrong type, a nested table, a long text; a key deleted; a key
nobody reads added.  The promise checked (the project's rule for bad input, no
outside source): the reader returns its object, or raises ConfigError whose
message is one line, starts with the file and, for a value no key accepts, names
the key.  Nothing else may escape.  The loops stop at load: no bar is solved.
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import mutate
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from synth.config import MAX_EVENTS, MAX_SCORE_S
from synth.engine.score import Score
from synth.errors import ConfigError
from synth.physics.instrument import BarFile, Instrument
from synth.physics.mallet import Mallet
from synth.physics.materials import Material
from synth.pitch import HIGHEST_MIDI, LOWEST_MIDI, note_to_midi
from synth.settings.instrument import load_design
from synth.settings.mallet import load_mallet
from synth.settings.material import load_material
from synth.settings.score import read_events, read_midi

CASES = settings(max_examples=250, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

_DIR = Path(tempfile.mkdtemp(prefix="reader-props-"))

BAR = mutate.load("bars/parabolic-example.toml")
STATIONS = mutate.load("bars/calipers-example.toml")
PRESET = mutate.load("instruments/lantern-street-bars.toml")
MATERIAL = mutate.load("materials/aluminium-6061-t6.toml")
MALLET = mutate.load("mallets/medium.toml")
EVENTS = mutate.load("events/harbour-waltz.toml")


def _read(reader, name: str, change) -> object | None:
    doc, path, surely_bad = change
    file = mutate.write(_DIR / name, doc)
    try:
        result = reader(file)
    except ConfigError as exc:
        mutate.check_error(exc, file, path, surely_bad)
        return None
    assert not surely_bad, f"accepted {mutate.key_of(path)} = {mutate._at(doc, path)!r}"
    return result


@CASES
@given(st.one_of(mutate.mutation(BAR), mutate.mutation(STATIONS)))
def test_bar_file(change) -> None:
    result = _read(load_design, "bar.toml", change)
    if result is not None:
        assert isinstance(result, BarFile)
        g = result.geometry
        assert 0.02 <= g.length_m <= 3.0 and 0.005 <= g.width_m <= 0.5  # LIMITS["bar.*"]


@CASES
@given(mutate.mutation(PRESET))
def test_instrument_preset(change) -> None:
    result = _read(load_design, "preset.toml", change)
    if result is not None:
        assert isinstance(result, Instrument)
        assert all(n in result.notes for n in result.bars)
        assert 380.0 <= result.reference_pitch_hz <= 480.0
        assert -20.0 <= result.temperature_c <= 50.0


@CASES
@given(mutate.mutation(MATERIAL))
def test_material(change) -> None:
    result = _read(load_material, "alloy.toml", change)
    if result is not None:
        assert isinstance(result, Material)
        assert 0.0 <= result.poisson_ratio < 0.5
        assert math.isfinite(result.bar_wave_speed_m_s) and result.bar_wave_speed_m_s > 0


@CASES
@given(mutate.mutation(MALLET))
def test_mallet(change) -> None:
    result = _read(load_mallet, "head.toml", change)
    if result is not None:
        assert isinstance(result, Mallet)
        assert 1.0 <= result.exponent <= 5.0


@CASES
@given(mutate.mutation(EVENTS))
def test_event_list(change) -> None:
    result = _read(read_events, "events.toml", change)
    if result is not None:
        _bounded(result)


def _bounded(score: Score) -> None:
    assert len(score.strikes) + len(score.pedal) <= MAX_EVENTS
    assert 0.0 <= score.last_event_s <= MAX_SCORE_S
    for s in score.strikes:
        assert LOWEST_MIDI <= note_to_midi(s.note) <= HIGHEST_MIDI


# --------------------------------------------------------------------------- MIDI
@CASES
@given(mutate.midi_bytes())
def test_midi_bytes(data: bytes) -> None:
    file = _DIR / "passage.mid"
    file.write_bytes(data)
    try:
        score = read_midi(file)
    except ConfigError as exc:
        mutate.check_error(exc, file, (), False)
        return
    _bounded(score)
