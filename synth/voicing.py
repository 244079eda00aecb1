"""The voice plan: from a preset note and a strike to the engine's generic voices.

For each note the plan solves the bar (vertical bending modes 1-5 and torsional
modes 1-2; lateral modes are not excited by a strike from above), budgets each
mode's losses (:mod:`synth.physics.losses`), and, with tubes, couples vertical
mode 1 to its tube (:mod:`synth.physics.coupling`), modulated by the motor's discs
(:mod:`synth.physics.motor`).  For a strike it simulates the mallet's contact
(:mod:`synth.physics.mallet`) on the bar's modes at the strike point and gives
the engine, per mode:

* frequency and decay rate ``pi f / Q`` from the loss budget;
* amplitude ``sqrt(E_n) * w_n``: ``E_n = M_n w_n^2 A_n^2 / 2`` is the energy the
  mallet left in the mode (free vibration ``A_n exp(-g t) sin(w t + phase)`` after
  the contact, referred back to the strike instant: the sound of the 0.3-4 ms
  contact itself is approximated by that continuation) and ``w_n`` the
  power-equivalent free-field pressure per sqrt(J) at the listening distance,
  ``sqrt(rho c g_rad / (pi r^2))`` with ``g_rad = w eta_rad / 2`` the mode's
  radiation share of its decay.  So the output is in pascals at the listening
  distance, averaged over directions;
* the phase of that free vibration.

The mallet's force spectrum is thus contained in ``E_n`` (a soft, long contact
puts little energy into the upper partials), the strike point enters through
the mode shape there (a strike at a node leaves that mode silent), and the
radiation weight makes the bare bar's fundamental weak beside its upper
partials, until the tube lifts it.

Pedal and dampers: a pedal value ``p`` of 1 lifts the dampers (notes ring), 0
lets them rest on the bars; a released note (MIDI note-off, the end of an event's
``duration``, the end of ``--hold``) then decays with the extra rate
``(1 - p) ln(1000) / damper_t60_s``, so half-pedal damps partly.  In a score, a
strike without a release of its own is released at once (a bar has no key to
hold): it rings while the dampers are lifted and stops when they come down.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property, lru_cache
from pathlib import Path
from typing import Final

import numpy as np

from synth import plan_cache
from synth.constants import LN_1000
from synth.engine.contact import run_contact
from synth.engine.render import render
from synth.engine.score import Score, Strike
from synth.engine.voice import (
    CurveOrConstant,
    ModeBank,
    ModePair,
    PairModulation,
    RotorLaw,
    Voice,
    constant_power_pan,
    seconds_to_sample,
)
from synth.errors import ConfigError, ModelError
from synth.physics.bar_fe import BarModes, solve_bar
from synth.physics.coupling import BarMode, BarTubeCoupling, couple, pressure_weight
from synth.physics.instrument import BarFile, Instrument
from synth.physics.losses import Calibration, ModeLoss, Supports, loss_budget
from synth.physics.mallet import Mallet, SoundSettings, simulate_contact
from synth.physics.materials import Material
from synth.physics.motor import DiscModulation, MotorSpec, disc_modulation, steady_bar_decay_per_s
from synth.physics.solid_correction import ModelCorrection, corrected_modes, model_correction
from synth.physics.tube import (
    TubeSettings,
    TubeSpec,
    air_density,
    bar_area_over_mouth,
    bar_cover_fraction,
    speed_of_sound,
    tube_length_for_bar,
    with_file_calibration,
)
from synth.settings.mallet import load_mallet

# --------------------------------------------------------------------------------------
# Preset sections
# --------------------------------------------------------------------------------------


# The [sound], [tubes], [motor], [supports] and [damping] tables are read by
# synth.settings.instrument when the preset is loaded (Instrument.tables).


# --------------------------------------------------------------------------------------
# Per-note model
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class NoteModel:
    """Everything fixed about one bar: its modes, their losses, its tube."""

    note: str
    modes: BarModes
    budget: tuple[ModeLoss, ...]  # bare bar (no tube term)
    tube: TubeSpec | None
    coupling: BarTubeCoupling | None
    pan: float

    @property
    def fundamental(self) -> ModeLoss:
        """Budget of vertical mode 1."""
        return self.budget[0]

    def sounding(self) -> list[tuple[int, ModeLoss]]:
        """(index into modes, budget) of the modes a strike from above excites."""
        return [(i, b) for i, b in enumerate(self.budget) if b.kind != "lateral"]

    def tube_loss_factor(self) -> float:
        """Extra loss factor the tube gives vertical mode 1 (coupled, bar-like pole)."""
        if self.coupling is None:
            return 0.0
        m = self.coupling.pair.modes()
        return max(0.0, 1.0 / m.q[0] - self.fundamental.eta)


@dataclass(frozen=True)
class StrikePlan:
    """One strike's voice wherever it starts: what a warm plan reads in one entry.

    ``bank`` holds the frequency, decay, amplitude and phase of the free modes
    (engine :class:`~synth.engine.voice.ModeBank` order), ``pairs`` the coupled
    bar-tube pairs (no rotor), ``onset`` the samples of the contact (None
    without ``attack``), ``pan`` the note's place, -1..1.
    """

    note: str
    pan: float
    bank: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
    pairs: tuple[ModePair, ...]
    onset: np.ndarray | None


@lru_cache(maxsize=512)
def _solve_sounding(geometry, material) -> BarModes:
    """Solve the modes a strike from above excites (pure, frozen inputs).

    Shared by every plan of the same bar in the same alloy (a sweep's tube, motor
    or mallet variants solve each bar once per process).
    """
    return solve_bar(geometry, material, n_vertical=5, n_lateral=0, n_torsional=2)


@dataclass(frozen=True)
class Voicer:
    """Plans engine voices for the notes of one instrument (frozen settings).

    Derive variants with :func:`dataclasses.replace`; each instance keeps its own
    cache of what it has planned, keyed by the note and strike, and a replaced
    instance starts with an empty one (the cache is not an ``__init__`` field), so a
    variant never reuses a plan of other settings.  Bar solves are shared between
    instances through a cache keyed by the frozen geometry and material.

    Parameters
    ----------
    instrument : Instrument
        The preset, as read by :func:`synth.settings.instrument.load_instrument`.
    sample_rate : float
        Hz.
    tubes : bool
        Use the preset's ``[tubes]`` (False: bare bars).
    motor_rate_rev_per_s : float, optional
        Override the preset's motor rate, rev/s (0 stops it).
    channels : {1, 2}
        Output channels (2: bars panned by their place on the keyboard).
    calibration : Calibration, optional
        Loss calibration (default: the preset's ``[damping]`` table).
    mallet : str, optional
        Mallet preset name for strikes that name none (default: the preset's
        ``[sound]`` mallet).
    attack : bool
        Render the first samples as the modes' response to the contact force
        while the mallet touches the bar (:func:`contact_onset`; default).
        False starts every mode at once in its free form, as the live pool does.
    """

    instrument: Instrument
    sample_rate: float = 48000.0
    tubes: bool = True
    motor_rate_rev_per_s: float | None = None
    channels: int = 2
    calibration: Calibration | None = None
    mallet: str | None = None
    attack: bool = True
    _cache: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    def __post_init__(self):
        if self.channels not in (1, 2):
            raise ConfigError(f"= {self.channels}: must be 1 or 2", source="--channels")
        if not (isinstance(self.sample_rate, (int, float)) and self.sample_rate > 0):
            raise ConfigError(f"= {self.sample_rate!r}: must be > 0 Hz", source="sample_rate")

    # -- settings derived from the preset (computed once per instance) -------------
    @cached_property
    def sound(self) -> SoundSettings:
        """The preset's ``[sound]`` table, with this plan's default mallet."""
        sound = self.instrument.tables.sound
        return sound if self.mallet is None else replace(sound, mallet=self.mallet)

    @cached_property
    def supports(self) -> Supports:
        """The preset's ``[supports]`` table."""
        return self.instrument.tables.supports

    @cached_property
    def loss_calibration(self) -> Calibration:
        """The calibration in use: the override, else the preset's ``[damping]``."""
        if self.calibration is not None:
            return self.calibration
        return self.instrument.tables.damping

    @cached_property
    def tube_settings(self) -> TubeSettings | None:
        """The preset's ``[tubes]`` table with any ``[tubes]`` of the calibration file.

        None: no tubes.
        """
        return with_file_calibration(self.instrument.tables.tubes,
                                     self.loss_calibration)

    @cached_property
    def _motor_table(self) -> tuple[MotorSpec, float]:
        return self.instrument.tables.motor

    @cached_property
    def motor(self) -> MotorSpec:
        """The preset's motor, with this plan's rate override."""
        motor = self._motor_table[0]
        if self.motor_rate_rev_per_s is None:
            return motor
        return replace(motor, rate_rev_per_s=float(self.motor_rate_rev_per_s))

    @property
    def phase_step_deg(self) -> float:
        """Disc angle step between neighbouring bars, degrees."""
        return self._motor_table[1]

    @property
    def temperature_c(self) -> float:
        """Design temperature of the preset, degrees C."""
        return self.instrument.temperature_c

    @cached_property
    def correction(self) -> ModelCorrection | None:
        """What the 1-D frequencies are multiplied by (None: nothing).

        The preset's ``[solid_correction]`` table composed with the stiffness
        calibration of the calibration in use (:attr:`loss_calibration`; an explicit
        ``calibration`` without ``[stiffness]`` plans the uncalibrated model).
        """
        return model_correction(self.instrument, stiffness=self.loss_calibration.stiffness)

    @property
    def stiffness(self):
        """The stiffness calibration the plan predicts with (None: none)."""
        return None if self.correction is None else self.correction.stiffness

    @cached_property
    def material(self) -> Material:
        """The preset's alloy at its design temperature."""
        return self.instrument.material.at_temperature(self.instrument.temperature_c)

    @property
    def tubes_active(self) -> bool:
        """Tubes are fitted and switched on."""
        return bool(self.tubes and self.tube_settings is not None
                    and self.tube_settings.enabled)

    # -- per note ------------------------------------------------------------------
    def model(self, note: str) -> NoteModel:
        """Return the per-note model (cached per plan)."""
        note = self.instrument.check_note(note, option="note")
        if note in self._cache:
            return self._cache[note]
        model = plan_cache.cached(self._plan_key("note-model", note),
                                  lambda: self._solve_model(note))
        self._cache[note] = model
        return model

    def _plan_key(self, kind: str, note: str, *more) -> str:
        """Disk-cache key: every setting :meth:`_solve_model` reads, and ``more``."""
        return plan_cache.plan_key(kind, self._note_key(note), *more)

    def _note_key(self, note: str) -> str:
        """Return the key of everything one note's plans share (hashed once per note)."""
        key = self._cache.get(("note-key", note))
        if key is None:
            inst = self.instrument
            key = plan_cache.plan_key("note-settings", note, inst.bars.get(note),
                                      inst.tube_lengths.get(note), self._settings_key)
            self._cache[("note-key", note)] = key
        return key

    @cached_property
    def _settings_key(self) -> str:
        """Return the key of the settings every note's plan shares.

        Hashed once per plan, not per strike: a strike's key then costs a hash of
        its own few settings.
        """
        inst = self.instrument
        return plan_cache.plan_key(
            "plan-settings", inst.notes[0], inst.notes[-1], self.material,
            self.temperature_c, self.supports, self.loss_calibration, self.sound,
            self.channels, self.tubes_active, self.tube_settings, self.correction)

    def _solve_model(self, note: str) -> NoteModel:
        geo = self.instrument.bar(note)
        modes = corrected_modes(_solve_sounding(geo, self.material), self.correction, note)
        budget = tuple(loss_budget(modes, supports=self.supports,
                                   calibration=self.loss_calibration,
                                   temperature_c=self.temperature_c, note=note))
        frac = self.instrument.note_fraction(note)
        pan = (frac - 0.5) * 2.0 * self.sound.pan_width if self.channels == 2 else 0.0
        tube, coupling = (None, None)
        if self.tubes_active:
            tube, coupling = self._couple(note, modes, budget[0], frac)
        return NoteModel(note, modes, budget, tube, coupling, pan)

    def tube_spec(self, note: str, modes: BarModes | None = None) -> TubeSpec | None:
        """Return the note's tube as cut ([bars.NOTE.tube] length, or solved from the offset)."""
        ts = self.tube_settings
        if ts is None:
            return None
        note = self.instrument.check_note(note, option="note")
        frac = self.instrument.note_fraction(note)
        radius = ts.radius_at(frac)
        geo = self.instrument.bar(note)
        template = TubeSpec(radius, 1.0, gap_to_bar_m=ts.gap_m, flanged=ts.flanged,
                            bar_cover_fraction=bar_cover_fraction(geo.width_m, radius),
                            gap_calibration=ts.gap_calibration)
        length = self.instrument.tube_lengths.get(note)   # [bars.NOTE] tube, read at load
        if length is None:
            if modes is None:
                modes = corrected_modes(solve_bar(geo, self.material, n_vertical=1,
                                                  n_lateral=0, n_torsional=0),
                                        self.correction, note)
            length = tube_length_for_bar(modes.fundamental_hz, template,
                                         offset_cents=ts.offset_cents,
                                         temperature_c=self.temperature_c,
                                         ka_correction=ts.ka_correction)
        return replace(template, length_m=length)

    def _couple(self, note: str, modes: BarModes, fund: ModeLoss, frac: float):
        tube, ts = self.tube_spec(note, modes), self.tube_settings
        if tube is None or ts is None:  # called only while tubes are active
            raise ModelError(f"{note}: no [tubes] table to couple a tube from")
        geo = modes.geometry
        m1 = modes.vertical[0]
        a = tube.inner_radius_m
        xs = np.linspace(0.5 * geo.length_m - a, 0.5 * geo.length_m + a, 41)
        weights = np.sqrt(np.maximum(a**2 - (xs - 0.5 * geo.length_m) ** 2, 0.0))
        mouth_shape = float(np.sum(m1.shape_at(xs) * weights) / np.sum(weights))
        bar = BarMode(
            frequency_hz=fund.frequency_hz, q=fund.q, modal_mass_kg=m1.modal_mass,
            mouth_shape_value=mouth_shape,
            area_over_mouth_m2=bar_area_over_mouth(geo.width_m, a),
            radiation_loss_factor=min(fund.terms["radiation"], fund.eta),
        )
        coupling = couple(bar, tube, temperature_c=self.temperature_c,
                          coupling_calibration=ts.coupling_calibration,
                          ka_correction=ts.ka_correction)
        return tube, coupling

    def disc_phase_deg(self, note: str) -> float:
        """Return the disc angle of this note's bar on the shaft, degrees."""
        from synth.pitch import note_to_midi

        return self.phase_step_deg * (note_to_midi(note) - note_to_midi(self.instrument.notes[0]))

    # -- strikes -------------------------------------------------------------------
    def strike_voice(self, note: str, *, time_s: float = 0.0, velocity: float | None = None,
                     speed_m_s: float | None = None, mallet: str | Mallet | None = None,
                     position: float | None = None, across: float | None = None,
                     release_s: float | None = None,
                     pedal: tuple[tuple[float, float], ...] = ((0.0, 1.0),),
                     mono: bool = False) -> Voice:
        """One struck note as an engine voice.

        Parameters
        ----------
        note : str
        time_s : float
            Strike time, s from the start of the render.
        velocity : float, optional
            Strength 0..1 (mapped to a mallet speed by the [sound] table).
        speed_m_s : float, optional
            Mallet head speed at impact (instead of velocity; default 1 m/s).
        mallet : name, Mallet, or None (the plan's ``mallet``, else the preset's)
        position : float, optional
            Strike point along the bar, 0..1 of the length (default [sound].position).
        across : float, optional
            Off the centreline, -0.5..0.5 of the width (excites torsion).
        release_s : float, optional
            Key up: from here the dampers act as the pedal allows.
        pedal : sequence of (time_s, value)
            Pedal curve, piecewise constant; 1 = dampers lifted.
        mono : bool
            One channel whatever the voicer's channels (for analysis).
        """
        note = self.instrument.check_note(note, option="note")
        s = self.sound
        if speed_m_s is None:
            speed_m_s = 1.0 if velocity is None else s.speed_of(velocity)
        if not speed_m_s > 0:
            raise ConfigError(f"= {speed_m_s}: mallet speed must be > 0 m/s", key="velocity")
        pos = s.position if position is None else position
        acr = s.across if across is None else across
        if not 0.0 <= pos <= 1.0:
            raise ConfigError(f"= {pos}: must be between 0 and 1 (fraction of the length)",
                              key="position")
        if not -0.5 <= acr <= 0.5:
            raise ConfigError(f"= {acr}: must be between -0.5 and 0.5 (fraction of the width)",
                              key="across")
        head = _mallet(mallet if mallet is not None else s.mallet)
        if self._motionless:
            plan = self._strike_plan(note, head, float(speed_m_s), float(pos), float(acr))
            return self._placed(plan, time_s, release_s, pedal, mono)
        model = self.model(note)
        amps, phases, pulse = self._excite(model, head, float(speed_m_s), pos, acr)
        voice = self._voice(model, amps, phases, time_s, release_s, pedal, mono)
        if not self.attack:
            return voice
        return contact_onset(voice, pulse, self.sample_rate)

    @cached_property
    def _motionless(self) -> bool:
        """No rotor moves a tube's mouth: a strike's voice is the same at any time.

        Its modes, pairs and onset are then a :class:`StrikePlan`, one cache entry
        per strike (:meth:`_strike_plan`); a voice under turning discs reads the
        rotor's angle where it starts, and its pieces are cached apart.
        """
        return not self.tubes_active or (self.motor.rate_rev_per_s <= 0
                                         and self.motor.resting == "open")

    def _strike_plan(self, note: str, head: Mallet, speed: float, pos: float,
                     acr: float) -> StrikePlan:
        """Return the strike's plan, kept in this instance and on disk.

        Its key: the note's (every setting the note model reads), the strike
        (mallet, speed, point), and what the voice is then shaped by: the sample
        rate (modes above 0.45 of it are left out), the motor (at rest, checked by
        :attr:`_motionless`), whether the contact is rendered (``attack``), and the
        engine's source (the onset's free form is its render).  The listening
        distance, temperature and channels are among the note's settings.
        """
        # exact values (a float's bits, the mallet's form), as on disk
        memo = ("strike", note, plan_cache.canonical_bytes((head, speed, pos, acr)))
        plan = self._cache.get(memo)
        if plan is None:
            plan = plan_cache.cached(self._strike_key(note, head, speed, pos, acr),
                                     lambda: self._make_strike_plan(note, head, speed, pos, acr))
            self._cache[memo] = plan
        return plan

    def _strike_key(self, note: str, head: Mallet, speed: float, pos: float,
                    acr: float) -> str:
        """Disk-cache key of a :class:`StrikePlan` (:meth:`_strike_plan`)."""
        return self._plan_key("strike", note, head, speed, pos, acr, self.sample_rate,
                              self.motor, self.attack, plan_cache.source_fingerprint(_ENGINE))

    def _make_strike_plan(self, note: str, head: Mallet, speed: float, pos: float,
                          acr: float) -> StrikePlan:
        model = self.model(note)
        amps, phases, pulse = self._excite(model, head, speed, pos, acr)
        voice = self._voice(model, amps, phases, 0.0, None, (), mono=True)
        onset = _onset(voice, pulse, self.sample_rate, keep=False) if self.attack else None
        bank = voice.modes
        phase = np.zeros(bank.n_modes) if bank.phase_rad is None else bank.phase_rad
        return StrikePlan(note, model.pan, (bank.frequency_hz, bank.decay_per_s,
                                            bank.amplitude, phase),
                          voice.pairs, onset)

    def _placed(self, plan: StrikePlan, time_s: float, release_s, pedal,
                mono: bool) -> Voice:
        """Return the planned strike as a voice starting at ``time_s``."""
        start = seconds_to_sample(time_s, self.sample_rate)
        gains = constant_power_pan(plan.pan) if self.channels == 2 and not mono else (1.0,)
        return Voice(start, ModeBank(*plan.bank), channel_gains=gains,
                     damping=self._damping(start, release_s, pedal), pairs=plan.pairs,
                     label=plan.note, onset=plan.onset)

    def strike_settings(self, *, velocity: float | None = None, speed_m_s: float | None = None,
                        mallet: str | None = None, position: float | None = None,
                        across: float | None = None) -> dict:
        """Return the strike as :meth:`strike_voice` plays it, every default resolved.

        Returns ``velocity`` (None when a speed was given), ``speed_m_s``,
        ``mallet``, ``position`` and ``across``, as used.
        """
        s = self.sound
        speed = speed_m_s if speed_m_s is not None else (
            1.0 if velocity is None else s.speed_of(velocity))
        name = mallet if mallet is not None else s.mallet
        return {"velocity": velocity, "speed_m_s": float(speed),
                "mallet": name if isinstance(name, str) else name.name,
                "position": s.position if position is None else float(position),
                "across": s.across if across is None else float(across)}

    def plan_settings(self) -> dict:
        """Return what every voice of this plan shares: rate, channels, tubes, motor, preset."""
        return {"sample_rate_hz": self.sample_rate, "channels": self.channels,
                "tubes": self.tubes_active,
                "motor_rate_rev_per_s": float(self.motor.rate_rev_per_s),
                "preset_sha256": self.instrument.sha256,
                "stiffness_calibration": (None if self.stiffness is None
                                          else self.stiffness.to_dict())}

    def _excite(self, model: NoteModel, head: Mallet, speed: float, pos: float, acr: float):
        key = (model.note, head, round(speed, 6), round(pos, 6), round(acr, 6))
        hit = self._cache.get(("contact", *key))
        if hit is not None:
            return hit
        # On disk the exact values are the key, so a stored plan equals a fresh one.
        out = plan_cache.cached(self._plan_key("contact", model.note, head, speed, pos, acr),
                                lambda: self._contact(model, head, speed, pos, acr))
        self._cache[("contact", *key)] = out
        return out

    def _contact(self, model: NoteModel, head: Mallet, speed: float, pos: float, acr: float):
        geo = model.modes.geometry
        x = pos * geo.length_m
        y = acr * geo.width_m
        sound = model.sounding()
        modes = [model.modes.modes[i] for i, _ in sound]
        omega = np.array([m.angular_frequency for m in modes])
        mass = np.array([m.modal_mass for m in modes])
        phi = np.array([float(m.vertical_displacement_at(x, y)) for m in modes])
        decay = np.array([b.decay_per_s for _, b in sound])
        res = simulate_contact(head, speed, omega_rad_s=omega, modal_mass_kg=mass,
                               shape_value=phi, decay_per_s=decay, runner=run_contact)
        energy_root = np.abs(res.amplitude_m) * omega * np.sqrt(mass / 2.0)
        pulse = (np.asarray(res.time_s, dtype=float), np.asarray(res.force_n, dtype=float))
        return energy_root, np.asarray(res.phase_rad, dtype=float), pulse

    def _voice(self, model: NoteModel, energy_root, phases, time_s, release_s, pedal,
               mono: bool = False) -> Voice:
        fs = self.sample_rate
        nyquist = 0.5 * fs
        rz = air_density(self.temperature_c) * speed_of_sound(self.temperature_c)
        r = self.sound.listening_distance_m
        sound = model.sounding()
        freq, decay, amp, ph = [], [], [], []
        pairs = []
        for j, (_i, b) in enumerate(sound):
            if b.frequency_hz >= 0.45 * fs or b.frequency_hz >= nyquist:
                continue
            if model.coupling is not None and b.kind == "vertical" and b.order == 1:
                pairs.append(self._pair(model, energy_root[j], phases[j]))
                continue
            g_rad = 0.5 * (2 * math.pi * b.frequency_hz) * min(b.terms["radiation"], b.eta)
            weight = pressure_weight(g_rad, reference_distance_m=r, impedance_rayl=rz)
            freq.append(b.frequency_hz)
            decay.append(b.decay_per_s)
            amp.append(energy_root[j] * weight)
            ph.append(phases[j])
        start = seconds_to_sample(time_s, fs)
        gains = constant_power_pan(model.pan) if self.channels == 2 and not mono else (1.0,)
        bank = ModeBank(np.asarray(freq), np.asarray(decay), np.asarray(amp), np.asarray(ph))
        return Voice(start, bank, channel_gains=gains,
                     damping=self._damping(start, release_s, pedal), pairs=tuple(pairs),
                     label=model.note)

    def _pair(self, model: NoteModel, energy_root: float, phase: float) -> ModePair:
        if model.coupling is None:  # called for a note with a tube only
            raise ModelError(f"{model.note}: no tube under the bar to pair with")
        pair = model.coupling.pair
        form = pair.engine_form(strike_energy_j=1.0,
                                reference_distance_m=self.sound.listening_distance_m)
        coupling: CurveOrConstant = form.coupling_rate_rad_s
        weight2: CurveOrConstant = form.weight_tube
        decays, decay_curve = form.decay_per_s, None
        mod = self.modulation(model)
        rotor = None
        if mod is not None:
            # the curves for other readers; the engine evaluates the same law itself
            coupling, weight2, decay_curve = mod.coupling_rate, mod.tube_weight, mod.tube_decay
            rotor = pair_modulation(mod)
            # the engine needs a lower bound of the tube's decay curve
            decays = (decays[0], mod.tube_wall_decay_per_s
                      + mod.tube_radiation_decay_per_s * mod.floor)
        return ModePair(frequency_hz=form.frequency_hz, decay_per_s=decays,
                           amplitude=(float(energy_root), 0.0), phase_rad=(float(phase), 0.0),
                           coupling_rad_s=coupling, weight_1=form.weight_bar,
                           weight_2=weight2, damped=(True, True), decay_2_curve=decay_curve,
                           modulation=rotor)

    def modulation(self, model: NoteModel) -> DiscModulation | None:
        """Return the discs' per-sample streams for a note's tube (None: mouth always open)."""
        if model.coupling is None:
            return None
        if self.motor.rate_rev_per_s <= 0 and self.motor.resting == "open":
            return None
        return disc_modulation(model.coupling.pair, self.motor, self.sample_rate,
                               phase_offset_deg=self.disc_phase_deg(model.note),
                               reference_distance_m=self.sound.listening_distance_m)

    def fundamental(self, note: str) -> tuple[float, float, float]:
        """(frequency Hz, Q, T60 s) of the sounding fundamental.

        Bare bar: the budget.  With a tube: the coupled bar-like pole; with the
        motor running, its exact decay over a steady modulation period
        (:func:`synth.physics.motor.steady_bar_decay_per_s`).
        """
        model = self.model(note)
        if model.coupling is None:
            f = model.fundamental
            return f.frequency_hz, f.q, f.t60_s
        modes = model.coupling.pair.modes()
        freq, decay = modes.frequency_hz[0], modes.decay_per_s[0]
        mod = self.modulation(model)
        if mod is not None:
            decay = steady_bar_decay_per_s(model.coupling.pair, mod)
        return freq, math.pi * freq / decay, LN_1000 / decay

    def _damping(self, start: int, release_s, pedal) -> tuple[tuple[int, float], ...]:
        if release_s is None:
            return ()
        rate = LN_1000 / self.sound.damper_t60_s
        fs = self.sample_rate
        rel = max(seconds_to_sample(release_s, fs), start)
        # By time only, and stably: at equal times the later entry wins, so a score's
        # own change at t = 0 overrides the default put first, and equal-time changes
        # of a file act in file order (sorting by value let the larger one win).
        curve = sorted(pedal, key=lambda p: p[0])

        def value_at(t):
            v = 1.0
            for tt, vv in curve:
                if tt <= t:
                    v = vv
            return v

        changes = [(rel, rate * (1.0 - value_at(release_s)))]
        for tt, vv in curve:
            s = seconds_to_sample(tt, fs)
            if s > rel:
                changes.append((s, rate * (1.0 - vv)))
        merged: list[tuple[int, float]] = []
        for s, e in changes:
            if merged and merged[-1][0] == s:
                merged[-1] = (s, e)
            elif not merged or merged[-1][1] != e:
                merged.append((s, e))
        return tuple(merged)

    # -- scores --------------------------------------------------------------------
    def score_voices(self, score: Score, *, default_pedal: float = 1.0,
                     progress=None, workers: int | None = 1) -> list[Voice]:
        """Voices for every strike of a score (pedal changes applied).

        ``workers``: processes the strikes are planned on, the strikes of each
        note one independent job of :func:`synth.executor.run_jobs` (so each
        note's bar is solved once); 1 plans them here, None on every core.  The
        voices are the same whichever number planned them.  ``progress(done,
        total)`` counts strikes (a note's strikes when its job is back).
        """
        pedal = ((0.0, default_pedal),) + tuple((p.time_s, p.value) for p in score.pedal)
        notes = self.instrument.notes
        for st in score.strikes:   # every note checked before any work starts
            if st.note not in notes:
                raise ConfigError(
                    f"= {st.note!r}: not in the range of {Path(self.instrument.source).name}; "
                    f"allowed: {notes[0]} to {notes[-1]}",
                    source=score.source or None, key=f"{st.key}.note" if st.key else "note")
        if workers == 1:
            voices = []
            for k, st in enumerate(score.strikes):
                voices.append(self._strike_of(st, pedal))
                if progress is not None:
                    progress(k + 1, len(score.strikes))
            return voices
        from synth.executor import Job, run_jobs, values_or_raise

        by_note: dict[str, list[int]] = {}
        for k, st in enumerate(score.strikes):
            by_note.setdefault(st.note, []).append(k)
        jobs = [Job(note, plan_strikes, (self, tuple(score.strikes[k] for k in ks), pedal))
                for note, ks in by_note.items()]
        count = [0]

        def done(res) -> None:
            count[0] += len(by_note[res.key])
            if progress is not None:
                progress(count[0], len(score.strikes))

        planned = values_or_raise(jobs, run_jobs(jobs, workers=workers, progress=done),
                                  "planning")
        out: list[Voice | None] = [None] * len(score.strikes)
        for ks, voices in zip(by_note.values(), planned, strict=True):
            for k, voice in zip(ks, voices, strict=True):
                out[k] = voice
        placed = [v for v in out if v is not None]
        if len(placed) != len(out):
            raise ModelError(f"{len(out) - len(placed)} strike(s) came back unplanned")
        return placed

    def _strike_of(self, st: Strike, pedal) -> Voice:
        # A bar has no key to hold: a strike without a release of its own is free at
        # once, so it rings while the dampers are lifted and stops when they come down.
        release = st.release_s if st.release_s is not None else st.time_s
        return self.strike_voice(st.note, time_s=st.time_s, velocity=st.velocity,
                                 speed_m_s=st.mallet_speed_m_s, mallet=st.mallet,
                                 position=st.position, across=st.across,
                                 release_s=release, pedal=pedal)


def contact_onset(voice: Voice, pulse: tuple[np.ndarray, np.ndarray],
                  sample_rate: float) -> Voice:
    """Return the voice with its first samples following the contact force (its onset).

    While the mallet touches the bar the voice is its free form scaled by the
    momentum given so far, ``rho(t) = int_0^t F / int_0^t_c F``: zero at the first
    touch (the Hunt & Crossley force is zero there and ``rho`` grows from it),
    rising monotonically to 1 at the final separation ``t_c``, after which the
    free form rings on unchanged.  For a mode whose period is long beside
    ``t_c`` this is its response to the force, ``(1 / M w) int_0^t F(tau)
    sin(w (t - tau)) dtau``, to first order in ``w t_c``; a mode of shorter period
    is small after the contact (the pulse filters it), and the scale never lets it
    exceed its free amplitude (the modes' own response to the force would add the
    bar's quasi-static deflection under the head, which radiates little).  The
    onset is ``(rho - 1)`` times the free form, rendered here by the engine over
    the samples before ``t_c`` from the voice's own start (damping changes within
    the contact left out).
    """
    onset = _onset(voice, pulse, sample_rate, keep=True)
    return voice if onset is None else replace(voice, onset=onset)


def _onset(voice: Voice, pulse: tuple[np.ndarray, np.ndarray], sample_rate: float, *,
           keep: bool) -> np.ndarray | None:
    """Return the onset samples of :func:`contact_onset` (None: none).

    ``keep``: the free form is kept on disk as a plan of its own (the caller
    keeps the result otherwise); a voice with curves is rendered each time.
    """
    t, force = pulse
    t_c = float(t[-1])
    tk = np.arange(int(math.ceil(t_c * sample_rate))) / sample_rate
    tk = tk[tk < t_c]
    if tk.size == 0 or t.size < 2:
        return None
    momentum = np.concatenate([[0.0], np.cumsum(0.5 * (force[1:] + force[:-1]) * np.diff(t))])
    if not momentum[-1] > 0:
        return None
    rho = np.interp(tk, t, momentum) / momentum[-1]

    def free_form() -> np.ndarray:
        return render([_from_zero(voice)], tk.size, sample_rate=sample_rate, channels=1,
                      retire_db=None)[:, 0]

    key = _free_form_key(voice, tk.size, sample_rate) if keep else None
    free = free_form() if key is None else plan_cache.cached(key, free_form)
    return (rho - 1.0) * free


def _free_form_key(voice: Voice, n: int, sample_rate: float) -> str | None:
    """Key of the free form of ``voice`` over ``n`` samples (None: it has curves).

    What :func:`_from_zero` keeps of the voice: its modes, its pairs (a rotor's
    clock moved by the voice's start) and the gain curve's bound.
    """
    if voice.gain_curve is not None or any(
            callable(p.coupling_rad_s) or callable(p.weight_2) or p.decay_2_curve is not None
            for p in voice.pairs):
        return None
    start = voice.start_sample
    pairs = tuple(p if p.modulation is None or start == 0 else replace(
        p, modulation=replace(p.modulation, shift_samples=p.modulation.shift_samples + start))
        for p in voice.pairs)
    return plan_cache.plan_key("onset-free-form", voice.modes, pairs, voice.gain_curve_max,
                               n, float(sample_rate), plan_cache.source_fingerprint(_ENGINE))


_ENGINE: Final[tuple[str, ...]] = ("engine/*.py",)
"""Modules the onset's free form runs through besides the planning ones (its cache key)."""


def _from_zero(voice: Voice) -> Voice:
    """Return the voice moved to output sample 0, mono, undamped; curves read where it was."""
    start = voice.start_sample

    def shifted(curve):
        if not callable(curve):
            return curve
        return lambda first, n: curve(first + start, n)

    pairs = tuple(replace(p, coupling_rad_s=shifted(p.coupling_rad_s),
                          weight_2=shifted(p.weight_2),
                          decay_2_curve=shifted(p.decay_2_curve),
                          modulation=None if p.modulation is None else replace(
                              p.modulation, shift_samples=p.modulation.shift_samples + start))
                  for p in voice.pairs)
    return replace(voice, start_sample=0, channel_gains=(1.0,), stop_sample=None, damping=(),
                   gain_curve=shifted(voice.gain_curve), pairs=pairs, onset=None)


def disc_rotor_law(mod: DiscModulation) -> RotorLaw:
    """Return the engine's generic law of one tube under a disc."""
    return RotorLaw(depth=mod.motor.block_fraction, floor=mod.floor,
                    offset_rad=math.radians(mod.phase_offset_deg),
                    coupling_open_rad_s=mod.coupling_open_rad_s,
                    weight_2_open=mod.tube_weight_open,
                    decay_2_fixed_per_s=mod.tube_wall_decay_per_s,
                    decay_2_per_factor=mod.tube_radiation_decay_per_s)


def pair_modulation(mod: DiscModulation) -> PairModulation:
    """Return the declarative form of ``mod`` that the engine evaluates per sample.

    The same law as the streams ``mod.coupling_rate``, ``mod.tube_weight`` and
    ``mod.tube_decay`` (:mod:`synth.physics.motor`): the shaft's closed-form angle
    from its resting angle, spin-up law and start time, and the factor
    ``m = max(1 - beta |cos(theta + offset)|, floor)``.
    """
    motor = mod.motor
    return PairModulation(disc_rotor_law(mod), rate_rev_per_s=motor.rate_rev_per_s,
                          resting_rad=motor.resting_angle_rad, start_s=motor.start_time_s,
                          spin_up_s=motor.spin_up_s, spin_up_law=motor.spin_up_law)


def plan_strikes(voicer: Voicer, strikes: Sequence[Strike], pedal) -> list[Voice]:
    """Return the voices of ``strikes`` under the pedal curve ``pedal``.

    One job of :meth:`Voicer.score_voices` (module level, picklable).
    """
    return [voicer._strike_of(st, pedal) for st in strikes]


@lru_cache(maxsize=64)
def _mallet_by_name(name: str) -> Mallet:
    return load_mallet(name)


def _mallet(spec: str | Mallet) -> Mallet:
    if isinstance(spec, Mallet):
        return spec
    return _mallet_by_name(spec)


def tube_cut_lengths(instrument: Instrument) -> dict[str, float]:
    """Tube cut length of every bar of a preset with ``[tubes]`` (empty without)."""
    v = Voicer(instrument, channels=1)
    if v.tube_settings is None:
        return {}
    return {n: spec.length_m for n in instrument.notes
            if n in instrument.bars and (spec := v.tube_spec(n)) is not None}


def design_budget(design: Instrument | BarFile, label: str,
                  result: BarModes) -> tuple[list[ModeLoss], str]:
    """Loss budget of a solved bar with its design's supports, calibration and tube.

    For an instrument preset the tube's extra loss on vertical mode 1 is included
    (the coupled bar-like pole); a single-bar file is a bare bar.  Returns the
    budget and one line saying what it assumed.
    """
    if isinstance(design, Instrument):
        v = Voicer(design, channels=1)
        model = v.model(label)
        extra = {}
        if model.coupling is not None:
            extra[("vertical", 1)] = model.tube_loss_factor()
        budget = loss_budget(result, supports=v.supports, calibration=v.loss_calibration,
                             temperature_c=design.temperature_c, note=label, tube_eta=extra)
        tube = (f"tube {model.tube.length_m * 1e3:.1f} mm long, radius "
                f"{model.tube.inner_radius_m * 1e3:.1f} mm, tuned "
                f"{model.coupling.tube_offset_cents:+.1f} cents from the bar"
                if model.coupling is not None and model.tube is not None else "no tube")
        return budget, (f"cords at the mode-1 nodes; {tube}; air and bar at "
                        f"{design.temperature_c:g} C")
    budget = loss_budget(result, supports=design.tables.supports,
                         calibration=design.tables.damping,
                         temperature_c=design.temperature_c)
    return budget, "cords at the mode-1 nodes; bare bar (no tube)"
