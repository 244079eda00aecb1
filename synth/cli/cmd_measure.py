"""``measure``: partials of a recorded strike, and loss calibration of a preset from it.

The command, its checks and the calibration file format are described in
:mod:`synth.reports.measure`.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.common import (
    EXIT_MISSED,
    commit_outputs,
    format_table,
    handle_errors,
    missed,
    plan_outputs,
    print_json,
    warn,
)
from synth.errors import ConfigError, ModelError, SynthError


def _num(value, fmt: str) -> str:
    if value is None:
        return "-"
    if isinstance(value, float) and not math.isfinite(value):
        return "inf"
    return format(value, fmt)


def _partials_table(m) -> str:
    named = m.note is not None
    headers = ["freq Hz", "note", "cents"]
    if named:
        headers += ["ratio", f"cents re {m.note}"]
    headers += ["Q", "Q +-%", "T60 s", "level dB", "decay from"]
    rows = []
    for p in m.partials:
        row = [f"{p.frequency_hz:.2f}", p.note, f"{p.cents:+.1f}"]
        if named:
            row += [_num(p.ratio, ".4f"), _num(p.cents_from_note, "+.1f")]
        se = "-" if not math.isfinite(p.q_rel_se) else f"{100 * p.q_rel_se:.1f}"
        row += [_num(p.q, ".0f"), se, _num(p.t60_s, ".2f"), f"{p.level_db:.1f}",
                p.decay_method + (", beats" if p.beating else "")]
        rows.append(row)
    align = "rlr" + ("rr" if named else "") + "rrrrl"
    return format_table(headers, rows, align=align)


def _fit_tables(fit) -> str:
    rows = [(m.label, f"{m.model_hz:.2f}", f"{m.measured_hz:.2f}", f"{m.offset_cents:+.1f}",
             f"{m.measured_q:.0f}", f"{m.q_before:.0f}", f"{m.q_after:.0f}",
             f"{100 * m.error_before:+.1f}", f"{100 * m.error_after:+.1f}",
             _num(m.override_q, ".0f"))
            for m in fit.modes]
    out = [format_table(
        ["mode", "model Hz", "measured Hz", "cents", "measured Q", "Q before", "Q after",
         "error before %", "error after %", "override Q"], rows, align="lrrrrrrrrr",
        title=f"loss calibration of {fit.note} (tube "
              + ("on: vertical 1 is the coupled bar-like pole)" if fit.tubes else "off)"))]
    frows = []
    for t, c in fit.factors.items():
        if t in fit.fitted_terms:
            how = "fitted"
            sens = f"{fit.sensitivity.get(t, math.nan):.1f}"
        elif t in fit.held_terms:
            how, sens = "not identifiable: preset's value", "-"
        else:
            how, sens = "held: preset's value", "-"
        if t == "tube" and not fit.tubes:
            how = "no tube in this fit"
        frows.append((t, f"{c:.4f}", how, sens))
    out.append("")
    out.append(format_table(["term", "factor", "", "% per 1 % Q error"], frows,
                            align="lrlr", title="calibration factors"))
    if math.isfinite(fit.condition_number):
        out.append(f"condition number of the fit (columns scaled to unit length): "
                   f"{fit.condition_number:.1f}")
    for u in fit.unmatched:
        out.append(f"not matched: {u}")
    return "\n".join(out)


@app.command("measure")
@handle_errors
def measure_command(
    recording: Annotated[Path, typer.Argument(
        help="Recording of one struck bar (WAV, FLAC, AIFF...); several channels are "
             "averaged unless --channel picks one. A folder: every recording in it, the "
             "note of each from its file name.", show_default=False)],
    note: Annotated[str | None, typer.Option(
        help="The note the bar is meant to be (e.g. A4): adds each partial's ratio to the "
             "fundamental and its interval above the note in cents.")] = None,
    reference_hz: Annotated[float | None, typer.Option(
        min=380.0, max=480.0, metavar="Hz",
        help="A4 for note names (default: the reference_pitch_hz of --preset or "
             "--calibrate, else 440 Hz per ISO 16; the header says which).")] = None,
    preset: Annotated[Path | None, typer.Option(
        "--preset", help="Instrument preset the bar belongs to: its reference pitch names "
                         "the notes (and --note is checked against its range).",
        show_default=False)] = None,
    max_partials: Annotated[int, typer.Option(
        min=1, max=64, help="Report at most this many partials, the strongest.")] = 12,
    channel: Annotated[int | None, typer.Option(
        min=1, max=64, help="Analyse this channel only (1 = first); default: the mean of all.")
    ] = None,
    calibrate: Annotated[Path | None, typer.Option(
        "--calibrate", help="Instrument preset whose loss factors, effective Young's modulus "
                            "and vertical 1-3 factors to fit to this recording of --note; "
                            "writes the calibration file --out.",
        show_default=False)] = None,
    out: Annotated[Path | None, typer.Option(
        help="Calibration file to write (TOML), with --calibrate; an existing calibration "
             "file (e.g. from tubecal) gets the [damping] and [stiffness] tables added.")
    ] = None,
    force: Annotated[bool, typer.Option(
        help="Replace the [damping] and [stiffness] tables of --out if it holds them (a "
             "[tubes] table from tubecal is kept either way); with a folder, overwrite "
             "--plot.")] = False,
    keep_overrides: Annotated[bool, typer.Option(
        "--keep-overrides", help="When no loss factor is identifiable from the recording, "
                                 "still write --out with per-mode Q overrides for the note "
                                 "(the exit code is 3 either way).")] = False,
    terms: Annotated[str | None, typer.Option(
        help="Loss terms to fit, comma-separated, from internal, thermoelastic, radiation, "
             "cords, air, tube (default: internal,cords,radiation, plus tube when the "
             "preset has tubes).")] = None,
    tolerance: Annotated[float, typer.Option(
        min=0.001, max=0.19, help="Largest relative frequency difference between a model "
                                  "mode and the measured partial matched to it.")] = 0.03,
    no_tubes: Annotated[bool, typer.Option(
        "--no-tubes", help="The recording was made with the bar alone (no tube under it).")
    ] = False,
    plot: Annotated[Path | None, typer.Option(
        help="With a folder: PNG of cents off target and T60 across the range (default "
             "renders/<folder>/measure-range.png).", show_default=False)] = None,
    workers: Annotated[int | None, typer.Option(
        min=1, max=256, help="With a folder: local worker processes measuring the "
                             "recordings (default: every core; one recording takes one).")
    ] = None,
    json_out: Annotated[bool, typer.Option("--json", help="Print JSON on stdout.")] = False,
) -> None:
    """Measure a recorded strike: partials with note, cents, Q, T60 and level.

    RECORDING may be a folder of recordings, one per bar, each named by its note
    (A4.wav, bar-12-F#4.flac): one table and one plot across the range
    (--preset gives the reference pitch and the target ratios).

    With --calibrate PRESET --note N --out FILE it also fits the preset's loss
    factors so that the model's Q of vertical modes 1-3 and torsional mode 1
    match the recording, prints the model's error before and after, and writes
    the factors to a calibration file that the preset names in its damping
    table (calibration_file = "..."). Record with the motor stopped. When no
    factor is identifiable the command says so first and exits with code 3; it
    then writes the file (per-mode Q overrides) only with --keep-overrides.

    From vertical partials 1-3 it also fits the effective Young's modulus (one
    scale on E, least squares in log-frequency) and what is left per partial
    after it; both multiply on top of the preset's 3-D correction table, go to
    the file's [stiffness] table, and `barwright tune` re-tunes the range with
    them. An existing calibration file (from tubecal) gets the tables added; a
    table it already holds is replaced only with --force.
    """
    from synth.reports import measure as rm

    if recording.is_dir():
        _measure_folder(recording, preset=preset, reference_hz=reference_hz,
                        max_partials=max_partials, channel=channel, plot=plot, force=force,
                        json_out=json_out, workers=workers,
                        refused=[o for o, v in (("--note", note), ("--calibrate", calibrate),
                                                ("--out", out), ("--terms", terms))
                                 if v is not None])
        return
    target = rm.check_measure_options(plot=plot, note=note, calibrate=calibrate, out=out,
                                      terms=terms, no_tubes=no_tubes,
                                      keep_overrides=keep_overrides, force=force)
    if calibrate is not None:
        plan_outputs([(out, "calibration file")], force=force or target is not None)
    instrument, note = rm.measure_instrument(calibrate, preset, note)
    ref, ref_from = rm.reference_pitch(reference_hz, instrument, preset or calibrate)
    measurement = rm.measure_file(recording, note=note, reference_hz=ref,
                                  max_partials=max_partials, channel=channel)
    fit = path = rel = None
    if calibrate is not None:
        fit, path, rel = _calibrate(measurement, instrument, note, calibrate=calibrate,
                                    out=out, terms=terms, no_tubes=no_tubes,
                                    tolerance=tolerance, keep_overrides=keep_overrides,
                                    target=target, force=force)
    for w in measurement.warnings + (fit.warnings if fit is not None else ()):
        warn(w)
    if json_out:
        doc = measurement.to_dict()
        doc["reference_pitch_from"] = ref_from
        if fit is not None:
            doc["calibration"] = {**fit.to_dict(), "file": path and str(path),
                                  "calibration_file": rel}
        print_json(doc)
    else:
        _print_measurement(measurement, note, ref, ref_from, fit, path, rel)
    _exit_if_missed(fit)


def _calibrate(measurement, instrument, note, *, calibrate: Path, out, terms, no_tubes,
               tolerance, keep_overrides, target, force):
    """Fit the calibration, say first when it missed, and write it; (fit, path, rel)."""
    from synth.reports.measure import calibrate as fit_calibration
    from synth.reports.measure import calibration_terms, write_calibration

    path = rel = None
    if instrument is None or note is None:  # both set above with --calibrate
        raise ModelError("--calibrate: no instrument or note to calibrate")
    wanted = calibration_terms(terms)
    try:
        fit = fit_calibration(measurement, instrument, note, terms=wanted,
                              tubes=not no_tubes, tolerance=tolerance)
    except SynthError:
        for w in measurement.warnings:
            warn(w)
        raise
    if fit.fallback:  # first line on stderr: the job ran but missed what was asked
        missed("no loss factor is identifiable from this recording; " + (
            f"wrote per-mode Q overrides to {out} anyway (--keep-overrides)"
            if keep_overrides else "nothing written (use --keep-overrides to write "
            "per-mode Q overrides instead)"))
    if keep_overrides or not fit.fallback:
        path = write_calibration(out, fit, target=target, force=force)
        commit_outputs()  # before a non-zero exit, which discards uncommitted files
        rel = os.path.relpath(path, Path(calibrate).parent)
    return fit, path, rel


def _print_measurement(measurement, note, ref, ref_from, fit, path, rel) -> None:
    ch = ("mono" if measurement.n_channels == 1 else
          f"channel {measurement.channel} of {measurement.n_channels}" if measurement.channel
          else f"{measurement.n_channels} channels (mean)")
    typer.echo(f"{measurement.recording}: {measurement.sample_rate_hz:g} Hz, {ch}, "
               f"{measurement.duration_s:.2f} s; strike at {measurement.onset_s:.3f} s; "
               f"A4 = {ref:g} Hz ({ref_from})")
    typer.echo(_partials_table(measurement))
    if note is not None:
        if measurement.fundamental_hz is not None:
            from synth.pitch import cents

            off = float(cents(measurement.fundamental_hz, measurement.note_hz))
            typer.echo(f"fundamental {measurement.fundamental_hz:.2f} Hz: {off:+.1f} cents "
                       f"from {note} ({measurement.note_hz:.2f} Hz)")
    typer.echo("Q = pi f tau, T60 = tau ln 1000 (tau: amplitude time constant); level: "
               "amplitude at the strike, dB re full scale")
    if fit is None:
        return
    typer.echo("")
    typer.echo(_fit_tables(fit))
    if fit.stiffness is not None:
        typer.echo("")
        typer.echo(_stiffness_table(fit))
    if fit.coupling_calibration is not None:
        typer.echo(f"renders take the tube's effect from the coupled bar-tube pair, not from "
                   f"factors.tube: [tubes] coupling_calibration = "
                   f"{fit.coupling_calibration:.4f} gives them the fitted Q of vertical 1")
    if path is not None:
        typer.echo(f"wrote {path}; use it from the preset's [damping] table: "
                   f'calibration_file = "{rel}"')


def _stiffness_table(fit) -> str:
    st = fit.stiffness
    rows = [(f"vertical {n + 1}", f"{st.model_hz[n]:.2f}", f"{st.measured_hz[n]:.2f}",
             f"{st.tolerance_hz[n]:.3f}", f"{st.factors[n]:.5f}", f"{st.residual_cents[n]:+.2f}")
            for n in range(len(st.factors))]
    table = format_table(["partial", "model Hz", "measured Hz", "+- Hz", "factor after E",
                          "residual cents"], rows, align="lrrrrr",
                         title="stiffness calibration (model: 1-D x the preset's 3-D table "
                               "where it has one)")
    e = fit.youngs_modulus_pa * st.youngs_scale
    return (f"{table}\neffective Young's modulus: E x {st.youngs_scale:.5f} = {e / 1e9:.3f} GPa "
            f"(+-{100 * st.scale_uncertainty:.3f} % from the frequency resolution); residual "
            f"rms {st.rms_residual_cents:.2f} cents; `barwright tune` re-tunes the range with "
            "them")


def _exit_if_missed(fit) -> None:
    if fit is not None and fit.fallback:
        raise typer.Exit(code=EXIT_MISSED)


def _measure_folder(folder: Path, *, preset, reference_hz, max_partials, channel, plot, force,
                    json_out, refused, workers) -> None:
    """One table and one plot across the range from a folder of recordings."""
    from synth.cli.common import default_output
    from synth.pitch import DEFAULT_REFERENCE_HZ, cents
    from synth.reports.measure import measure_folder, range_png

    if refused:
        raise ConfigError("applies to one recording, not to a folder", source=refused[0])
    ratios: tuple[float, ...] = (1.0, 4.0, 10.08)
    ref = reference_hz or DEFAULT_REFERENCE_HZ
    ref_from = "--reference-hz" if reference_hz else "default, ISO 16"
    if preset is not None:
        from synth.settings.instrument import load_instrument

        inst = load_instrument(preset)
        ratios = tuple(inst.target_ratios[:3])
        if not reference_hz:
            ref, ref_from = inst.reference_pitch_hz, preset.name
    png = plot or default_output(folder, "measure-range.png")
    plan_outputs([(png, "plot")], force=force)
    rows, skipped = measure_folder(folder, reference_hz=ref, ratios=ratios,
                                   max_partials=max_partials, channel=channel,
                                   workers=workers)
    if not rows:
        raise ConfigError(f"= {folder}: no recording named by its note in it"
                          + (f" ({len(skipped)} skipped)" if skipped else ""),
                          source="RECORDING")
    failed = [r for r in rows if r.error is not None]
    if failed:  # first line on stderr: the job ran but missed part of what was asked
        missed(f"{len(failed)} of {len(rows)} recordings could not be measured: "
               + "; ".join(f"{Path(r.path).name}: {r.error}" for r in failed))
    for sk in skipped:
        warn(f"skipped {sk}")
    from synth import io

    io.write_bytes(png, range_png(rows, ratios, title=f"{folder.name}: A4 = {ref:g} Hz"),
                   force=force)
    commit_outputs()
    if json_out:
        print_json({"folder": str(folder), "reference_pitch_hz": ref,
                    "reference_pitch_from": ref_from, "ratios": list(ratios),
                    "plot": str(png), "notes": [r.to_dict(ratios) for r in rows],
                    "skipped": skipped})
    else:
        headers = ["note", "file", "f1 Hz", "cents"]
        for k, ratio in enumerate(ratios[1:], start=2):
            headers += [f"p{k} cents re x{ratio:g}"]
        headers += [f"T60 p{k + 1} s" for k in range(len(ratios))]
        trows = []
        for r in rows:
            m = r.measurement
            if m is None or m.fundamental_hz is None:
                why = r.error or "no fundamental near the note"
                trows.append([r.note, Path(r.path).name, "-", "refused" if r.error else why]
                             + ["-"] * (2 * len(ratios) - 1))
                continue
            row = [r.note, Path(r.path).name, f"{m.fundamental_hz:.2f}",
                   f"{float(cents(m.fundamental_hz, m.note_hz)):+.1f}"]
            parts = [r.partial(x) for x in ratios]
            for x, p in zip(ratios[1:], parts[1:], strict=True):
                row.append("-" if p is None else
                           f"{float(cents(p.frequency_hz, x * m.fundamental_hz)):+.1f}")
            row += ["-" if p is None else _num(p.t60_s, ".2f") for p in parts]
            trows.append(row)
        typer.echo(f"{folder}: {len(rows)} recordings; A4 = {ref:g} Hz ({ref_from})")
        typer.echo(format_table(headers, trows, align="ll" + "r" * (len(headers) - 2)))
        typer.echo("cents: fundamental off its note; pN cents: partial N off N's ratio times "
                   "the measured fundamental")
        typer.echo(f"wrote {png}")
    if failed:
        raise typer.Exit(code=EXIT_MISSED)
