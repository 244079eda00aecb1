"""Import every command module so that its commands register on the app.

The order here is the order of ``barwright --help``.
"""

from synth.cli import cmd_bar  # noqa: F401, I001  partials, tune, cutlist
from synth.cli import cmd_solid  # noqa: F401  solid
from synth.cli import cmd_sound  # noqa: F401  strike, chord, render
from synth.cli import cmd_reports  # noqa: F401  sustain
from synth.cli import cmd_sweep  # noqa: F401  sweep
from synth.cli import cmd_compare  # noqa: F401  compare
from synth.cli import cmd_measure  # noqa: F401  measure
from synth.cli import cmd_offcut  # noqa: F401  offcut
from synth.cli import cmd_retune  # noqa: F401  retune
from synth.cli import cmd_tubecal  # noqa: F401  tubecal
from synth.cli import cmd_bench  # noqa: F401  bench
from synth.cli import cmd_demo  # noqa: F401  demo
from synth.cli import cmd_play  # noqa: F401  play
