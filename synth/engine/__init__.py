"""The generic sound engine: decaying modes, coupled pairs and gain curves to samples.

The engine never learns what it is playing.  The voice plan (the layer above)
turns a note and a strike into :class:`Voice` objects; this package renders
them.  :mod:`synth.engine.voice` defines the types and the clock,
:mod:`synth.engine.render` streams, guards and plans the gain,
:mod:`synth.engine.kernels` holds the compiled loops and
:mod:`synth.engine.score` defines the note events the voice plan turns into voices
(files are read by :mod:`synth.settings.score`).
"""

from synth.engine.render import (
    ANCHOR_EVERY,
    DEFAULT_BLOCK_SIZE,
    DEFAULT_RETIRE_DB,
    RETIRE_EVERY,
    GainPlan,
    measure_peak,
    peak_bound,
    plan_gain,
    render,
    render_blocks,
    ring_out_sample,
)
from synth.engine.voice import (
    ModeBank,
    ModePair,
    PairModulation,
    RotorLaw,
    Voice,
    constant_power_pan,
    seconds_to_sample,
)

__all__ = [
    "ANCHOR_EVERY",
    "DEFAULT_BLOCK_SIZE",
    "DEFAULT_RETIRE_DB",
    "RETIRE_EVERY",
    "ModePair",
    "GainPlan",
    "ModeBank",
    "PairModulation",
    "RotorLaw",
    "Voice",
    "constant_power_pan",
    "measure_peak",
    "peak_bound",
    "plan_gain",
    "render",
    "render_blocks",
    "ring_out_sample",
    "seconds_to_sample",
]
