"""Comparing measured and predicted curves: statistics, alignment, peak matching, reading.

Checks and their sources:
* error figures of a linear-in-log-frequency residual against the uniform distribution's
  median, 90th percentile and rms (closed form);
* level alignment in power against the power mean of two known levels (arithmetic);
* Pearson correlation of affine-related curves is +-1 (definition);
* a room 3 % longer shifts its length modes down by 1/1.03 and every mode by the ratio of
  Rayleigh's formula (Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3);
* an impulse response read from a WAV file gives the spectrum scipy.signal.freqz gives.
"""

import math

import numpy as np
import pytest
from scipy import signal

from roommodes import log_frequencies
from roommodes.analysis.compare import (
    Measurement,
    average_measurements,
    compare_curves,
    compare_measurements,
    compare_to_prediction,
    find_features,
    load_measurement,
    match_features,
    predicted_level,
)
from roommodes.analysis.predict import predict
from roommodes.io.importers import MeasurementFileError
from roommodes.io.roomfile import parse_room
from roommodes.io.wavio import write_wav_atomic
from roommodes.model.modes import mode_frequencies

WALLS6 = ("front", "back", "left", "right", "floor", "ceiling")


def box(size, alpha=0.12, speaker=(0.3, 0.25, 0.3), seat=(4.3, 2.9, 1.9)):
    """A plain test room (invented): one flat speaker near a corner, a seat."""
    return parse_room({"room": {"size_m": list(size)}, "surfaces": {w: alpha for w in WALLS6},
                       "speakers": {"left": {"position_m": list(speaker)}},
                       "seat": {"position_m": list(seat)}}, "box.toml")


F = log_frequencies(15, 300, 48)


# ----------------------------------------------------------------------------- statistics


def test_known_offset_is_removed_by_alignment_and_kept_when_absolute():
    ref = predicted_level(box((5.7, 4.1, 2.6)), "left", None, F)
    c = compare_curves(F, ref + 7.0, ref)
    assert c.offset_db == pytest.approx(-7.0, abs=1e-9)
    assert c.median_abs_diff_db == pytest.approx(0.0, abs=1e-9)
    assert c.p90_abs_diff_db == pytest.approx(0.0, abs=1e-9)
    assert c.correlation == pytest.approx(1.0, abs=1e-12)
    a = compare_curves(F, ref + 7.0, ref, absolute=True)
    assert a.offset_db == 0.0
    assert a.median_abs_diff_db == pytest.approx(7.0, abs=1e-9)
    assert a.p90_abs_diff_db == pytest.approx(7.0, abs=1e-9)
    assert a.mean_diff_db == pytest.approx(7.0, abs=1e-9)


def test_linear_ramp_residual_matches_uniform_distribution():
    # d = A log2(f / f0) / (half band in octaves): |d| is uniform on [0, A] in log frequency,
    # so median A/2, 90th percentile 0.9 A, rms A / sqrt(3) (uniform distribution, closed form)
    f = log_frequencies(20, 200, 96)
    amp = 6.0
    d = amp * np.log2(f / math.sqrt(20 * 200)) / (0.5 * math.log2(10))
    c = compare_curves(f, d, np.zeros_like(f), band_hz=(20, 200), smoothing=0, absolute=True)
    assert c.median_abs_diff_db == pytest.approx(amp / 2, rel=0.01)
    assert c.p90_abs_diff_db == pytest.approx(0.9 * amp, rel=0.01)
    assert c.rms_diff_db == pytest.approx(amp / math.sqrt(3), rel=0.01)
    assert c.mean_diff_db == pytest.approx(0.0, abs=0.01)  # the grid ends on 200 Hz, not on a 1/96 step


def test_alignment_matches_power_means_not_db_means():
    # half the band (in octaves) at +3 dB, half at -3 dB: power mean 10 log10((10^0.3 + 10^-0.3) / 2)
    f = log_frequencies(20, 320, 96)
    meas = np.where(f < 80, 3.0, -3.0)
    c = compare_curves(f, meas, np.zeros_like(f), band_hz=(20, 320), smoothing=0)
    expected = 10 * math.log10((10**0.3 + 10**-0.3) / 2)  # 0.963 dB
    assert c.offset_db == pytest.approx(-expected, abs=0.02)


def test_correlation_sign_and_band_limits():
    ref = predicted_level(box((5.7, 4.1, 2.6)), "left", None, F)
    assert compare_curves(F, 2 * ref - 3, ref, smoothing=0).correlation == pytest.approx(1.0)
    assert compare_curves(F, -ref, ref, smoothing=0).correlation == pytest.approx(-1.0)
    with pytest.raises(ValueError, match="band_hz"):
        compare_curves(F, ref, ref, band_hz=(400, 500))
    with pytest.raises(ValueError, match="shape"):
        compare_curves(F, ref[:-1], ref)


def test_smoothing_is_applied_alike():
    rng = np.random.default_rng(3)
    ref = rng.normal(0, 4, F.size)
    c = compare_curves(F, ref, ref.copy(), smoothing=6)
    assert np.all(np.abs(c.difference_db) < 1e-9)
    assert np.std(c.reference_db) < np.std(ref)  # the curves were smoothed


# ----------------------------------------------------------------------------- features


def test_length_change_of_3_percent_shifts_length_modes_by_rayleigh_ratio():
    room = box((5.7, 4.1, 2.6))
    longer = box((5.7 * 1.03, 4.1, 2.6))
    meas = Measurement(F, predicted_level(longer, "left", None, F) + 7.0, "synthetic")
    rep = compare_to_prediction(room, meas, "left", band_hz=(20, 150), smoothing=24)
    length = [m for m in rep.matches if m.axis == "length" and np.isfinite(m.ratio)]
    assert length, "the first length mode must be paired"
    for m in length:
        assert m.ratio == pytest.approx(1 / 1.03, abs=0.003)
    # peaks traced to a mode move by the ratio of Rayleigh's formula (a peak where modes
    # overlap can move otherwise: three quarters within 1 %)
    errs = []
    for m in rep.matches:
        if m.kind == "peak" and m.mode is not None and np.isfinite(m.ratio):
            c = room.speed_of_sound
            expect = (mode_frequencies([m.mode], longer.size_m, c) / mode_frequencies([m.mode], room.size_m, c))[0]
            errs.append(abs(m.ratio / expect - 1))
    assert len(errs) >= 5 and np.median(errs) < 0.005 and np.mean(np.array(errs) < 0.01) >= 0.75
    text = " ".join(rep.interpretation)
    # the ratios say which way; the one figure of the effective length comes from the fit
    # (roommodes.analysis.fit.estimate_effective_size, tests/cli/test_effective_size.py)
    assert "Length modes" in text and "the length acts longer than the file's 5.70 m" in text
    assert rep.effective is None
    assert rep.comparison.correlation > 0.85


def test_all_dimensions_larger_reads_as_a_larger_room():
    room = box((5.7, 4.1, 2.6))
    bigger = box((5.7 * 1.03, 4.1 * 1.03, 2.6 * 1.03))
    meas = Measurement(F, predicted_level(bigger, "left", None, F), "synthetic")
    rep = compare_to_prediction(room, meas, "left", band_hz=(20, 150), smoothing=24)
    text = " ".join(rep.interpretation)
    assert "lower in frequency" in text and "larger" in text
    peaks = [m.ratio for m in rep.matches if m.kind == "peak" and np.isfinite(m.ratio)]
    assert np.median(peaks) == pytest.approx(1 / 1.03, abs=0.01)


@pytest.mark.parametrize("factor,word", [(2.5, "more damping"), (0.4, "less damping")])
def test_damping_difference_is_named(factor, word):
    room = box((5.7, 4.1, 2.6), alpha=0.12)
    other = box((5.7, 4.1, 2.6), alpha=0.12 * factor)
    meas = Measurement(F, predicted_level(other, "left", None, F), "synthetic")
    rep = compare_to_prediction(room, meas, "left", band_hz=(20, 150), smoothing=24)
    assert any(word in s for s in rep.interpretation)


def test_shifted_measurement_pairs_with_known_ratio_without_a_room():
    # first(f_i) = L(f_{i+2}): every feature of the first sits 2/48 octave lower
    level = predicted_level(box((5.7, 4.1, 2.6)), "left", None, F)
    first = Measurement(F[:-2], level[2:], "first")
    second = Measurement(F[:-2], level[:-2], "second")
    rep = compare_measurements(first, second, band_hz=(20, 200), smoothing=24)
    ratios = [m.ratio for m in rep.matches if np.isfinite(m.ratio)]
    assert len(ratios) >= 5
    np.testing.assert_allclose(ratios, 2 ** (-2 / 48), atol=0.002)
    assert any("lower in frequency" in s for s in rep.interpretation)
    assert rep.names == ("first", "second")


def test_find_features_interpolates_a_resonance_between_grid_points():
    # one resonance |H|^2 = 1 / ((1 - x^2)^2 + (x / Q)^2), x = f / f0: its maximum lies at
    # f0 sqrt(1 - 1 / (2 Q^2)) (second-order resonator; closed form)
    f = log_frequencies(20, 200, 24)
    f0, q = 61.3, 8.0
    x = f / f0
    lv = -10 * np.log10((1 - x**2) ** 2 + (x / q) ** 2)
    (feat,) = [t for t in find_features(f, lv, (20, 200)) if t.kind == "peak"]
    assert feat.freq_hz == pytest.approx(f0 * math.sqrt(1 - 1 / (2 * q**2)), rel=0.003)
    assert feat.level_db == pytest.approx(-10 * math.log10(1 / q**2 - 1 / (4 * q**4)), abs=0.3)


def test_match_features_is_one_to_one_and_within_distance():
    a = find_features(F, np.sin(np.log2(F) * 6) * 6, (20, 200))
    b = find_features(F, np.sin(np.log2(F) * 6 + 0.2) * 6, (20, 200))
    ms = match_features(a, b, max_distance_octaves=0.1)
    paired = [m for m in ms if np.isfinite(m.ratio)]
    assert len({id(m.measured) for m in paired}) == len(paired)
    assert all(abs(math.log2(m.ratio)) <= 0.1 for m in paired)
    with pytest.raises(ValueError, match="max_distance_octaves"):
        match_features(a, b, max_distance_octaves=0)


def test_predicted_level_at_the_seat_equals_predict():
    room = box((5.7, 4.1, 2.6))
    np.testing.assert_allclose(predicted_level(room, "left", None, F), predict(room, freq_hz=F).channels[0].level_db,
                               atol=1e-9)
    with pytest.raises(ValueError, match="choose one of left"):
        predicted_level(room, "centre", None, F)


# ----------------------------------------------------------------------------- reading


def test_load_text_interpolates_in_log_frequency(tmp_path):
    p = tmp_path / "m.txt"
    # a straight line in (log f, dB) is reproduced exactly by interpolation
    p.write_text("Freq;dB\n10;0\n100;20\n1000;40\n", encoding="utf-8")
    m = load_measurement(p, freq_hz=F)
    np.testing.assert_allclose(m.level_db, 20 * np.log10(m.freq_hz / 10), atol=1e-9)
    assert m.resolution_hz is None and m.sources == (str(p),)
    short = tmp_path / "short.txt"
    short.write_text("400 1\n500 2\n600 3\n", encoding="utf-8")
    with pytest.raises(MeasurementFileError, match="short.txt.*fewer than two points"):
        load_measurement(short, freq_hz=F)


def test_load_wav_impulse_response_matches_freqz(tmp_path):
    # a resonator's impulse response, delayed by 30 ms, against scipy.signal.freqz
    fs = 8000
    b, a = signal.iirpeak(50.0, 10.0, fs=fs)
    h = signal.lfilter(b, a, np.r_[np.zeros(240), 1.0, np.zeros(fs * 2)])
    p = tmp_path / "ir.wav"
    write_wav_atomic(p, h, fs, "float64")
    m = load_measurement(p, window_s=1.5, freq_hz=F, taper_fraction=0.0)
    _, ref = signal.freqz(b, a, worN=F, fs=fs)
    np.testing.assert_allclose(m.level_db, 20 * np.log10(np.abs(ref)), atol=0.01)
    assert m.resolution_hz == pytest.approx(1 / 1.5, rel=0.01)
    # a window much shorter than the decay smears the peak (resolution ~ 1 / window)
    coarse = load_measurement(p, window_s=0.02, freq_hz=F)
    assert coarse.resolution_hz == pytest.approx(50, rel=0.01)
    assert coarse.level_db.max() < m.level_db.max() - 3


def test_load_errors_name_the_file(tmp_path):
    with pytest.raises(MeasurementFileError, match="nope.wav: no such file"):
        load_measurement(tmp_path / "nope.wav")
    fake = tmp_path / "fake.wav"
    fake.write_text("20 1\n30 2\n40 3\n", encoding="utf-8")
    with pytest.raises(MeasurementFileError, match="fake.wav: has a .wav name but no RIFF/WAVE header"):
        load_measurement(fake)
    st = tmp_path / "stereo.wav"
    write_wav_atomic(st, np.zeros((800, 2)) + 0.1, 8000, "pcm16")
    with pytest.raises(MeasurementFileError, match="stereo.wav.*2 channels"):
        load_measurement(st)
    silent = tmp_path / "silent.wav"
    write_wav_atomic(silent, np.zeros(8000), 8000, "pcm16")
    with pytest.raises(MeasurementFileError, match="silent.wav: is silent"):
        load_measurement(silent)
    bad = tmp_path / "bad.txt"
    bad.write_text("20 1\n30 2\nthirty 3\n", encoding="utf-8")
    with pytest.raises(MeasurementFileError, match="bad.txt, line 3"):
        load_measurement(bad)


def test_average_keeps_power_mean_and_spread():
    base = np.linspace(-5, 5, F.size)
    a = Measurement(F, base + 3.0, "a", sources=("a",))
    b = Measurement(F, base - 3.0, "b", sources=("b",))
    avg = average_measurements([a, b])
    expected = 10 * math.log10((10**0.3 + 10**-0.3) / 2)
    np.testing.assert_allclose(avg.level_db, base + expected, atol=1e-9)
    np.testing.assert_allclose(avg.std_db, 3.0, atol=1e-9)
    assert avg.count == 2 and avg.sources == ("a", "b")
    assert average_measurements([a]) is a
