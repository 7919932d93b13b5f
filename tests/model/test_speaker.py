"""The speaker's own roll-off: Butterworth high-pass alignments.

Source: the Butterworth magnitude |H|^2 = 1 / (1 + (fc/f)^(2n)) (Butterworth 1930).
"""

import numpy as np
import pytest

from roommodes.model.room import Speaker
from roommodes.model.speaker import highpass_response, speaker_response


@pytest.mark.parametrize("order", [2, 4])
def test_minus_3_db_at_lowcut_and_asymptotic_slope(order):
    # Butterworth: |H|^2 = 1 / (1 + (fc/f)^(2n)) -> -3.01 dB at fc and 6n dB/octave below it
    # (Butterworth 1930; any filter-design text, e.g. scipy.signal.butter's documentation).
    fc = 48.0
    f = np.array([fc, fc / 16, fc / 32, 10 * fc])
    level = 20 * np.log10(np.abs(highpass_response(f, fc, order)))
    assert level[0] == pytest.approx(-3.0103, abs=1e-3)
    assert level[1] - level[2] == pytest.approx(6.0206 * order, abs=0.01)
    assert level[3] == pytest.approx(0.0, abs=1e-3)
    expected = -10 * np.log10(1 + (fc / f) ** (2 * order))
    np.testing.assert_allclose(level, expected, atol=1e-9)


def test_flat_speaker_and_bad_order():
    sp = Speaker("x", (1, 1, 1))
    np.testing.assert_allclose(speaker_response(sp, [20.0, 100.0]), 1.0)
    with pytest.raises(ValueError, match="lowcut_order must be 2"):
        highpass_response([50.0], 40.0, 3)
