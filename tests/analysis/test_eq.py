"""Filters, bands, conversions, targets, headroom and export of roommodes.analysis.eq.

Reference values come from /work/shared/CHECKS.md ("EQ filters and bands") unless a
test names another source. Cookbook = R. Bristow-Johnson, "Cookbook formulae for audio
EQ biquad filter coefficients", W3C Audio Working Group note.
"""

import numpy as np
import pytest
from scipy import signal

from roommodes.analysis import eq

RATES = (44100, 48000, 88200, 96000, 176400, 192000)
F_BASS = np.geomspace(20.0, 250.0, 300)


def db(h):
    return 20 * np.log10(np.abs(h))


# ---------------------------------------------------------------------------------------
# Cookbook coefficients
# ---------------------------------------------------------------------------------------
def test_peaking_coefficients_cookbook_worked_cases():
    # Cookbook peakingEQ, worked values in CHECKS.md (seen): 48 kHz, 1 kHz, Q 1, +6 dB
    row = eq.peaking_sos(1000.0, 6.0, 1.0, 48000)
    np.testing.assert_allclose(row[:3], [1.043953087, -1.895320724, 0.867722285], atol=1e-9)
    np.testing.assert_allclose(row[3:], [1.0, -1.895320724, 0.911675372], atol=1e-9)
    # 48 kHz, 50 Hz, Q 5, -8 dB
    row = eq.peaking_sos(50.0, -8.0, 5.0, 48000)
    np.testing.assert_allclose(row[:3], [0.9993763019, -1.9978847520, 0.9985512424], atol=1e-9)
    np.testing.assert_allclose(row[3:], [1.0, -1.9978847520, 0.9979275442], atol=1e-9)


@pytest.mark.parametrize("fs", RATES)
@pytest.mark.parametrize("f0,gain,q", [(31.5, 6.0, 4.3), (57.0, -9.5, 8.0), (120.0, 3.0, 0.7)])
def test_peaking_realised_gain_at_f0_equals_request(fs, f0, gain, q):
    # Cookbook: the bilinear mapping keeps the centre exact, |H(f0)| = gain
    h = eq.sos_response(eq.peaking_sos(f0, gain, q, fs), [f0], fs)
    assert db(h)[0] == pytest.approx(gain, abs=1e-9)


@pytest.mark.parametrize("fs", RATES)
def test_plus_and_minus_sections_cancel(fs):
    # Cookbook: +N and -N dB peaking sections with equal Q cancel exactly (CHECKS.md);
    # the numerator of one is the denominator of the other, so only round-off remains
    for f0, n, q in [(40.0, 6.0, 2.0), (90.0, 11.0, 7.5), (200.0, 2.5, 0.6)]:
        plus, minus = eq.peaking_sos(f0, n, q, fs), eq.peaking_sos(f0, -n, q, fs)
        np.testing.assert_allclose(plus[:3] / plus[0], minus[3:] / minus[3], rtol=1e-12)
        h = eq.sos_response(np.array([plus, minus]), F_BASS, fs)
        assert np.max(np.abs(db(h))) < 1e-8


def test_low_shelf_dc_and_corner():
    # Cookbook lowShelf, S = 1, +6 dB at 100 Hz: +6.00 dB at DC, +3.00 dB at f0 (CHECKS.md)
    for fs in RATES:
        row = eq.low_shelf_sos(100.0, 6.0, fs, slope=1.0)
        h = eq.sos_response(row, [0.0, 100.0], fs)
        np.testing.assert_allclose(db(h), [6.0, 3.0], atol=1e-9)
    flt = eq.Filter.shelf("low_shelf", 100.0, 6.0, slope=1.0)
    np.testing.assert_allclose(flt.response_db([1e-4, 100.0]), [6.0, 3.0], atol=1e-6)


def test_high_shelf_nyquist_and_corner():
    # Cookbook highShelf: full gain at Nyquist, half the dB gain at f0
    for fs in (44100, 48000, 96000):
        row = eq.high_shelf_sos(1000.0, -4.0, fs, slope=0.8)
        np.testing.assert_allclose(db(eq.sos_response(row, [fs / 2, 1000.0], fs)), [-4.0, -2.0],
                                   atol=1e-9)


def test_highpass_matches_scipy_butterworth():
    # Cookbook HPF with Q = 1/sqrt(2) is the bilinear (pre-warped) 2nd-order Butterworth:
    # reference scipy.signal.butter(2, f0, "highpass", fs=fs)
    for fs in RATES:
        for f0 in (25.0, 40.0, 80.0):
            b, a = signal.butter(2, f0, "highpass", fs=fs)
            np.testing.assert_allclose(eq.highpass_sos(f0, 2**-0.5, fs), np.r_[b, a], atol=1e-12)


def test_shelf_slope_and_q_round_trip():
    # Cookbook: S = 1 gives Q = 1/sqrt(2) at any gain; 1/Q = sqrt((A + 1/A)(1/S - 1) + 2)
    for g in (-12.0, -3.0, 3.0, 9.0):
        assert eq.shelf_slope_to_q(1.0, g) == pytest.approx(2**-0.5, abs=1e-12)
        for s in (0.3, 0.7, 1.0):
            assert eq.shelf_q_to_slope(eq.shelf_slope_to_q(s, g), g) == pytest.approx(s, rel=1e-12)


# ---------------------------------------------------------------------------------------
# Responses against scipy.signal
# ---------------------------------------------------------------------------------------
CASCADE = [eq.Filter("peaking", 25.0, 5.0, 1.2), eq.Filter("peaking", 36.0, -5.0, 6.0),
           eq.Filter("peaking", 54.0, -6.0, 8.0), eq.Filter("peaking", 118.0, -3.0, 10.0),
           eq.Filter.shelf("low_shelf", 60.0, 3.0, 0.7), eq.Filter("highpass", 18.0, 0.0, 0.7071)]


@pytest.mark.parametrize("fs", RATES)
def test_sos_response_matches_scipy_sosfreqz(fs):
    # reference: scipy.signal.sosfreqz (general-purpose library)
    sos = np.array([flt.sos(fs) for flt in CASCADE])
    _, h_ref = signal.sosfreqz(sos, worN=F_BASS, fs=fs)
    h = eq.sos_response(sos, F_BASS, fs)
    assert np.max(np.abs(db(h) - db(h_ref))) < 1e-9
    assert np.max(np.abs(np.angle(h / h_ref))) < 1e-9


@pytest.mark.parametrize("fs", RATES)
def test_sos_and_transfer_function_forms_agree(fs):
    # each section in sos form against its own transfer function (scipy.signal.sos2tf +
    # scipy.signal.freqz). A direct-form polynomial of many low-frequency sections loses
    # precision (one reason the export is sos), so the forms are compared per section.
    for flt in CASCADE:
        row = flt.sos(fs)
        b, a = signal.sos2tf(row[None, :])
        _, h_tf = signal.freqz(b, a, worN=F_BASS, fs=fs)
        assert np.max(np.abs(db(eq.sos_response(row, F_BASS, fs)) - db(h_tf))) < 1e-9


def test_digital_response_tends_to_the_analog_prototype():
    # Cookbook: the biquads are bilinear maps of analog prototypes; warping shrinks as fs grows
    f = np.geomspace(20, 250, 100)
    analog = eq.correction_db(CASCADE, f)
    errs = [np.max(np.abs(eq.correction_db(CASCADE, f, fs) - analog))
            for fs in (44100, 96000, 192000)]
    assert errs[0] < 2e-3 and errs[1] < errs[0] / 3 and errs[2] < errs[1] / 3


def test_peaking_half_gain_bandwidth_matches_q_convention():
    # Cookbook definition of Q: half-gain (dB) points BW octaves apart, 1/Q = 2 sinh(ln2/2 BW)
    for g, q in [(6.0, 2.0), (-10.0, 4.318), (3.0, 0.9)]:
        flt = eq.Filter("peaking", 100.0, g, q)
        f = np.geomspace(10, 1000, 200001)
        r = flt.response_db(f) - g / 2
        crossings = f[np.flatnonzero(np.diff(np.sign(r)) != 0)]
        assert crossings.size == 2
        assert np.log2(crossings[1] / crossings[0]) == pytest.approx(
            eq.q_to_bandwidth_octaves(q), abs=1e-4)


def test_q_at_3db_below_peak_matches_measured_points():
    # derived from the Cookbook prototype; checked by locating the -3.0103 dB points
    for g, q in [(6.0, 2.0), (12.0, 5.0), (-9.0, 3.0)]:
        flt = eq.Filter("peaking", 80.0, g, q)
        f = np.geomspace(5, 1000, 400001)
        level = g - 10 * np.log10(2) if g > 0 else g + 10 * np.log10(2)
        r = flt.response_db(f) - level
        crossings = f[np.flatnonzero(np.diff(np.sign(r)) != 0)]
        bw = np.log2(crossings[1] / crossings[0])
        q3 = eq.q_at_3db_below_peak(q, g)
        assert q3 == pytest.approx(eq.bandwidth_octaves_to_q(bw), rel=1e-4)
    assert np.isnan(eq.q_at_3db_below_peak(2.0, 3.0))


def test_bandwidth_q_conversions():
    # CHECKS.md: 1 octave -> 1.41421, 1/3 octave -> 4.3185 (1/Q = 2 sinh(ln2/2 BW))
    assert eq.bandwidth_octaves_to_q(1.0) == pytest.approx(1.41421, abs=1e-5)
    assert eq.bandwidth_octaves_to_q(1 / 3) == pytest.approx(4.3185, abs=1e-4)
    q = np.array([0.5, 1.41421356, 4.3184730, 10.0])
    np.testing.assert_allclose(eq.bandwidth_octaves_to_q(eq.q_to_bandwidth_octaves(q)), q,
                               rtol=1e-12)
    assert eq.q_to_bandwidth_octaves(2**0.5) == pytest.approx(1.0, abs=1e-9)


# ---------------------------------------------------------------------------------------
# IEC 61260-1 / ISO 266 bands
# ---------------------------------------------------------------------------------------
ISO266_THIRDS = ["20", "25", "31.5", "40", "50", "63", "80", "100", "125", "160", "200", "250",
                 "315", "400", "500", "630", "800", "1k", "1.25k", "1.6k", "2k", "2.5k",
                 "3.15k", "4k", "5k", "6.3k", "8k", "10k", "12.5k", "16k", "20k"]


def test_third_octave_bands_iec_61260_and_iso_266():
    # IEC 61260-1:2014 base 10 (G = 10^0.3, f_m = 1000 G^(x/3)); ISO 266 nominal labels
    b = eq.iec_bands("third")
    assert len(b) == 31
    assert list(b.labels) == ISO266_THIRDS
    k = int(np.flatnonzero(b.index == -12)[0])
    assert b.exact_hz[k] == pytest.approx(63.096, abs=5e-4)
    assert b.lower_hz[k] == pytest.approx(56.234, abs=5e-4)
    assert b.upper_hz[k] == pytest.approx(70.795, abs=5e-4)
    assert b.nominal_hz[k] == 63.0
    np.testing.assert_allclose(b.upper_hz[:-1], b.lower_hz[1:], rtol=1e-12)  # contiguous
    # nominal values are the exact ones rounded (ISO 266): within 2.5 %
    assert np.max(np.abs(b.nominal_hz / b.exact_hz - 1)) < 0.025


def test_octave_bands():
    b = eq.iec_bands("octave")
    assert list(b.labels) == ["31.5", "63", "125", "250", "500", "1k", "2k", "4k", "8k", "16k"]
    np.testing.assert_allclose(b.exact_hz, 1000 * 10 ** (0.3 * np.arange(-5, 5)), rtol=1e-12)
    np.testing.assert_allclose(b.upper_hz / b.lower_hz, 10**0.3, rtol=1e-12)


# ---------------------------------------------------------------------------------------
# Targets
# ---------------------------------------------------------------------------------------
def test_tilt_and_table_targets():
    f = np.geomspace(15, 300, 200)
    t = eq.target_tilt(f, 2.0, 100.0)
    assert np.all(t[f >= 100] == 0)
    # an octave below the corner: one step of the slope
    assert np.interp(np.log(50.0), np.log(f), t) == pytest.approx(2.0, abs=1e-3)
    tab = eq.target_from_table(f, [20.0, 80.0, 250.0], [6.0, 0.0, 0.0])
    # linear in log f: 40 Hz is halfway between 20 and 80 Hz
    assert np.interp(np.log(40.0), np.log(f), tab) == pytest.approx(3.0, abs=1e-3)
    assert np.all(np.isnan(tab[f < 20])) and np.all(np.isnan(tab[f > 250]))


def test_alignment_mean_in_db_or_power():
    # power mean of +10 dB over half the log band and 0 dB over the other half:
    # 10 log10((10 + 1)/2) = 7.404 dB (definition of the power mean)
    f = np.geomspace(20, 320, 4001)
    level = np.where(f < 80, 10.0, 0.0)
    t = eq.make_target(f, level, (20, 320), mean="power")
    assert t[0] == pytest.approx(10 * np.log10(5.5), abs=0.01)
    assert np.ptp(t) == 0
    # the default is the mean in dB: (10 + 0) / 2 = 5 dB (definition of the mean)
    assert eq.make_target(f, level, (20, 320))[0] == pytest.approx(5.0, abs=0.01)
    tilt = eq.make_target(f, level, (20, 320), shape="tilt", db_per_octave=1.5, corner_hz=80)
    assert tilt[0] - tilt[-1] == pytest.approx(3.0, abs=1e-6)  # two octaves below 80 Hz


# ---------------------------------------------------------------------------------------
# Headroom
# ---------------------------------------------------------------------------------------
def test_headroom_from_the_combined_curve_two_peak_example():
    # CHECKS.md: +4 dB at 40 and 60 Hz, Q 2: cascade peaks at +5.15 dB near 57.8 Hz.
    # The analog curve is symmetric in log f about sqrt(40 x 60) Hz, so an equal maximum
    # sits at 2400/57.8 = 41.5 Hz: either may be reported.
    pair = [eq.Filter("peaking", 40.0, 4.0, 2.0), eq.Filter("peaking", 60.0, 4.0, 2.0)]
    for fs in (None, 44100, 48000, 96000):
        top, f_top = eq.cascade_max_db(pair, fs)
        assert top == pytest.approx(5.15, abs=0.005)
        assert min(abs(f_top - 57.8), abs(f_top - 2400 / 57.8)) < 0.1
    f = np.geomspace(15, 300, 500)
    h = eq.headroom(pair, f)
    assert h.max_boost_db == pytest.approx(5.15, abs=0.005)
    assert h.preattenuation_db == h.max_boost_db
    assert h.max_boost_db > max(flt.gain_db for flt in pair) + 1.0
    # the figure agrees with a brute-force search on a very fine grid
    fine = np.geomspace(30, 80, 200001)
    assert h.max_boost_db == pytest.approx(np.max(eq.correction_db(pair, fine)), abs=1e-7)


def test_power_and_excursion_factors():
    # CHECKS.md: +3 dB x2.0 power, +6 dB x3.98, +10 dB x10; excursion/voltage 10^(G/20)
    for g, p in [(3.0, 1.995), (6.0, 3.981), (10.0, 10.0)]:
        h = eq.headroom([eq.Filter("peaking", 50.0, g, 2.0)], [50.0])
        assert h.power_factor[0] == pytest.approx(p, abs=1e-3)
        assert h.excursion_factor[0] == pytest.approx(10 ** (g / 20), rel=1e-9)
    cut = eq.headroom([eq.Filter("peaking", 50.0, -6.0, 2.0)], [50.0, 500.0])
    assert cut.preattenuation_db == 0.0
    assert cut.power_factor[0] == pytest.approx(10**-0.6, rel=1e-9)


def test_max_clean_spl_before_and_after():
    # decibel arithmetic of the stated assumptions: 87 dB/1 W/1 m, 100 W -> 107 dB at 1 m
    f = np.array([30.0, 50.0, 80.0, 120.0])
    level = np.array([-3.0, 4.0, -8.0, 0.0])
    corr = np.array([6.0, -4.0, 0.0, 2.0])
    r = eq.max_clean_spl(f, level, 100.0, 87.0, 110.0, correction_db=corr)
    np.testing.assert_allclose(r.before_db, 107.0 + level)
    assert r.preattenuation_db == 6.0
    np.testing.assert_allclose(r.after_db, 107.0 + corr - 6.0 + level)
    assert list(r.limit_after) == ["amplifier"] * 4
    # a speaker ceiling below the amplifier's reach caps the level (1 m free field)
    r = eq.max_clean_spl(f, level, 100.0, 87.0, 104.0, correction_db=corr)
    np.testing.assert_allclose(r.before_db, 104.0 + level)
    np.testing.assert_allclose(r.after_db, np.minimum(107.0 + corr - 6.0, 104.0) + level)
    assert list(r.limit_after) == ["speaker", "amplifier", "amplifier", "amplifier"]


# ---------------------------------------------------------------------------------------
# Warnings
# ---------------------------------------------------------------------------------------
def test_vented_boost_warning_recommends_highpass():
    f = np.geomspace(15, 300, 200)
    boost = eq.correction_db([eq.Filter("peaking", 30.0, 5.0, 1.0)], f)
    w = eq.vented_boost_warnings(f, boost, 40.0, 4)
    assert len(w) == 1 and w[0].code == "vented_boost_refused"
    assert w[0].recommended == eq.Filter("highpass", 40.0, 0.0, 2**-0.5)
    assert "high-pass" in w[0].message
    assert eq.vented_boost_warnings(f, boost, 40.0, 2) == []  # sealed: no rule
    cut = eq.correction_db([eq.Filter("peaking", 30.0, -5.0, 1.0)], f)
    assert eq.vented_boost_warnings(f, cut, 40.0, 4) == []


def test_channel_headroom_difference_warning():
    w = eq.channel_headroom_warnings({"left": 5.5, "right": 1.9})
    assert len(w) == 1 and "'left'" in w[0].message and w[0].code == "channel_headroom_differs"
    assert eq.channel_headroom_warnings({"left": 4.0, "right": 1.5}) == []


# ---------------------------------------------------------------------------------------
# Export
# ---------------------------------------------------------------------------------------
def test_sos_export_rates_layout_and_response():
    out = eq.sos_export(CASCADE)
    assert list(out) == ["44100", "48000", "96000"]
    for key, rows in out.items():
        fs = int(key)
        rows = np.array(rows)
        assert rows.shape == (len(CASCADE), 6)
        assert np.all(rows[:, 3] == 1.0)
        # the exported sections do what the filter list says (scipy.signal.sosfreqz)
        _, h = signal.sosfreqz(rows, worN=F_BASS, fs=fs)
        np.testing.assert_allclose(db(h), eq.correction_db(CASCADE, F_BASS), atol=0.01)


def test_render_text_round_trips_the_coefficients():
    pre = 5.15
    text = eq.render_text(CASCADE, "9.9.9-test", title="left channel", preattenuation_db=pre,
                          notes=eq.CAUTIONS)
    assert text.startswith("# roommodes 9.9.9-test")
    assert f"preattenuation_db {pre:.2f}" in text
    lines = text.splitlines()
    assert sum(1 for s in lines if s[:4].strip().isdigit()) == len(CASCADE)
    # parse the coefficient blocks back and compare with sos_export
    blocks, current = {}, None
    for s in lines:
        if s.startswith("sample_rate "):
            current = s.split()[1]
            blocks[current] = []
        elif current and s and not s.startswith("#"):
            blocks[current].append([float(v) for v in s.split()])
        elif not s:
            current = None
    assert blocks == eq.sos_export(CASCADE)
    # peaking Q 1.2 -> BW = (2/ln2) asinh(1/2.4) = 1.170 octaves (Cookbook BW, computed)
    assert "BW 1.170 oct" in text


# ---------------------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------------------
def test_bad_filter_and_biquad_input():
    with pytest.raises(ValueError, match="filter type must be one of"):
        eq.Filter("bandpass", 50.0, 3.0, 1.0)
    with pytest.raises(ValueError, match="q must be finite and > 0"):
        eq.Filter("peaking", 50.0, 3.0, 0.0)
    with pytest.raises(ValueError, match="below half the sample rate"):
        eq.peaking_sos(30000.0, 3.0, 1.0, 48000)
    with pytest.raises(ValueError, match="sample_rate must be finite"):
        eq.peaking_sos(50.0, 3.0, 1.0, 100)
    with pytest.raises(ValueError, match="bandwidth_octaves must be in"):
        eq.bandwidth_octaves_to_q(-1.0)
    with pytest.raises(ValueError, match="either a slope S or a q"):
        eq.low_shelf_sos(50.0, 3.0, 48000, slope=1.0, q=0.7)


def test_bad_target_tables():
    f = np.geomspace(15, 300, 100)
    with pytest.raises(ValueError, match=r"strictly rising; row 3 \(40 Hz\) follows 50 Hz"):
        eq.target_from_table(f, [20, 50, 40, 100], [0, 0, 0, 0])
    with pytest.raises(ValueError, match="row 2: missing or invalid frequency"):
        eq.target_from_table(f, [20, np.nan, 100], [0, 0, 0])
    with pytest.raises(ValueError, match=r"row 2 \(50 Hz\): missing or invalid level"):
        eq.target_from_table(f, [20, 50, 100], [0, np.nan, 0])
    with pytest.raises(ValueError, match="at least 2 rows"):
        eq.target_from_table(f, [20], [0])
    with pytest.raises(ValueError, match="target shape must be"):
        eq.make_target(f, np.zeros_like(f), (20, 250), shape="smile")
    with pytest.raises(ValueError, match="db_per_octave must be finite"):
        eq.target_tilt(f, 20.0, 100.0)


def test_bad_bands_and_limits():
    with pytest.raises(ValueError, match="bands must be 'third' or 'octave'"):
        eq.iec_bands("sixth")
    with pytest.raises(ValueError, match="freq_range_hz must satisfy"):
        eq.cascade_max_db([], None, (100.0, 10.0))
    with pytest.raises(ValueError, match="amplifier_power_w must be finite and > 0"):
        eq.max_clean_spl([20, 30, 40], [0, 0, 0], -5, 87, 105)
    with pytest.raises(ValueError, match="lowcut_order must be 2 .* or 4"):
        eq.vented_boost_warnings([20, 30, 40], [0, 0, 0], 30.0, 3)


def test_every_public_name_exists():
    for name in eq.__all__:
        assert hasattr(eq, name), name
