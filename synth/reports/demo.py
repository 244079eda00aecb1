"""The demo: the whole job on the bundled demo instrument, step by step.

The demo instrument (presets/instruments/lantern-street-bars.toml) is invented: a
three-octave F3-F6 instrument of 6061-T6 bars built by an invented shop for an
invented client.  :func:`run_demo` solves the partials of every bar from its
geometry (1-D finite elements), re-solves every bar's length and undercut from
its blank (inverse design), writes the build sheet, renders strikes, a chord and
a passage (modal synthesis with the mallet's Hunt & Crossley contact, the
bar-tube coupling and the motor's discs), reports sustain across the range and
the decay of a chord, compares the range in another alloy for the client, and
measures a simulated prototype to pull the loss model onto it.

Steps 6 and 7 are whole commands (``compare`` and ``measure``): the caller hands
them in, so that their own reports are printed the way those commands print
them.  Everything the demo writes goes into one folder, listed first by
:func:`demo_outputs` so the caller can plan the files before any is written.
"""

from __future__ import annotations

import contextlib
import statistics
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from synth.config import presets_dir

DEMO_PRESET = "lantern-street-bars.toml"
DEMO_OPTION = "lantern-street-bars-7075.toml"
"""The client's alternative: the same range in 7075-T6."""

DEMO_WAVS = ("strike-A4.wav", "strike-A4-bare.wav", "strike-F3-motor.wav", "strike-C5-hard.wav",
             "chord-F3-A4-C5-E6.wav", "harbour-waltz.wav")
"""The renders of step 4, in order."""

DEMO_TRIALS = 8
"""Blind trials of step 6."""

DEMO_SAMPLE_RATE = 48000
CHORD = ("F3", "A4", "C5", "E6")

Say = Callable[[str], None]
Steps = Callable[[int, str], contextlib.AbstractContextManager]
"""``steps(total, label)``: a context manager yielding ``step(n, note)`` (a progress bar)."""


@contextlib.contextmanager
def no_progress(total: int, label: str):
    """Yield a step function that does nothing (the default progress)."""
    yield lambda n=1, note="": None


def demo_preset_path() -> Path:
    """Return the path of the bundled demo instrument."""
    return presets_dir() / "instruments" / DEMO_PRESET


def demo_outputs(out: Path) -> list[tuple[Path, str]]:
    """Return every file the demo writes into ``out``, with what each is."""
    from synth import io
    from synth.reports.compare import planned_files

    files = [(out / "cutlist.csv", "cut list"), (out / "profiles.png", "profile sheet")]
    for name in DEMO_WAVS:
        files += [(out / name, "WAV"), (io.sidecar_path(out / name), "settings sidecar")]
    files += [(out / "sustain.csv", "table"), (out / "sustain.png", "plot"),
              (out / "chord-decay.png", "plot")]
    files += [(p, "comparison file") for p in planned_files(out / "compare", DEMO_TRIALS,
                                                            page=True)]
    files += [(out / "prototype-A4.wav", "recording"),
              (out / "calibration-A4.toml", "calibration file")]
    return files


def run_demo(out: Path, *, say: Say, compare: Callable[[Path, Path, Path], None],
             calibrate: Callable[[Path, Path, Path], None],
             steps: Steps = no_progress, workers: int | None = 1) -> None:
    """Run the demo into ``out`` (files planned by the caller; see :func:`demo_outputs`).

    Parameters
    ----------
    out : Path
        Folder for every file.
    say : callable(str)
        Receives the demo's report, line by line.
    compare : callable(design_a, design_b, folder)
        Step 6: compare two presets, writing into ``folder``.
    calibrate : callable(recording, preset, calibration_file)
        Step 7: measure the recording of the A4 bar and fit the loss model.
    steps : callable(total, label), optional
        Progress bars for the long steps.
    workers : int, optional
        Processes for the independent work of steps 2-5 (tuning runs, bar solves
        of the build sheet, the passage's strikes, the sustain notes), through
        :func:`synth.executor.run_jobs`: 1 here, None every core.  The files are
        the same either way.
    """
    from synth.settings.instrument import load_instrument

    path = demo_preset_path()
    inst = load_instrument(path)
    say(f"demo instrument: {inst.name} ({inst.description})")
    say(f"  {inst.raw.get('workshop', '')}; for {inst.raw.get('client', '')}")
    say(f"  {len(inst.notes)} bars {inst.notes[0]}-{inst.notes[-1]}, "
        f"{inst.material.name}, A4 = {inst.reference_pitch_hz:g} Hz at "
        f"{inst.temperature_c:g} C\n")
    _partials(inst, say, steps)
    _tuning(inst, say, steps, workers)
    _build_sheet(inst, out, say, workers)
    stereo = _sounds(inst, out, say, steps, workers)
    _reports(inst, stereo, out, say, steps, workers)
    say("6. for the client: 6061-T6 (A) against 7075-T6 (B), loudness-matched")
    compare(path, presets_dir() / "instruments" / DEMO_OPTION, out / "compare")
    say("")
    say("7. a prototype A4 bar, struck over its tube and recorded (here simulated with "
        "losses the model does not know: alloy x1.5, cords x0.8, radiation x1.2)")
    calibrate(prototype_recording(inst, out), path, out / "calibration-A4.toml")


def _partials(inst, say: Say, steps: Steps) -> None:
    """Step 1: partials of every bar from its geometry."""
    from synth.physics.bar_fe import solve_bar
    from synth.physics.solid_correction import corrected_modes, model_correction
    from synth.pitch import cents
    from synth.reports.tables import format_table

    material = inst.material.at_temperature(inst.temperature_c)
    correction = model_correction(inst)
    table = None if correction is None else correction.table
    stiffness = None if correction is None else correction.stiffness
    rows = []
    t0 = time.perf_counter()
    with steps(len(inst.notes), "partials") as step:
        for note in inst.notes:
            res = corrected_modes(solve_bar(inst.bar(note), material), correction, note)
            v = res.vertical
            target = inst.target_hz(note)
            tors = res.of_kind("torsional")[0].frequency_hz
            lat = res.of_kind("lateral")[0].frequency_hz
            rows.append([note, f"{v[0].frequency_hz:.2f}",
                         f"{float(cents(v[0].frequency_hz, target)) + 0.0:+.2f}",
                         f"{v[1].frequency_hz / v[0].frequency_hz:.4f}",
                         f"{v[2].frequency_hz / v[0].frequency_hz:.4f}",
                         f"{tors:.0f}", f"{lat:.0f}",
                         f"{v[0].nodes_m[0] * 1e3:.1f}"])
            step(1, note)
    say("1. partials from geometry (1-D finite elements, mesh refined to 0.01 %"
        + ("; corrected by the preset's 3-D table, anchors "
           + " ".join(table.anchors) + ")" if table is not None else ")"))
    if stiffness is not None:
        say("   " + stiffness.describe())
    say(format_table(
        ["note", "f1 Hz", "cents", "f2/f1", "f3/f1", "torsion 1 Hz", "lateral 1 Hz",
         "cord hole mm"], rows))
    say(f"   {len(rows)} bars solved in {time.perf_counter() - t0:.2f} s; target "
        f"ratios {', '.join(f'{r:g}' for r in inst.target_ratios)}")
    _solid_check(inst, material, say)


SOLID_CHECK_NOTE = "A4"
SOLID_CHECK_LEVEL = 3
"""The demo's 3-D check: one bar on a coarse mesh level (about a second)."""


def _solid_check(inst, material, say: Say) -> None:
    """Solve one bar as a 3-D elastic solid, coarse, and say how far it sits from target."""
    from synth.physics.solid import solve_level
    from synth.pitch import cents

    note = SOLID_CHECK_NOTE
    t0 = time.perf_counter()
    solved = solve_level(inst.bar(note), material, SOLID_CHECK_LEVEL)
    target = inst.target_hz(note)
    off = [float(cents(solved.mode("vertical", k + 1).frequency_hz, target * r))
           for k, r in enumerate(inst.target_ratios[:3])]
    say(f"   3-D check of {note} (solid model, mesh level {SOLID_CHECK_LEVEL}, "
        f"{time.perf_counter() - t0:.1f} s): partials 1-3 "
        + " / ".join(f"{c:+.1f}" for c in off) + " cents off target (this coarse level "
        "reads a little sharp; `barwright solid` refines it)\n")


def _tuning(inst, say: Say, steps: Steps, workers: int | None = 1) -> None:
    """Step 2: design to target, every bar re-solved from its blank."""
    from synth.physics.tuning import tune_instrument

    t0 = time.perf_counter()
    with steps(len(inst.notes), "tuning") as step:
        tuned = tune_instrument(inst, progress=lambda n: step(1, n), workers=workers)
    worst = np.max([np.abs(r.residual_cents) for r in tuned], axis=0)
    say("2. design to target: length and arch solved per bar from the blank")
    say(f"   {sum(r.reachable for r in tuned)}/{len(tuned)} bars on target in "
        f"{time.perf_counter() - t0:.2f} s (median "
        f"{statistics.median(r.n_solves for r in tuned):.0f} finite-element solves per bar)")
    say("   worst residual per partial, cents: "
        + ", ".join(f"p{i + 1} {w:.3f}" for i, w in enumerate(worst)) + "\n")


def _build_sheet(inst, out: Path, say: Say, workers: int | None = 1) -> None:
    """Step 3: the build sheet (cut list and profile drawings)."""
    from synth import io
    from synth.reports.cutlist import SAFETY, cut_rows, cutlist_csv
    from synth.reports.plots import profile_sheet_png

    cut = cut_rows(inst, tubes=True, workers=workers)
    csv_path, png_path = out / "cutlist.csv", out / "profiles.png"
    io.write_bytes(csv_path, cutlist_csv(cut).encode("utf-8"), force=True)
    io.write_bytes(png_path, profile_sheet_png([(r.note, inst.bar(r.note), r.cord_holes_m)
                                                for r in cut],
                                               title=f"{inst.name}: bar profiles"), force=True)
    say("3. build sheet")
    say(f"   {csv_path}   (lengths, stations, cord holes)")
    say(f"   {png_path}   (profile drawings)")
    say(f"   {SAFETY}\n")


def _render_list(inst, stereo, workers: int | None = 1):
    """Return the renders of step 4: (file, voices, seconds, what)."""
    from dataclasses import replace

    from synth.settings.score import read_events

    spinning = replace(stereo, motor_rate_rev_per_s=3.0)
    bare = replace(stereo, tubes=False)
    a4, a4_bare, f3_motor, c5_hard, chord, waltz = DEMO_WAVS
    renders = [
        (a4, [stereo.strike_voice("A4", velocity=0.6)], 5.0, "A4, tubes on"),
        (a4_bare, [bare.strike_voice("A4", velocity=0.6)], 5.0, "A4 without its tube"),
        (f3_motor, [spinning.strike_voice("F3", velocity=0.6)], 8.0,
         "F3 with the motor at 3 rev/s (6 pulses/s)"),
        (c5_hard, [stereo.strike_voice("C5", velocity=0.7, mallet="hard")], 4.0,
         "C5 with a hard mallet"),
        (chord, [stereo.strike_voice(n, time_s=0.02 * k, velocity=0.6)
                 for k, n in enumerate(CHORD)], 6.0, "F major-seventh spread, rolled 60 ms"),
    ]
    score = read_events(presets_dir() / "events" / "harbour-waltz.toml")
    renders.append((waltz, stereo.score_voices(score, workers=workers),
                    score.last_event_s + 1.0,
                    "a short passage (presets/events/harbour-waltz.toml)"))
    return renders


def _sounds(inst, out: Path, say: Say, steps: Steps, workers: int | None = 1):
    """Step 4: strikes, a chord and a passage to WAV; return the stereo plan.

    The A4 pair (with and without its tube) shares one gain, that of the tubed
    strike normalised to -1 dBFS, so the pair keeps the level the tube adds;
    ``compare`` is where designs are heard loudness-matched.  Every file is cut
    at its length with the closing fade of :func:`synth.output.render_to_wav`.
    """
    from synth.output import render_to_wav
    from synth.physics.solid_correction import correction_record
    from synth.voicing import Voicer

    say("4. sound (peak-normalised to -1 dBFS; the A4 pair at one gain; start playback "
        "quietly)")
    fs = DEMO_SAMPLE_RATE
    stereo = Voicer(inst, sample_rate=float(fs), channels=2)
    renders = _render_list(inst, stereo, workers)
    pair_gain = None
    with steps(len(renders), "rendering") as step:
        for name, voices, seconds, what in renders:
            bare = name == DEMO_WAVS[1]
            rep = render_to_wav(out / name, voices, int(seconds * fs), sample_rate=fs,
                                channels=2, force=True, gain_db=pair_gain if bare else None,
                                settings={"command": "demo", "what": what,
                                          "preset": str(demo_preset_path()),
                                          "solid_correction": correction_record(
                                              stereo.correction),
                                          **({"gain_shared_with": DEMO_WAVS[0]} if bare
                                             else {})})
            if name == DEMO_WAVS[0]:
                pair_gain = rep.plan.gain_db
            how = (f"same gain as {DEMO_WAVS[0]}, {rep.plan.gain_db:+.1f} dB: the tube adds "
                   f"{_tube_loudness_db(renders, fs):.1f} dB of BS.1770-4 loudness" if bare
                   else f"gain {rep.plan.gain_db:+.1f} dB")
            say(f"   {rep.path}   ({what}; {rep.seconds:.1f} s, {how}; "
                f"{rep.ending.sentence(rep.seconds) if rep.ending else 'no ending stated'})")
            step(1, name)
    say("")
    return stereo


def _tube_loudness_db(renders, fs: int) -> float:
    """Loudness of the tubed A4 over the bare one (the first two renders, unscaled), dB."""
    from synth.analysis import integrated_loudness
    from synth.engine.render import render

    level = [integrated_loudness(render(voices, int(seconds * fs), sample_rate=fs, channels=2),
                                 fs).integrated_lufs for _, voices, seconds, _ in renders[:2]]
    return level[0] - level[1]


def _reports(inst, stereo, out: Path, say: Say, steps: Steps,
             workers: int | None = 1) -> None:
    """Step 5: sustain across the range and the decay of a chord."""
    from dataclasses import replace

    from synth import io
    from synth.reports.chord import chord_decay, chord_decay_png
    from synth.reports.sustain import sustain_csv, sustain_png, sustain_report

    with steps(len(inst.notes), "sustain") as step:
        sus = sustain_report(replace(stereo, channels=1), progress=lambda n: step(1, n),
                             workers=workers)
    io.write_bytes(out / "sustain.csv", sustain_csv(sus).encode("utf-8"), force=True)
    io.write_bytes(out / "sustain.png", sustain_png(sus, f"{inst.name}: sustain"), force=True)
    worst = max(abs(r.render_agreement_percent) for r in sus.rows)
    flagged = [r.note for r in sus.rows if r.flagged]
    say("5. reports")
    say(f"   sustain: target {sus.target_label}; {len(flagged)} of {len(sus.rows)} notes "
        f"outside +-{sus.tolerance_percent:g} % (fundamental T60 "
        f"{sus.rows[0].t60_s[0]:.1f} s at {sus.rows[0].note} to "
        f"{sus.rows[-1].t60_s[0]:.1f} s at {sus.rows[-1].note}); rendered T60 within "
        f"{worst:.2f} % of the budget")
    say(f"   {out / 'sustain.csv'}   {out / 'sustain.png'}")
    cd = chord_decay(stereo, [(n, 0.6) for n in CHORD], seconds=6.0)
    io.write_bytes(out / "chord-decay.png", chord_decay_png(cd, " ".join(CHORD)), force=True)
    say("   chord F3 A4 C5 E6: decay " + ", ".join(
        f"{n.note} {n.decay_db_per_s:.1f}" for n in cd.notes) + f" dB/s (spread "
        f"{cd.spread_db_per_s:.1f} dB/s)")
    say(f"   {out / 'chord-decay.png'}\n")


def prototype_recording(inst, out: Path) -> Path:
    """Write a simulated recording of a prototype A4 bar whose losses differ from the model.

    Alloy losses x1.5, cords x0.8, radiation x1.2, struck off-centre, peak at half
    full scale, with noise 85 dB below full scale (seeded).
    """
    from synth import io
    from synth.engine.render import render
    from synth.physics.losses import Calibration
    from synth.voicing import Voicer

    fs = DEMO_SAMPLE_RATE
    proto = Voicer(inst, sample_rate=float(fs), channels=1,
                   calibration=Calibration({"internal": 1.5, "cords": 0.8, "radiation": 1.2}))
    take = render([proto.strike_voice("A4", time_s=0.2, velocity=0.7, position=0.3,
                                      across=0.3)], int(6.0 * fs), sample_rate=fs)[:, 0]
    take = 0.5 * take / np.max(np.abs(take))
    take += 10 ** (-85 / 20) * np.random.default_rng(37).standard_normal(take.size)
    return io.write_wav(out / "prototype-A4.wav", take, sample_rate=fs, force=True)
