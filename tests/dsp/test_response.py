"""Frequency grids and fractional-octave smoothing.

Sources: the fractional-octave window definition (CHECKS.md, computed) and the
definitions of the means; named beside each test.
"""

import numpy as np
import pytest

from roommodes.dsp.response import align_level, fractional_octave_edges, log_frequencies, smooth_fractional_octave


def test_third_octave_window_at_50_hz():
    # Window f 2^(-1/2b) .. f 2^(1/2b): 1/3 octave at 50 Hz spans 44.545-56.123 Hz (CHECKS.md,
    # computed from the definition; the same windows as Hatziantoniou & Mourjopoulos 2000).
    lo, hi = fractional_octave_edges(50.0, 3)
    assert lo == pytest.approx(44.545, abs=1e-3) and hi == pytest.approx(56.123, abs=1e-3)


def test_grid():
    f = log_frequencies(15, 300, 48)
    assert f[0] == 15 and f[-1] == 300
    np.testing.assert_allclose(np.diff(np.log2(f[:-1])), 1 / 48)
    with pytest.raises(ValueError, match="0 < low < high"):
        log_frequencies(300, 15)


def test_smoothing_means_power_over_the_window():
    f = log_frequencies(10, 1000, 96)
    # a function linear in log frequency is its own window mean (symmetric window in log f)
    p = 1.0 + np.log(f)
    s = smooth_fractional_octave(f, p, 3)
    inner = (f > 20) & (f < 500)
    np.testing.assert_allclose(s[inner], p[inner], rtol=1e-12)
    # a single spike of power spreads over one window: its integral over log f is preserved
    spike = np.zeros_like(f)
    spike[f.size // 2] = 1.0
    sm = smooth_fractional_octave(f, spike, 6)
    assert np.trapezoid(sm, np.log(f)) == pytest.approx(np.trapezoid(spike, np.log(f)), rel=0.02)


def test_align_level_power_mean():
    # power mean of +10 dB and 0 dB over equal halves in log f: 10 log10(5.5) = 7.404 dB
    f = np.geomspace(20, 320, 4001)
    level = np.where(f < 80, 10.0, 0.0)
    assert align_level(level, np.zeros_like(f), f, (20, 320)) == pytest.approx(7.404, abs=0.01)
