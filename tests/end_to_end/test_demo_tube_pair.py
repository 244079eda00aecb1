"""The demo's A4 with and without its tube: one gain, so the pair keeps what the tube adds.

Loudness per ITU-R BS.1770-4 measured with pyloudnorm (gated) on the two WAV
files the demo writes, against the model's own figure for the same two strikes:
the unscaled renders of the engine (pascals at the listening distance) weighted
with the standard's K filter, whose two biquads at 48 kHz are written out here
from the standard (ITU-R BS.1770-4, Annex 1, Tables 1 and 2), and summed over
the whole render without gating.  With one gain on both files the two
differences agree up to the gating, which the ungated sum leaves out, and the
24-bit rounding: measured 12.2357 dB (files, gated) against 12.2345 dB (model,
ungated), 0.0012 dB apart; tolerance 0.02 dB.  Normalising each file on its own,
as the demo did before, would leave the files' difference 12 dB away from the
model's, and the check fails.
"""

from __future__ import annotations

import contextlib
import json
import re

import numpy as np
import pyloudnorm
import pytest
import soundfile as sf
from scipy.signal import lfilter

# ITU-R BS.1770-4 K-weighting at 48 kHz: pre-filter (shelf) and RLB high-pass
SHELF_B = [1.53512485958697, -2.69169618940638, 1.19839281085285]
SHELF_A = [1.0, -1.69065929318241, 0.73248077421585]
RLB_B = [1.0, -2.0, 1.0]
RLB_A = [1.0, -1.99004745483398, 0.99007225036621]


def _k_energy(x: np.ndarray) -> float:
    y = lfilter(RLB_B, RLB_A, lfilter(SHELF_B, SHELF_A, x, axis=0), axis=0)
    return float(np.sum(y ** 2))


@contextlib.contextmanager
def _no_steps(n, label):
    yield lambda k, name=None: None


def test_demo_tube_pair_shares_one_gain(tmp_path):
    """Same gain in both sidecars; the files' loudness difference is the model's."""
    from dataclasses import replace

    from synth.engine.render import render
    from synth.output import fade_seconds
    from synth.reports import demo
    from synth.settings.instrument import load_instrument
    from synth.voicing import Voicer

    inst = load_instrument(demo.demo_preset_path())
    said: list[str] = []
    demo._sounds(inst, tmp_path, said.append, _no_steps)
    tubed, bare = (tmp_path / name for name in demo.DEMO_WAVS[:2])
    side_t = json.loads(tubed.with_suffix(".json").read_text())
    side_b = json.loads(bare.with_suffix(".json").read_text())
    assert side_b["gain_db"] == side_t["gain_db"] and side_b["gain_mode"] == "fixed"
    assert side_b["gain_shared_with"] == tubed.name
    assert any("same gain as" in line for line in said)

    a, fs = sf.read(tubed, dtype="float64")
    b, _ = sf.read(bare, dtype="float64")
    meter = pyloudnorm.Meter(fs)   # ITU-R BS.1770-4
    files_db = meter.integrated_loudness(a) - meter.integrated_loudness(b)

    plan = Voicer(inst, sample_rate=float(fs), channels=2)
    n = a.shape[0]
    f = int(round(fade_seconds() * fs))
    ramp = np.ones(n)
    ramp[n - f:] = np.sin(0.5 * np.pi * (n - np.arange(n - f, n)) / f) ** 2
    model = [render([p.strike_voice("A4", velocity=0.6)], n, sample_rate=fs, channels=2)
             * ramp[:, None] for p in (plan, replace(plan, tubes=False))]
    model_db = 10 * np.log10(_k_energy(model[0]) / _k_energy(model[1]))
    assert model_db > 6.0                      # the tube is heard: 12.2 dB measured
    assert files_db == pytest.approx(model_db, abs=0.02)
    # what the demo prints: measured on the renders before the closing fade (12.12 dB
    # against the files' 12.24), printed to 0.1 dB: within 0.14 + 0.05 dB
    printed = [float(m.group(1)) for line in said
               if (m := re.search(r"the tube adds ([0-9.]+) dB of BS.1770-4 loudness", line))]
    assert len(printed) == 1 and printed[0] == pytest.approx(files_db, abs=0.14 + 0.05)
