"""Event lists (TOML) and standard MIDI files -> :class:`~synth.engine.score.Score`.

The reader turns a file into a :class:`~synth.engine.score.Score`: strikes (note name, velocity,
mallet, strike position, release) and pedal changes, all timed in seconds.
The voice plan turns a score into engine voices; the engine itself never sees
notes.  Times become samples through
:func:`synth.engine.voice.seconds_to_sample`, the single conversion, so every
event lands on the same sample whoever converts it.

Event list format (TOML)
------------------------
One optional ``[score]`` table and any number of ``[[strike]]`` and
``[[pedal]]`` tables, in any order (events are sorted by time)::

    # Opening of the shop demo: a rolled F major chord, then a melody.
    [score]
    tempo_bpm = 90          # optional; needed by events timed in beats
    length_s = 12.0         # optional; render length (default: chosen by the renderer)

    [[pedal]]
    time_s = 0.0
    value = 1.0             # 1 = dampers lifted (notes ring), 0 = dampers on the bars

    [[strike]]
    time_s = 0.00
    note = "F3"
    velocity = 0.8          # 0..1 (the voice plan maps it to a mallet speed)

    [[strike]]
    time_s = 0.03
    note = "A3"
    mallet_speed_m_s = 1.6  # or the speed of the mallet head itself, m/s
    mallet = "medium"       # optional: a mallet preset of the instrument
    position = 0.5          # optional: along the bar, 0..1 of its length (0.5 = centre)
    across = 0.1            # optional: off the centreline, -0.5..0.5 of the width

    [[strike]]
    beat = 4                # with tempo_bpm: 4 beats = 2.667 s at 90 bpm
    note = "C5"
    velocity = 0.6
    duration_beats = 1      # optional release: the note's own damping starts here
                            # (duration_s in seconds; absent = released at once, so
                            # the note rings while the dampers are lifted)

    [[pedal]]
    beat = 6
    value = 0.5             # half pedal

Keys of ``[[strike]]``: ``time_s`` or ``beat`` (exactly one, >= 0), ``note``
(scientific pitch notation, C0 to C9: ``A4``, ``F#5``, ``Bb3``), ``velocity``
(0..1) or ``mallet_speed_m_s`` (0.01-20 m/s, exactly one), ``mallet``,
``position``, ``across``, ``duration_s`` or ``duration_beats`` (> 0, at most
one).  Keys of ``[[pedal]]``: ``time_s`` or ``beat``, ``value`` (0..1).  Unknown
keys are errors, and every error names the file, the key, the value and the
allowed range (all ranges in :data:`synth.config.LIMITS`).  A passage ends within
4 hours (:data:`synth.config.MAX_SCORE_S`: event times, releases and
``length_s``) and holds at most :data:`synth.config.MAX_EVENTS` strikes and pedal
changes together.  Before the first pedal change the pedal is in the renderer's
default state.

Standard MIDI files
-------------------
:func:`read_midi` reads type 0 and 1 files with mido (other types are refused;
so are notes outside C0..C9, events after 4 hours and more than
:data:`synth.config.MAX_EVENTS` events).  Note-on with velocity
> 0 starts a strike (``velocity = v/127``); the matching note-off (or note-on
with velocity 0) on the same channel and key sets its release; a key struck
again while still held is released at the new strike.  Controller 64 (the
sustain pedal) on any channel becomes a pedal change ``value = v/127`` (127 =
dampers lifted; values in between are kept for half-pedalling).  Tempo
changes are honoured: tick times are converted through the tempo map
exactly, in integer ticks and microseconds.  Other messages are ignored.

References
----------
.. [1] MIDI Manufacturers Association, "Standard MIDI Files 1.0", 1996
   (tempo meta-event, division in ticks per quarter note).
.. [2] MIDI Manufacturers Association, "MIDI 1.0 Detailed Specification",
   1996 (note on/off, velocity 0 as note-off, controller 64).
"""

from __future__ import annotations

import os
from pathlib import Path

from synth.config import (
    LIMITS,
    MAX_EVENTS,
    MAX_FILE_BYTES,
    MAX_SCORE_S,
    Section,
    find_preset,
    load_toml,
    one_line,
)
from synth.engine.score import PedalChange, Score, Strike
from synth.engine.voice import seconds_to_sample
from synth.errors import ConfigError
from synth.pitch import HIGHEST_MIDI, LOWEST_MIDI, midi_to_note, note_to_midi

_STRIKE_KEYS = ("time_s", "beat", "note", "velocity", "mallet_speed_m_s", "mallet", "position",
                "across", "duration_s", "duration_beats")


_PEDAL_KEYS = ("time_s", "beat", "value")


_SCORE_KEYS = ("tempo_bpm", "length_s")


_TOP_KEYS = ("score", "strike", "pedal")


_DEFAULT_TEMPO_US = 500_000  # 120 bpm, the default of a MIDI file without a tempo event


# --------------------------------------------------------------------------- TOML
def _time_of(sec: Section, seconds_per_beat: float | None) -> float:
    has_t, has_b = "time_s" in sec, "beat" in sec
    if has_t == has_b:
        raise sec.error(None, "give exactly one of time_s (seconds) or beat")
    if has_t:
        return sec.number("time_s", limit="score.time_s")
    beat = sec.number("beat", limit="score.beat")
    if seconds_per_beat is None:
        raise sec.error("beat", "needs tempo_bpm in the [score] table")
    return _within_score(sec, "beat", beat * seconds_per_beat)


def _within_score(sec: Section, key: str, time_s: float) -> float:
    if time_s > MAX_SCORE_S:
        raise sec.error(key, f"falls at {time_s:g} s, too late; allowed: "
                             f"{LIMITS['score.time_s'].text()}")
    return time_s


def _note_of(sec: Section) -> str:
    name = sec.string("note")
    try:
        return midi_to_note(note_to_midi(name))
    except ConfigError as exc:
        raise sec.error("note", exc.detail) from None


def _strike_of(sec: Section, seconds_per_beat: float | None) -> Strike:
    sec.check_keys(_STRIKE_KEYS)
    time_s = _time_of(sec, seconds_per_beat)
    note = _note_of(sec)
    if ("velocity" in sec) == ("mallet_speed_m_s" in sec):
        raise sec.error(None, "give exactly one of velocity (0..1) or mallet_speed_m_s (m/s)")
    velocity = sec.number("velocity", None, limit="strike.velocity")
    speed = sec.number("mallet_speed_m_s", None, limit="mallet.speed_m_s")
    mallet = sec.string("mallet", None)
    if mallet is not None and find_preset(mallet, "mallets") is None:
        raise sec.error("mallet", "unknown mallet; allowed: a name from presets/mallets or "
                                  "the path of a .toml file")
    position = sec.number("position", None, limit="strike.position")
    across = sec.number("across", None, limit="strike.across")
    if "duration_s" in sec and "duration_beats" in sec:
        raise sec.error(None, "give at most one of duration_s or duration_beats")
    release = None
    if "duration_s" in sec:
        release = _within_score(sec, "duration_s",
                                time_s + sec.number("duration_s", limit="score.duration_s"))
    elif "duration_beats" in sec:
        beats = sec.number("duration_beats", limit="score.duration_beats")
        if seconds_per_beat is None:
            raise sec.error("duration_beats", "needs tempo_bpm in the [score] table")
        release = _within_score(sec, "duration_beats", time_s + beats * seconds_per_beat)
    return Strike(time_s, note, velocity, speed, mallet, position, across, release,
                  key=sec.prefix)


def _tables(top: Section, name: str) -> list[Section]:
    value = top.data.get(name, [])
    if not isinstance(value, list):
        raise top.error(name, f"must be an array of tables, written [[{name}]]")
    for i, v in enumerate(value):
        if not isinstance(v, dict):
            raise top.error(f"{name}[{i}]", f"must be a table, written [[{name}]]")
    count = sum(len(v) for v in top.data.values() if isinstance(v, list))
    if count > MAX_EVENTS:
        raise ConfigError(f"holds {count} strikes and pedal changes; allowed: up to "
                          f"{MAX_EVENTS}", source=top.source, key=name)
    return [Section(v, top.source, f"{name}[{i}]") for i, v in enumerate(value)]


def parse_events(data: dict, source: str) -> Score:
    """Validate an event list already parsed from TOML (see the module docstring).

    Parameters
    ----------
    data : dict
        The parsed TOML document.
    source : str
        File name for error messages.

    Returns
    -------
    Score
        The events, sorted by time.

    Raises
    ------
    ConfigError
        Naming the file, the key, the value and the rule.
    """
    top = Section(data, source)
    top.check_keys(_TOP_KEYS)
    head = top.section("score", None)
    seconds_per_beat = None
    length_s = None
    if head is not None:
        head.check_keys(_SCORE_KEYS)
        tempo = head.number("tempo_bpm", None, limit="score.tempo_bpm")
        seconds_per_beat = None if tempo is None else 60.0 / tempo
        length_s = head.number("length_s", None, limit="score.length_s")
    strikes = [_strike_of(sec, seconds_per_beat) for sec in _tables(top, "strike")]
    pedal = []
    for sec in _tables(top, "pedal"):
        sec.check_keys(_PEDAL_KEYS)
        pedal.append(PedalChange(_time_of(sec, seconds_per_beat),
                                 sec.number("value", limit="score.pedal")))
    strikes.sort(key=lambda s: s.time_s)
    pedal.sort(key=lambda p: p.time_s)
    return Score(tuple(strikes), tuple(pedal), length_s, source)


def read_toml_events(path: str | os.PathLike[str]) -> Score:
    """Read our TOML event list (format in the module docstring)."""
    return parse_events(load_toml(path), str(path))


# --------------------------------------------------------------------------- MIDI
def read_midi(path: str | os.PathLike[str]) -> Score:
    """Read a standard MIDI file into a :class:`Score` (rules in the module docstring).

    Raises
    ------
    ConfigError
        The file is missing or not a standard MIDI file.
    """
    import mido

    p = Path(path)
    source = str(p)
    try:
        is_file, is_dir = p.is_file(), p.is_dir()
        size = p.stat().st_size if is_file else 0
    except (OSError, ValueError) as exc:   # a name too long, a NUL byte
        raise ConfigError(f"cannot be read ({getattr(exc, 'strerror', None) or exc})",
                          source=repr(source)) from None
    if not is_file:
        raise ConfigError("is a folder, expected a MIDI file" if is_dir else
                          "file not found", source=source)
    if size > MAX_FILE_BYTES:
        raise ConfigError(f"is {size} bytes; allowed: up to {MAX_FILE_BYTES} bytes",
                          source=source)
    try:
        midi = mido.MidiFile(p)
    except Exception as exc:  # noqa: BLE001 -- mido raises many kinds on damaged files
        raise ConfigError(f"not a readable standard MIDI file ({one_line(str(exc), 80)})",
                          source=source) from None
    if midi.type not in (0, 1):
        raise ConfigError(f"MIDI type = {midi.type!r}: not supported; allowed: 0 or 1 (type 2, "
                          "independent sequences, is not read; save as type 0 or 1)",
                          source=source)
    tpq = midi.ticks_per_beat
    if not isinstance(tpq, int) or tpq <= 0:
        raise ConfigError(f"ticks per beat = {tpq!r}: must be a positive whole number "
                          "(SMPTE time division is not supported)", source=source)

    # Exact tick -> seconds through the tempo map: integer ticks times microseconds.
    tick = 0
    seg_tick, seg_us, tempo = 0, 0, _DEFAULT_TEMPO_US  # segment start tick, its time in us*tpq

    def seconds(t: int) -> float:
        return (seg_us + (t - seg_tick) * tempo) / (tpq * 1e6)

    held: dict[tuple[int, int], list[int]] = {}   # (channel, key) -> indices into `notes`
    notes: list[dict] = []
    pedal: list[PedalChange] = []
    for msg in mido.merge_tracks(midi.tracks):
        tick += msg.time
        if msg.is_meta and msg.type == "end_of_track":
            continue   # only where the track ends, not an event
        if seconds(tick) > MAX_SCORE_S:
            raise ConfigError(f"an event at tick {tick} falls at {seconds(tick):g} s, too late; "
                              f"allowed: up to {MAX_SCORE_S:g} s", source=source)
        if len(notes) + len(pedal) > MAX_EVENTS:
            raise ConfigError(f"holds more than {MAX_EVENTS} strikes and pedal changes; "
                              f"allowed: up to {MAX_EVENTS}", source=source)
        if msg.type in ("note_on", "note_off") and not LOWEST_MIDI <= msg.note <= HIGHEST_MIDI:
            raise ConfigError(f"note number {msg.note} at {seconds(tick):g} s is off the "
                              f"keyboard; allowed: {LOWEST_MIDI} to {HIGHEST_MIDI} (C0 to C9)",
                              source=source)
        if msg.type == "set_tempo":
            seg_us += (tick - seg_tick) * tempo
            seg_tick, tempo = tick, msg.tempo
        elif msg.type == "note_on" and msg.velocity > 0:
            key = (msg.channel, msg.note)
            now = seconds(tick)
            for i in held.pop(key, []):       # struck again while held: release it now
                notes[i]["release_s"] = now
            notes.append({"time_s": now, "note": midi_to_note(msg.note),
                          "velocity": msg.velocity / 127.0, "release_s": None})
            held[key] = [len(notes) - 1]
        elif msg.type == "note_off" or (msg.type == "note_on" and msg.velocity == 0):
            for i in held.pop((msg.channel, msg.note), []):
                notes[i]["release_s"] = seconds(tick)
        elif msg.type == "control_change" and msg.control == 64:
            pedal.append(PedalChange(seconds(tick), msg.value / 127.0))
    strikes = [Strike(n["time_s"], n["note"], velocity=n["velocity"], release_s=n["release_s"])
               for n in notes]
    strikes.sort(key=lambda s: s.time_s)
    pedal.sort(key=lambda c: c.time_s)
    return Score(tuple(strikes), tuple(pedal), None, source)


def read_events(path: str | os.PathLike[str]) -> Score:
    """Read an event file by its suffix: ``.toml`` (ours) or ``.mid``/``.midi``."""
    suffix = Path(path).suffix.lower()
    if suffix == ".toml":
        return read_toml_events(path)
    if suffix in (".mid", ".midi", ".smf"):
        return read_midi(path)
    raise ConfigError(
        f"unknown event file type {suffix or '(none)'!r}: use a .toml event list or a "
        ".mid standard MIDI file", source=str(path)
    )


def midi_file_events(path, sample_rate: float) -> list[tuple[int, object]]:
    """Messages of a standard MIDI file with their output samples.

    Times follow the file's tempo map exactly (integer ticks times
    microseconds, as :func:`synth.settings.score.read_midi` reads them) and become
    samples through :func:`seconds_to_sample`, so each event lands on the sample
    an offline render of the file puts it on.
    """
    import mido

    midi = mido.MidiFile(path)
    tpq = midi.ticks_per_beat
    tick, seg_tick, seg_us, tempo = 0, 0, 0, 500_000
    out = []
    for msg in mido.merge_tracks(midi.tracks):
        tick += msg.time
        if msg.type == "set_tempo":
            seg_us += (tick - seg_tick) * tempo
            seg_tick, tempo = tick, msg.tempo
            continue
        if msg.is_meta:
            continue
        seconds = (seg_us + (tick - seg_tick) * tempo) / (tpq * 1e6)
        out.append((seconds_to_sample(seconds, sample_rate), msg))
    return out
