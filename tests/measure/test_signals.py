"""Pink noise and fractional-octave band levels.

Sources (named beside each test): IEC 61260-1:2014 band definitions; the -3 dB/octave
spectrum of pink noise by definition.
"""

import numpy as np
import pytest

from roommodes.measure.signals import (
    band_centres,
    band_levels,
    crest_factor_db,
    level_dbfs,
    pink_noise,
)

FS = 48000


def test_band_centres_match_iec_61260_and_iso_266():
    # CHECKS.md "EQ filters and bands": IEC 61260-1:2014 base-10, f_m = 1000 G^(x/3),
    # G = 10^0.3; x = -12 gives 63.096 Hz with edges 56.234 / 70.795 Hz; ISO 266 labels
    # 20, 25, 31.5, ..., 20k.
    fm, nom, lo, hi = band_centres(3, 60.0, 66.0)
    assert fm[0] == pytest.approx(63.096, abs=5e-4)
    assert lo[0] == pytest.approx(56.234, abs=5e-4) and hi[0] == pytest.approx(70.795, abs=5e-4)
    _, nom, _, _ = band_centres(3, 20.0, 20000.0)
    iso = [20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800,
           1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000,
           20000]
    assert list(nom) == iso
    _, nom1, lo1, hi1 = band_centres(1, 20.0, 200.0)
    assert list(nom1) == [31.5, 63, 125]
    assert np.allclose(hi1[:-1], lo1[1:])  # octave bands tile the axis
    # even fractions: centres at 1000 G^((2x+1)/(2b)), so 1 kHz is an edge
    _, _, _, hi6 = band_centres(6, 900.0, 1100.0)
    assert np.any(np.isclose(hi6, 1000.0))


def test_level_convention_full_scale_sine_is_0_dbfs():
    # AES17 convention (memory): a sine whose peak reaches full scale is 0 dBFS.
    t = np.arange(FS) / FS
    assert level_dbfs(np.sin(2 * np.pi * 1000 * t)) == pytest.approx(0.0, abs=1e-9)
    assert level_dbfs(0.1 * np.sin(2 * np.pi * 1000 * t)) == pytest.approx(-20.0, abs=1e-9)
    assert crest_factor_db(np.sin(2 * np.pi * 1000 * t)) == pytest.approx(3.0103, abs=1e-3)


def test_pure_tone_reads_its_level_in_its_band_and_butterworth_skirts_elsewhere():
    # Analog Butterworth band-pass (Butterworth 1930; low-pass to band-pass map
    # W = (f/f0 - f0/f) / (B/f0)): |H|^2 = 1 / (1 + W^6) for order 3, so the neighbouring
    # 1/3-octave centres are 18.30 dB down and two bands away 36.98 dB down.
    t = np.arange(4 * FS) / FS
    tone = 0.1 * np.sin(2 * np.pi * 1000.0 * t)
    bl = band_levels(tone, FS, 3, 200.0, 5000.0)
    i = int(np.flatnonzero(bl.nominal_hz == 1000)[0])
    assert bl.level_db[i] == pytest.approx(-20.0, abs=0.02)
    g = 10**0.3
    rel_bw = g ** (1 / 6) - g ** (-1 / 6)  # bandwidth / centre of every 1/3-octave band

    def expected(fc):
        w = (1000.0 / fc - fc / 1000.0) / rel_bw
        return -20.0 - 10 * np.log10(1 + w**6)

    for j in (i - 2, i - 1, i + 1, i + 2):
        assert bl.level_db[j] == pytest.approx(expected(bl.center_hz[j]), abs=0.2)


def test_tone_at_a_band_edge_reads_minus_3_db_in_both_bands():
    # Butterworth: -3.01 dB at the cut-off frequencies, which are the IEC band edges.
    _, _, _, hi = band_centres(3, 390.0, 410.0)
    t = np.arange(4 * FS) / FS
    bl = band_levels(np.sin(2 * np.pi * hi[0] * t), FS, 3, 300.0, 600.0)
    i = int(np.flatnonzero(bl.nominal_hz == 400)[0])
    assert bl.level_db[i] == pytest.approx(-3.01, abs=0.05)
    assert bl.level_db[i + 1] == pytest.approx(-3.01, abs=0.05)


@pytest.fixture(scope="module")
def pink():
    return pink_noise(FS, 12.0, level_dbfs_rms=-20.0, f_low_hz=20.0, f_high_hz=20000.0, seed=3)


def test_pink_noise_has_equal_energy_per_band(pink):
    # Pink noise: power per Hz ~ 1/f, hence the same power in every fractional-octave
    # band. 20 Hz-20 kHz spans 30 one-third octaves, so each band holds the total minus
    # 10 log10(30) = 14.77 dB, plus the Butterworth filters' excess noise bandwidth,
    # (pi / 6) / sin(pi / 6) = 1.047 (+0.20 dB) for a 3rd-order prototype (low-pass value,
    # used as an approximation for the band-pass).
    bl = band_levels(pink, FS, 3, 25.0, 16000.0)
    assert np.ptp(bl.level_db) < 0.3
    expected = -20.0 - 10 * np.log10(30) + 10 * np.log10((np.pi / 6) / np.sin(np.pi / 6))
    assert np.mean(bl.level_db) == pytest.approx(expected, abs=0.15)


def test_pink_noise_spectrum_falls_3_db_per_octave_and_stops_at_the_band(pink):
    x = pink_noise(FS, 4.0, f_low_hz=50.0, f_high_hz=5000.0, fade_s=0.0, seed=1)
    p = np.abs(np.fft.rfft(x)) ** 2
    f = np.fft.rfftfreq(x.size, 1 / FS)
    inside = (f >= 50) & (f <= 5000)
    assert np.sum(p[~inside]) < 1e-20 * np.sum(p[inside])
    # power density per octave-wide bin group: slope of 10 log10(p) vs log2 f is -3.01 dB
    slope = np.polyfit(np.log2(f[inside]), 10 * np.log10(p[inside]), 1)[0]
    assert slope == pytest.approx(-10 * np.log10(2), abs=0.02)


def test_pink_noise_level_crest_and_determinism(pink):
    body = pink[FS:-FS]  # away from the fades
    assert level_dbfs(body) == pytest.approx(-20.0, abs=0.1)
    assert crest_factor_db(pink) <= 12.0 + 1e-9
    assert np.max(np.abs(pink)) <= 10 ** (-1 / 20)
    again = pink_noise(FS, 12.0, level_dbfs_rms=-20.0, f_low_hz=20.0, f_high_hz=20000.0, seed=3)
    assert np.array_equal(again, pink)
    other = pink_noise(FS, 12.0, level_dbfs_rms=-20.0, f_low_hz=20.0, f_high_hz=20000.0, seed=4)
    assert not np.allclose(other, pink)
    assert pink[0] == pytest.approx(0.0, abs=1e-4) and pink[-1] == pytest.approx(0.0, abs=1e-4)


def test_pink_noise_crest_factor_can_be_lowered():
    x = pink_noise(FS, 5.0, level_dbfs_rms=-20.0, max_crest_db=9.0, fade_s=0.0, seed=2)
    assert crest_factor_db(x) <= 9.0 + 1e-9


@pytest.mark.parametrize("kw, match", [
    ({"level_dbfs_rms": -5.0}, "level_dbfs_rms"),
    ({"f_high_hz": 30000.0}, "band must satisfy"),
    ({"duration_s": 0.1}, "duration_s"),
    ({"max_crest_db": 3.0}, "max_crest_db"),
    ({"fade_s": 10.0}, "fade_s"),
])
def test_pink_noise_refuses_bad_settings(kw, match):
    with pytest.raises(ValueError, match=match):
        pink_noise(**kw)


def test_band_levels_validation():
    with pytest.raises(ValueError, match="fraction"):
        band_levels(np.zeros(1000), FS, fraction=5)
    with pytest.raises(ValueError, match="NaN"):
        band_levels(np.array([0.0, np.nan, 0.0]), FS)
    with pytest.raises(ValueError, match="Nyquist"):
        band_levels(np.zeros(1000), 8000, 3, 5000.0, 6000.0)
