"""The ``compare`` command: two designs, one passage, level-matched; blind trials and scoring."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated

import typer

from synth.cli import app
from synth.cli.cmd_sound import (
    FormatOpt,
    MotorOpt,
    RateOpt,
    TubesOpt,
    parse_chord,
)
from synth.cli.common import (
    Progress,
    commit_outputs,
    format_table,
    handle_errors,
    info,
    plan_outputs,
    print_json,
    say_correction,
    say_stiffness,
    warn,
)
from synth.reports.compare import MAX_TRIALS

MalletOpt = Annotated[str | None, typer.Option(
    help="Mallet preset (presets/mallets) for every strike that names none; default: each "
         "design's own.")]
ForceOpt = Annotated[bool, typer.Option(
    help="Overwrite the files of an earlier comparison in the same folder.")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print the report (or the score) as JSON.")]

REMINDER = ("Fix the number of trials before listening and score every one of them: stopping "
            "on a lucky run, or adding trials after a poor one, makes the chance figure "
            "meaningless.")


def _cell(x: float, fmt: str) -> str:
    return "-" if x is None or not math.isfinite(x) else format(x, fmt)


def _score(key_path: Path, answers: str | None, answers_file: Path | None,
           json_out: bool) -> None:
    from synth.reports.compare import parse_answers, score_answers
    from synth.settings.comparison import read_answers_file, read_key

    key = read_key(key_path)
    given = (read_answers_file(answers_file, key) if answers_file is not None
             else parse_answers(answers or ""))
    result = score_answers(key.x, given)
    chance = 100.0 * result.p_value
    if json_out:
        print_json({"key": str(key_path), "trials": result.trials, "correct": result.correct,
                    "chance_by_guessing": result.p_value,
                    "test": "exact one-sided binomial against guessing (1/2 per trial)",
                    "per_trial": [{"trial": k, "x": x, "answer": a, "right": r}
                                  for k, (x, a, r) in enumerate(
                                      zip(result.key, result.answers, result.right,
                                          strict=True), start=1)],
                    "reminder": REMINDER})
        return
    rows = [[k, x, a, "yes" if r else "no"]
            for k, (x, a, r) in enumerate(zip(result.key, result.answers, result.right,
                                              strict=True), start=1)]
    typer.echo(format_table(["trial", "X was", "answer", "right"], rows, align="rlll",
                            title=f"blind trials of {key_path}"))
    typer.echo("")
    typer.echo(f"trials answered correctly: {result.correct} of {result.trials}; chance of "
               f"doing this well by guessing: {_percent(chance)}")
    if result.p_value <= 0.05:
        typer.echo("guessing does this well at most 1 time in 20: the listener told the "
                   "designs apart")
    else:
        typer.echo("guessing does this well more than 1 time in 20: no difference shown, which "
                   "does not prove there is none")
    typer.echo(REMINDER)


def _percent(x: float) -> str:
    """Format a percentage with two significant figures (3.8 %, 0.011 %, 50 %)."""
    if x >= 10.0:
        return f"{x:.0f} %"
    return f"{float(f'{x:.2g}'):g} %"


@app.command("compare")
@handle_errors
def compare_command(
    design_a: Annotated[Path | None, typer.Argument(
        help="Design A: an instrument preset (TOML) with solved bars; the reference.",
        show_default=False)] = None,
    design_b: Annotated[Path | None, typer.Argument(
        help="Design B: the option to compare; it is levelled to A's loudness.",
        show_default=False)] = None,
    notes: Annotated[str | None, typer.Option(
        help='Play these notes one after the other, e.g. "F3 A4 C5" (a strength per note as '
             '"A4:0.8"; default: a short phrase across the range, then a chord).')] = None,
    events: Annotated[Path | None, typer.Option(
        help="Play an event file instead (TOML event list or .mid), as `barwright render` "
             "reads it.")] = None,
    tail: Annotated[float, typer.Option(
        min=0.0, max=120.0, metavar="seconds",
        help="Seconds of ringing after the last note (event files with their own length_s "
             "keep it).")] = 3.0,
    gap: Annotated[float, typer.Option(
        min=0.05, max=10.0, metavar="seconds",
        help="Seconds of silence between the parts of AB.wav and of each trial.")] = 0.5,
    out: Annotated[Path | None, typer.Option(
        help="Folder for the files (default renders/compare-<A>-vs-<B>/).")] = None,
    blind: Annotated[int | None, typer.Option(
        min=1, max=MAX_TRIALS,
        help="Also write this many blind trials blind-NN.wav (A, gap, B, gap, then X: A or B "
             "at random; the ABX method) and their answer key, blind-key.toml. Fix the number "
             "before listening.", show_default=False)
    ] = None,
    seed: Annotated[int | None, typer.Option(
        min=0, max=2**32 - 1,
        help="Seed of the trial order (default: a fresh random one, kept in the key).",
        show_default=False)] = None,
    mallet: MalletOpt = None,
    no_tubes: TubesOpt = False,
    bare_b: Annotated[bool, typer.Option(
        "--bare-b", help="Render design B without its tubes (A keeps them): with the same "
                         "preset twice and --match gain, hear what the tubes add.")] = False,
    motor_rate: MotorOpt = None,
    match: Annotated[str, typer.Option(
        metavar="loudness|gain",
        help="loudness: B gets the gain that brings it to A's loudness (BS.1770-4); gain: "
             "both get one gain, so a louder design stays louder.")] = "loudness",
    band_range: Annotated[float, typer.Option(
        min=3.0, max=120.0, metavar="dB",
        help="Give spectral differences only in octave bands within this many dB of the "
             "loudest band (quieter bands are masked by it).")] = 30.0,
    sample_rate: RateOpt = 48000,
    fmt: FormatOpt = "pcm24",
    force: ForceOpt = False,
    json_out: JsonOpt = False,
    page: Annotated[bool, typer.Option(
        "--page", help="Also write listen.html: players, the differences in plain words, the "
                       "plot and (with --blind) a form per trial whose answers the listener "
                       "saves to a file. Opens from disk with the WAVs beside it.")] = False,
    score: Annotated[Path | None, typer.Option(
        help="Score a listener: the blind-key.toml of a blind run (with --answers or "
             "--answers-file).", show_default=False)] = None,
    answers: Annotated[str | None, typer.Option(
        help='The listener\'s answers with --score, one A or B per trial in order, e.g. '
             '"A,B,B,A".', show_default=False)] = None,
    answers_file: Annotated[Path | None, typer.Option(
        help="The answers file saved by the listening page, with --score.",
        show_default=False)] = None,
) -> None:
    """Hear two designs side by side: the same passage, level-matched, and blind ABX trials.

    Writes A.wav, B.wav and AB.wav (A, gap, B, gap, A, gap, B) at equal BS.1770-4
    loudness (or one gain, --match gain), both under -1 dBTP, and prints the
    differences per note and over time; --page adds a listening page. With
    --score KEY --answers "..." (or --answers-file FILE) it scores a listener.
    """
    from synth.io import check_sample_format
    from synth.reports import compare as cmp

    if score is not None or answers is not None or answers_file is not None:
        key = cmp.check_score_options(score, answers, answers_file, design_a, design_b)
        _score(key, answers, answers_file, json_out)
        return
    for w in cmp.check_compare_options(design_a, design_b, notes, events, blind, seed):
        warn(w)
    assert design_a is not None and design_b is not None
    check_sample_format(fmt)
    sequence = parse_chord(notes, "--notes") if notes is not None else None  # before reading files
    cmp.check_match(match)
    cmp.check_band_range(band_range)
    va, vb, same = cmp.design_voicers(design_a, design_b, sample_rate=sample_rate,
                                      no_tubes=no_tubes, bare_b=bare_b, motor_rate=motor_rate)
    if same:
        warn(f"A and B are the same file ({design_a}): the two renders are identical, so any "
             "difference heard is imagined and a blind test can only score by chance")
    passage = cmp.choose_passage(events, sequence, va, vb, tail_s=tail)
    gap_samples = cmp.gap_samples(gap, sample_rate)  # checks the range before any work
    directory = out or Path("renders") / f"compare-{design_a.stem}-vs-{design_b.stem}"
    _plan_files(directory, blind, page=page, force=force)
    comp = _compare(va, vb, passage, mallet=mallet, match=match, band_range=band_range)
    names = (va.instrument.name, vb.instrument.name)
    files = (str(design_a), str(design_b))
    settings = {"command": "compare", "design_a": files[0], "design_b": files[1],
                "name_a": names[0], "name_b": names[1], "sample_rate_hz": sample_rate,
                "channels": 2,
                "events": None if events is None else str(events), "notes": notes}
    out_files = cmp.write_comparison(comp, directory, names=names, files=files,
                                     settings=settings, blind=blind, seed=seed, gap=gap,
                                     gap_s=gap_samples / sample_rate, fmt=fmt, force=force,
                                     page=page)
    commit_outputs()
    _show_outcome(comp, out_files, directory, names=names, files=files, blind=blind,
                  page=page, gap_s=gap_samples / sample_rate, json_out=json_out,
                  stiffness=(va.stiffness, vb.stiffness))


def _plan_files(directory: Path, blind: int | None, *, page: bool, force: bool) -> None:
    from synth.reports import compare as cmp

    planned = cmp.planned_files(directory, blind, page=page)
    plan_outputs(planned, force=force)
    stale = sorted(p.name for p in directory.glob("blind-*.wav") if p not in set(planned))
    if stale:
        warn(f"{directory} also holds {len(stale)} trial file(s) of an earlier run "
             f"({stale[0]}...); they are not part of this key")


def _compare(va, vb, passage, *, mallet: str | None, match: str, band_range: float):
    from synth.reports import compare as cmp

    with Progress(5, "comparing") as step:
        last = [0]

        def progress(done, total):
            step(done - last[0])
            last[0] = done

        return cmp.compare_designs(va, vb, passage, mallet=mallet, match=match,
                                   band_range_db=band_range, progress=progress)


def _show_outcome(comp, out_files, directory: Path, *, names, files, blind: int | None,
                  page: bool, gap_s: float, json_out: bool, stiffness=(None, None)) -> None:
    from synth.output import HEARING_CAUTION

    trials, key_path, page_path = out_files.trials, out_files.key_path, out_files.page_path
    png, report = out_files.png, out_files.report
    if json_out:
        print_json({**out_files.record, "out_dir": str(directory),
                    "files": [str(p) for p in out_files.written] + [str(png), str(report)],
                    "gap_s": gap_s,
                    "page": None if page_path is None else str(page_path),
                    "blind": None if blind is None else {
                        "trials": blind, "files": [str(p) for p in trials],
                        "key": str(key_path)}})
    else:
        _print_report(comp, names, files)
        for letter, s in zip("AB", stiffness, strict=True):
            say_stiffness(s, prefix=f"design {letter}: ")
        typer.echo("")
        typer.echo(f"wrote {directory}/: A.wav, B.wav, AB.wav (A, gap, B, gap, A, gap, B; "
                   f"gap {gap_s:g} s), a .json sidecar beside each, "
                   f"{png.name}, {report.name}")
        if blind is not None and key_path is not None:
            typer.echo(f"blind: {blind} trials {trials[0].name}..{trials[-1].name} (A, gap, B, "
                       f"gap, X) and their answer key {key_path.name}")
        if page_path is not None:
            typer.echo(f"listening page: {page_path} (open it in a browser; keep it with the "
                       "WAVs)")
    if blind is not None:
        info(f"Give the listener only the trial files{' and the page' if page else ''}; keep "
             f"{key_path} out of sight. Score with: barwright compare --score {key_path} "
             + ("--answers-file FILE (the file the page saves)" if page
                else "--answers \"A,B,...\""))
    for w in comp.warnings:
        warn(w)
    info(HEARING_CAUTION)


def _design_rows(comp, names, files) -> list[list[str]]:
    rows = []
    for d, nm, f, st in zip(("A", "B"), names, files, comp.designs, strict=True):
        rate = st.get("motor_rate_rev_per_s", 0.0)
        rows.append([d, f"{nm} ({f})", "on" if st.get("tubes") else "off",
                     f"{rate:g} rev/s" if rate > 0 else "stopped", str(st.get("mallet", "-")),
                     _cell(st.get("output_gain_db_re_1_per_pa", math.nan), "+.2f")])
    return rows


def _print_report(comp, names, files) -> None:
    from synth.defaults import RENDER_DEFAULTS
    from synth.reports.compare import FADE_S

    lv = comp.levels
    typer.echo(format_table(["", "design", "tubes", "motor", "mallet", "gain dB re 1/Pa"],
                            _design_rows(comp, names, files), align="llllll",
                            title="what each design was rendered with"))
    for d, st in zip(("A", "B"), comp.designs, strict=True):
        say_correction(st.get("solid_correction"), prefix=f"{d}: ")
    typer.echo(f"passage: {comp.passage.label}")
    typer.echo(f"render length {comp.length_s:.2f} s per design at {comp.sample_rate} Hz, "
               "stereo, onsets aligned (integrated loudness of ringing notes depends on the "
               "length)")
    typer.echo(f"end: both cut at {comp.length_s:.2f} s with a {FADE_S * 1000:.0f} ms fade; "
               f"last 10 ms below {RENDER_DEFAULTS.end_level_db:g} dB re peak")
    typer.echo("")
    after = ("as written (B matched to A)" if comp.match == "loudness"
             else "as written (one gain on both)")
    rows = [
        ["before matching (one gain on both)", _cell(lv.loudness_before_lufs[0], ".2f"),
         _cell(lv.loudness_before_lufs[1], ".2f"), _cell(lv.loudness_difference_before_lu, "+.2f"),
         _cell(lv.true_peak_before_dbtp[0], ".2f"), _cell(lv.true_peak_before_dbtp[1], ".2f")],
        [after, _cell(lv.loudness_after_lufs[0], ".2f"),
         _cell(lv.loudness_after_lufs[1], ".2f"), _cell(lv.loudness_difference_after_lu, "+.2f"),
         _cell(lv.true_peak_after_dbtp[0], ".2f"), _cell(lv.true_peak_after_dbtp[1], ".2f")],
    ]
    typer.echo(format_table(["level", "A LUFS", "B LUFS", "B-A LU", "A dBTP", "B dBTP"], rows,
                            title="loudness (ITU-R BS.1770-4) and true peak"))
    typer.echo(f"gain given to B: {lv.gain_b_db:+.2f} dB; the louder true peak sits at "
               f"{lv.ceiling_dbtp:+.1f} dBTP")
    typer.echo("")
    rows = [[d.note, _cell(d.fundamental_hz[0], ".2f"), _cell(d.fundamental_hz[1], ".2f"),
             _cell(d.fundamental_cents, "+.2f"), _cell(d.partial_cents[0], "+.2f"),
             _cell(d.partial_cents[1], "+.2f"), _cell(d.t60_s[0], ".2f"),
             _cell(d.t60_s[1], ".2f"), _cell(d.t60_ratio, ".2f")] for d in comp.notes]
    tubed = any(c for d in comp.notes for c in d.coupled)
    typer.echo(format_table(
        ["note", "f1 A Hz", "f1 B Hz", "f1 B-A c", "p2 B-A c", "p3 B-A c", "T60 A s", "T60 B s",
         "T60 B/A"], rows,
        title="per note (from the models, each with its own tubes and motor; f1 and its T60 "
              "are the bar-tube pair's bar-like mode where tubed)"
        if tubed else "per note (from the models; bare bars)"))
    typer.echo("")
    rows = []
    for w in comp.balance:
        span = f"{w.window_s[0]:g}-{w.window_s[1]:g}"
        rows.append([span, "A dBFS"] + [_cell(x, ".0f") for x in w.level_a_db])
        rows.append(["", "B dBFS"] + [_cell(x, ".0f") for x in w.level_b_db])
        rows.append(["", "B-A dB"] + [_cell(x, "+.1f") for x in w.difference_db])
    range_db = comp.balance[0].range_db if comp.balance else 30.0
    typer.echo(format_table(["window s", ""] + [lab for lab, _, _, _ in comp.bands], rows,
                            title="spectral balance as written: octave-band level, dB re full "
                                  "scale, and B - A (windows from the start of the render)"))
    typer.echo(f"B - A is given only in bands within {range_db:g} dB of the window's loudest "
               "band (--band-range); about 1 dB is the smallest level change most listeners "
               "notice")
