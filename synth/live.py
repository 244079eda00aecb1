"""Playing a design live: the voice plan of every note, and MIDI onto the voice pool.

Before the stream starts, every note of each design is planned by the voice plan
(:class:`synth.voicing.Voicer`) at a set of velocity layers: the strike a MIDI
velocity maps to is the nearest planned layer (``velocity / 127``, as a
rendered MIDI file maps it).  Each planned strike becomes a template of the
generic real-time pool (:class:`synth.engine.realtime.VoicePool`): its modes,
its bar-tube pair and, for the pair, the law by which the motor's discs
modulate it.  With two designs, both are planned and loudness-matched as
``compare`` matches them (its default phrase rendered offline, equal BS.1770-4
integrated loudness, the louder true peak at -1 dBTP); a controller or a
program change picks the design the next strike uses, so a ringing note keeps
its own design.

MIDI mapping (:meth:`LivePlayer.handle`), following the offline reader
(:func:`synth.settings.score.read_midi`):

* note-on with velocity > 0 starts a strike (a key struck again while held is
  released first); note-off, or note-on with velocity 0, releases it: from then
  on the dampers act on it as far as the pedal allows;
* controller 64 (sustain pedal): damper lift ``value / 127`` (half-pedalling
  kept);
* the motor controller (default 1, the modulation wheel): motor rate
  ``value / 127`` times the top rate; the shaft follows at the preset's spin-up;
* the design controller (default 80, a general-purpose switch): A below 64,
  B from 64; program change 0 = A, 1 = B;
* controller 7 (channel volume): the output gain times ``(value / 127)^2``
  (40 log10(value / 127) dB, the usual volume curve; from memory), ramped;
* notes outside the design's range are counted and ignored.

A player can record what it was given as a standard MIDI file whose ticks are
samples (:func:`recorded_midi`), so ``render`` makes the same passage offline.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any, Final

import numpy as np

from synth.engine.realtime import DEFAULT_VOICES, LiveVoice, Rotor, RotorLaw, VoicePool
from synth.errors import ConfigError, ModelError
from synth.physics.motor import disc_modulation
from synth.pitch import note_to_midi
from synth.voicing import LN_1000, Voicer, disc_rotor_law

DEFAULT_LAYERS: Final[int] = 8
"""Velocity layers planned per note (each strike costs about 20 ms to plan)."""

DEFAULT_GAIN_DB: Final[float] = -18.0
"""Output gain at the start, dB re the level-matched demo phrase at -1 dBTP (quiet)."""

DEFAULT_MOTOR_TOP: Final[float] = 6.0
"""Motor rate at controller value 127, rev/s (typical 0.5-6 rev/s, physics.md section 9)."""

MOTOR_CC: Final[int] = 1
VOLUME_CC: Final[int] = 7
DESIGN_CC: Final[int] = 80
PEDAL_CC: Final[int] = 64
DESIGNS: Final[tuple[str, str]] = ("A", "B")


def layer_velocities(n_layers: int) -> tuple[int, ...]:
    """MIDI velocities of the planned layers: ``round(127 (k + 1) / n)``, k = 0 .. n-1."""
    if not (isinstance(n_layers, int) and 1 <= n_layers <= 127):
        raise ConfigError(f"= {n_layers!r}: must be 1 to 127", source="--layers")
    return tuple(int(round(127 * (k + 1) / n_layers)) for k in range(n_layers))


def nearest_layers(velocities: Sequence[int]) -> np.ndarray:
    """Layer index for every MIDI velocity 0..127 (the nearest; ties to the louder)."""
    vel = np.asarray(velocities, dtype=float)
    table = np.zeros(128, dtype=np.int64)
    for v in range(128):
        d = np.abs(vel - v)
        table[v] = int(np.flatnonzero(d == d.min())[-1])
    return table


def rotor_law(voicer: Voicer, note: str) -> RotorLaw | None:
    """Return the disc law of a note's tube pair (``None`` without a tube).

    The same streams the offline voice plan uses (:func:`disc_modulation`), read
    as the generic law; taken with the motor running so that a controller can
    start it even when the preset's motor is stopped.
    """
    model = voicer.model(note)
    if model.coupling is None:
        return None
    motor = voicer.motor
    running = motor if motor.rate_rev_per_s > 0 else replace(motor, rate_rev_per_s=1.0)
    mod = disc_modulation(model.coupling.pair, running, voicer.sample_rate,
                          phase_offset_deg=voicer.disc_phase_deg(note),
                          reference_distance_m=voicer.sound.listening_distance_m)
    return disc_rotor_law(mod)

def rotor_of(voicer: Voicer) -> Rotor:
    """Return the motor's shaft as the pool's rotor (it starts with the stream, as in a render)."""
    m = voicer.motor
    return Rotor(resting_rad=m.resting_angle_rad, rate_rev_per_s=m.rate_rev_per_s,
                 spin_up_s=m.spin_up_s, law=m.spin_up_law)


def plan_notes(voicer: Voicer, notes: Sequence[str], velocities: Sequence[int],
                scale: float) -> list[LiveVoice]:
    """Templates of ``notes`` (in order) at every layer: one job of :func:`plan_design`."""
    release = LN_1000 / voicer.sound.damper_t60_s
    out = []
    for note in notes:
        law = rotor_law(voicer, note)
        for vel in velocities:
            v = voicer.strike_voice(note, velocity=vel / 127.0)
            v = replace(v, channel_gains=tuple(g * scale for g in v.channel_gains))
            out.append(LiveVoice(v, tuple(law for _ in v.pairs), release))
    return out


def plan_design(voicer: Voicer, velocities: Sequence[int], *, scale: float = 1.0,
                workers: int | None = 1, scheduler: str | None = None) -> list[LiveVoice]:
    """Templates for every note (range order) and layer (``velocities`` order).

    ``scale`` multiplies the voice's channel gains (the design's level match).
    The notes are independent jobs (:func:`synth.executor.run_jobs`): ``workers``
    local processes (1: here; ``None``: every core) or a Dask ``scheduler``.
    """
    notes = list(voicer.instrument.notes)
    if workers == 1 and scheduler is None:
        return plan_notes(voicer, notes, velocities, scale)
    from synth.executor import Job, default_workers, run_jobs

    n = default_workers() if workers is None else workers
    size = max(1, -(-len(notes) // (2 * n)))   # two chunks per worker evens the load
    chunks = [notes[i:i + size] for i in range(0, len(notes), size)]
    jobs = [Job(f"notes {c[0]}-{c[-1]}", plan_notes, (voicer, c, tuple(velocities), scale))
            for c in chunks]
    out: list[LiveVoice] = []
    for res in run_jobs(jobs, workers=workers, scheduler=scheduler):
        if not res.ok:
            raise ModelError(f"planning {res.key}: {res.error}")
        out += res.value
    return out


def level_scales(voicers: Sequence[Voicer], *, ceiling_dbtp: float = -1.0) -> list[float]:
    """Linear gain from pressure to full scale per design, loudness-matched as ``compare`` does.

    ``compare``'s default phrase is rendered offline for each design (the
    first design's range and the second's shared); one design is put with its
    true peak at ``ceiling_dbtp``, two are matched to equal integrated loudness
    with the louder true peak there (:func:`synth.reports.compare.match_levels`).

    The gains are a pure function of the designs' settings, so they are kept in
    the plan cache (:mod:`synth.plan_cache`), keyed on every setting of each
    voice plan (the mallet file's values too) and on the source of the modules
    the match runs through (the engine, the analysis, ``compare`` and this
    module): a warm start renders and measures nothing, and imports neither
    scipy's signal package nor the loudness code.
    """
    from synth import plan_cache
    from synth.settings.mallet import load_mallet

    voicers = tuple(voicers)
    heads = tuple(load_mallet(v.sound.mallet) for v in voicers)   # the files' values
    key = plan_cache.plan_key("level-scales", voicers, heads, float(ceiling_dbtp),
                              plan_cache.source_fingerprint(_LEVEL_SOURCES))
    return list(plan_cache.cached(key, lambda: _match_scales(voicers, ceiling_dbtp)))


_LEVEL_SOURCES: Final[tuple[str, ...]] = ("engine/*.py", "analysis/*.py", "reports/compare.py",
                                          "live.py")
"""Modules the level match runs through besides the planning ones (its cache key)."""


def _match_scales(voicers: Sequence[Voicer], ceiling_dbtp: float) -> tuple[float, ...]:
    """Render ``compare``'s phrase for each design and match levels (see level_scales)."""
    from synth.engine.render import render
    from synth.reports.compare import default_passage, fade_out, match_levels

    notes = [v.instrument.notes for v in voicers]
    passage = default_passage(notes[0], notes[-1])
    renders = []
    for v in voicers:
        fs = v.sample_rate
        voices = v.score_voices(passage.score, default_pedal=passage.default_pedal)
        n = int(round(passage.length_s * fs))
        renders.append(fade_out(render(voices, n, sample_rate=fs, channels=v.channels), fs))
    a, b = renders[0], renders[-1]
    _, _, plan = match_levels(a, b, voicers[0].sample_rate, ceiling_dbtp=ceiling_dbtp)
    gains = [10.0 ** (g / 20.0) for g in plan.output_gain_db]
    return tuple(gains[:len(voicers)])


@dataclass
class Counters:
    """What a player has met: notes out of range, events the ring dropped."""

    off_range: int = 0
    dropped: int = 0
    messages: int = 0


class LivePlayer:
    """One or two designs planned on one voice pool, driven by MIDI messages.

    Parameters
    ----------
    voicers : sequence of Voicer
        Design A (and B), one sample rate and channel count.
    n_layers : int
        Velocity layers per note.
    n_voices : int
        Voices that can sound at once.
    gain_db : float
        Output gain at the start, dB re the matched level.
    pedal : float
        Damper lift before the first controller 64, 0..1 (1 = dampers lifted).
    motor_top : float
        Motor rate at controller value 127, rev/s.
    motor_cc, design_cc : int
        Controller numbers of the motor rate and the design switch.
    scales : sequence of float, optional
        Level of each design (default :func:`level_scales`).
    retire_dbfs : float
        Level below which a voice is freed (see :class:`VoicePool`).
    workers, scheduler
        Where the notes are planned (:func:`plan_design`; default here).
    """

    def __init__(self, voicers: Sequence[Voicer], *, n_layers: int = DEFAULT_LAYERS,
                 n_voices: int = DEFAULT_VOICES, gain_db: float = DEFAULT_GAIN_DB,
                 pedal: float = 1.0, motor_top: float = DEFAULT_MOTOR_TOP,
                 motor_cc: int = MOTOR_CC, design_cc: int = DESIGN_CC,
                 scales: Sequence[float] | None = None,
                 retire_dbfs: float = -150.0, workers: int | None = 1,
                 scheduler: str | None = None):
        # the pool renders modes only: every mode starts in its free form (no contact onset)
        voicers = [replace(v, attack=False) for v in voicers]
        if not 1 <= len(voicers) <= 2:
            raise ConfigError("a player plays one or two designs")
        fs = voicers[0].sample_rate
        if any(v.sample_rate != fs or v.channels != voicers[0].channels for v in voicers):
            raise ConfigError("designs A and B must play at one sample rate and channel count",
                              source="designs")
        self.voicers = voicers
        self.sample_rate = fs
        self.channels = voicers[0].channels
        self.velocities = layer_velocities(n_layers)
        self.layer_of = nearest_layers(self.velocities)
        self.scales = list(scales) if scales is not None else level_scales(voicers)
        self.motor_top = float(motor_top)
        self.motor_cc = int(motor_cc)
        self.design_cc = int(design_cc)
        templates: list[LiveVoice] = []
        self.n_voices = n_voices
        self.retire_dbfs = retire_dbfs
        self.first: list[int] = []
        self.index: list[dict[int, int]] = []
        for v, scale in zip(voicers, self.scales, strict=True):
            self.first.append(len(templates))
            self.index.append({note_to_midi(n): k for k, n in enumerate(v.instrument.notes)})
            templates += plan_design(v, self.velocities, scale=scale, workers=workers,
                                     scheduler=scheduler)
        self.templates = templates
        self.reset(gain_db=gain_db, pedal=pedal)

    def reset(self, *, gain_db: float = DEFAULT_GAIN_DB, pedal: float = 1.0) -> None:
        """Start again on a fresh pool (silent, clock 0, design A), keeping the plans."""
        self.gain = 10.0 ** (gain_db / 20.0)
        self.pool = VoicePool(self.templates, sample_rate=self.sample_rate,
                              channels=self.channels, n_voices=self.n_voices,
                              gain=self.gain, lift=pedal,
                              rotor=rotor_of(self.voicers[0]), retire_dbfs=self.retire_dbfs)
        self.design = 0
        self.counters = Counters()
        self.recording: list[tuple[int, object]] | None = None

    # -------------------------------------------------------------- events
    def template(self, midi_note: int, velocity: int, design: int | None = None) -> int | None:
        """Template index of a strike (``None``: the note is outside the design's range)."""
        d = self.design if design is None else design
        k = self.index[d].get(int(midi_note))
        if k is None:
            return None
        return self.first[d] + k * len(self.velocities) + int(self.layer_of[int(velocity)])

    def handle(self, msg, sample: int) -> None:
        """Apply one mido message at stream sample ``sample`` (non-decreasing)."""
        pool = self.pool
        self.counters.messages += 1
        kind = msg.type
        ok = True
        if kind == "note_on" and msg.velocity > 0:
            tag = msg.channel * 128 + msg.note
            t = self.template(msg.note, msg.velocity)
            if t is None:
                self.counters.off_range += 1
                return
            ok = pool.release(tag, sample) and pool.start(t, tag, sample)
        elif kind == "note_off" or (kind == "note_on" and msg.velocity == 0):
            ok = pool.release(msg.channel * 128 + msg.note, sample)
        elif kind == "control_change" and msg.control == PEDAL_CC:
            ok = pool.lift(msg.value / 127.0, sample)
        elif kind == "control_change" and msg.control == self.motor_cc:
            ok = pool.rotor_rate(self.motor_top * msg.value / 127.0, sample)
        elif kind == "control_change" and msg.control == VOLUME_CC:
            ok = pool.set_gain(self.gain * (msg.value / 127.0) ** 2, sample)
        elif kind == "control_change" and msg.control == self.design_cc:
            self.design = min(len(self.voicers) - 1, int(msg.value >= 64))
        elif kind == "program_change" and msg.program < len(self.voicers):
            self.design = int(msg.program)
        else:
            return
        if not ok:
            self.counters.dropped += 1
        if self.recording is not None:
            self.recording.append((int(sample), msg))

    def set_gain_db(self, gain_db: float, sample: int) -> None:
        """Ramp the output gain to ``gain_db`` (dB re the matched level)."""
        self.pool.set_gain(10.0 ** (float(gain_db) / 20.0), sample)

    def start_recording(self) -> None:
        """Keep every handled message with its sample from now on."""
        self.recording = []

    def status(self) -> dict:
        """Return notes sounding, pedal, motor, design and the pool's counters."""
        p = self.pool
        return {"sounding": p.sounding, "pedal": p.lift_value, "motor_rev_per_s": p.rotor_target,
                "design": DESIGNS[self.design], "steals": p.steals, "fault": p.fault,
                "limited_blocks": p.limited_blocks, "off_range": self.counters.off_range,
                "dropped_events": self.counters.dropped + p.dropped_events}


# ------------------------------------------------------------------ MIDI files
def ticks_per_beat(sample_rate: float) -> int:
    """Ticks per beat of a recording whose tick is one sample at 10 000 us per beat."""
    tpq = int(round(sample_rate / 100.0))
    if tpq * 100 != sample_rate or not 1 <= tpq <= 32767:
        raise ConfigError(f"= {sample_rate:g}: recording needs a sample rate that is a "
                          "multiple of 100 Hz", source="--sample-rate")
    return tpq


RECORD_TEMPO_US: Final[int] = 10_000
"""Tempo of a recording, us per beat: with ``sample_rate / 100`` ticks per beat, one tick
is one sample, so the recording keeps every event's sample exactly."""


def recorded_midi(events: Iterable[tuple[int, Any]], sample_rate: float):
    """Return a type-0 ``mido.MidiFile`` of ``(sample, message)`` events, one tick per sample."""
    import mido

    midi = mido.MidiFile(type=0, ticks_per_beat=ticks_per_beat(sample_rate))
    track = mido.MidiTrack()
    midi.tracks.append(track)
    track.append(mido.MetaMessage("set_tempo", tempo=RECORD_TEMPO_US, time=0))
    last = 0
    for sample, msg in events:
        track.append(msg.copy(time=int(sample) - last))
        last = int(sample)
    track.append(mido.MetaMessage("end_of_track", time=0))
    return midi




# --- the play command's choices: option checks, a file's events, the recording ---

def check_play_options(*, motor_cc: int, switch_cc: int, to_wav, midi_file, fmt: str,
                       sample_rate: int) -> None:
    """Refuse clashing controllers, --to-wav without a file, an unknown format or rate."""
    from synth import io

    if len({motor_cc, switch_cc, 64, 7}) < 4:
        raise ConfigError(f"--motor-cc {motor_cc}, --switch-cc {switch_cc}: must differ from "
                          "each other and from 64 (the sustain pedal) and 7 (volume)",
                          source="controllers")
    if to_wav is not None and midi_file is None:
        raise ConfigError("needs --midi-file FILE (the events to play)", source="--to-wav")
    io.check_sample_format(fmt)
    io.check_sample_rate(sample_rate)


def file_events(midi_file, sample_rate: int):
    """Read a MIDI file to play (the offline reader's checks first); None without one."""
    if midi_file is None:
        return None
    from synth.settings.score import midi_file_events, read_midi

    read_midi(midi_file)   # the offline reader's checks: one line for a bad file
    return midi_file_events(midi_file, float(sample_rate))


def recorded_midi_bytes(events: Iterable[tuple[int, Any]], sample_rate: float) -> bytes:
    """Return the bytes of :func:`recorded_midi`'s file."""
    import io as _bytes_io

    buf = _bytes_io.BytesIO()
    recorded_midi(events, sample_rate).save(file=buf)
    return buf.getvalue()
