"""The shared argument checks (roommodes.dsp.checks) and the one band generator (sources below).

No outside check values for the checks: the rule is the project's own (a message names the
argument, the value and what is allowed). The band figures come from IEC 61260-1:2014
eqs. (1)-(5) (x = -12 one-third octave: 63.096 Hz, edges 56.234 and 70.795 Hz) and
ISO 266:1997 Table 1 (nominal 20, 25, 31.5, ... 315 Hz), as listed in shared/CHECKS.md.
"""

import math

import numpy as np
import pytest

from roommodes.dsp.bands import band_centres, iec_bands
from roommodes.dsp.checks import check_fraction, check_grid, check_number, check_range


@pytest.mark.parametrize("value, message", [
    (float("nan"), "q must be 0.1 to 20, got nan"),
    (0.0, "q must be 0.1 to 20, got 0"),
    (1e308, "q must be 0.1 to 20, got 1e\\+308"),
    ("x", "q must be 0.1 to 20, got 'x'"),
    (10 ** 400, "q must be 0.1 to 20"),
])
def test_check_number_names_argument_value_and_range(value, message):
    with pytest.raises(ValueError, match=message):
        check_number("q", value, 0.1, 20)


def test_check_number_open_bounds_and_integers():
    assert check_number("step", 0.05, 0.0, lo_open=True, unit=" m") == 0.05
    with pytest.raises(ValueError, match="step must be a number > 0 m, got 0 m"):
        check_number("step", 0, 0.0, lo_open=True, unit=" m")
    assert check_number("n", 4.0, 1, 8, integer=True) == 4
    with pytest.raises(ValueError, match="n must be 1 to 8, got 2.5"):
        check_number("n", 2.5, 1, 8, integer=True)


def test_check_range_and_grid():
    assert check_range("band", (20, 200), lo=0.0) == (20.0, 200.0)
    with pytest.raises(ValueError, match=r"band must satisfy 0 Hz < low < high, got \(200, 20\)"):
        check_range("band", (200, 20), lo=0.0, unit=" Hz")
    with pytest.raises(ValueError, match="band must be a pair"):
        check_range("band", 5)
    np.testing.assert_array_equal(check_grid("f", [1.0, 2.0]), [1.0, 2.0])
    with pytest.raises(ValueError, match="f must rise strictly; it goes from 3 to 2 Hz at index 1"):
        check_grid("f", [1.0, 3.0, 2.0])
    with pytest.raises(ValueError, match="above 0 Hz"):
        check_grid("f", [0.0, 1.0])
    assert check_fraction("smoothing", 0, zero_ok=True) == 0
    with pytest.raises(ValueError, match="smoothing must be one of 1, 3"):
        check_fraction("smoothing", 2, allowed=(1, 3))


def test_one_band_generator_gives_iec_centres_edges_and_iso_labels():
    b = iec_bands("third", 20.0, 315.0)
    i = list(b.nominal_hz).index(63.0)
    assert b.exact_hz[i] == pytest.approx(63.096, abs=5e-4)
    assert b.lower_hz[i] == pytest.approx(56.234, abs=5e-4)
    assert b.upper_hz[i] == pytest.approx(70.795, abs=5e-4)
    assert b.index[i] == -12
    assert b.labels == ("20", "25", "31.5", "40", "50", "63", "80", "100", "125", "160", "200", "250", "315")
    fm, nominal, lo, hi = band_centres(3, 20.0, 315.0)
    np.testing.assert_allclose(fm, b.exact_hz)
    np.testing.assert_array_equal(nominal, b.nominal_hz)
    assert math.isclose(hi[0] / lo[0], 10 ** 0.1)
