"""Commands that spread independent work over processes give the output of one process.

Each check runs the same library call with ``workers=1`` (every job here, one
after the other) and ``workers=2`` (a local pool through synth.executor.run_jobs)
and compares the results to the bit: the jobs are fixed by the input, never by
the number of workers, so nothing may differ.
"""

from __future__ import annotations

import numpy as np
import pytest

from synth.config import presets_dir
from synth.settings.instrument import load_instrument

DEMO = presets_dir() / "instruments" / "lantern-street-bars.toml"


@pytest.fixture(scope="module")
def inst():
    """Load the demo instrument (tuned, with tubes and a 3-D correction table)."""
    return load_instrument(DEMO)


def test_cut_rows_on_two_workers_equal_one(inst) -> None:
    """Cut-list rows, tube lengths included, equal on 1 and 2 processes.

    The tube lengths also equal those the voice plan gives for the whole range at once.
    """
    from synth.reports.cutlist import cut_rows
    from synth.voicing import tube_cut_lengths

    notes = ["F3", "B3", "A4", "D5", "F6"]
    here = cut_rows(inst, notes, tubes=True, workers=1)
    pool = cut_rows(inst, notes, tubes=True, workers=2)
    assert pool == here
    whole = tube_cut_lengths(inst)
    assert [r.tube_length_m for r in here] == [whole[n] for n in notes]


@pytest.mark.parametrize("through_table", [False, True])
def test_tuning_on_two_workers_equals_one(inst, through_table) -> None:
    """Tuned bars (two runs of warm starts: 8 notes) equal on 1 and 2 processes."""
    from synth.physics.solid_correction import correction_of
    from synth.physics.solid_tuning import tune_with_table
    from synth.physics.tuning import TUNE_SEGMENT, tune_instrument

    notes = list(inst.notes[10:10 + TUNE_SEGMENT + 2])
    if through_table:
        table = correction_of(inst)
        assert table is not None
        runs = [tune_with_table(inst, notes, table, workers=w) for w in (1, 2)]
    else:
        runs = [tune_instrument(inst, notes, workers=w) for w in (1, 2)]
    for a, b in zip(*runs, strict=True):
        assert a.geometry == b.geometry
        np.testing.assert_array_equal(a.residual_cents, b.residual_cents)
        np.testing.assert_array_equal(a.frequencies_hz, b.frequencies_hz)
        assert (a.reachable, a.n_solves, a.message) == (b.reachable, b.n_solves, b.message)


def test_passage_planned_on_two_workers_renders_the_same(inst) -> None:
    """A passage planned one job per note on 2 processes renders the same samples.

    The same to the bit as planned here (the waltz's first 16 strikes, pedal changes kept).
    """
    from dataclasses import replace

    from synth.engine.render import render
    from synth.settings.score import read_events
    from synth.voicing import Voicer

    score = read_events(presets_dir() / "events" / "harbour-waltz.toml")
    score = replace(score, strikes=score.strikes[:16])
    assert len({s.note for s in score.strikes}) > 2
    v = Voicer(inst, sample_rate=48000.0, channels=2)
    n = int(48000 * (score.strikes[-1].time_s + 1.0))
    here = render(v.score_voices(score, workers=1), n, sample_rate=48000.0, channels=2)
    pool = render(Voicer(inst, sample_rate=48000.0, channels=2).score_voices(score, workers=2),
                  n, sample_rate=48000.0, channels=2)
    assert np.max(np.abs(here)) > 0
    np.testing.assert_array_equal(pool, here)


def test_bad_strike_raises_its_own_error_on_any_number_of_workers(inst) -> None:
    """A strike naming no mallet preset fails with the same ConfigError on 2 processes.

    The same type (exit code 2) and line as here: the failed job is run again in
    this process.
    """
    from dataclasses import replace

    from synth.errors import ConfigError
    from synth.settings.score import read_events
    from synth.voicing import Voicer

    score = read_events(presets_dir() / "events" / "harbour-waltz.toml")
    strikes = list(score.strikes[:6])
    strikes[3] = replace(strikes[3], mallet="no-such-mallet")
    score = replace(score, strikes=tuple(strikes))
    messages = []
    for workers in (1, 2):
        with pytest.raises(ConfigError) as caught:
            Voicer(inst, sample_rate=48000.0).score_voices(score, workers=workers)
        messages.append(str(caught.value))
    assert messages[0] == messages[1]
    assert "no-such-mallet" in messages[0]
