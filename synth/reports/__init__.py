"""Reports: sustain across the range, chord decay, comparisons, build sheets, plots."""
