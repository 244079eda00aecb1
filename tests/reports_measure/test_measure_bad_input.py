"""Bad and doubtful recordings: exit code 2 with one line, or a warning line.

Policy (module docstring of :mod:`synth.reports.measure`): input that cannot
give a meaningful number stops with one stderr line and exit code 2; input
that gives numbers with a caveat is measured and the caveat is printed as a
``barwright: warning:`` line.  Clipping is "three or more consecutive samples at
full scale" (common practice, no source; :data:`synth.analysis.checks.CLIP_MIN_RUN`).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
from measure_signals import (
    FS,
    PRESET,
    assert_one_line_error,
    cents_between,
    damped_sines,
    fundamental_hz,
    nearest,
    render_strike,
    run,
    warning_lines,
    wav,
)


@pytest.fixture(scope="module")
def take():
    """A4 struck off-centre, tubes on, peak 0.5, -90 dBFS noise (mono samples)."""
    return render_strike("A4", noise_dbfs=-90.0, seed=11)


def test_missing_file(tmp_path) -> None:
    """A missing file: exit 2, one line naming it."""
    p = tmp_path / "nothing.wav"
    assert_one_line_error(run("measure", p), str(p), "file not found")


def test_not_an_audio_file(tmp_path) -> None:
    """A text file named .wav: exit 2, one line."""
    p = tmp_path / "notes.wav"
    p.write_text("these are workshop notes, not audio\n", encoding="utf-8")
    assert_one_line_error(run("measure", p), str(p), "not a readable audio file")


def test_silence(tmp_path) -> None:
    """Digital silence: exit 2, one line."""
    p = wav(tmp_path / "silence.wav", np.zeros(2 * FS))
    assert_one_line_error(run("measure", p), str(p), "silent")


def test_steady_tone_has_no_strike(tmp_path) -> None:
    """A steady tone has no strike: exit 2, one line."""
    t = np.arange(3 * FS) / FS
    p = wav(tmp_path / "hum.wav", 0.3 * np.sin(2 * np.pi * 440.0 * t))
    assert_one_line_error(run("measure", p), str(p), "no strike found")


def test_noise_only_has_no_partials(tmp_path) -> None:
    """A noise burst has no partials: exit 2, one line."""
    rng = np.random.default_rng(2)
    x = np.concatenate([np.zeros(FS // 10), 0.2 * np.exp(-np.arange(FS) / FS * 3)
                        * rng.standard_normal(FS)])
    p = wav(tmp_path / "scrape.wav", x)
    r = run("measure", p)
    assert_one_line_error(r, str(p))


def test_clipping_in_the_attack_only_warns(tmp_path, take) -> None:
    """Clipping confined to the attack: measured, with a clipping warning."""
    # a mallet click that overloads the converter for 2 ms at the strike
    x = take.copy()
    n0, n = int(0.1 * FS), int(0.002 * FS)
    x[n0:n0 + n] += 3.0 * np.hanning(n)
    x = np.clip(x, -1.0, 1.0)
    p = wav(tmp_path / "click.wav", x, sample_format="float32")
    r = run("measure", p, "--note", "A4", "--reference-hz", "442", "--json")
    assert r.exit_code == 0, r.stderr
    assert any("clipped" in w for w in warning_lines(r))
    doc = json.loads(r.stdout)
    assert any("clipped" in w for w in doc["warnings"])
    f1 = fundamental_hz("A4")
    assert cents_between(nearest(doc["partials"], f1)["frequency_hz"], f1) == pytest.approx(
        0.0, abs=0.2)  # the 0.2 cent


def test_clipping_in_the_decay_is_refused(tmp_path, take) -> None:
    """Clipping inside the fitted decay: exit 2, one line."""
    p = wav(tmp_path / "hot.wav", np.clip(4.0 * take, -1.0, 1.0), sample_format="float32")
    assert_one_line_error(run("measure", p), str(p), "clipped after the attack",
                          "less gain")


def test_stereo_is_averaged_with_a_warning(tmp_path, take) -> None:
    """Stereo: the mean is analysed, with a warning, and matches mono."""
    stereo = np.stack([take, 0.8 * take], axis=1)
    p = wav(tmp_path / "pair.wav", stereo)
    r = run("measure", p, "--json")
    assert r.exit_code == 0, r.stderr
    assert any("2 channels" in w and "mean" in w for w in warning_lines(r))
    doc = json.loads(r.stdout)
    assert doc["channels"] == 2
    mono = json.loads(run("measure", wav(tmp_path / "mono.wav", take), "--json").stdout)
    # the mean of two scaled copies has the same partials (0.2 cent, 3 %: issue tolerances)
    for pm in mono["partials"][:4]:
        ps = nearest(doc["partials"], pm["frequency_hz"])
        assert 1200 * np.log2(ps["frequency_hz"] / pm["frequency_hz"]) == pytest.approx(
            0.0, abs=0.2)
        assert ps["q"] == pytest.approx(pm["q"], rel=0.03)


def test_wrong_sample_rate_in_the_header(tmp_path, take) -> None:
    """A wrong rate in the header: a warning with --note, exit 2 when calibrating."""
    # rendered at 48 kHz, labelled 40 kHz: every frequency reads 316 cents flat, and
    # no partial lands by chance within 3 % of another of the model's modes
    p = tmp_path / "relabelled.wav"  # written by soundfile: a recorder may use any rate
    sf.write(p, take, 40000, subtype="PCM_24")
    r = run("measure", p, "--note", "A4", "--reference-hz", "442")
    assert r.exit_code == 0, r.stderr
    assert any("no partial within 100 cents of A4" in w and "sample rate" in w
               for w in warning_lines(r))
    out = tmp_path / "cal.toml"
    r = run("measure", p, "--calibrate", PRESET, "--note", "A4", "--out", out)
    line = [ln for ln in r.stderr.splitlines() if "error" in ln]
    assert r.exit_code == 2 and len(line) == 1, r.stderr
    assert "no measured partial lies within 3 %" in line[0] and "sample rate" in line[0]
    assert not out.exists()


def test_sample_rate_too_low_for_the_note(tmp_path) -> None:
    """A named note above 0.45 x rate: exit 2, one line."""
    rate = 800
    x = damped_sines((300.0,), (0.3,), (0.5,), rate=rate)
    p = tmp_path / "slow.wav"
    sf.write(p, x, rate, subtype="PCM_24")
    assert_one_line_error(run("measure", p, "--note", "A4"), str(p), "lies above",
                          "sample rate of 800 Hz")


def test_low_sample_rate_loses_upper_modes_with_a_warning(tmp_path, take) -> None:
    """At 8 kHz vertical 3 is out of band: warned and listed as not matched."""
    from scipy.signal import resample_poly

    rate = 8000
    p = tmp_path / "phone.wav"
    sf.write(p, resample_poly(take, 1, 6), rate, subtype="PCM_24")
    r = run("measure", p, "--calibrate", PRESET, "--note", "A4", "--out",
            tmp_path / "cal.toml", "--json")
    assert r.exit_code == 0, r.stderr
    assert any("sample rate 8000 Hz" in w for w in warning_lines(r))
    cal = json.loads(r.stdout)["calibration"]
    assert any(u.startswith("vertical 3") and "above the band" in u for u in cal["unmatched"])


def test_calibrate_needs_note_and_out(tmp_path, take) -> None:
    """Option errors of --calibrate: exit 2, one line each."""
    p = wav(tmp_path / "a4.wav", take)
    assert_one_line_error(run("measure", p, "--calibrate", PRESET), "--calibrate", "--note")
    assert_one_line_error(run("measure", p, "--out", tmp_path / "c.toml"), "--out")
    assert_one_line_error(run("measure", p, "--calibrate", PRESET, "--note", "A4", "--terms",
                              "friction", "--out", tmp_path / "c.toml"), "--terms", "friction")
    assert_one_line_error(run("measure", p, "--calibrate", PRESET, "--note", "A4", "--no-tubes",
                              "--terms", "tube", "--out", tmp_path / "c.toml"), "tube")
    assert_one_line_error(run("measure", p, "--calibrate", PRESET, "--note", "B9",
                              "--out", tmp_path / "c.toml"), "B9")


def test_existing_calibration_file_is_kept_without_force(tmp_path, take) -> None:
    """An existing --out is kept without --force and replaced with it."""
    p = wav(tmp_path / "a4.wav", take)
    out = tmp_path / "cal.toml"
    out.write_text("# mine\n", encoding="utf-8")
    assert_one_line_error(run("measure", p, "--calibrate", PRESET, "--note", "A4", "--out", out),
                          str(out), "already exists")
    assert out.read_text(encoding="utf-8") == "# mine\n"
    r = run("measure", p, "--calibrate", PRESET, "--note", "A4", "--out", out, "--force")
    assert r.exit_code == 0, r.stderr
    assert out.read_text(encoding="utf-8").startswith("# barwright calibration file")


def test_channels_that_cancel_are_refused_and_one_can_be_picked(tmp_path, take) -> None:
    """Channels cancelling in their mean: exit 2; --channel picks one."""
    p = wav(tmp_path / "swapped.wav", np.stack([take, -take], axis=1))
    assert_one_line_error(run("measure", p), str(p), "cancelling", "--channel 1")
    r = run("measure", p, "--channel", "2", "--json")
    assert r.exit_code == 0, r.stderr
    doc = json.loads(r.stdout)
    assert doc["channel"] == 2 and doc["channels"] == 2
    f1 = fundamental_hz("A4")
    assert cents_between(nearest(doc["partials"], f1)["frequency_hz"], f1) == pytest.approx(
        0.0, abs=0.2)  # the 0.2 cent
    assert_one_line_error(run("measure", p, "--channel", "3"), "--channel", "1..2")
