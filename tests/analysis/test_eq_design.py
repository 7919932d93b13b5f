"""Dip classification and the three correction designs of roommodes.analysis.eq.

The room-like curves below are invented test data: a flat direct part plus five modal
resonances (one of them in antiphase), a sealed-speaker roll-off, and a deep narrow notch
whose frequency and depth change at the neighbouring positions (a seat near a pressure
node). Known-answer cases build a curve from Cookbook filters and ask the fit to find
them again (Cookbook = R. Bristow-Johnson, Audio EQ Cookbook, W3C Audio WG note).
"""

import numpy as np
import pytest
from scipy import signal

from roommodes.analysis import eq
from roommodes.dsp.response import log_frequencies

BAND = (20.0, 250.0)
F = log_frequencies(15.0, 300.0, 48)
MODES = [(36.0, 5.0, 1.2), (54.0, 7.0, 1.5), (75.0, 6.0, -0.45), (118.0, 8.0, 1.0),
         (163.0, 9.0, 0.8)]  # (frequency Hz, Q, amplitude relative to the direct part)


def room_like(f, notch_hz=92.0, notch_depth_db=28.0, notch_q=5.0, gain_scale=1.0):
    s = 1j * f
    h = np.ones_like(f, dtype=complex)
    for fn, qn, an in MODES:
        h = h + gain_scale * an * (s * fn / qn) / (fn**2 + s**2 + s * fn / qn)
    hp = s**2 / (s**2 + s * 24.0 / 0.6 + 24.0**2)
    dz = 10 ** (-notch_depth_db / 20) / notch_q
    notch = (notch_hz**2 + s**2 + s * notch_hz * dz) / (notch_hz**2 + s**2 + s * notch_hz / notch_q)
    return 20 * np.log10(np.abs(h * hp * notch)) - 6.0


LEVEL = room_like(F)
NEIGHBOURS = np.array([room_like(F, 92 * k, d, notch_q=5.0, gain_scale=g)
                       for k, d, g in [(0.95, 22, 1.05), (1.05, 30, 0.95), (0.97, 26, 1.0),
                                       (1.04, 20, 1.02)]])
TARGET = eq.make_target(F, LEVEL, BAND, mean="power")


@pytest.fixture(scope="module")
def classification():
    return eq.classify_regions(F, LEVEL, TARGET, BAND, NEIGHBOURS)


@pytest.fixture(scope="module")
def parametric(classification):
    return eq.design_parametric(F, LEVEL, TARGET, BAND, classification=classification)


def dense_check_grid():
    return np.geomspace(1.0, 20000.0, 60001)


# ---------------------------------------------------------------------------------------
# Classification
# ---------------------------------------------------------------------------------------
def test_classification_of_the_room_like_curve(classification):
    kinds = {r.kind for r in classification.regions}
    assert kinds <= set(eq.REGION_KINDS)
    nulls = classification.nulls
    assert len(nulls) == 1
    null = nulls[0]
    assert null.freq_extreme_hz == pytest.approx(92.0, rel=0.03)
    assert null.deviation_db < -20 and null.width_octaves < 0.2
    assert any("moves with position" in r for r in null.reasons)
    assert null.spread_db > 6.0
    peaks = [r.freq_extreme_hz for r in classification.regions if r.kind == "peak"]
    for fn in (36.0, 54.0, 118.0, 163.0):
        assert min(abs(p / fn - 1) for p in peaks) < 0.03
    # the roll-off at the bottom of the band is a stable, broad shortfall: boostable
    low = [r for r in classification.regions if r.freq_lo_hz == pytest.approx(BAND[0], rel=0.02)]
    assert low and low[0].kind == "broad dip" and low[0].spread_db < 1.0
    # labels agree with the regions
    assert np.all(classification.labels[(F >= null.freq_lo_hz) & (F <= null.freq_hi_hz)]
                  == "narrow null")
    assert np.all(classification.labels[(F < BAND[0]) | (F > BAND[1])] == "")


def test_null_found_without_neighbours_by_width_and_depth():
    c = eq.classify_regions(F, LEVEL, TARGET, BAND)
    (null,) = c.nulls
    assert any(s.startswith("narrow") for s in null.reasons)
    assert np.isnan(null.spread_db)


def test_position_spread_decides_a_moderate_dip():
    # an 8 dB dip, 0.57 octave wide at half depth (Cookbook Q 2.5): not narrow, not very deep
    f = log_frequencies(15.0, 300.0, 48)
    flat = np.zeros_like(f)

    def dip(centre):
        return eq.correction_db([eq.Filter("peaking", centre, -8.0, 2.5)], f)

    level = dip(70.0)
    stable = np.array([dip(70.0) + 0.5, dip(70.0) - 0.5])
    moving = np.array([flat, dip(100.0)])  # gone at one position, shifted at another
    c_stable = eq.classify_regions(f, level, flat, BAND, stable)
    c_moving = eq.classify_regions(f, level, flat, BAND, moving)
    assert [r.kind for r in c_stable.regions] == ["broad dip"]
    assert [r.kind for r in c_moving.regions] == ["narrow null"]
    assert c_moving.regions[0].spread_db > 6.0
    # common-practice thresholds can be moved: a wider "narrow" makes it a null too
    c_wide = eq.classify_regions(f, level, flat, BAND, narrow_octaves=1.0)
    assert [r.kind for r in c_wide.regions] == ["narrow null"]


# ---------------------------------------------------------------------------------------
# Parametric design on the room-like curve
# ---------------------------------------------------------------------------------------
def test_parametric_brings_allowed_band_within_3db(parametric):
    d = parametric
    assert 1 <= len(d.filters) <= 6
    dev_after = (d.after_db - d.target_db)[d.allowed]
    assert np.max(np.abs(dev_after)) <= 3.0
    assert d.error_after.within_3db == 1.0
    assert d.error_after.rms_db < d.error_before.rms_db / 3
    # the allowed region is the band minus the null
    null = d.classification.nulls[0]
    in_null = (F >= null.freq_lo_hz) & (F <= null.freq_hi_hz)
    assert not np.any(d.allowed & in_null)
    assert np.all(d.allowed == ((F >= BAND[0]) & (F <= BAND[1]) & ~in_null))


def test_parametric_boost_limit_holds_at_every_frequency(parametric):
    d = parametric
    fine = dense_check_grid()
    curve = eq.correction_db(d.filters, fine, 48000)
    assert np.max(curve) <= 6.0 + 1e-9
    assert d.max_boost_db == pytest.approx(np.max(curve), abs=1e-6)
    # same figure from scipy.signal.sosfreqz on the exported sections
    rows = np.array(d.sos()["48000"])
    _, h = signal.sosfreqz(rows, worN=fine[fine < 20000], fs=48000)
    assert np.max(20 * np.log10(np.abs(h))) <= 6.0 + 1e-9


def test_parametric_does_not_boost_into_the_null(parametric):
    d = parametric
    null = d.classification.nulls[0]
    fine = np.geomspace(null.freq_lo_hz, null.freq_hi_hz, 4001)
    assert np.max(eq.correction_db(d.filters, fine, 48000)) <= 0.5 + 1e-9
    for flt in d.filters:
        if flt.gain_db > 0:
            assert not null.freq_lo_hz <= flt.freq_hz <= null.freq_hi_hz


def test_parametric_table_matches_realised_filters(parametric):
    # the correction curve in the result is what the listed filters do
    # (reference: scipy.signal.sosfreqz of each exported section)
    d = parametric
    for key, rows in d.sos().items():
        _, h = signal.sosfreqz(np.array(rows), worN=F, fs=int(key))
        np.testing.assert_allclose(20 * np.log10(np.abs(h)), d.correction_db, atol=2e-3)
    np.testing.assert_allclose(d.after_db, d.before_db + d.correction_db)
    for flt in d.filters:
        assert flt.type == "peaking"
        assert 0.5 - 1e-9 <= flt.q <= 10.0 + 1e-9
        assert BAND[0] - 1e-9 <= flt.freq_hz <= BAND[1] + 1e-9


def test_parametric_known_answer_recovers_cookbook_filters():
    # level = target + two Cookbook peaks; the exact inverse is two cuts of equal Q
    # (+N and -N cancel, Cookbook), which a fit on realised responses must find
    # (both well inside the band: outside it the fit keeps the curve near 0 dB)
    peaks = [eq.Filter("peaking", 47.0, 7.0, 4.0), eq.Filter("peaking", 110.0, 5.0, 4.0)]
    level = eq.correction_db(peaks, F, 48000)
    d = eq.design_parametric(F, level, np.zeros_like(F), BAND, max_filters=4)
    assert len(d.filters) == 2
    found = sorted(d.filters, key=lambda x: x.freq_hz)
    for got, want in zip(found, peaks):
        assert got.freq_hz == pytest.approx(want.freq_hz, rel=1e-3)
        assert got.gain_db == pytest.approx(-want.gain_db, abs=0.02)
        assert got.q == pytest.approx(want.q, rel=5e-3)
    assert d.error_after.max_abs_db < 0.02


def test_parametric_prefers_a_cut():
    # equal +5 dB excess at 50 Hz and 5 dB shortfall at 140 Hz (not a null): one filter
    # allowed, it must be the cut
    f = F
    level = eq.correction_db([eq.Filter("peaking", 50.0, 5.0, 3.0),
                              eq.Filter("peaking", 140.0, -5.0, 1.0)], f)
    d = eq.design_parametric(f, level, np.zeros_like(f), BAND, max_filters=1)
    (flt,) = d.filters
    assert flt.gain_db < 0 and flt.freq_hz == pytest.approx(50.0, rel=0.02)


@pytest.mark.parametrize("limit", [0.0, 3.0])
def test_parametric_respects_smaller_boost_limits(limit, classification):
    d = eq.design_parametric(F, LEVEL, TARGET, BAND, classification=classification,
                             max_boost_db=limit)
    assert np.max(eq.correction_db(d.filters, dense_check_grid(), 48000)) <= limit + 1e-9
    assert d.max_boost_db <= limit + 1e-9
    if limit == 0.0:
        assert all(flt.gain_db < 0 for flt in d.filters)
    # the shortfall at the bottom of the band is now too deep: the result says so
    (w,) = [w for w in d.warnings if w.code == "shortfall_remains"]
    assert w.freq_hz[0] == pytest.approx(BAND[0], rel=0.02)


def test_measured_style_linear_grid_is_accepted():
    # a curve on FFT bins (linear spacing), as a measurement would give: the API does not
    # care where the curve comes from; the same peaks are found
    f_lin = np.arange(10.0, 400.0, 0.5)
    peaks = [eq.Filter("peaking", 63.0, 6.0, 5.0)]
    level = eq.correction_db(peaks, f_lin, 48000)
    d = eq.design_parametric(f_lin, level, np.zeros_like(f_lin), BAND, max_filters=2)
    assert d.filters[0].freq_hz == pytest.approx(63.0, rel=1e-3)
    assert d.filters[0].gain_db == pytest.approx(-6.0, abs=0.05)


def test_analog_design_agrees_with_digital(classification):
    d = eq.design_parametric(F, LEVEL, TARGET, BAND, classification=classification,
                             sample_rate=None)
    assert d.sample_rate is None
    assert np.max(np.abs((d.after_db - d.target_db)[d.allowed])) <= 3.0


# ---------------------------------------------------------------------------------------
# Vented speaker
# ---------------------------------------------------------------------------------------
def test_vented_speaker_is_not_boosted_below_tuning(classification):
    d = eq.design_parametric(F, LEVEL, TARGET, BAND, classification=classification,
                             lowcut_hz=30.0, lowcut_order=4)
    below = np.geomspace(1.0, 30.0, 3001)
    assert np.max(eq.correction_db(d.filters, below, 48000)) <= 0.5 + 1e-9
    (w,) = [w for w in d.warnings if w.code == "vented_boost_refused"]
    assert w.recommended.type == "highpass" and w.recommended.freq_hz == 30.0
    assert not np.any(d.allowed & (F < 30.0))
    # a sealed speaker with the same corner may be boosted there
    s = eq.design_parametric(F, LEVEL, TARGET, BAND, classification=classification,
                             lowcut_hz=30.0, lowcut_order=2)
    assert np.max(eq.correction_db(s.filters, below, 48000)) > 3.0
    assert not any(w.code == "vented_boost_refused" for w in s.warnings)


# ---------------------------------------------------------------------------------------
# Shelf
# ---------------------------------------------------------------------------------------
def test_shelf_known_answer():
    # level = target minus a Cookbook low shelf; the best shelf is its exact inverse
    want = eq.Filter.shelf("low_shelf", 60.0, -5.0, slope=0.8)
    level = eq.correction_db([want], F, 48000)
    # boost_cost=0: no preference for cuts, so the exact inverse is the optimum; the
    # no-harm ceiling (tested on its own below) is dropped so that only the fit is judged
    d = eq.design_shelf(F, level, np.zeros_like(F), BAND, boost_cost=0.0, no_harm_db=None)
    (got,) = d.filters
    assert got.type == "low_shelf"
    assert got.freq_hz == pytest.approx(60.0, rel=2e-3)
    assert got.gain_db == pytest.approx(5.0, abs=0.02)
    assert d.slope == pytest.approx(0.8, abs=0.01)
    assert d.error_after.rms_db < 0.02


def test_shelf_on_room_like_curve(classification):
    d = eq.design_shelf(F, LEVEL, TARGET, BAND, classification=classification)
    (sh,) = d.filters
    assert sh.type == "low_shelf" and 0 < sh.gain_db <= 6.0 + 1e-9
    assert d.error_after.rms_db < d.error_before.rms_db
    assert d.max_boost_db <= 6.0 + 1e-9
    assert 0.3 - 1e-9 <= d.slope <= 1.0 + 1e-9


# ---------------------------------------------------------------------------------------
# Graphic EQ
# ---------------------------------------------------------------------------------------
def test_graphic_known_answer_beats_minus_the_curve():
    # level = target minus known slider settings on constant-Q 1/3-octave bands: the fit
    # on realised band shapes recovers them; "minus the curve" overshoots where bands
    # overlap (invented slider settings, all within +-6 dB)
    bands = eq.iec_bands("third", 20, 250)
    q = eq.bandwidth_octaves_to_q(1 / 3)
    sliders = np.array([2.0, 4.0, 5.0, 5.0, 3.0, 0.0, -3.0, -5.0, -5.0, 0.0, 0.0, 0.0])
    bumps = [eq.Filter("peaking", c, -g, q) for c, g in zip(bands.exact_hz, sliders)]
    level = eq.correction_db(bumps, F, 48000)
    # no preference for cuts and a boost limit above the sliders' sum: the exact
    # setting is the optimum
    # (the no-harm ceiling, tested on its own below, is dropped so that only the fit is judged)
    d = eq.design_graphic(F, level, np.zeros_like(F), BAND, bands="third", boost_cost=0.0,
                          max_boost_db=12.0, no_harm_db=None)
    assert list(d.bands.labels) == ["20", "25", "31.5", "40", "50", "63", "80", "100", "125",
                                    "160", "200", "250"]
    assert d.band_q == pytest.approx(4.3185, abs=1e-4)
    # the top slider also answers to the "leave the response alone above the band" rows
    # (the 125 Hz bump reaches +0.1 dB at 250 Hz), so it is checked more loosely
    np.testing.assert_allclose(d.gains_db[:-1], sliders[:-1], atol=0.05)
    assert abs(d.gains_db[-1]) < 0.3
    assert d.error_after.rms_db < 0.05
    assert d.naive_error.rms_db > 1.0
    assert d.naive_error.max_abs_db > 2.0


@pytest.mark.parametrize("bands,n", [("third", 12), ("octave", 4)])
def test_graphic_on_room_like_curve(bands, n, classification):
    d = eq.design_graphic(F, LEVEL, TARGET, BAND, bands=bands, classification=classification)
    assert len(d.gains_db) == n == len(d.filters)
    assert np.all(d.gains_db >= -12 - 1e-9) and np.all(d.gains_db <= 6 + 1e-9)
    assert np.max(eq.correction_db(d.filters, dense_check_grid(), 48000)) <= 6.0 + 1e-9
    # the fitted sliders beat the naive setting in both rms and worst-case error
    assert d.error_after.rms_db < d.naive_error.rms_db
    assert d.error_after.max_abs_db < d.naive_error.max_abs_db
    assert d.error_after.rms_db < d.error_before.rms_db
    null = d.classification.nulls[0]
    fine = np.geomspace(null.freq_lo_hz, null.freq_hi_hz, 2001)
    assert np.max(eq.correction_db(d.filters, fine, 48000)) <= 0.5 + 1e-9


# ---------------------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------------------
def test_design_bad_input_messages():
    z = np.zeros_like(F)
    with pytest.raises(ValueError, match="max_boost_db must be finite and >= 0"):
        eq.design_parametric(F, LEVEL, z, BAND, max_boost_db=-1.0)
    with pytest.raises(ValueError,
                       match=r"q_range must satisfy 0 < low < high <= 100, got \(10, 0.5\)"):
        eq.design_parametric(F, LEVEL, z, BAND, q_range=(10.0, 0.5))
    with pytest.raises(ValueError, match="band_hz 10-250 Hz lies outside the data range 15-300 Hz"):
        eq.design_parametric(F, LEVEL, z, (10.0, 250.0))
    with pytest.raises(ValueError, match="band_hz must satisfy"):
        eq.design_shelf(F, LEVEL, z, (250.0, 20.0))
    with pytest.raises(ValueError, match="gain_range low end must be negative"):
        eq.design_parametric(F, LEVEL, z, BAND, gain_range=(0.0, 6.0))
    with pytest.raises(ValueError, match="lowcut_order must be 2"):
        eq.design_parametric(F, LEVEL, z, BAND, lowcut_hz=30.0, lowcut_order=3)
    with pytest.raises(ValueError, match="max_filters must be"):
        eq.design_parametric(F, LEVEL, z, BAND, max_filters=2.5)
    with pytest.raises(ValueError, match="slider_range_db must satisfy"):
        eq.design_graphic(F, LEVEL, z, BAND, slider_range_db=(12.0, -12.0))
    with pytest.raises(ValueError, match=r"neighbour_levels_db must have shape \(K, "):
        eq.classify_regions(F, LEVEL, z, BAND, np.zeros((2, 5)))


def test_design_bad_grid_and_target_messages():
    with pytest.raises(ValueError, match=r"freq_hz must be strictly rising; entry 2"):
        eq.design_parametric([20.0, 40.0, 30.0, 60.0], [0, 0, 0, 0], [0, 0, 0, 0], (20, 60))
    with pytest.raises(ValueError, match=r"level_db must have the shape of freq_hz"):
        eq.design_graphic(F, LEVEL[:-1], np.zeros_like(F), BAND)
    # a target table that does not cover the band
    shape = eq.target_from_table(F, [30.0, 250.0], [3.0, 0.0])
    with pytest.raises(ValueError, match=r"target_db is undefined at 15-29.\d+ Hz|undefined"):
        eq.design_parametric(F, LEVEL, shape, BAND)
    with pytest.raises(ValueError, match=r"inside band_hz 20-250 Hz \(a target table must cover"):
        eq.design_parametric(F, LEVEL, shape, BAND)


def test_classification_must_match_the_design_band(classification):
    with pytest.raises(ValueError,
                       match="classification covers 20-250 Hz, the design band_hz is 30-200"):
        eq.design_shelf(F, LEVEL, TARGET, (30.0, 200.0), classification=classification)


def test_results_serialise_to_strict_json(parametric, classification):
    import json

    shelf = eq.design_shelf(F, LEVEL, TARGET, BAND, classification=classification)
    graphic = eq.design_graphic(F, LEVEL, TARGET, BAND, bands="octave",
                                classification=classification)
    for d in (parametric, shelf, graphic):
        doc = json.loads(json.dumps(d.to_dict(), allow_nan=False))
        assert set(doc["sos"]) == {"44100", "48000", "96000"}
        assert len(doc["after_db"]) == F.size
        assert doc["max_boost_db"] == pytest.approx(d.max_boost_db)
        assert [f["type"] for f in doc["filters"]] == [f.type for f in d.filters]
        assert any(r["kind"] == "narrow null" for r in doc["regions"])
    assert graphic.to_dict()["bands"]["labels"] == ["31.5", "63", "125", "250"]
