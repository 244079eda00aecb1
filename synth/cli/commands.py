"""Import every command module so that its commands register on the app.

The order here is the order of ``barwright --help``.
"""

from synth.cli import (
    cmd_bar,  # noqa: F401  partials, tune, cutlist
    cmd_bench,  # noqa: F401  bench
    cmd_compare,  # noqa: F401  compare
    cmd_demo,  # noqa: F401  demo
    cmd_measure,  # noqa: F401  measure
    cmd_reports,  # noqa: F401  sustain
    cmd_sound,  # noqa: F401  strike, chord, render
    cmd_sweep,  # noqa: F401  sweep
)
