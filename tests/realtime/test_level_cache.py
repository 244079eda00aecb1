"""The designs' level match kept in the plan cache.

A stored match equals a fresh one, and a changed setting measures again.
"""

from __future__ import annotations

import pytest
from realtime_common import demo_voicer

import synth.live as live
from synth import plan_cache


def _refuse(*args, **kwargs):
    raise AssertionError("measured again although the match is stored")


def test_stored_level_match_equals_fresh_one(tmp_path, monkeypatch) -> None:
    """Gains read back from disk are bit-identical to gains measured without a cache.

    Independent path: the same designs measured with the cache switched off.
    """
    monkeypatch.setenv(plan_cache.CACHE_ENV, "off")
    fresh = live.level_scales([demo_voicer(0.0)])
    monkeypatch.setenv(plan_cache.CACHE_ENV, str(tmp_path))
    assert live.level_scales([demo_voicer(0.0)]) == fresh   # measures and stores
    monkeypatch.setattr(live, "_match_scales", _refuse)
    assert live.level_scales([demo_voicer(0.0)]) == fresh   # a new plan: from disk


@pytest.mark.parametrize("change", ["motor", "ceiling", "tubes"])
def test_changed_setting_measures_again(change, tmp_path, monkeypatch) -> None:
    """Any setting the match depends on changes the key, so nothing stale is read."""
    monkeypatch.setenv(plan_cache.CACHE_ENV, str(tmp_path))
    live.level_scales([demo_voicer(0.0)])
    monkeypatch.setattr(live, "_match_scales", _refuse)
    with pytest.raises(AssertionError, match="measured again"):
        if change == "motor":
            live.level_scales([demo_voicer(3.0)])
        elif change == "ceiling":
            live.level_scales([demo_voicer(0.0)], ceiling_dbtp=-2.0)
        else:
            live.level_scales([demo_voicer(0.0, tubes=False)])
