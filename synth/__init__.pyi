from synth.analysis import find_partials as find_partials
from synth.analysis import integrated_loudness as integrated_loudness
from synth.api import render_score as render_score
from synth.api import render_strike as render_strike
from synth.api import solve_partials as solve_partials
from synth.errors import AudioError as AudioError
from synth.errors import ConfigError as ConfigError
from synth.errors import ModelError as ModelError
from synth.errors import SynthError as SynthError
from synth.io import read_audio as read_audio
from synth.reports.sustain import sustain_report as sustain_report
from synth.reports.sweep import parse_vary as parse_vary
from synth.reports.sweep import run_sweep as run_sweep
from synth.settings.instrument import load_design as load_design
from synth.settings.instrument import load_instrument as load_instrument
from synth.settings.score import read_events as read_events
from synth.voicing import Voicer as Voicer

__version__: str
__all__: list[str]
