"""Sustain across the range: whether every note rings as long as it should.

For each note, with the preset's tubes and motor: the fundamental (the coupled,
bar-like pole when a tube is fitted) and its cents off target; Q and T60 of
partials 1-3 from the loss budget; and the fundamental's T60 measured on a
rendered strike by the analysis module (a check that the engine plays what the
budget says).  The target is the same T60 for every note by default (the median
of the range: chords then fade evenly) or a curve through given notes
(interpolated in log T60 over semitones).  The mismatch is given in percent and
as the level difference it makes at a time after the strike,
``dL = -60 t (1/T60 - 1/T60_target)`` dB (a note that dies faster is quieter by
then).  Notes outside the tolerance are flagged; for each, the tube offset that
would bring it inside while keeping the tube's gain above a floor is suggested
(:func:`synth.physics.coupling.suggest_tube_offset`).
"""

from __future__ import annotations

import math
import statistics
import time
from dataclasses import dataclass

import numpy as np

from synth.analysis import band_envelope, fit_envelope_decay
from synth.engine.render import render
from synth.errors import ConfigError, ModelError
from synth.executor import Job, run_jobs
from synth.physics.coupling import suggest_tube_offset
from synth.pitch import cents, note_to_midi
from synth.voicing import Voicer

LN_1000 = math.log(1000.0)


@dataclass(frozen=True)
class SustainRow:
    """One note of the sustain report."""

    note: str
    target_hz: float
    frequency_hz: float
    cents: float
    q: tuple[float, ...]  # partials 1..3
    t60_s: tuple[float, ...]
    t60_rendered_s: float
    render_agreement_percent: float
    target_t60_s: float
    mismatch_percent: float
    level_difference_db: float
    flagged: bool
    suggestion: str
    suggested_offset_cents: float | None
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class SustainReport:
    """Rows plus what they were measured against."""

    rows: tuple[SustainRow, ...]
    tolerance_percent: float
    at_time_s: float
    target_label: str
    tubes: bool
    motor_rate_rev_per_s: float
    render_seconds: float
    analysis_seconds: float
    audio_seconds: float


def parse_target_curve(text: str, notes: list[str]) -> dict[str, float]:
    """``"F3:20,C5:12,F6:6"`` -> T60 target per note (log-linear in semitones)."""
    points = []
    for item in text.replace(" ", "").split(","):
        if not item:
            continue
        try:
            name, value = item.split(":")
            points.append((note_to_midi(name), float(value)))
        except (ValueError, ConfigError):
            raise ConfigError(f"= {item!r}: write NOTE:T60_SECONDS pairs, e.g. F3:20,F6:6",
                              source="--target-curve") from None
    if not points or any(v <= 0 for _, v in points):
        raise ConfigError("needs at least one NOTE:T60 pair with T60 > 0", source="--target-curve")
    points.sort()
    xs = np.array([p[0] for p in points], dtype=float)
    ys = np.log([p[1] for p in points])
    return {n: float(np.exp(np.interp(note_to_midi(n), xs, ys))) for n in notes}


def sustain_report(voicer: Voicer, notes: list[str] | None = None, *,
                   target_t60_s: float | None = None, target_curve: dict[str, float] | None = None,
                   tolerance_percent: float = 15.0, at_time_s: float = 2.0,
                   min_gain_db: float = 3.0, max_render_s: float = 12.0,
                   progress=None, workers: int | None = None) -> SustainReport:
    """Build the sustain report (see the module docstring).

    Parameters
    ----------
    voicer : Voicer
        The instrument with its tube and motor settings (mono is enough).
    notes : list of str, optional
        Default: the whole range.
    target_t60_s, target_curve : optional
        A single T60 for every note, or one per note; default: the median.
    tolerance_percent : float
        Flag notes whose T60 misses the target by more than this.
    at_time_s : float
        When to state the level difference.
    min_gain_db : float
        Gain floor for the tube-offset suggestion.
    max_render_s : float
        Longest strike rendered for the measured T60.
    progress : callable(note), optional
        Called as each note is measured (in completion order).
    workers : int, optional
        Processes the notes are measured on (:func:`synth.executor.run_jobs`;
        default every core, 1 measures them here one after the other).
    """
    inst = voicer.instrument
    notes = list(notes or inst.notes)
    done = run_jobs([Job(n, _measure_note, (voicer, n, max_render_s)) for n in notes],
                    workers=workers,
                    progress=None if progress is None else (lambda r: progress(r.key)))
    failed = [r for r in done if not r.ok]
    if failed:
        raise ModelError(f"sustain of {failed[0].key}: {failed[0].error}")
    measured = {r.key: r.value for r in done}
    fund = {n: measured[n].fundamental for n in notes}
    if target_curve is not None:
        targets = target_curve
        label = "curve"
    else:
        common = target_t60_s if target_t60_s is not None else statistics.median(
            t for _, _, t in fund.values())
        targets = {n: common for n in notes}
        label = f"{common:.2f} s for every note" + (" (median of the range)"
                                                   if target_t60_s is None else "")
    rows = []
    t_render = t_analysis = audio = 0.0
    for note in notes:
        m = measured[note]
        f1, q1, t1 = m.fundamental
        t_render += m.render_s
        t_analysis += m.analysis_s
        audio += m.audio_s
        target = targets[note]
        mismatch = 100.0 * (t1 - target) / target
        level = -60.0 * at_time_s * (1.0 / t1 - 1.0 / target)
        flagged = abs(mismatch) > tolerance_percent
        suggestion, offset = "", None
        if flagged:
            suggestion, offset = _suggest(voicer, note, target, min_gain_db)
        rows.append(SustainRow(
            note=note, target_hz=inst.target_hz(note), frequency_hz=f1,
            cents=float(cents(f1, inst.target_hz(note))), q=m.q, t60_s=m.t60_s,
            t60_rendered_s=m.t60_rendered_s,
            render_agreement_percent=100.0 * (m.t60_rendered_s - t1) / t1,
            target_t60_s=target, mismatch_percent=mismatch, level_difference_db=level,
            flagged=flagged, suggestion=suggestion, suggested_offset_cents=offset,
            warnings=m.warnings))
    return SustainReport(tuple(rows), tolerance_percent, at_time_s, label, voicer.tubes_active,
                         voicer.motor.rate_rev_per_s, t_render, t_analysis, audio)


@dataclass(frozen=True)
class _Measured:
    """What one note contributes before the targets are known."""

    fundamental: tuple[float, float, float]
    q: tuple[float, ...]
    t60_s: tuple[float, ...]
    t60_rendered_s: float
    warnings: tuple[str, ...]
    render_s: float
    analysis_s: float
    audio_s: float


def _measure_note(voicer: Voicer, note: str, max_render_s: float) -> _Measured:
    """Budget and rendered T60 of one note (an independent job: module level, picklable)."""
    f1, q1, t1 = voicer.fundamental(note)
    model = voicer.model(note)
    vertical = [b for b in model.budget if b.kind == "vertical"][:3]
    fs = voicer.sample_rate
    # measure the rendered strike: long enough for ~25 dB of decay
    motor = voicer.motor
    spinning = model.coupling is not None and motor.rate_rev_per_s > 0
    fit_from = (motor.start_time_s + 5.0 * motor.spin_up_s + 0.5) if spinning else 0.2
    seconds = float(min(max(0.42 * t1, 1.5), max_render_s) + fit_from)
    t0 = time.perf_counter()
    x = render([voicer.strike_voice(note, mono=True)], int(seconds * fs), sample_rate=fs,
               channels=1)[:, 0]
    t_render = time.perf_counter() - t0
    t0 = time.perf_counter()
    # Under the discs, a smoothing window of exactly one pulse period removes the
    # pulsing and leaves the decay.  A render has no noise: a floor far below the
    # signal lets the fit use all of it.
    times, env = band_envelope(x, fs, f1, start_s=fit_from,
                               bandwidth_hz=2.0 * motor.rate_rev_per_s if spinning else None)
    fit = fit_envelope_decay(times, env, f1, noise_floor=1e-9 * float(env.max()))
    return _Measured((f1, q1, t1), (q1, *[b.q for b in vertical[1:]]),
                     (t1, *[b.t60_s for b in vertical[1:]]), fit.t60_s, tuple(fit.warnings),
                     t_render, time.perf_counter() - t0, seconds)


def _suggest(voicer: Voicer, note: str, target: float, min_gain_db: float):
    model = voicer.model(note)
    if model.coupling is None:
        return "no tube to retune: change the bar or its cords", None
    bare = model.fundamental.t60_s
    if target >= bare:
        return (f"the bare bar rings only {bare:.1f} s: no tube offset lengthens it to "
                f"{target:.1f} s; change the bar, its alloy or its cords"), None
    try:
        s = suggest_tube_offset(model.coupling.bar, model.tube, target_t60_s=target,
                                min_gain_db=min_gain_db, temperature_c=voicer.temperature_c,
                                coupling_calibration=voicer.tube_settings.coupling_calibration)
    except ModelError as exc:
        return f"no tube offset reaches it ({exc})", None
    return (f"tube {s.offset_cents:+.0f} c (cut {s.tube_length_m * 1e3:.1f} mm): T60 "
            f"{s.bar_t60_s:.2f} s, gain {s.gain_db:.1f} dB"), s.offset_cents


def sustain_csv(report: SustainReport) -> str:
    """Return the sustain report as CSV text."""
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["note", "target_hz", "frequency_hz", "cents", "q1", "q2", "q3", "t60_1_s",
                "t60_2_s", "t60_3_s", "t60_rendered_s", "target_t60_s", "mismatch_percent",
                f"level_difference_db_at_{report.at_time_s:g}s", "flagged", "suggestion"])
    for r in report.rows:
        w.writerow([r.note, f"{r.target_hz:.4f}", f"{r.frequency_hz:.4f}", f"{r.cents:.3f}",
                    *[f"{q:.1f}" for q in r.q], *[f"{t:.3f}" for t in r.t60_s],
                    f"{r.t60_rendered_s:.3f}", f"{r.target_t60_s:.3f}",
                    f"{r.mismatch_percent:.2f}", f"{r.level_difference_db:.2f}",
                    int(r.flagged), r.suggestion])
    return buf.getvalue()


def sustain_png(report: SustainReport, title: str) -> bytes:
    """T60 per note against the target band, flagged notes marked."""
    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    rows = report.rows
    x = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(10, 4.2))
    t60 = np.array([r.t60_s[0] for r in rows])
    target = np.array([r.target_t60_s for r in rows])
    tol = report.tolerance_percent / 100.0
    ax.fill_between(x, target * (1 - tol), target * (1 + tol), color="0.85",
                    label=f"target +-{report.tolerance_percent:g} %")
    ax.plot(x, target, color="0.4", lw=1, ls="--")
    ax.plot(x, t60, marker="o", ms=3.5, lw=1.2, label="fundamental T60 (loss budget)")
    ax.plot(x, [r.t60_rendered_s for r in rows], ls="none", marker="x", ms=4,
            label="measured on a render")
    bad = [i for i, r in enumerate(rows) if r.flagged]
    ax.plot(x[bad], t60[bad], ls="none", marker="o", ms=8, mfc="none", mec="k",
            label="outside the target")
    ax.set_yscale("log")
    from matplotlib.ticker import FormatStrFormatter

    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.yaxis.set_minor_formatter(FormatStrFormatter("%g"))
    ax.tick_params(axis="y", which="minor", labelsize=7)
    ax.set_xticks(x)
    ax.set_xticklabels([r.note for r in rows], rotation=90, fontsize=7)
    ax.set_ylabel("T60 s")
    ax.set_title(title, fontsize=10)
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=8)
    return figure_png(fig)
