"""The listening page of a comparison: one HTML file a client opens from disk.

:func:`listening_page` returns the text of ``listen.html``: players for A, B
and the alternating file, the plot of differences (embedded as a PNG data
URI), the report in plain words (:func:`plain_report`), and, when blind trials
were written, one form per trial.  The listener plays the trial file, or only
its A, B or unknown X part, and answers A or B; answers stay in the browser
(``localStorage``, keyed by the run) and are saved as a small JSON file that
``barwright compare --score KEY --answers-file FILE`` scores.  The page holds
no key: which design X is stays in the key file.

The WAVs are not embedded: the page plays the files beside it in the same
folder (relative links), so it opens from the file system with no server and
no network.  Every player starts at volume 0.3 and nothing plays until the
listener presses play.

Style sheet and script live in ``synth/reports/page_assets/`` and are copied
into the page, so the one file is complete.
"""

from __future__ import annotations

import base64
import html
import json
import math
import re
from collections.abc import Sequence
from importlib import resources
from typing import Any, Final

from synth.reports.compare import DESIGNS, JND_LEVEL_DB, KEY_FILE, Comparison
from synth.settings.comparison import ANSWERS_FORMAT

START_VOLUME: Final[float] = 0.3
"""Volume every player starts at (0..1); the listener raises it."""

PITCH_HEARD_CENTS: Final[float] = 5.0
"""A pitch difference below this many cents is described as hard to hear
[common practice, no source]."""

SUSTAIN_HEARD_RATIO: Final[float] = 1.1
"""A T60 ratio within this factor either way is described as about equal
[common practice, no source]."""


def _asset(name: str) -> str:
    return resources.files("synth.reports").joinpath("page_assets", name).read_text("utf-8")


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _fmt(x: float | None, spec: str) -> str:
    return "-" if x is None or not math.isfinite(x) else format(x, spec)


def _louder(db: float) -> str:
    if abs(db) < 0.05:
        return "as loud as"
    return f"{abs(db):.1f} dB {'louder' if db > 0 else 'quieter'} than"


def plain_report(comp: Comparison, names: tuple[str, str]) -> list[str]:
    """Return the comparison in short sentences a client reads (one string per paragraph).

    Parameters
    ----------
    comp : Comparison
    names : (str, str)
        Names of designs A and B.

    Returns
    -------
    list of str
        Plain text (escape it before putting it into HTML).
    """
    lv = comp.levels
    out = [f"Both designs play the same passage ({comp.passage.label}), "
           f"{comp.length_s:.1f} s each, struck alike. A is {names[0]}; B is {names[1]}."]
    diff = lv.loudness_difference_before_lu
    if comp.match == "loudness":
        out.append(f"Played with one and the same setting, B is {_louder(diff)} A. For "
                   f"listening, B has been turned {'down' if lv.gain_b_db < 0 else 'up'} by "
                   f"{abs(lv.gain_b_db):.1f} dB so both sound equally loud (ITU-R BS.1770-4 "
                   "loudness): what you hear between them is tone and ring, not level.")
    else:
        out.append(f"Both files keep one and the same gain, so loudness is part of the "
                   f"difference: B is {_louder(diff)} A, as it would be in the room.")
    if comp.notes:
        worst = max(comp.notes, key=lambda d: abs(d.fundamental_cents)
                    if math.isfinite(d.fundamental_cents) else -1.0)
        c = worst.fundamental_cents
        if math.isfinite(c) and abs(c) >= PITCH_HEARD_CENTS:
            out.append(f"Pitch: B's {worst.note} sounds {abs(c):.0f} cents "
                       f"{'higher' if c > 0 else 'lower'} than A's (the largest difference; "
                       "100 cents make a semitone).")
        elif math.isfinite(c):
            out.append(f"Pitch: every note of B is within {max(abs(c), 0.01):.2f} cents of A's, "
                       "too little to hear (100 cents make a semitone).")
        ratios = [d.t60_ratio for d in comp.notes if math.isfinite(d.t60_ratio)]
        if ratios:
            lo, hi = min(ratios), max(ratios)
            if hi <= SUSTAIN_HEARD_RATIO and lo >= 1.0 / SUSTAIN_HEARD_RATIO:
                out.append("Ring: each note of B fades about as long as the same note of A.")
            else:
                d = max(comp.notes, key=lambda d: abs(math.log(d.t60_ratio))
                        if math.isfinite(d.t60_ratio) and d.t60_ratio > 0 else -1.0)
                longer = d.t60_ratio > 1.0
                span = (f"{lo:.2f} times" if hi - lo < 0.005
                        else f"between {lo:.2f} and {hi:.2f} times")
                out.append(f"Ring: B's notes ring {'longer' if longer else 'shorter'} "
                           f"({span} as long as A's). {d.note} "
                           f"takes {d.t60_s[1]:.0f} s to fade by 60 dB in B against "
                           f"{d.t60_s[0]:.0f} s in A.")
    diffs = [(abs(v), v, lab, w.window_s) for w in comp.balance
             for v, (lab, *_rest) in zip(w.difference_db, comp.bands, strict=True)
             if math.isfinite(v)]
    rng = comp.balance[0].range_db if comp.balance else 30.0
    if diffs:
        _, v, lab, (t0, t1) = max(diffs)
        if abs(v) < JND_LEVEL_DB:
            out.append(f"Tone: in the bands that carry the sound (within {rng:g} dB of the "
                       f"loudest), B and A differ by at most {abs(v):.1f} dB, below the "
                       f"{JND_LEVEL_DB:g} dB or so most listeners notice.")
        else:
            out.append(f"Tone: B is {abs(v):.1f} dB {'stronger' if v > 0 else 'weaker'} than A "
                       f"in the {lab} Hz octave between {t0:g} and {t1:g} s (the largest "
                       f"difference among bands within {rng:g} dB of the loudest; about "
                       f"{JND_LEVEL_DB:g} dB is noticeable).")
    return out


def _design_table(comp: Comparison, names: tuple[str, str]) -> str:
    rows = []
    for d, nm, st in zip(DESIGNS, names, comp.designs, strict=True):
        rate = float(st.get("motor_rate_rev_per_s", 0.0) or 0.0)
        rows.append("<tr><th scope=\"row\">" + _e(d) + "</th><td>" + _e(nm) + "</td><td>"
                    + ("on" if st.get("tubes") else "off") + "</td><td>"
                    + (_e(f"{rate:g} turns per second") if rate > 0 else "stopped")
                    + "</td><td>" + _e(st.get("mallet", "-")) + "</td></tr>")
    return ("<table><caption>What each design was played with</caption><thead><tr>"
            "<th scope=\"col\">design</th><th scope=\"col\">name</th><th scope=\"col\">tubes"
            "</th><th scope=\"col\">motor</th><th scope=\"col\">mallet</th></tr></thead>"
            "<tbody>" + "".join(rows) + "</tbody></table>")


def _note_table(comp: Comparison) -> str:
    rows = []
    for d in comp.notes:
        rows.append("<tr><th scope=\"row\">" + _e(d.note) + "</th><td>"
                    + _fmt(d.fundamental_cents, "+.1f") + "</td><td>"
                    + _fmt(d.t60_s[0], ".1f") + "</td><td>" + _fmt(d.t60_s[1], ".1f")
                    + "</td></tr>")
    return ("<table><caption>Per note, from the models</caption><thead><tr>"
            "<th scope=\"col\">note</th><th scope=\"col\">pitch of B against A, cents</th>"
            "<th scope=\"col\">A fades by 60 dB in, s</th>"
            "<th scope=\"col\">B fades by 60 dB in, s</th></tr></thead><tbody>"
            + "".join(rows) + "</tbody></table>")


def _trial_forms(trials: Sequence[str]) -> str:
    parts = []
    n = len(trials)
    for k, name in enumerate(trials, start=1):
        parts.append(f"""
<fieldset class="trial" id="trial-{k}" data-trial="{k}">
  <legend>Trial {k} of {n}</legend>
  <audio controls preload="auto" src="{_e(name)}" id="trial-audio-{k}"
         aria-label="Trial {k}: A, pause, B, pause, then the unknown X"></audio>
  <div class="parts" role="group" aria-label="Play one part of trial {k}">
    <button type="button" data-trial="{k}" data-part="A">Play A</button>
    <button type="button" data-trial="{k}" data-part="B">Play B</button>
    <button type="button" data-trial="{k}" data-part="X">Play X</button>
  </div>
  <div class="answer" role="radiogroup" aria-label="Trial {k}: X is">
    <span class="ask" aria-hidden="true">X is</span>
    <label><input type="radio" name="answer-{k}" value="A"> A</label>
    <label><input type="radio" name="answer-{k}" value="B"> B</label>
  </div>
</fieldset>""")
    return "".join(parts)


def listening_page(comp: Comparison, *, names: tuple[str, str], png: bytes,
                   trials: Sequence[str] = (), run: str = "", gap_s: float = 0.5,
                   title: str | None = None) -> str:
    """Return the HTML text of the listening page (see the module docstring).

    Parameters
    ----------
    comp : Comparison
        The comparison whose files sit beside the page (A.wav, B.wav, AB.wav).
    names : (str, str)
        Names of designs A and B.
    png : bytes
        The plot of differences, embedded.
    trials : sequence of str
        File names of the blind trials, in order (none: no trial section).
    run : str
        The run's token, also in the key: answers are stored and saved under it.
    gap_s : float
        Pause between the parts of a trial file, s.
    title : str, optional
        Page title (default: "A against B").
    """
    title = title or f"{names[0]} against {names[1]}"
    part_s = comp.a.shape[0] / comp.sample_rate
    data = {"run": run, "volume": START_VOLUME, "trials": len(trials),
            "trialFiles": list(trials), "partSeconds": part_s, "gapSeconds": float(gap_s),
            "format": ANSWERS_FORMAT, "storageKey": f"barwright-answers-{run or 'none'}"}
    data_json = json.dumps(data).replace("<", "\\u003c")
    report = "".join(f"<p>{_e(p)}</p>" for p in plain_report(comp, names))
    if trials:
        blind = (
            "<section id=\"blind\" aria-labelledby=\"blind-h\"><h2 id=\"blind-h\">"
            "Blind trials</h2>"
            "<p>Each trial file plays A, a pause, B, a pause, then X. X is A or B, drawn at "
            "random for each trial; this page does not know which. Listen as often as you "
            "like, then answer. Answer every trial: the number of trials was fixed before "
            "listening.</p>"
            "<p id=\"progress\" role=\"status\" aria-live=\"polite\"></p>"
            + _trial_forms(trials)
            + "<div class=\"actions\"><button type=\"button\" id=\"save\">Save answers to a "
              "file</button> <button type=\"button\" id=\"clear\">Clear answers</button></div>"
              "<p class=\"hint\">Your answers are kept in this browser as you go. Send the "
              "saved file to the workshop; they score it with <code>barwright compare --score "
              f"{_e(KEY_FILE)} --answers-file FILE</code>.</p></section>")
    else:
        blind = ""
    page = _asset("listen.html")
    img = base64.b64encode(png).decode("ascii")
    fill = {
        "@@TITLE@@": _e(title), "@@NAME_A@@": _e(names[0]), "@@NAME_B@@": _e(names[1]),
        "@@STYLE@@": _asset("listen.css"), "@@SCRIPT@@": _asset("listen.js"),
        "@@DATA@@": data_json, "@@REPORT@@": report,
        "@@DESIGNS@@": _design_table(comp, names), "@@NOTES@@": _note_table(comp),
        "@@PNG@@": img, "@@BLIND@@": blind, "@@LENGTH@@": _e(f"{part_s:.1f}"),
        "@@GAP@@": _e(f"{gap_s:g}"),
    }
    # one pass, so text put in (a design's name, say) is never read as a placeholder
    return re.sub(r"@@[A-Z_]+@@", lambda m: fill[m.group(0)], page)
