"""Signal helpers on frequency grids: log grids, fractional-octave smoothing, curves."""
