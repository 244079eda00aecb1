"""The 3-D level cache is keyed by the bar's values, not by how numpy prints them."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from synth.config import presets_dir
from synth.physics.solid import cache_key
from synth.settings.instrument import load_instrument


def test_numpy_scalars_and_floats_share_a_key() -> None:
    """A tuned bar (numpy scalars) and the same bar read back from a file (floats)."""
    inst = load_instrument(presets_dir() / "instruments" / "lantern-street-bars.toml")
    bar = inst.bar("A4")
    tuned = replace(bar, length_m=np.float64(bar.length_m),
                    thickness_m=np.float64(bar.thickness_m))
    assert "np.float64" in repr(tuned)
    assert cache_key(tuned, inst.material, 3, 8) == cache_key(bar, inst.material, 3, 8)
    # a different value is a different key
    longer = replace(bar, length_m=np.float64(bar.length_m + 1e-6))
    assert cache_key(longer, inst.material, 3, 8) != cache_key(bar, inst.material, 3, 8)
