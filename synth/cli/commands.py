"""Every command: its name, the module that registers it, and its one-line help.

The order here is the order of ``barwright --help``.  The lazy group in
:mod:`synth.cli` answers ``barwright --help`` from this table and imports a
module only when one of its commands runs; ``tests/cli/test_lazy_commands.py``
checks the table against the commands the modules register.
"""

COMMANDS: dict[str, tuple[str, str]] = {
    "partials": ("synth.cli.cmd_bar", "Compute a bar's partials: frequency, ratio, nearest "
                 "note, cents and nodes."),
    "solid": ("synth.cli.cmd_solid", "Solve a bar as a 3-D elastic solid and set its "
              "partials beside the 1-D model's."),
    "tune": ("synth.cli.cmd_bar", "Solve every bar's length and undercut so partials 1-3 "
             "land on the target ratios."),
    "grind": ("synth.cli.cmd_bar", "Grind map: cents each partial moves per 0.1 mm removed "
              "in a band at each station."),
    "cutlist": ("synth.cli.cmd_bar", "Write the build sheet: length, undercut stations and "
                "cord holes for every bar."),
    "strike": ("synth.cli.cmd_sound", "Render one struck bar to WAV: its computed partials, "
               "losses, tube and motor."),
    "chord": ("synth.cli.cmd_sound", "Render a chord (struck together or rolled) to WAV."),
    "render": ("synth.cli.cmd_sound", "Render a passage from an event file (TOML events or "
               "MIDI) to WAV."),
    "sustain": ("synth.cli.cmd_reports", "Sustain across the range: T60 per note and "
                "partial, mismatch against the target."),
    "sweep": ("synth.cli.cmd_sweep", "Design sweep: tuning reach, T60 and tube gain per "
              "register, evenness, loudness."),
    "compare": ("synth.cli.cmd_compare", "Hear two designs side by side: the same passage, "
                "level-matched, and blind ABX trials."),
    "measure": ("synth.cli.cmd_measure", "Measure a recorded strike: partials with note, "
                "cents, Q, T60 and level."),
    "offcut": ("synth.cli.cmd_offcut", "Alloy stiffness from a tapped offcut: E, G and "
               "Poisson's ratio (impulse excitation)."),
    "retune": ("synth.cli.cmd_retune", "Retune plan: metal to grind off at which stations, "
               "and end trim, for partials 1-3."),
    "tubecal": ("synth.cli.cmd_tubecal", "Tube calibration: gap correction and coupling "
                "strength of one note's tube."),
    "bench": ("synth.cli.cmd_bench", "Measure speed: medians over repeats and ratios "
              "against references run alongside."),
    "demo": ("synth.cli.cmd_demo", "Run the main job on the bundled demo instrument and "
             "say where every file went."),
    "play": ("synth.cli.cmd_play", "Play the design live: MIDI in, sound out, through the "
             "real-time voice pool."),
}
