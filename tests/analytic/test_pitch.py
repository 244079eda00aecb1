"""Equal-tempered pitch against ISO 16 and exact 12-TET values."""

from __future__ import annotations

import pytest

from synth import pitch
from synth.errors import ConfigError


# ISO 16:1975 sets A4 = 440 Hz; the other values follow exactly from 12-TET
# (f = 440 * 2**((n - 69)/12)), checked to 1e-4 Hz.
@pytest.mark.parametrize(
    ("name", "hz"),
    [("A4", 440.0), ("C4", 261.6256), ("F3", 174.6141), ("F6", 1396.9129),
     ("C5", 523.2511), ("F5", 698.4565), ("C6", 1046.5023), ("F4", 349.2282)],
)
def test_iso16_and_12tet_frequencies(name: str, hz: float) -> None:
    assert pitch.note_to_hz(name) == pytest.approx(hz, abs=1e-4)


def test_sharps_and_flats_are_enharmonic() -> None:
    assert pitch.note_to_midi("F#5") == pitch.note_to_midi("Gb5") == 78
    assert pitch.note_to_midi("Bb3") == pitch.note_to_midi("A#3") == 58
    assert pitch.note_to_midi("C0") == 12 and pitch.note_to_midi("C9") == 120
    assert pitch.canonical_note("Bb3") == "A#3"


def test_reference_442_is_7_8514_cents_above_440() -> None:
    # exact: 1200 log2(442/440)
    assert pitch.cents(442.0, 440.0) == pytest.approx(7.8514, abs=1e-4)
    assert pitch.note_to_hz("A4", reference_hz=442.0) == 442.0


def test_nearest_note_and_offset() -> None:
    name, off = pitch.nearest_note(441.0)
    assert name == "A4"
    assert off == pytest.approx(3.9302, abs=1e-4)  # exact 1200 log2(441/440)
    assert pitch.nearest_note(pitch.note_to_hz("F#5") * pitch.cents_to_ratio(-49.0))[0] == "F#5"


def test_note_range_is_chromatic() -> None:
    notes = pitch.note_range("F3", "F6")
    assert len(notes) == 37 and notes[0] == "F3" and notes[-1] == "F6"


@pytest.mark.parametrize("bad", ["H4", "A", "4A", "A#", "", "Cx4", "C-1", "C10", "Bbb3",
                                 "C99999999", "A" * 300])
def test_unknown_note_names_are_refused(bad: str) -> None:
    with pytest.raises(ConfigError, match="unknown note"):
        pitch.note_to_midi(bad)


@pytest.mark.parametrize("bad", ["C#9", "Cb0", "G9"])
def test_notes_off_the_keyboard_are_refused(bad: str) -> None:
    # scientific pitch notation spans C0..C9 here (MIDI 12..120): common practice, no source
    with pytest.raises(ConfigError, match="off the keyboard; allowed: C0 to C9"):
        pitch.note_to_midi(bad)
