"""Predicted levels at the seat: the peak finder and the band figures.

Reference library: scipy.signal.find_peaks (its prominence definition); the band figures
are checked on a curve whose answer follows from their definition.
"""

import numpy as np
import pytest
from scipy.signal import find_peaks

from roommodes.analysis.predict import band_figures, find_extrema


@pytest.mark.parametrize("seed", range(6))
def test_extrema_match_scipy_find_peaks(seed):
    rng = np.random.default_rng(seed)
    y = np.cumsum(rng.normal(size=300))  # a rough curve with many peaks
    for threshold in (0.5, 3.0):
        ref_idx, props = find_peaks(y, prominence=threshold)
        idx, prom = find_extrema(y, threshold)
        np.testing.assert_array_equal(idx, ref_idx)
        np.testing.assert_allclose(prom, props["prominences"], rtol=1e-12)


def test_band_figures_of_a_known_curve():
    f = np.geomspace(20, 200, 200)
    level = np.where(f < 63, 3.0, -3.0)  # a 6 dB step; smoothing rounds its corner only
    fig = band_figures(f, level, (20, 200))
    assert fig["max_db"] == pytest.approx(3.0, abs=1e-9) and fig["min_db"] == pytest.approx(-3.0, abs=1e-9)
    assert fig["spread_db"] == pytest.approx(6.0, abs=1e-9)
