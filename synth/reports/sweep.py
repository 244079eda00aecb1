"""Design sweeps: variants of a preset over a grid of settings, and what each gives.

A sweep varies preset keys by their dotted names (``tubes.offset_cents``,
``tubes.inner_radius_m``, ``motor.rate_rev_per_s``, ``sound.mallet``,
``material``, ``blank.thickness_m``...) over the grid of every combination.  Each
variant is the preset's TOML table with those values set, read by the same
reader as a file (:func:`synth.settings.variants.read_variants`), so every
range check applies and a bad key or value stops the sweep before any work.

Per variant it reports what a maker chooses on, each computed in about a second:

* tuning reach: the bars of three sample notes (lowest, middle, highest) tuned
  afresh from the variant's blank, undercut family and alloy
  (:func:`synth.physics.tuning.tune_instrument`); the worst residual of partials
  1-3, cents.  The preset's own bars are also checked: how far their fundamental
  sits from the target, cents (a new alloy or blank needs new bars);
* T60 of the fundamental and the tube's gain (peak radiated power over the bare
  bar's, :meth:`synth.physics.coupling.CoupledPair.peak_gain_db`) per register,
  with the preset's bars as they stand: the same plan as ``barwright sustain``
  (:class:`synth.voicing.Voicer` at 48 kHz);
* evenness: the spread of the fundamental's T60 about a smooth trend across the
  range, every third note: the RMS of log T60 about a quadratic in semitones,
  as a percentage (0 %: the decay follows the trend exactly);
* loudness: ITU-R BS.1770-4 integrated loudness of a short phrase (the three
  sample notes struck 0.5 s apart at strength 0.6, 2.5 s, mono), taking 1 Pa at
  the listening distance as full scale: for comparing variants, not an absolute
  level.

Variants are independent jobs run by :func:`synth.executor.run_jobs` (this
process, a local process pool, or a Dask cluster); each job holds BLAS to one
thread, so every engine computes the same numbers.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from synth.errors import ConfigError
from synth.executor import Job, JobResult, run_jobs

if TYPE_CHECKING:
    from synth.physics.instrument import Instrument

SWEEP_SAMPLE_RATE = 48000.0
"""Sample rate of the plans, Hz (the sustain report's)."""
PHRASE_STRENGTH = 0.6
PHRASE_STEP_S = 0.5
PHRASE_SECONDS = 2.5
REGISTERS = ("low", "mid", "high")
MAX_VARIANTS = 10000
"""Most variants one sweep may hold."""


@dataclass(frozen=True)
class Vary:
    """One swept key and its values."""

    key: str
    values: tuple


@dataclass(frozen=True)
class VariantResult:
    """What one variant gives.  Units: cents, s, dB, percent, LUFS."""

    settings: tuple[tuple[str, object], ...]
    registers: tuple[str, str, str]
    tuning_reach_cents: float
    bars_off_target_cents: float
    t60_s: tuple[float, float, float]
    tube_gain_db: tuple[float | None, float | None, float | None]
    evenness_percent: float
    loudness_lufs: float
    t60_by_note: tuple[tuple[str, float], ...]


@dataclass(frozen=True)
class SweepReport:
    """The variants in grid order; ``results[i]`` is None when variant ``i`` failed."""

    preset: str
    varies: tuple[Vary, ...]
    variants: tuple[tuple[tuple[str, object], ...], ...]
    results: tuple[VariantResult | None, ...]
    errors: tuple[str | None, ...]
    engine: str

    @property
    def failed(self) -> list[int]:
        """Indices of the variants that failed."""
        return [i for i, e in enumerate(self.errors) if e is not None]


# ------------------------------------------------------------------------------ the grid
def _value(text: str, where: str):
    text = text.strip()
    if not text:
        raise ConfigError("= '': empty value; write KEY=V1,V2,...", source=where)
    if ":" in text:
        return [_value(t, where) for t in text.split(":")]
    low = text.lower()
    if low in ("true", "false"):
        return low == "true"
    for kind in (int, float):
        try:
            number = kind(text)
        except ValueError:
            continue
        if isinstance(number, float) and not math.isfinite(number):
            raise ConfigError(f"= {text!r}: not a finite number", source=where)
        return number
    return text


def parse_vary(text: str) -> Vary:
    """Read one ``KEY=V1,V2,...`` grid axis.

    Parameters
    ----------
    text : str
        A dotted preset key and its values, e.g. ``"tubes.offset_cents=0,20,40"``.
        Values are whole numbers, numbers, ``true``/``false`` or text (a preset
        name); a list is written with colons (``blank.thickness_m=0.013:0.011``),
        and a single number given for a key that holds a list sets every element.

    Returns
    -------
    Vary
    """
    key, eq, values = text.partition("=")
    key = key.strip()
    if not eq or not key or any(not part for part in key.split(".")):
        raise ConfigError(f"= {text!r}: write KEY=V1,V2,... with a dotted preset key, e.g. "
                          "tubes.offset_cents=0,20,40", source="--vary")
    items = tuple(_value(v, f"--vary {key}") for v in values.split(","))
    return Vary(key, items)


def variant_tables(preset: str | Path, varies: Sequence[Vary]) -> list[tuple[tuple, Instrument]]:
    """Read every variant of the preset (:func:`synth.settings.variants.read_variants`).

    Returns
    -------
    list of (settings, instrument)
        In grid order (the last axis varies fastest); ``settings`` is a tuple of
        (key, value) pairs, ``instrument`` the preset read with them set.

    Raises
    ------
    ConfigError
        A bad key or value, naming the variant (before any work starts).
    """
    from synth.physics.instrument import Instrument
    from synth.settings.variants import read_variants

    if not varies:
        raise ConfigError("give at least one --vary KEY=V1,V2,...", source="--vary")
    keys = [v.key for v in varies]
    if len(set(keys)) != len(keys):
        raise ConfigError(f"= {keys!r}: each key may be varied once", source="--vary")
    count = math.prod(len(v.values) for v in varies)
    if count > MAX_VARIANTS:
        raise ConfigError(f"= {count} variants: allowed: up to {MAX_VARIANTS}",
                          source="--vary")
    grid = [tuple(zip(keys, combo, strict=True))
            for combo in itertools.product(*(v.values for v in varies))]
    out = []
    for settings, design in zip(grid, read_variants(preset, grid), strict=True):
        if not isinstance(design, Instrument):
            raise ConfigError("is a single-bar file; a sweep needs an instrument preset",
                              source=str(preset))
        out.append((settings, design))
    return out


# ------------------------------------------------------------------------- one variant
def _sample_notes(notes: Sequence[str]) -> tuple[str, str, str]:
    return notes[0], notes[len(notes) // 2], notes[-1]


def evenness_percent(semitones: Sequence[float], t60_s: Sequence[float]) -> float:
    """Spread of T60 about a smooth trend across the range, percent.

    The RMS of ``ln T60`` about its least-squares quadratic in semitones, as
    ``100 (exp(rms) - 1)``: the typical factor by which a note rings longer or
    shorter than the trend.  Needs at least four notes.
    """
    x = np.asarray(semitones, dtype=float)
    y = np.log(np.asarray(t60_s, dtype=float))
    if x.size < 4:
        raise ConfigError(f"= {x.size} notes: the trend needs at least 4", source="evenness")
    coef = np.polyfit(x - x.mean(), y, 2)
    resid = y - np.polyval(coef, x - x.mean())
    return float(100.0 * math.expm1(math.sqrt(float(np.mean(resid**2)))))


def evaluate_variant(settings: tuple, inst: Instrument) -> VariantResult:
    """Compute the figures of one variant (a sweep job; see the module docstring).

    Parameters
    ----------
    settings : tuple of (key, value)
        The variant's swept values (carried into the result).
    inst : Instrument
        The variant, as :func:`variant_tables` read it.

    Returns
    -------
    VariantResult
    """
    from synth.physics.bar_fe import one_blas_thread

    with one_blas_thread():
        return _evaluate(settings, inst)


def _evaluate(settings: tuple, inst: Instrument) -> VariantResult:
    from synth.analysis import integrated_loudness
    from synth.engine.render import render
    from synth.physics.tuning import tune_instrument
    from synth.pitch import cents, note_to_midi
    from synth.voicing import Voicer

    notes = list(inst.notes)
    registers = _sample_notes(notes)
    low, mid, high = registers
    tuned = tune_instrument(inst, list(registers))
    reach = max(float(np.max(np.abs(r.residual_cents))) for r in tuned)
    plan = Voicer(inst, sample_rate=SWEEP_SAMPLE_RATE, channels=1)
    trend = sorted(set(notes[::3]) | set(registers), key=note_to_midi)
    t60 = {n: plan.fundamental(n)[2] for n in trend}
    off = max(abs(float(cents(plan.model(n).fundamental.frequency_hz, inst.target_hz(n))))
              for n in registers)
    gains = []
    for n in registers:
        coupling = plan.model(n).coupling
        gains.append(None if coupling is None else float(coupling.pair.peak_gain_db()))
    voices = [plan.strike_voice(n, time_s=k * PHRASE_STEP_S, velocity=PHRASE_STRENGTH)
              for k, n in enumerate(registers)]
    x = render(voices, int(PHRASE_SECONDS * SWEEP_SAMPLE_RATE), sample_rate=SWEEP_SAMPLE_RATE,
               channels=1)
    loud = integrated_loudness(x, SWEEP_SAMPLE_RATE).integrated_lufs
    return VariantResult(
        settings=settings, registers=registers, tuning_reach_cents=reach,
        bars_off_target_cents=off, t60_s=(t60[low], t60[mid], t60[high]),
        tube_gain_db=(gains[0], gains[1], gains[2]),
        evenness_percent=evenness_percent([note_to_midi(n) for n in trend],
                                          [t60[n] for n in trend]),
        loudness_lufs=float(loud), t60_by_note=tuple(t60.items()))


# ---------------------------------------------------------------------------- the sweep
def run_sweep(preset: str | Path, varies: Sequence[Vary | str], *, workers: int | None = None,
              scheduler: str | None = None,
              progress: Callable[[JobResult], None] | None = None) -> SweepReport:
    """Run a design sweep over every combination of the varied settings.

    Parameters
    ----------
    preset : path
        Instrument preset (TOML) with solved ``[bars]``, ``[blank]`` and ``[undercut]``.
    varies : sequence of Vary or str
        Grid axes, e.g. ``["tubes.offset_cents=0,20,40", "sound.mallet=soft,hard"]``.
    workers : int, optional
        Local processes (1: in this process); see :func:`synth.executor.run_jobs`.
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``).
    progress : callable, optional
        Called with each job's result as it completes.

    Returns
    -------
    SweepReport
        One result per variant in grid order; a failed variant has its error
        instead, and the others complete.
    """
    axes = tuple(v if isinstance(v, Vary) else parse_vary(v) for v in varies)
    return run_variants(preset, axes, variant_tables(preset, axes), workers=workers,
                        scheduler=scheduler, progress=progress)


def run_variants(preset: str | Path, varies: Sequence[Vary],
                 tables: list[tuple[tuple, Instrument]],
                 *, workers: int | None = None, scheduler: str | None = None,
                 progress: Callable[[JobResult], None] | None = None) -> SweepReport:
    """Run variants already built by :func:`variant_tables` (see :func:`run_sweep`)."""
    from synth.executor import describe

    jobs = [Job(i, evaluate_variant, (settings, inst))
            for i, (settings, inst) in enumerate(tables)]
    results = run_jobs(jobs, workers=workers, scheduler=scheduler, progress=progress)
    return SweepReport(
        preset=str(preset), varies=tuple(varies), variants=tuple(s for s, _ in tables),
        results=tuple(r.value if r.ok else None for r in results),
        errors=tuple(r.error for r in results),
        engine=describe(workers, scheduler))


# ------------------------------------------------------------------------------ outputs
COLUMNS = ("tuning_reach_cents", "bars_off_target_cents", "t60_low_s", "t60_mid_s",
           "t60_high_s", "tube_gain_low_db", "tube_gain_mid_db", "tube_gain_high_db",
           "evenness_percent", "loudness_lufs")


def variant_row(result: VariantResult) -> dict[str, float | None]:
    """Return the report columns of one variant (:data:`COLUMNS`)."""
    row: dict[str, float | None] = {
        "tuning_reach_cents": result.tuning_reach_cents,
        "bars_off_target_cents": result.bars_off_target_cents}
    for reg, t60 in zip(REGISTERS, result.t60_s, strict=True):
        row[f"t60_{reg}_s"] = t60
    for reg, gain in zip(REGISTERS, result.tube_gain_db, strict=True):
        row[f"tube_gain_{reg}_db"] = gain
    row["evenness_percent"] = result.evenness_percent
    row["loudness_lufs"] = result.loudness_lufs
    return row


_FORMATS = {"cents": ".2f", "_s": ".2f", "_db": ".1f", "percent": ".1f", "lufs": ".1f"}


def _text(column: str, value) -> str:
    if value is None:
        return ""
    fmt = next(f for suffix, f in _FORMATS.items() if column.endswith(suffix))
    return format(value, fmt)


def sweep_rows(report: SweepReport) -> tuple[list[str], list[list[str]]]:
    """Headers and text rows of the table (also the CSV): one row per variant."""
    keys = [v.key for v in report.varies]
    headers = ["variant", *keys, *COLUMNS, "error"]
    rows = []
    for i, (settings, result, error) in enumerate(
            zip(report.variants, report.results, report.errors, strict=True)):
        values = [_setting_text(v) for _, v in settings]
        if result is None:
            cells = [""] * len(COLUMNS)
        else:
            row = variant_row(result)
            cells = [_text(c, row[c]) for c in COLUMNS]
        rows.append([str(i + 1), *values, *cells, error or ""])
    return headers, rows


def _setting_text(value) -> str:
    if isinstance(value, list):
        return ":".join(str(v) for v in value)
    return str(value)


def sweep_csv(report: SweepReport) -> str:
    """Return the sweep table as CSV text."""
    import csv
    import io

    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    headers, rows = sweep_rows(report)
    writer.writerow(headers)
    writer.writerows(rows)
    return buf.getvalue()


def sweep_record(report: SweepReport) -> dict:
    """Return the sweep as a JSON-ready dict (full precision, T60 of every trend note)."""
    variants = []
    for i, (settings, result, error) in enumerate(
            zip(report.variants, report.results, report.errors, strict=True)):
        item = {"variant": i + 1, "settings": dict(settings), "error": error}
        if result is not None:
            item.update(variant_row(result))
            item["registers"] = list(result.registers)
            item["t60_by_note_s"] = dict(result.t60_by_note)
        variants.append(item)
    return {"preset": report.preset, "engine": report.engine,
            "varies": [asdict(v) for v in report.varies], "variants": variants,
            "failed": len(report.failed)}


def pareto_front(x: Sequence[float], y: Sequence[float]) -> list[int]:
    """Return the points no other point beats on both counts: smaller x, larger y."""
    front = []
    for i, (xi, yi) in enumerate(zip(x, y, strict=True)):
        if not any((xj <= xi and yj >= yi) and (xj < xi or yj > yi)
                   for xj, yj in zip(x, y, strict=True)):
            front.append(i)
    return front


def sweep_png(report: SweepReport, title: str) -> bytes:
    """Two panels: evenness against loudness, mid-register T60 against tube gain.

    The Pareto front of the first panel (more even and louder than every other
    variant on at least one count) is joined by a line.
    """
    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    done = [(i, r) for i, r in enumerate(report.results) if r is not None]
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(10, 4.2))
    if done:
        labels = [str(i + 1) for i, _ in done]
        even = [r.evenness_percent for _, r in done]
        loud = [r.loudness_lufs for _, r in done]
        ax1.plot(even, loud, "o", ms=5)
        front = sorted(pareto_front(even, loud), key=lambda k: even[k])
        ax1.plot([even[k] for k in front], [loud[k] for k in front], "-o", color="0.4",
                 lw=1, ms=10, mfc="none", label="Pareto front (more even, louder)")
        t60 = [r.t60_s[1] for _, r in done]
        gain = [r.tube_gain_db[1] if r.tube_gain_db[1] is not None else math.nan
                for _, r in done]
        ax2.plot(gain, t60, "o", ms=5, color="C1")
        for k, label in enumerate(labels):
            ax1.annotate(label, (even[k], loud[k]), fontsize=7, xytext=(3, 3),
                         textcoords="offset points")
            ax2.annotate(label, (gain[k], t60[k]), fontsize=7, xytext=(3, 3),
                         textcoords="offset points")
        ax1.legend(fontsize=8)
    ax1.set_xlabel("T60 spread about the trend across the range, %")
    ax1.set_ylabel("phrase loudness, LUFS (1 Pa = full scale)")
    ax2.set_xlabel("tube gain, middle register, dB")
    ax2.set_ylabel("T60 of the fundamental, middle register, s")
    for ax in (ax1, ax2):
        ax.grid(alpha=0.3)
    fig.suptitle(title, fontsize=10)
    return figure_png(fig)


def failure_lines(report: SweepReport) -> list[str]:
    """One line per failed variant: its number, settings and error."""
    out = []
    for i in report.failed:
        label = ", ".join(f"{k}={_setting_text(v)}" for k, v in report.variants[i])
        out.append(f"variant {i + 1} ({label}): {report.errors[i]}")
    return out

