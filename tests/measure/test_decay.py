"""Decay analysis: Schroeder curves, noise handling, EDT/T20/T30, modal decay, waterfall.

Synthetic decays are built from their definition: a carrier times exp(-6.908 t / T), so the
squared envelope falls 60 dB in T seconds. A random-sign carrier (+-1 samples) is noise
whose square is exactly the envelope, so the expected result holds sample by sample and a
tight tolerance tests the method, not the luck of a seed. Gaussian carriers are also used,
averaged over seeds.
"""

import math
import warnings

import numpy as np
import pytest
from scipy import signal

from roommodes.measure.decay import (
    MODE_BANDWIDTH_T60,
    DecayRangeWarning,
    band_sos,
    cumulative_spectral_decay,
    estimate_noise_lundeby,
    find_modal_peaks,
    fit_decay_time,
    modal_decay_times,
    onset_index,
    reverberation_times,
    schroeder_integral,
)

FS = 16000
LN_1E3 = 3 * math.log(10)  # 6.908: amplitude decay constant times T60


def decaying_noise(t60_s=0.5, floor_db=50.0, fs=FS, dur_s=1.5, seed=0, carrier="sign"):
    """carrier * exp(-6.908 t / T) plus Gaussian noise ``floor_db`` below the start."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(dur_s * fs)) / fs
    if carrier == "sign":
        c = rng.choice([-1.0, 1.0], t.size)
    else:
        c = rng.standard_normal(t.size)
    floor = 10 ** (-floor_db / 20) * rng.standard_normal(t.size) if floor_db else 0.0
    return c * np.exp(-LN_1E3 * t / t60_s) + floor


def quiet(fn, *args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DecayRangeWarning)
        return fn(*args, **kw)


# --------------------------------------------------------------------------- Schroeder curve


def test_schroeder_curve_of_pure_exponential_is_the_geometric_sum():
    # Schroeder 1965 (JASA 37:409) eq. 1 for h^2 = r^n: E(n) = r^n (1 - r^(N-n)) / (1 - r),
    # summed in closed form (definition, no noise, no truncation).
    n = 8000
    r = math.exp(-2 * LN_1E3 / (0.4 * FS))
    h = np.sqrt(r) ** np.arange(n) * np.where(np.arange(n) % 3 == 0, -1, 1)
    curve = schroeder_integral(h, FS, method="none")
    k = np.arange(n)
    expected = r**k * (1 - r ** (n - k)) / (1 - r)
    expected_db = 10 * np.log10(expected / expected[0])
    assert np.max(np.abs(curve.level_db[:-1] - expected_db[:-1])) < 1e-8
    # a straight line of -60 dB per 0.4 s, bent only near the end by the finite sum
    assert fit_decay_time(curve, FS, (-5, -35))[0] == pytest.approx(0.4, rel=1e-4)


@pytest.mark.parametrize("floor_db", [50.0, 60.0])
def test_t20_t30_of_exponential_decay_with_noise_floor(floor_db):
    # CHECKS.md "Reverberation": synthetic noise x exp(-6.908 t / 0.5 s), floor >= 50 dB
    # down: T20 = T30 = 0.500 s within 1 % (from the definition). ISO 3382-1:2009
    # evaluation ranges -5..-25 and -5..-35 dB.
    for seed in range(3):
        ir = decaying_noise(0.5, floor_db, seed=seed)
        rt = reverberation_times(ir, FS, bands=None)
        assert rt.t20_s[0] == pytest.approx(0.5, rel=0.01)
        assert rt.t30_s[0] == pytest.approx(0.5, rel=0.01)
        assert rt.edt_s[0] == pytest.approx(0.5, rel=0.01)
        assert rt.t20_ok[0] and rt.t30_ok[0] and rt.edt_ok[0]
        assert rt.decay_range_db[0] == pytest.approx(floor_db, abs=1.0)


def test_t20_t30_gaussian_noise_carrier_mean_over_seeds():
    # Same check with a Gaussian carrier: a single realisation scatters by about 0.7 % in
    # T20 at 16 kHz (statistics of decaying noise), so the mean over seeds is checked.
    t20, t30 = [], []
    for seed in range(8):
        rt = reverberation_times(decaying_noise(0.5, 50.0, seed=seed, carrier="gauss"), FS,
                                 bands=None)
        t20.append(rt.t20_s[0])
        t30.append(rt.t30_s[0])
    assert np.mean(t20) == pytest.approx(0.5, rel=0.01)
    assert np.mean(t30) == pytest.approx(0.5, rel=0.01)


def test_octave_bands_of_decaying_white_noise_mean_over_seeds():
    # Exponentially decaying white noise has the same T in every band (definition). Band
    # levels of noise scatter (few degrees of freedom in narrow bands), so bands with
    # B*T >= 175 are averaged over seeds and held to 2 %.
    res = []
    for seed in range(6):
        rt = reverberation_times(decaying_noise(0.5, 60.0, seed=seed, carrier="gauss"), FS,
                                 bands="octave", freq_range_hz=(500, 4000))
        res.append(np.c_[rt.t20_s, rt.t30_s])
        np.testing.assert_allclose(rt.nominal_hz, [500, 1000, 2000, 4000])
    mean = np.mean(res, axis=0)
    np.testing.assert_allclose(mean, 0.5, rtol=0.02)


def test_edt_on_double_slope_decay_matches_the_analytic_curve():
    # Double-slope energy decay h^2 = e^{-2 d1 t} + a e^{-2 d2 t}: the Schroeder curve is
    # E(t) = e^{-2 d1 t}/(2 d1) + a e^{-2 d2 t}/(2 d2) (Schroeder 1965, integrated by hand).
    # EDT (0..-10 dB) and T30 (-5..-35 dB) are the least-squares fits to that curve
    # (ISO 3382-1:2009 ranges), computed here independently on a fine time grid.
    t1, t2, a = 0.3, 1.2, 10 ** (-15 / 10)
    d1, d2 = LN_1E3 / t1, LN_1E3 / t2
    fs = 8000
    t = np.arange(int(5.0 * fs)) / fs
    rng = np.random.default_rng(5)
    env = np.sqrt(np.exp(-2 * d1 * t) + a * np.exp(-2 * d2 * t))
    ir = rng.choice([-1.0, 1.0], t.size) * env + 1e-5 * rng.standard_normal(t.size)

    tt = np.linspace(0, 4, 400001)
    e = np.exp(-2 * d1 * tt) / (2 * d1) + a * np.exp(-2 * d2 * tt) / (2 * d2)
    edc = 10 * np.log10(e / e[0])

    def expected(hi, lo):
        sel = (edc <= hi) & (edc >= lo)
        return -60 / np.polyfit(tt[sel], edc[sel], 1)[0]

    rt = reverberation_times(ir, fs, bands=None)
    assert rt.edt_s[0] == pytest.approx(expected(0, -10), rel=0.01)
    assert rt.t30_s[0] == pytest.approx(expected(-5, -35), rel=0.01)
    # the early decay is the faster one: EDT well below T30 (here 0.382 s vs 1.085 s)
    assert rt.edt_s[0] < 0.6 * rt.t30_s[0]
    assert rt.curvature_percent[0] > 10


def test_lundeby_noise_estimate_and_crossover():
    # Decay of 120 dB/s with Gaussian noise 50 dB down: the noise power is 1e-5 and the
    # decay meets it at t = 50 / 120 = 0.417 s (definition). Lundeby et al. 1995,
    # Acustica 81:344, iterative estimate.
    ir = decaying_noise(0.5, 50.0, seed=2)
    est = estimate_noise_lundeby(ir, FS)
    assert est.converged
    assert 10 * math.log10(est.noise_power / 1e-5) == pytest.approx(0, abs=0.5)
    assert est.crossover_s == pytest.approx(50 / 120, abs=0.02)
    assert est.late_slope_db_per_s == pytest.approx(-120, rel=0.03)


def test_noise_handling_improves_t20_t30_with_floor_40_db_down():
    # Floor 40 dB down (T = 0.5 s, random-sign carrier, mean of 3 seeds). Measured here:
    #   method   T20       T30
    #   none     ~0.95 s   ~4.97 s   (the noise integrated into the curve)
    #   truncate ~0.508 s  ~0.509 s
    #   lundeby  ~0.510 s  ~0.523 s  (truncation + tail, Lundeby et al. 1995)
    #   subtract ~0.500 s  ~0.499 s  (the same with the noise power subtracted; default)
    # The expected value 0.5 s is the definition of the synthetic decay.
    res = {}
    for method in ("none", "lundeby", "subtract"):
        vals = [quiet(reverberation_times, decaying_noise(0.5, 40.0, seed=s), FS, bands=None,
                      method=method) for s in range(3)]
        res[method] = (np.mean([v.t20_s[0] for v in vals]), np.mean([v.t30_s[0] for v in vals]))
    err = {m: (abs(t20 / 0.5 - 1), abs(t30 / 0.5 - 1)) for m, (t20, t30) in res.items()}
    assert err["none"][0] > 0.5 and err["none"][1] > 5
    assert err["lundeby"][0] < 0.03 and err["lundeby"][1] < 0.06
    assert err["subtract"][0] < 0.01 and err["subtract"][1] < 0.01
    assert err["subtract"][0] < err["lundeby"][0] < err["none"][0]


def test_insufficient_range_flagged_and_warned_floor_20_db_down():
    # ISO 3382-1:2009 (secondary): the bottom of the evaluation range at least 10 dB above
    # the noise, so T20 needs 35 dB and T30 45 dB of decay range; EDT 20 dB.
    ir = decaying_noise(0.5, 20.0, seed=1)
    with pytest.warns(DecayRangeWarning, match="T30 needs 45 dB"):
        rt = reverberation_times(ir, FS, bands=None)
    assert rt.decay_range_db[0] == pytest.approx(20, abs=1.5)
    assert not rt.t20_ok[0] and not rt.t30_ok[0]
    assert any("T20 needs 35 dB" in f for f in rt.flags[0])
    # 60 dB down: no warning at all
    with warnings.catch_warnings():
        warnings.simplefilter("error", DecayRangeWarning)
        rt = reverberation_times(decaying_noise(0.5, 60.0), FS, bands=None)
    assert rt.t30_ok[0] and rt.flags[0] == ()


def test_leading_delay_does_not_change_the_result():
    # ISO 3382-1 annex A (secondary): time zero is the onset, >= 20 dB below the peak.
    ir = decaying_noise(0.5, 60.0, seed=4)
    delayed = np.concatenate([1e-3 * np.random.default_rng(9).standard_normal(800), ir])
    assert onset_index(delayed) == 800 + onset_index(ir)
    a = reverberation_times(ir, FS, bands=None)
    b = reverberation_times(delayed, FS, bands=None)
    assert b.edt_s[0] == pytest.approx(a.edt_s[0], rel=1e-3)
    assert b.t30_s[0] == pytest.approx(a.t30_s[0], rel=2e-3)


def test_time_reversed_filtering_recovers_short_low_frequency_decay():
    # A decaying 63 Hz tone, T = 0.15 s, in the 63 Hz octave band (B = 44.5 Hz, B*T = 6.7):
    # forward filtering distorts the decay (B*T < 16), filtering the time-reversed
    # response does not (Jacobsen & Rindel 1987, J. Sound Vib. 117:187; memory for the
    # 16 / 4 limits). The exact answer is the tone's own T (definition).
    fs = 8000
    t = np.arange(2 * fs) / fs
    ir = np.exp(-LN_1E3 * t / 0.15) * np.sin(2 * np.pi * 63 * t + 0.2)
    ir += 1e-4 * np.random.default_rng(3).standard_normal(t.size)
    fwd = reverberation_times(ir, fs, bands="octave", freq_range_hz=(60, 66))
    rev = reverberation_times(ir, fs, bands="octave", freq_range_hz=(60, 66),
                              filtering="reverse")
    assert rev.edt_s[0] == pytest.approx(0.15, rel=0.02)
    assert rev.t20_s[0] == pytest.approx(0.15, rel=0.02)
    assert abs(fwd.edt_s[0] / 0.15 - 1) > 0.5  # measured ~0.27 s
    assert any("time-reversed filtering" in f for f in fwd.flags[0])
    assert rev.flags[0] == ()


# --------------------------------------------------------------------------- bands


def test_band_filters_iec_61260_base_10_bands():
    # CHECKS.md: IEC 61260-1:2014 base-10, x = -12 gives 63.096 Hz, edges 56.234 / 70.795 Hz;
    # ISO 266 nominal labels. The bands themselves come from measure.signals.band_centres.
    rt = reverberation_times(decaying_noise(0.5, 60.0, dur_s=1.0), FS, bands="third",
                             freq_range_hz=(50, 80))
    np.testing.assert_allclose(rt.nominal_hz, [50, 63, 80])
    assert rt.center_hz[1] == pytest.approx(63.096, abs=5e-4)
    fc = rt.center_hz[1]
    sos = band_sos(fc, 48000, fraction=3)
    lo, hi = fc * 10 ** (-0.05), fc * 10 ** 0.05
    assert (lo, hi) == pytest.approx((56.234, 70.795), abs=5e-4)
    # Butterworth band-pass: 0 dB at the (geometric) centre, -3.01 dB at both edges
    # (definition of the Butterworth response; evaluated with scipy.signal.sosfreqz)
    _, h = signal.sosfreqz(sos, worN=[lo, fc, hi], fs=48000)
    np.testing.assert_allclose(20 * np.log10(np.abs(h)), [-3.0103, 0.0, -3.0103], atol=1e-3)
    octs = reverberation_times(decaying_noise(0.5, 60.0, dur_s=1.0), 48000, bands="octave",
                               freq_range_hz=(63, 8000)).nominal_hz
    np.testing.assert_allclose(octs, [63, 125, 250, 500, 1000, 2000, 4000, 8000])


def test_band_parameter_errors():
    with pytest.raises(ValueError, match="fs / 2"):
        band_sos(20000, 44100, 1)
    with pytest.raises(ValueError, match="fs / 2"):
        reverberation_times(decaying_noise(dur_s=0.5), FS, bands="octave",
                            freq_range_hz=(63, 8000))
    with pytest.raises(ValueError, match="bands must be"):
        reverberation_times(decaying_noise(dur_s=0.5), FS, bands="sixth")
    with pytest.raises(ValueError, match="method must be"):
        schroeder_integral(decaying_noise(dur_s=0.5), FS, method="magic")
    with pytest.raises(ValueError, match="NaN or infinite"):
        schroeder_integral(np.array([1.0, np.nan] * 20), FS)
    with pytest.raises(ValueError, match="all zeros"):
        reverberation_times(np.zeros(1000), FS)
    with pytest.raises(ValueError, match=r"fs \(sampling rate\)"):
        reverberation_times(decaying_noise(dur_s=0.5), -1)
    with pytest.raises(ValueError, match="range_db"):
        fit_decay_time(np.zeros(10), FS, (-25, -5))


# --------------------------------------------------------------------------- modes


def mode(t, f_hz, t60_s, amp=1.0, phase=0.3):
    """One room mode's free decay: amp e^{-6.908 t / T60} cos(2 pi f t + phase) (Kuttruff,
    Room Acoustics, ch. 3; memory)."""
    return amp * np.exp(-LN_1E3 * t / t60_s) * np.cos(2 * np.pi * f_hz * t + phase)


def test_modal_decay_of_single_45_hz_mode():
    # A single decaying sinusoid at 45 Hz, T60 = 0.8 s, noise 60 dB down: T60 within 5 %
    # (task check; measured 0.800 s). Q = f T60 / 2.19881 = 16.37 (Schroeder 1996,
    # JASA 99(5):3240 eq. 2, CHECKS.md).
    fs = 8000
    t = np.arange(3 * fs) / fs
    ir = mode(t, 45, 0.8) + 1e-3 * np.random.default_rng(1).standard_normal(t.size)
    md = modal_decay_times(ir, fs, [45.0])
    assert md.t60_s[0] == pytest.approx(0.8, rel=0.05)
    assert md.q[0] == pytest.approx(45 * 0.8 / 2.19881, rel=0.05)
    assert MODE_BANDWIDTH_T60 == pytest.approx(2.19881, abs=1e-5)
    assert md.ok[0] and md.r[0] < -0.999


def test_modal_decay_with_neighbouring_modes_and_peak_search():
    # 45 Hz (T60 0.8 s) with modes at 70 Hz (0.4 s) and 38 Hz (0.5 s) ringing at the same
    # time: the 1/6-octave analysis (41.3-49.1 Hz) still gives 0.8 s within 5 %, and the
    # strongest peak found is the 45 Hz mode (definition of the synthetic response).
    fs = 8000
    t = np.arange(3 * fs) / fs
    ir = (mode(t, 45, 0.8) + mode(t, 70, 0.4, 0.7, 1.0) + mode(t, 38, 0.5, 0.5, 2.0)
          + 1e-3 * np.random.default_rng(2).standard_normal(t.size))
    freqs, levels = find_modal_peaks(ir, fs, (20, 200), count=3)
    assert freqs[0] == pytest.approx(45, abs=0.2)
    assert np.all(np.diff(levels) <= 0)
    md = modal_decay_times(ir, fs, count=1, freq_range_hz=(20, 200))
    assert md.freq_hz[0] == pytest.approx(45, abs=0.2)
    assert md.t60_s[0] == pytest.approx(0.8, rel=0.05)


def test_modal_decay_short_mode_needs_reverse_filtering():
    # T60 = 0.3 s at 45 Hz through a 5.2 Hz wide filter (B*T60 = 1.6): the time-reversed
    # filtering gives 0.3 s within 5 %, forward filtering is off by more than 20 %
    # (Jacobsen & Rindel 1987; memory) and is flagged.
    fs = 8000
    t = np.arange(2 * fs) / fs
    ir = mode(t, 45, 0.3) + 1e-4 * np.random.default_rng(3).standard_normal(t.size)
    rev = modal_decay_times(ir, fs, [45.0])
    fwd = modal_decay_times(ir, fs, [45.0], filtering="forward")
    assert rev.t60_s[0] == pytest.approx(0.3, rel=0.05)
    assert abs(fwd.t60_s[0] / 0.3 - 1) > 0.2
    assert "time-reversed filtering" in fwd.flags[0][0]


def test_modal_decay_errors():
    t = np.arange(8000) / 8000
    with pytest.raises(ValueError, match="freqs_hz"):
        modal_decay_times(mode(t, 45, 0.5), 8000, [5000.0])
    with pytest.raises(ValueError, match="bandwidth_hz"):
        modal_decay_times(mode(t, 45, 0.5), 8000, [45.0], bandwidth_hz=-1)
    with pytest.raises(ValueError, match="fit_range_db"):
        modal_decay_times(mode(t, 45, 0.5), 8000, [45.0], fit_range_db=(-30, -5))


# --------------------------------------------------------------------------- waterfall


def test_waterfall_level_falls_at_the_mode_decay_rate():
    # Each later slice of a decaying mode is the first slice scaled by e^{-delta t_k}, so
    # the level at the mode frequency falls by 60 / T60 dB/s (definition; cumulative
    # spectral decay after Berman & Fincham 1977, JAES 25(6):370, memory).
    fs = 8000
    t = np.arange(3 * fs) / fs
    csd = cumulative_spectral_decay(mode(t, 45, 0.8), fs, [30.0, 45.0, 60.0],
                                    np.arange(0, 0.61, 0.05))
    assert csd.level_db.shape == (13, 3)
    assert csd.level_db[0].max() == pytest.approx(0.0)
    assert np.argmax(csd.level_db[0]) == 1
    slope = np.polyfit(csd.time_s, csd.level_db[:, 1], 1)[0]
    assert slope == pytest.approx(-60 / 0.8, rel=0.02)


def test_waterfall_slices_match_numpy_fft():
    # With frequencies on the FFT grid, each slice's level equals
    # |numpy.fft.rfft| of the same windowed slice (general-purpose reference).
    fs = 1000
    rng = np.random.default_rng(0)
    t = np.arange(2 * fs) / fs
    ir = rng.standard_normal(t.size) * np.exp(-LN_1E3 * t / 0.4)
    ir[0] = 5.0  # onset at sample 0
    n = 200
    bins = np.array([5, 10, 23, 40])
    freqs = bins * fs / n
    times = np.array([0.0, 0.1, 0.25])
    csd = cumulative_spectral_decay(ir, fs, freqs, times, window_s=n / fs, taper_fraction=0.5,
                                    rise_s=0.01, normalize=False)
    w = np.ones(n)
    w[:10] = 0.5 - 0.5 * np.cos(np.pi * (np.arange(10) + 0.5) / 10)
    w[100:] *= 0.5 + 0.5 * np.cos(np.pi * (np.arange(100) + 0.5) / 100)
    for k, tk in enumerate(times):
        s = round(tk * fs)
        ref = 20 * np.log10(np.abs(np.fft.rfft(ir[s: s + n] * w))[bins])
        np.testing.assert_allclose(csd.level_db[k], ref, atol=1e-9)


def test_waterfall_errors():
    t = np.arange(4000) / 8000
    with pytest.raises(ValueError, match="window_s"):
        cumulative_spectral_decay(mode(t, 45, 0.5), 8000, [45.0], [0.0], window_s=0)
    with pytest.raises(ValueError, match="times_s"):
        cumulative_spectral_decay(mode(t, 45, 0.5), 8000, [45.0], [-0.1])
    with pytest.raises(ValueError, match="freqs_hz"):
        cumulative_spectral_decay(mode(t, 45, 0.5), 8000, [4000.0], [0.0])
