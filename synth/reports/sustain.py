"""Sustain across the range: does every note ring as long as its neighbours.

For each note, with the preset's tubes and motor: the fundamental (the coupled,
bar-like pole when a tube is fitted, with its steady decay under the discs when
the motor turns) and its cents off target; Q and T60 of partials 1-3 from the
loss budget; and the fundamental's T60 measured on the model's own render of a
strike (a check that the engine plays what the budget says).

The default target is the range's own trend: on any keyboard percussion low
notes ring longer than high ones, and a maker accepts T60 falling smoothly with
pitch [common practice, no source].  So the target is a low-order polynomial
fit of ln T60 against the MIDI note number (:func:`trend_targets`, order 2 by
default; notes far off the first fit are left out of a second one, so one bad
bar does not bend it), and a note is flagged when it breaks from that line by
more than the tolerance.  One T60 for every note (the median: chords then fade
evenly), a given T60, or a curve through given notes stay as options.

The mismatch is given in percent and as the level difference it makes at a
time after the strike, ``dL = -60 t (1/T60 - 1/T60_target)`` dB.  For a
flagged tubed note the tube offset that brings it onto the target is solved
with the same voice as the row (its calibration, tube and motor: the T60 under
the turning discs), within ``0..max_offset_cents`` above the bar and with the
tube's gain above a floor; each suggestion is then checked by building the
voice again with that tube length cut (:func:`verify_suggestions`) and printed
only if the re-solved T60 lies within the tolerance of the target.
"""

from __future__ import annotations

import math
import statistics
import time
from dataclasses import dataclass
from dataclasses import replace as dc_replace
from typing import Final

import numpy as np

from synth.analysis import band_envelope, fit_envelope_decay
from synth.constants import LN_1000
from synth.engine.render import render
from synth.errors import ConfigError, ModelError
from synth.executor import Job, run_jobs, values_or_raise
from synth.numerics import bracketed_root
from synth.physics.coupling import coupling_at_offset
from synth.physics.motor import disc_modulation, steady_bar_decay_per_s
from synth.physics.solid_correction import correction_record
from synth.physics.tube import tube_length_for_bar
from synth.pitch import cents, note_to_midi
from synth.voicing import Voicer

TARGETS: Final[tuple[str, str]] = ("trend", "even")
"""Default targets: the range's own trend, or one T60 (the median) for every note."""

DEFAULT_TREND_ORDER: Final[int] = 2
"""Order of the polynomial in ln T60 against note number."""

DEFAULT_MAX_OFFSET_CENTS: Final[float] = 100.0
"""Largest tube offset above the bar a suggestion may ask for, cents (a tube a
semitone sharp of its bar still reinforces it; far beyond, it no longer does)
[common practice, no source]."""

OFFSET_GRID: Final[int] = 41
"""Offsets scanned in ``0..max_offset_cents`` to bracket the target before Brent's method."""


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
    suggested_length_m: float | None = None
    suggested_t60_s: float | None = None


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
    max_offset_cents: float = DEFAULT_MAX_OFFSET_CENTS
    solid_correction: dict | None = None
    """The preset's 3-D correction table applied to every row (``correction_record``)."""


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


def trend_targets(t60: dict[str, float], *, order: int = DEFAULT_TREND_ORDER,
                  tolerance_percent: float = 15.0) -> dict[str, float]:
    """Fit the range's own trend: ln T60 against MIDI note number, a polynomial of ``order``.

    A first least-squares fit over every note; notes off it by more than
    ``tolerance_percent`` are left out of a second fit (as long as more than
    ``order + 2`` notes remain), so a bar that breaks from its neighbours does not
    pull the line towards itself.  Fewer notes than ``order + 1`` lower the order.

    Returns
    -------
    dict
        Target T60 per note, s.
    """
    if isinstance(order, bool) or not isinstance(order, int) or not 0 <= order <= 3:
        raise ConfigError(f"= {order!r}: must be 0, 1, 2 or 3", source="--trend-order")
    notes = list(t60)
    x = np.array([note_to_midi(n) for n in notes], dtype=float)
    y = np.log([t60[n] for n in notes])
    deg = min(order, len(notes) - 1)
    keep = np.ones(len(notes), dtype=bool)
    for _ in range(2):
        coef = np.polyfit(x[keep], y[keep], deg)
        fit = np.polyval(coef, x)
        off = np.abs(np.exp(y - fit) - 1.0) * 100.0
        nxt = off <= tolerance_percent
        if nxt.sum() <= deg + 2 or np.array_equal(nxt, keep):
            break
        keep = nxt
    return {n: float(np.exp(v)) for n, v in zip(notes, fit, strict=True)}


def sustain_report(voicer: Voicer, notes: list[str] | None = None, *,
                   target_t60_s: float | None = None, target_curve: dict[str, float] | None = None,
                   target: str = "trend", trend_order: int = DEFAULT_TREND_ORDER,
                   tolerance_percent: float = 15.0, at_time_s: float = 2.0,
                   min_gain_db: float = 3.0, max_offset_cents: float = DEFAULT_MAX_OFFSET_CENTS,
                   max_render_s: float = 12.0, progress=None,
                   workers: int | None = 1) -> SustainReport:
    """Build the sustain report (see the module docstring).

    Parameters
    ----------
    voicer : Voicer
        The instrument with its tube and motor settings (mono is enough).
    notes : list of str, optional
        Default: the whole range.
    target_t60_s, target_curve : optional
        A single T60 for every note, or one per note (either overrides ``target``).
    target : {"trend", "even"}
        Without the two above: the range's own trend (:func:`trend_targets`), or
        the median T60 for every note.
    trend_order : int
        Order of the trend fit (0-3).
    tolerance_percent : float
        Flag notes whose T60 misses the target by more than this.
    at_time_s : float
        When to state the level difference.
    min_gain_db : float
        Gain floor for the tube-offset suggestion.
    max_offset_cents : float
        Largest tube offset above the bar a suggestion may ask for.
    max_render_s : float
        Longest strike rendered for the measured T60.
    progress : callable(note), optional
        Called as each note is measured (in completion order).
    workers : int, optional
        Processes the notes are measured on, each note an independent job of
        :func:`synth.executor.run_jobs` (1: here, one after the other; None:
        every core).  The rows are the same whichever number measured them.
    """
    if target not in TARGETS:
        raise ConfigError(f"= {target!r}: must be one of " + ", ".join(TARGETS),
                          source="--target")
    if not (math.isfinite(max_offset_cents) and 0.0 < max_offset_cents <= 1200.0):
        raise ConfigError(f"= {max_offset_cents}: must be above 0 and at most 1200 cents",
                          source="--max-offset-cents")
    inst = voicer.instrument
    notes = list(notes or inst.notes)
    jobs = [Job(n, _measure_note, (voicer, n, max_render_s)) for n in notes]
    done = run_jobs(jobs, workers=workers,
                    progress=None if progress is None else (lambda r: progress(r.key)))
    measured = dict(zip(notes, values_or_raise(jobs, done, "sustain of"), strict=True))
    fund = {n: measured[n].fundamental for n in notes}
    if target_curve is not None:
        targets = target_curve
        label = "curve through the given notes"
    elif target_t60_s is not None or target == "even":
        common = target_t60_s if target_t60_s is not None else statistics.median(
            t for _, _, t in fund.values())
        targets = {n: common for n in notes}
        label = f"{common:.2f} s for every note" + (" (median of the range)"
                                                   if target_t60_s is None else "")
    else:
        targets = trend_targets({n: f[2] for n, f in fund.items()}, order=trend_order,
                                tolerance_percent=tolerance_percent)
        label = (f"the range's own trend (order-{min(trend_order, len(notes) - 1)} fit of "
                 f"ln T60 on note number): {targets[notes[0]]:.1f} s at {notes[0]} to "
                 f"{targets[notes[-1]]:.1f} s at {notes[-1]}")
    rows = []
    t_render = t_analysis = audio = 0.0
    for note in notes:
        m = measured[note]
        t1 = m.fundamental[2]
        t_render += m.render_s
        t_analysis += m.analysis_s
        audio += m.audio_s
        goal = targets[note]
        mismatch = 100.0 * (t1 - goal) / goal
        level = -60.0 * at_time_s * (1.0 / t1 - 1.0 / goal)
        flagged = abs(mismatch) > tolerance_percent
        suggestion, offset, length, t_new = "", None, None, None
        if flagged:
            suggestion, offset, length, t_new = _suggest(voicer, note, goal, min_gain_db,
                                                         max_offset_cents)
        f1 = m.fundamental[0]
        rows.append(SustainRow(
            note=note, target_hz=inst.target_hz(note), frequency_hz=f1,
            cents=float(cents(f1, inst.target_hz(note))), q=m.q, t60_s=m.t60_s,
            t60_rendered_s=m.t60_rendered_s,
            render_agreement_percent=100.0 * (m.t60_rendered_s - t1) / t1,
            target_t60_s=goal, mismatch_percent=mismatch, level_difference_db=level,
            flagged=flagged, suggestion=suggestion, suggested_offset_cents=offset,
            warnings=m.warnings, suggested_length_m=length, suggested_t60_s=t_new))
    rows = verify_suggestions(voicer, rows, tolerance_percent)
    return SustainReport(tuple(rows), tolerance_percent, at_time_s, label, voicer.tubes_active,
                         voicer.motor.rate_rev_per_s, t_render, t_analysis, audio,
                         max_offset_cents, correction_record(voicer.correction))


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


def voice_at_offset(voicer: Voicer, note: str, offset_cents: float) -> tuple[float, float, float]:
    """Return (T60 s, peak gain dB, tube length m) with the note's tube re-cut.

    The tube is cut ``offset_cents`` above the bar (as it sounds with the bar in
    place), and the note keeps the rest of its voice: the bar mode of its loss
    budget (with the calibration), the tube's radius, gap and coupling
    calibration, and the motor as the voicer runs it (the steady decay under the
    turning discs, as :meth:`synth.voicing.Voicer.fundamental` gives).
    """
    model = voicer.model(note)
    ts = voicer.tube_settings
    if model.coupling is None or model.tube is None or ts is None:
        raise ModelError(f"{note}: no tube under the bar: there is no tube offset to vary")
    bar, template = model.coupling.bar, model.tube
    length = tube_length_for_bar(bar.frequency_hz, template, offset_cents=offset_cents,
                                 temperature_c=voicer.temperature_c,
                                 ka_correction=ts.ka_correction)
    pair = coupling_at_offset(bar, template, offset_cents, temperature_c=voicer.temperature_c,
                              coupling_calibration=ts.coupling_calibration,
                              ka_correction=ts.ka_correction).pair
    decay = float(pair.modes().decay_per_s[0])
    motor = voicer.motor
    if not (motor.rate_rev_per_s <= 0 and motor.resting == "open"):
        mod = disc_modulation(pair, motor, voicer.sample_rate,
                              phase_offset_deg=voicer.disc_phase_deg(note),
                              reference_distance_m=voicer.sound.listening_distance_m)
        decay = steady_bar_decay_per_s(pair, mod)
    return LN_1000 / decay, float(pair.peak_gain_db()), float(length)


def _suggest(voicer: Voicer, note: str, goal: float, min_gain_db: float,
             max_offset_cents: float):
    model = voicer.model(note)
    if model.coupling is None:
        return "no tube to retune: change the bar or its cords", None, None, None
    bare = model.fundamental.t60_s
    if goal >= bare:
        return (f"the bare bar rings only {bare:.1f} s: no tube lengthens it to "
                f"{goal:.1f} s; change the bar, its alloy or its cords"), None, None, None
    grid = np.linspace(0.0, max_offset_cents, OFFSET_GRID)
    t60 = [voice_at_offset(voicer, note, c)[0] - goal for c in grid]
    bracket = next(((grid[k], grid[k + 1]) for k in range(len(grid) - 1)
                    if t60[k] == 0.0 or t60[k] * t60[k + 1] < 0.0), None)
    if bracket is None:
        lo, hi = min(t60) + goal, max(t60) + goal
        return (f"no tube offset within 0..{max_offset_cents:g} c reaches {goal:.1f} s (it "
                f"gives {lo:.1f}-{hi:.1f} s; --max-offset-cents widens the search)"), \
            None, None, None
    c = bracket[0] if t60[list(grid).index(bracket[0])] == 0.0 else bracketed_root(
        lambda x: voice_at_offset(voicer, note, x)[0] - goal, *bracket, xtol=1e-6)
    t_new, gain, length = voice_at_offset(voicer, note, c)
    if gain < min_gain_db:
        return (f"tube {c:+.0f} c would reach {t_new:.1f} s but gives only {gain:.1f} dB "
                f"(floor {min_gain_db:g} dB, --min-gain)"), None, None, None
    return (f"tube {c:+.0f} c (cut {length * 1e3:.1f} mm): T60 {t_new:.2f} s, gain "
            f"{gain:.1f} dB"), float(c), length, t_new


def verify_suggestions(voicer: Voicer, rows: list[SustainRow],
                       tolerance_percent: float) -> list[SustainRow]:
    """Re-solve each suggested tube with the full voice and keep only those that hold.

    One voicer is built again from the instrument with every suggested tube
    length cut in (``[bars.NOTE] tube``), the same sample rate, tubes, motor and
    calibration; a suggestion stays only if that voice's T60 lies within
    ``tolerance_percent`` of the row's target.  Its T60 is the re-solved one.
    """
    lengths = {r.note: r.suggested_length_m for r in rows if r.suggested_length_m is not None}
    if not lengths:
        return rows
    inst = voicer.instrument
    check = Voicer(dc_replace(inst, tube_lengths={**inst.tube_lengths, **lengths}),
                   sample_rate=voicer.sample_rate, tubes=voicer.tubes,
                   motor_rate_rev_per_s=voicer.motor.rate_rev_per_s, channels=voicer.channels,
                   calibration=voicer.loss_calibration)
    out = []
    for r in rows:
        if r.suggested_length_m is None:
            out.append(r)
            continue
        t60 = check.fundamental(r.note)[2]
        off = 100.0 * (t60 - r.target_t60_s) / r.target_t60_s
        if abs(off) <= tolerance_percent:
            text = (f"tube {r.suggested_offset_cents:+.0f} c (cut "
                    f"{r.suggested_length_m * 1e3:.1f} mm): T60 {t60:.2f} s re-solved "
                    f"({off:+.1f} % of target)")
            out.append(dc_replace(r, suggestion=text, suggested_t60_s=t60))
        else:
            out.append(dc_replace(r, suggestion=f"no offset holds when re-solved ({t60:.2f} s, "
                                                f"{off:+.0f} % of target)",
                                  suggested_offset_cents=None, suggested_length_m=None,
                                  suggested_t60_s=None))
    return out


def preset_with_tubes(instrument, lengths: dict[str, float]) -> dict:
    """Return the preset's TOML data with ``[bars.NOTE] tube = {length_m = ...}`` set.

    Parameters
    ----------
    instrument : Instrument
        The preset as loaded (its ``raw`` TOML data).
    lengths : dict
        Cut tube length per note, m.

    Raises
    ------
    ConfigError
        A note has no ``[bars.NOTE]`` table to hold its tube.
    """
    import copy

    data = copy.deepcopy(instrument.raw)
    bars = data.get("bars", {})
    spelt = {}
    for key in bars:
        try:
            spelt[note_to_midi(key)] = key
        except ConfigError:
            continue
    for note, length in lengths.items():
        key = spelt.get(note_to_midi(note))
        if key is None:
            raise ConfigError(f"has no [bars.{note}] table to hold a tube length; tune the "
                              "preset first", source=instrument.source)
        bars[key]["tube"] = {"length_m": round(float(length), 6)}
    return data


def sustain_csv(report: SustainReport) -> str:
    """Return the sustain report as CSV text."""
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["note", "target_hz", "frequency_hz", "cents", "q1", "q2", "q3", "t60_1_s",
                "t60_2_s", "t60_3_s", "t60_rendered_s", "target_t60_s", "mismatch_percent",
                f"level_difference_db_at_{report.at_time_s:g}s", "flagged",
                "suggested_offset_cents", "suggested_tube_length_m", "suggested_t60_s",
                "suggestion"])
    for r in report.rows:
        w.writerow([r.note, f"{r.target_hz:.4f}", f"{r.frequency_hz:.4f}", f"{r.cents:.3f}",
                    *[f"{q:.1f}" for q in r.q], *[f"{t:.3f}" for t in r.t60_s],
                    f"{r.t60_rendered_s:.3f}", f"{r.target_t60_s:.3f}",
                    f"{r.mismatch_percent:.2f}", f"{r.level_difference_db:.2f}",
                    int(r.flagged), _opt(r.suggested_offset_cents, ".2f"),
                    _opt(r.suggested_length_m, ".6f"), _opt(r.suggested_t60_s, ".3f"),
                    r.suggestion])
    return buf.getvalue()


def _opt(x: float | None, spec: str) -> str:
    return "" if x is None else format(x, spec)


def sustain_png(report: SustainReport, title: str) -> bytes:
    """Plot T60 per note: partials 1-3, the target band of the fundamental, flagged notes."""
    from matplotlib.ticker import FormatStrFormatter, NullFormatter

    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    rows = report.rows
    x = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(11, 5.4))
    t60 = np.array([r.t60_s[0] for r in rows])
    target = np.array([r.target_t60_s for r in rows])
    tol = report.tolerance_percent / 100.0
    ax.fill_between(x, target * (1 - tol), target * (1 + tol), color="0.87",
                    label=f"target for the fundamental +-{report.tolerance_percent:g} %")
    ax.plot(x, target, color="0.4", lw=1, ls="--")
    ax.plot(x, t60, marker="o", ms=3.5, lw=1.2, label="fundamental (loss budget)")
    for k, mk in ((1, "^"), (2, "v")):
        ax.plot(x, [r.t60_s[k] if len(r.t60_s) > k else np.nan for r in rows], marker=mk,
                ms=3.5, lw=0.9, alpha=0.8, label=f"partial {k + 1} (loss budget)")
    ax.plot(x, [r.t60_rendered_s for r in rows], ls="none", marker="x", ms=5, color="k",
            label="fundamental measured on the model's own render")
    bad = [i for i, r in enumerate(rows) if r.flagged]
    ax.plot(x[bad], t60[bad], ls="none", marker="o", ms=9, mfc="none", mec="r",
            label="outside the target")
    ax.set_yscale("log")
    ax.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    lo, hi = ax.get_ylim()
    if hi / lo < 20.0:  # label the minor ticks only where they do not crowd
        ax.yaxis.set_minor_formatter(FormatStrFormatter("%g"))
        ax.tick_params(axis="y", which="minor", labelsize=7)
    else:
        ax.yaxis.set_minor_formatter(NullFormatter())
    ax.set_xticks(x)
    ax.set_xticklabels([r.note for r in rows], rotation=90, fontsize=8)
    ax.set_xlabel("note")
    ax.set_ylabel("T60 (time to fade by 60 dB), s; log scale")
    motor = (f"motor {report.motor_rate_rev_per_s:g} rev/s" if report.motor_rate_rev_per_s > 0
             else "motor stopped")
    ax.set_title(f"{title} ({'tubes on' if report.tubes else 'no tubes'}, {motor}); "
                 f"target: {report.target_label}", fontsize=9, loc="left")
    ax.grid(alpha=0.3, which="both")
    ax.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=3,
              frameon=False)
    fig.tight_layout()
    return figure_png(fig)


# --- the sustain command's work: option checks, the plan, the files ---

def check_sustain_options(target: str, target_t60: float | None,
                          target_curve: str | None) -> None:
    """Refuse an unknown target, or a T60 and a curve given together."""
    if target not in TARGETS:
        raise ConfigError(f"= {target!r}: must be one of " + ", ".join(TARGETS),
                          source="--target")
    if target_t60 is not None and target_curve is not None:
        raise ConfigError("give --target-t60 or --target-curve, not both", source="--target-curve")


def sustain_voicer(instrument, *, no_tubes: bool, motor_rate: float | None) -> Voicer:
    """Plan the mono voices the sustain report measures, at 48 kHz."""
    return Voicer(instrument, sample_rate=48000.0, tubes=not no_tubes,
                  motor_rate_rev_per_s=motor_rate, channels=1)


def write_sustain_files(report: SustainReport, instrument, preset, *, csv_path, png_path,
                        out_preset, tolerance: float, force: bool) -> dict[str, float]:
    """Write the table, the plot and (with out_preset) the preset with suggested tubes."""
    from synth import io

    lengths = {r.note: r.suggested_length_m for r in report.rows
               if r.suggested_length_m is not None}
    preset_data = preset_with_tubes(instrument, lengths) if out_preset is not None else None
    io.write_bytes(csv_path, sustain_csv(report).encode("utf-8"), force=force)
    io.write_bytes(png_path, sustain_png(report, f"{instrument.name}: sustain"), force=force)
    if preset_data is not None and out_preset is not None:
        import tomli_w

        head = (f"# {preset.name} with the tube lengths `barwright sustain` suggested for "
                f"{', '.join(lengths) or 'no note'}\n# (target: {report.target_label}; "
                f"tolerance +-{tolerance:g} %).\n")
        io.write_bytes(out_preset, (head + tomli_w.dumps(preset_data)).encode("utf-8"),
                       force=force)
    return lengths
