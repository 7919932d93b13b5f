"""Exponential sweep: parameters, inverse filter, description round trip, pyfar cross-check.

Sources (named beside each test): Farina 2000 (AES preprint 5093) and Novak, Simon &
Lotton 2015 (JAES 63(10):786) for the sweep; pyfar as a reference library.
"""

import json

import numpy as np
import pytest

from roommodes.measure.sweep import (
    MAX_LEVEL_DBFS,
    SweepSpec,
    exponential_sweep,
    harmonic_delay_s,
    instantaneous_frequency_hz,
    inverse_filter,
    sweep_signal,
    sweep_time_constant_s,
)


def _bare(**kw):
    """A sweep without fades or silences."""
    args = {"fade_in_s": 0.0, "fade_out_s": 0.0, "silence_before_s": 0.0, "silence_after_s": 0.0}
    args.update(kw)
    return exponential_sweep(**args)


def test_time_constant_and_harmonic_delays_match_worked_numbers():
    # CHECKS.md "Measurement": Farina 2000 (AES 108th Conv., preprint 5093) sweep law,
    # 20 Hz-20 kHz, T = 10 s: L = 1.447648 s; 2nd harmonic 1.00343 s early, 3rd 1.59040 s
    # (computed from L = T / ln(f2/f1) and L ln n).
    assert sweep_time_constant_s(10.0, 20.0, 20000.0) == pytest.approx(1.447648, abs=1e-6)
    _, spec = exponential_sweep(48000, 10.0, 20.0, 20000.0, synchronized=False)
    assert spec.duration_s == 10.0
    assert spec.time_constant_s == pytest.approx(1.447648, abs=1e-6)
    assert harmonic_delay_s(spec, 2) == pytest.approx(1.00343, abs=5e-6)
    assert harmonic_delay_s(spec, 3) == pytest.approx(1.59040, abs=5e-6)
    assert np.allclose(harmonic_delay_s(1.447648, [2, 3]), [1.00343, 1.59040], atol=5e-6)


def test_inverse_envelope_spans_60_db():
    # CHECKS.md: the inverse filter's e^{-t/L} envelope spans 20 log10(f2/f1) = 60.0 dB for
    # 20 Hz-20 kHz (Farina 2000). Measured here by dividing the inverse by the reversed
    # sweep and fitting a straight line to the log ratio.
    x, spec = _bare(fs_hz=48000, duration_s=10.0, f1_hz=20.0, f2_hz=20000.0, synchronized=False)
    g = inverse_filter(spec)
    rev = x[::-1]
    k = np.flatnonzero(np.abs(rev) > 0.5 * spec.amplitude)
    slope, _ = np.polyfit(k, 20 * np.log10(np.abs(g[k] / rev[k])), 1)
    span_db = -slope * (spec.n_sweep - 1)
    assert span_db == pytest.approx(60.0, abs=0.01)


@pytest.mark.parametrize("synchronized", [False, True])
def test_sweep_convolved_with_inverse_has_unit_gain_in_band(synchronized):
    # Farina 2000: sweep * inverse is a band-limited pulse. Its gain here follows from the
    # stationary-phase normalisation in inverse_filter (derived, not tuned); the
    # numerical product must be 0 dB and flat, with the usual ripple near the edges.
    x, spec = exponential_sweep(48000, 5.0, 20.0, 20000.0, fade_in_s=0.05, fade_out_s=0.005,
                                silence_before_s=0, silence_after_s=0,
                                synchronized=synchronized)
    g = inverse_filter(spec)
    n = 2 ** 20
    p = np.fft.rfft(x, n) * np.fft.rfft(g, n)
    f = np.fft.rfftfreq(n, 1 / 48000)
    gain_db = 20 * np.log10(np.abs(p))
    mid = (f >= 80) & (f <= 10000)
    inner = (f >= 40) & (f <= 10000)
    assert np.max(np.abs(gain_db[mid])) < 0.02
    assert np.max(np.abs(gain_db[inner])) < 0.3
    # the pulse sits at sample n - 1
    assert np.argmax(np.abs(np.fft.irfft(p, n))) == spec.n_sweep - 1


def test_matches_pyfar_time_domain_sweep():
    # Cross-check with pyfar.signals.exponential_sweep_time (pyfar docs: Farina 2000 law,
    # L = T / ln(f_high / f_low), T = n_samples / sampling_rate): same definition, so
    # near-identical samples without fades.
    pf = pytest.importorskip("pyfar", reason="pyfar is a test-only cross-check")
    x, spec = _bare(fs_hz=44100, duration_s=3.0, f1_hz=25.0, f2_hz=16000.0,
                    level_dbfs=-6.0, synchronized=False)
    ref = pf.signals.exponential_sweep_time(
        spec.n_sweep, [25.0, 16000.0], n_fade_out=0, amplitude=spec.amplitude,
        sampling_rate=44100)
    assert ref.n_samples == x.size
    assert np.max(np.abs(ref.time[0] - x)) < 1e-9


def test_synchronized_sweep_parameters():
    # Novak, Simon & Lotton 2015 (JAES 63(10):786): f1 L is a whole number, so
    # x(t + L ln n) = sin(n phi(t)); the length becomes L ln(f2/f1), within
    # ln(f2/f1) / (2 f1) of the request, and the sweep still ends at f2.
    for f1, f2, t_req in [(20.0, 20000.0, 10.0), (15.0, 20000.0, 7.3), (10.0, 1000.0, 3.0)]:
        _, spec = exponential_sweep(48000, t_req, f1, f2, synchronized=True)
        k = f1 * spec.time_constant_s
        assert k == pytest.approx(round(k), abs=1e-9) and round(k) >= 1
        c = np.log(f2 / f1)
        assert abs(spec.duration_s - t_req) <= c / (2 * f1) + 1 / 48000
        assert instantaneous_frequency_hz(spec, spec.time_constant_s * c) == pytest.approx(f2)
    # and the samples follow sin(2 pi f1 L e^{t/L}) (the "- 1" of Farina's form drops out)
    x, spec = _bare(fs_hz=8000, duration_s=2.0, f1_hz=20.0, f2_hz=2000.0)
    t = np.arange(spec.n_sweep) / 8000
    L = spec.time_constant_s
    assert np.allclose(x, spec.amplitude * np.sin(2 * np.pi * 20.0 * L * np.exp(t / L)),
                       atol=1e-9)


def test_level_silences_and_fades():
    x, spec = exponential_sweep(48000, 4.0, 20.0, 20000.0, level_dbfs=-12.0,
                                fade_in_s=0.1, fade_out_s=0.01,
                                silence_before_s=0.25, silence_after_s=1.5)
    assert x.size == spec.n_total == 12000 + spec.n_sweep + 72000
    assert np.all(x[:12000] == 0) and np.all(x[-72000:] == 0)
    assert np.max(np.abs(x)) == pytest.approx(10 ** (-12 / 20), rel=1e-4)
    sweep = x[12000:12000 + spec.n_sweep]
    assert np.max(np.abs(sweep[:200])) < 0.01 * spec.amplitude  # fade-in starts near 0
    assert np.max(np.abs(sweep[-20:])) < 0.01 * spec.amplitude  # fade-out ends near 0


def test_level_above_minus_1_dbfs_is_refused():
    with pytest.raises(ValueError, match=r"level_dbfs must be -60..-1 dBFS"):
        exponential_sweep(level_dbfs=-0.5)
    assert MAX_LEVEL_DBFS == -1.0
    _, spec = exponential_sweep(level_dbfs=-1.0, duration_s=1.0)
    assert spec.level_dbfs == -1.0


@pytest.mark.parametrize("kw, match", [
    ({"f2_hz": 24000.0}, "f2_hz"),
    ({"f1_hz": 0.5}, "f1_hz"),
    ({"f1_hz": 1000.0, "f2_hz": 1500.0}, "f2_hz"),
    ({"duration_s": 0.1}, "duration_s"),
    ({"fade_in_s": 5.0, "duration_s": 4.0}, "fade_in_s"),
    ({"silence_after_s": -1.0}, "silence_after_s"),
    ({"fs_hz": 44100.5}, "fs_hz"),
])
def test_bad_parameters_are_refused(kw, match):
    with pytest.raises(ValueError, match=match):
        exponential_sweep(**kw)


def test_spec_json_round_trip_rebuilds_the_same_samples():
    x, spec = exponential_sweep(44100, 3.0, 15.0, 18000.0, level_dbfs=-15.0)
    d = json.loads(json.dumps(spec.to_dict()))
    assert d["schema"] == "roommodes.sweep" and d["schema_version"] == 1
    spec2 = SweepSpec.from_dict(d)
    assert spec2 == spec
    assert np.array_equal(sweep_signal(spec2), x)


@pytest.mark.parametrize("edit, match", [
    (lambda d: d.update(schema="something.else"), "not a sweep description"),
    (lambda d: d.update(schema_version=2), "schema_version 2"),
    (lambda d: d.pop("n_sweep"), "lacks the key 'n_sweep'"),
    (lambda d: d.update(fs_hz="48000"), "'fs_hz' must be int"),
    (lambda d: d.update(synchronized=1), "'synchronized' must be bool"),
    (lambda d: d.update(n_sweep=d["n_sweep"] + 10), "inconsistent"),
    (lambda d: d.update(time_constant_s=1.2345), "inconsistent"),
    (lambda d: d.update(level_dbfs=0.0), "level_dbfs"),
])
def test_spec_from_dict_rejects_bad_descriptions(edit, match):
    _, spec = exponential_sweep(48000, 2.0, 20.0, 20000.0)
    d = spec.to_dict()
    edit(d)
    with pytest.raises(ValueError, match=match):
        SweepSpec.from_dict(d)
