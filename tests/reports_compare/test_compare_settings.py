"""A comparison says what each design was rendered with, and levels as asked.

Design B here is the 7075 option with its own motor turning at 3 rev/s (a copy
of the preset with ``[motor] rate_rev_per_s = 3``); A keeps its motor stopped.
The loudness checks read the written WAVs with pyloudnorm (ITU-R BS.1770-4).
"""

from __future__ import annotations

import json
import re

import pyloudnorm
import pytest
from compare_helpers import DESIGN_A, DESIGN_B, RATE, read, run

from synth.settings.instrument import load_instrument
from synth.voicing import Voicer


@pytest.fixture(scope="module")
def motor_b(tmp_path_factory):
    """Compare A (motor stopped) against B with its own motor at 3 rev/s."""
    d = tmp_path_factory.mktemp("motor")
    text = DESIGN_B.read_text()
    text, n = re.subn(r"(?m)^rate_rev_per_s = 0\.0", "rate_rev_per_s = 3.0", text)
    assert n == 1
    b = d / "option-motor.toml"
    b.write_text(text)
    out = d / "out"
    r = run("compare", DESIGN_A, b, "--notes", "A4", "--tail", "1.0", "--out", out)
    assert r.exit_code == 0, r.output + r.stderr
    return b, out, r.stdout


def test_sidecars_record_each_designs_own_motor(motor_b) -> None:
    """A.json says stopped, B.json says 3 rev/s; the report and table say the same."""
    _, out, stdout = motor_b
    side_a = json.loads((out / "A.json").read_text())
    side_b = json.loads((out / "B.json").read_text())
    assert side_a["motor_rate_rev_per_s"] == 0.0
    assert side_b["motor_rate_rev_per_s"] == 3.0
    assert side_a["tubes"] is True and side_b["tubes"] is True
    assert side_a["mallet"] == side_b["mallet"] == "medium"
    ab = json.loads((out / "AB.json").read_text())
    assert ab["designs"]["A"]["motor_rate_rev_per_s"] == 0.0
    assert ab["designs"]["B"]["motor_rate_rev_per_s"] == 3.0
    report = json.loads((out / "differences.json").read_text())
    assert report["designs"]["B"]["motor_rate_rev_per_s"] == 3.0
    assert report["designs"]["A"]["motor_rate_rev_per_s"] == 0.0
    # Each sidecar's gain is what its render got, and B's exceeds A's by B's gain.
    assert side_b["output_gain_db_re_1_per_pa"] - side_a["output_gain_db_re_1_per_pa"] == \
        pytest.approx(report["loudness"]["gain_b_db"], abs=1e-9)
    row_b = next(ln for ln in stdout.splitlines() if ln.startswith("B "))
    assert "3 rev/s" in row_b
    row_a = next(ln for ln in stdout.splitlines() if ln.startswith("A "))
    assert "stopped" in row_a


def test_t60_of_b_is_the_one_with_its_motor(motor_b) -> None:
    """B's T60 is the steady decay under its turning discs, not the motor-off budget."""
    b, out, _ = motor_b
    report = json.loads((out / "differences.json").read_text())
    t60_b = report["notes"][0]["fundamental_t60_s"]["B"]
    with_motor = Voicer(load_instrument(b), sample_rate=RATE).fundamental("A4")[2]
    stopped = Voicer(load_instrument(b), sample_rate=RATE,
                     motor_rate_rev_per_s=0.0).fundamental("A4")[2]
    assert t60_b == pytest.approx(with_motor, rel=1e-9)
    assert abs(with_motor - stopped) > 0.05 * stopped  # the motor does change it


def test_tube_against_none_at_equal_gain_keeps_the_tubes_loudness(tmp_path) -> None:
    """--bare-b --match gain: both files get one gain, so the tube's extra loudness stays.

    Measured on the written files with pyloudnorm (ITU-R BS.1770-4): A minus B
    equals the difference the report measured before levelling (loudness
    scales 1:1 with a common gain), and the tube makes A clearly louder.
    """
    out = tmp_path / "tube"
    r = run("compare", DESIGN_A, DESIGN_A, "--bare-b", "--match", "gain", "--notes", "A4",
            "--tail", "1.0", "--out", out)
    assert r.exit_code == 0, r.output + r.stderr
    assert "same file" not in r.stderr
    meter = pyloudnorm.Meter(RATE)
    la = meter.integrated_loudness(read(out / "A.wav"))
    lb = meter.integrated_loudness(read(out / "B.wav"))
    report = json.loads((out / "differences.json").read_text())
    assert report["levelling"] == "gain"
    assert report["loudness"]["gain_b_db"] == 0.0
    assert lb - la == pytest.approx(report["loudness"]["difference_before_lu"], abs=0.05)
    assert la - lb > 3.0, (la, lb)
    side_a = json.loads((out / "A.json").read_text())
    side_b = json.loads((out / "B.json").read_text())
    assert side_a["tubes"] is True and side_b["tubes"] is False
    assert side_a["output_gain_db_re_1_per_pa"] == side_b["output_gain_db_re_1_per_pa"]


def test_band_range_leaves_out_quiet_bands(written) -> None:
    """Differences only where a band is within the range (default 30 dB) of the loudest."""
    report = json.loads((written.folder / "differences.json").read_text())
    bal = report["spectral_balance"]
    assert bal["range_db"] == 30.0
    for w in bal["windows"]:
        top = max(max(w["level_a_db"]), max(w["level_b_db"]))
        for la, lb, d in zip(w["level_a_db"], w["level_b_db"], w["difference_db"],
                             strict=True):
            if max(la, lb) < top - 30.0:
                assert d is None
            else:
                assert d == pytest.approx(lb - la, abs=1e-9)
