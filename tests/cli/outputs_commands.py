"""Every writing command with short settings, and the files each one writes.

Shared by the output tests: ``test_outputs_planning.py`` (refusals before any
write, file-system errors) and ``test_outputs_interrupted.py`` (kills).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir
from synth.io import TEMP_MARK

PRESET = presets_dir() / "instruments" / "lantern-street-bars.toml"
OPTION = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
BAR = presets_dir() / "bars" / "parabolic-example.toml"

EVENTS = """\
[score]
tempo_bpm = 120

[[strike]]
beat = 0
note = "F3"
velocity = 0.6

[[strike]]
beat = 1
note = "A4"
velocity = 0.5
"""


def write_inputs(folder: Path) -> dict[str, Path]:
    """Write the inputs some commands read: an event list and a recorded strike."""
    from synth.engine.render import render
    from synth.io import write_wav
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    folder.mkdir(parents=True, exist_ok=True)
    events = folder / "two-notes.toml"
    events.write_text(EVENTS, encoding="utf-8")
    fs = 48000
    v = Voicer(load_instrument(PRESET), sample_rate=fs, channels=1)
    x = render([v.strike_voice("A4", mallet="hard", position=0.4, across=0.3, time_s=0.1)],
               3 * fs, sample_rate=fs)[:, 0]
    x = 0.5 * x / np.max(np.abs(x))
    x += 1e-5 * np.random.default_rng(5).standard_normal(x.size)
    recording = write_wav(folder / "take-A4.wav", x, sample_rate=fs, force=True)
    import mido

    from synth.live import recorded_midi

    midi = folder / "two-notes.mid"
    recorded_midi([(100, mido.Message("note_on", note=57, velocity=127)),
                   (24000, mido.Message("note_off", note=57))], fs).save(midi)
    return {"events": events, "recording": recording, "midi": midi}


# name -> (arguments given the output folder and the inputs, files written into the folder)
COMMANDS: dict[str, tuple] = {
    "partials": (lambda d, i: ["partials", BAR, "--plot", "--no-losses", "--out", d / "p.png"],
                 ["p.png"]),
    "grind": (lambda d, i: ["grind", BAR, "--stations", "5", "--out", d / "g.png"], ["g.png"]),
    "tune": (lambda d, i: ["tune", PRESET, "--note", "A4", "--out", d / "t.toml"], ["t.toml"]),
    "cutlist": (lambda d, i: ["cutlist", PRESET, "--out", d, "--templates"],
                ["cutlist.csv", "profiles.png", "templates.pdf"]),
    "strike": (lambda d, i: ["strike", PRESET, "A4", "--duration", "60", "--out", d / "s.wav"],
               ["s.wav", "s.json"]),
    "chord": (lambda d, i: ["chord", PRESET, "F3 A4", "--duration", "2", "--check-decay",
                            "--out", d / "c.wav"], ["c.wav", "c.json", "c-decay.png"]),
    "render": (lambda d, i: ["render", PRESET, i["events"], "--tail", "30", "--out",
                             d / "r.wav"], ["r.wav", "r.json"]),
    "sustain": (lambda d, i: ["sustain", PRESET, "--note", "A4", "--out", d],
                ["sustain.csv", "sustain.png"]),
    "measure": (lambda d, i: ["measure", i["recording"], "--calibrate", PRESET, "--note", "A4",
                              "--out", d / "cal.toml"], ["cal.toml"]),
    "compare": (lambda d, i: ["compare", PRESET, OPTION, "--notes", "A4", "--tail", "0.5",
                              "--blind", "2", "--out", d],
                ["A.wav", "A.json", "B.wav", "B.json", "AB.wav", "AB.json", "blind-01.wav",
                 "blind-01.json", "blind-02.wav", "blind-02.json", "differences.json",
                 "differences.png", "blind-key.toml"]),
    "sweep": (lambda d, i: ["sweep", PRESET, "--vary", "tubes.offset_cents=0,30", "--workers",
                            "1", "--out", d], ["sweep.csv", "sweep.json", "sweep.png"]),
    "play": (lambda d, i: ["play", PRESET, "--midi-file", i["midi"], "--layers", "1",
                           "--workers", "1", "--tail", "20", "--to-wav", d / "live.wav",
                           "--record", d / "live.mid"], ["live.wav", "live.mid"]),
    "demo": (lambda d, i: ["demo", "--out", d], ["cutlist.csv", "profiles.png", "sustain.csv",
                                                  "strike-A4.wav", "calibration-A4.toml"]),
}
"""Every command that writes files.  The demo's list is a sample of its files."""


def run(*args):
    """Run the command line in this process."""
    return CliRunner().invoke(app, [str(a) for a in args])


def temporaries(folder: Path) -> list[str]:
    """Names of the temporary files in ``folder`` and below."""
    if not folder.exists():
        return []
    return sorted(p.name for p in folder.rglob("*") if TEMP_MARK in p.name)


def one_error_line(result) -> str:
    """Assert exit 2 and a single stderr line without a traceback; return the line."""
    assert result.exit_code == 2, (result.exit_code, result.output)
    assert "Traceback" not in result.output
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, lines
    assert lines[0].startswith("barwright: error: ")
    return lines[0]
