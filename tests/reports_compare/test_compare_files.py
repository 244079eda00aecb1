"""The files `barwright compare` writes: matched loudness, layout, no clipping, trials.

The loudness check measures the written WAVs with pyloudnorm directly (an open-source
ITU-R BS.1770-4 meter), not through the project's own wrapper.
"""

from __future__ import annotations

import json

import numpy as np
import pyloudnorm
import pytest
from compare_helpers import (
    DESIGN_A,
    DESIGN_B,
    GAP_S,
    RATE,
    TRIALS,
    assert_one_line_error,
    read,
    run,
)

from synth.analysis import true_peak

GAP = int(round(GAP_S * RATE))


def test_matched_files_read_alike_after_a_gap_of_several_lu(written) -> None:
    """B starts several LU below A; after matching both read alike by pyloudnorm.

    pyloudnorm is an open-source BS.1770-4 meter, independent of the matching code.
    Before: B is heard from twice the distance (far field: -6.02 dB) with another
    alloy, so the gap must be 3-9 LU; without the matching step the written files
    would still be that far apart (measured: -6.03 LU).  After: 0.01 LU, ten times
    tighter than the report's own warning threshold (0.1 LU) and well below what a
    listener hears; loudness scales 1:1 with gain above the gates (BS.1770-4 Annex 1),
    so the method leaves only 24-bit rounding, measured at 4e-9 LU.
    """
    meter = pyloudnorm.Meter(RATE)
    a, b = written.wav("A.wav"), written.wav("B.wav")
    la, lb = meter.integrated_loudness(a), meter.integrated_loudness(b)
    report = json.loads((written.folder / "differences.json").read_text())
    loud = report["loudness"]
    assert 3.0 <= abs(loud["difference_before_lu"]) <= 9.0, loud
    assert abs(la - lb) <= 0.01, (la, lb)
    # B's gain undoes the measured difference (loudness scales 1:1 with gain).
    assert loud["gain_b_db"] == pytest.approx(-loud["difference_before_lu"], abs=0.01)
    assert loud["gain_b_db"] > 3.0


def test_alternating_file_is_a_gap_b_gap_a_gap_b(written) -> None:
    """AB.wav holds A, silence, B, silence, A, silence, B, sample for sample."""
    a, b, ab = written.wav("A.wav"), written.wav("B.wav"), written.wav("AB.wav")
    n = a.shape[0]
    assert ab.shape == (4 * n + 3 * GAP, a.shape[1])
    parts = [a, b, a, b]
    for k, part in enumerate(parts):
        start = k * (n + GAP)
        np.testing.assert_array_equal(ab[start:start + n], part)
        if k < 3:
            assert not np.any(ab[start + n:start + n + GAP]), f"gap {k + 1} is not silent"


def test_render_length_is_stated_and_shared(written) -> None:
    """Both designs have the length the report states (loudness depends on it)."""
    report = json.loads((written.folder / "differences.json").read_text())
    n = written.wav("A.wav").shape[0]
    assert written.wav("B.wav").shape[0] == n
    assert report["render_length_s"] == pytest.approx(n / RATE, abs=0.5 / RATE)
    assert f"render length {n / RATE:.2f} s" in written.stdout


def test_no_output_clips(written) -> None:
    """Every WAV written stays under full scale, and under the -1 dBTP ceiling.

    Sample peak <= true peak <= -1 dBTP; the 0.001 dB allowance covers 24-bit
    rounding (about 1e-6 dB at this level).
    """
    wavs = sorted(written.folder.glob("*.wav"))
    assert len(wavs) == 3 + TRIALS
    ceiling = 10 ** (-1.0 / 20)
    for path in wavs:
        x = read(path)
        assert np.max(np.abs(x)) < 1.0, path.name
        assert np.max(np.abs(x)) <= ceiling * 10 ** (0.001 / 20), path.name
        assert true_peak(x, RATE).true_peak_dbtp <= -1.0 + 0.001, path.name


def test_trials_hold_the_keyed_design(written) -> None:
    """Each trial is A, gap, B, gap, X with X equal, sample for sample, to the keyed design."""
    a, b = written.wav("A.wav"), written.wav("B.wav")
    n = a.shape[0]
    key = written.key
    assert key["trials"] == TRIALS and len(key["x"]) == TRIALS
    assert set(key["x"]) <= {"A", "B"}
    for k, (name, x) in enumerate(zip(key["files"], key["x"], strict=True), start=1):
        assert name == f"blind-{k:02d}.wav"
        t = written.wav(name)
        assert t.shape[0] == 3 * n + 2 * GAP
        np.testing.assert_array_equal(t[:n], a)
        np.testing.assert_array_equal(t[n + GAP:2 * n + GAP], b)
        tail = t[2 * (n + GAP):]
        np.testing.assert_array_equal(tail, a if x == "A" else b)
        assert not np.array_equal(tail, b if x == "A" else a)


def test_same_seed_same_trials(written) -> None:
    """The key follows the seed: the library draws the same X sequence again."""
    from synth.reports.compare import abx_key

    assert list(abx_key(TRIALS, 11)) == written.key["x"]
    assert written.key["seed"] == 11


def test_sidecars_and_trial_sidecars_keep_the_secret(written) -> None:
    """Every WAV has a JSON sidecar; a trial's sidecar never says which design X is."""
    for path in written.folder.glob("*.wav"):
        assert path.with_suffix(".json").is_file(), path.name
    side_a = json.loads((written.folder / "A.json").read_text())
    assert side_a["design"] == "A" and side_a["render_length_s"] > 0
    records = []
    for name in written.key["files"]:
        rec = json.loads((written.folder / name).with_suffix(".json").read_text())
        assert "seed" not in rec and "x" not in rec and "design" not in rec
        records.append({k: v for k, v in rec.items() if k not in ("file", "trial")})
    # Apart from their number, all trial sidecars are the same whatever X is.
    assert all(r == records[0] for r in records)


def test_existing_outputs_need_force(written) -> None:
    """Running again into the fixture's folder without --force refuses before rendering."""
    r = run("compare", DESIGN_A, DESIGN_B, "--notes", "A4 C5", "--out", written.folder)
    assert_one_line_error(r, "already exists")
