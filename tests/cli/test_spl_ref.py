"""Absolute SPL from a calibrator recording (--spl-ref), carried into the maximum-level figures.

Check values and their sources:
- an acoustic calibrator plays a sine of stated level, 94 dB SPL (1 Pa rms) or 114 dB SPL at
  1 kHz (IEC 60942:2017, sec. 4; common practice);
- dBFS: a full-scale sine reads 0 dBFS, a sine of amplitude a reads 20 log10(a) dBFS (AES17,
  memory); so a tone of amplitude 0.1 reads -20 dBFS and sets 0 dBFS = 94 + 20 = 114 dB SPL;
- an impulse response that is a single sample of height 0.01 has |H| = 0.01 = -40 dB at every
  frequency (the DFT of a delayed unit impulse has unit magnitude); with 0 dBFS = 114 dB SPL a
  full-scale input gives 74 dB SPL at the microphone;
- the maximum level after EQ is L + C - A (the project's own definition, analysis.eq.full_scale_level):
  it moves dB for dB with the calibration.
"""

from __future__ import annotations

import json
import struct

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path
from roommodes.cli import main
from roommodes.measure.calibration import calibrator_reference

DEMO = str(demo_room_path())
FS = 48000


def wav(path, samples, fs=FS):
    """A 32-bit float mono WAV (RIFF/WAVE, format 3, IBM/Microsoft 1991)."""
    data = np.asarray(samples, dtype="<f4").tobytes()
    fmt = struct.pack("<HHIIHH", 3, 1, fs, fs * 4, 4, 32)
    body = b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt + b"data" + struct.pack("<I", len(data)) + data
    path.write_bytes(b"RIFF" + struct.pack("<I", len(body)) + body)
    return path


def tone(amplitude, freq_hz=1000.0, seconds=3.0, noise=1e-4):
    t = np.arange(int(seconds * FS)) / FS
    return amplitude * np.sin(2 * np.pi * freq_hz * t) + noise * np.random.default_rng(0).standard_normal(t.size)


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.mark.parametrize("amplitude, freq_hz, spl_db", [(0.1, 1000.0, 94.0), (0.5, 1000.0, 114.0), (0.05, 250.0, 94.0)])
def test_calibrator_tone_sets_the_spl_of_full_scale(amplitude, freq_hz, spl_db):
    ref = calibrator_reference(tone(amplitude, freq_hz), FS, spl_db, freq_hz, "cal.wav")
    assert ref.tone_dbfs == pytest.approx(20 * np.log10(amplitude), abs=0.01)
    assert ref.full_scale_spl_db == pytest.approx(spl_db - 20 * np.log10(amplitude), abs=0.01)


def test_not_a_calibrator_tone_is_refused():
    with pytest.raises(ValueError, match="not near 1000 Hz"):
        calibrator_reference(tone(0.1, 700.0), FS, 94.0, 1000.0, "cal.wav")
    with pytest.raises(ValueError, match="not a steady calibrator tone"):
        calibrator_reference(tone(0.01, noise=0.05), FS, 94.0, 1000.0, "cal.wav")
    with pytest.raises(ValueError, match="clipped"):
        calibrator_reference(np.clip(tone(2.0), -1, 1), FS, 94.0, 1000.0, "cal.wav")


def _delta_ir(tmp_path, height=0.01):
    h = np.zeros(FS)
    h[200] = height
    return wav(tmp_path / "ir.wav", h)


def test_compare_reads_a_calibrated_impulse_response_in_db_spl(tmp_path):
    cal = wav(tmp_path / "cal.wav", tone(0.1))
    ir = _delta_ir(tmp_path)
    res = run("compare", DEMO, ir, "--channel", "left", "--spl-ref", f"94@1000:{cal}", "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    measured_spl = np.array(d["measured_db"]) - d["offset_db"]  # the alignment offset taken back out
    assert np.all(np.abs(measured_spl - 74.0) < 0.1)
    assert d["measured_level_unit"] == "dB SPL"
    assert d["spl_reference"]["full_scale_spl_db"] == pytest.approx(114.0, abs=0.01)
    # without it the levels are relative, and said so
    res = run("compare", DEMO, ir, "--channel", "left")
    assert "relative (no --spl-ref)" in res.stdout


def _peaked_ir(tmp_path):
    """0.01 x a peaking biquad, +8 dB at 60 Hz, Q 4 (Audio EQ Cookbook): a curve eq corrects."""
    from scipy import signal

    a_ = 10 ** (8 / 40)
    w0 = 2 * np.pi * 60 / FS
    al = np.sin(w0) / 8
    x = np.zeros(FS)
    x[100] = 1
    h = 0.01 * signal.lfilter([1 + al * a_, -2 * np.cos(w0), 1 - al * a_], [1 + al / a_, -2 * np.cos(w0), 1 - al / a_], x)
    return wav(tmp_path / "irpk.wav", h)


def test_eq_maximum_level_shifts_by_exactly_the_calibration_offset(tmp_path):
    ir = _peaked_ir(tmp_path)
    cal_a = wav(tmp_path / "cal-a.wav", tone(0.1))   # -20 dBFS: 0 dBFS = 114 dB SPL
    cal_b = wav(tmp_path / "cal-b.wav", tone(0.05))  # -26.02 dBFS: 0 dBFS = 120.02 dB SPL
    out = {}
    for name, cal in (("a", cal_a), ("b", cal_b)):
        res = run("eq", DEMO, "--measured", f"left={ir}", "--spl-ref", f"94@1000:{cal}", "--json")
        assert res.exit_code == 0, res.output
        out[name] = json.loads(res.stdout)
    offset = out["b"]["spl_reference"]["full_scale_spl_db"] - out["a"]["spl_reference"]["full_scale_spl_db"]
    assert offset == pytest.approx(20 * np.log10(2), abs=0.01)
    ca, cb = out["a"]["channels"][0], out["b"]["channels"][0]
    # the design itself does not change; the maximum level moves by exactly the offset
    assert ca["max_boost_db"] == pytest.approx(cb["max_boost_db"], abs=1e-6)
    ma, mb = ca["max_clean_spl"], cb["max_clean_spl"]
    assert ma["basis"] == mb["basis"] == "measured"
    for key in ("before_db", "after_db"):
        assert np.allclose(np.array(mb[key]) - np.array(ma[key]), offset, atol=1e-6)
    # above the resonance the level before EQ is the flat 74 dB SPL of the synthetic chain
    assert ma["before_db"][-1] == pytest.approx(74.0, abs=0.1)
    assert ma["preattenuation_db"] == pytest.approx(mb["preattenuation_db"], abs=1e-9)
    res = run("eq", DEMO, "--measured", f"left={ir}", "--json")
    plain = json.loads(res.stdout)
    assert "max_clean_spl" not in plain["channels"][0] and plain["spl_reference"] is None


@pytest.mark.parametrize("args, names", [
    (["eq", DEMO, "--spl-ref", "94:{cal}"], ["--spl-ref", "--measured"]),
    (["compare", DEMO, "{ir}", "--channel", "left", "--spl-ref", "loud"], ["--spl-ref", "DB@HZ:FILE"]),
    (["compare", DEMO, "{ir}", "--channel", "left", "--spl-ref", "94@1000:{ir}"], ["--spl-ref", "ir.wav"]),
    (["compare", DEMO, "{ir}", "--channel", "left", "--spl-ref", "94:{cal}", "--absolute"], ["--spl-ref", "--absolute"]),
    (["fit", DEMO, "{ir}", "--channel", "left", "-o", "{d}/cal.toml", "--spl-ref", "94:{cal}", "--absolute"],
     ["--spl-ref", "--absolute"]),
    (["compare", DEMO, "{ir}", "--channel", "left", "--spl-ref", "300@1000:{cal}"], ["--spl-ref", "70..140"]),
])
def test_spl_ref_errors_are_one_line(tmp_path, args, names):
    cal = wav(tmp_path / "cal.wav", tone(0.1))
    ir = _delta_ir(tmp_path)
    res = CliRunner().invoke(main, [a.format(cal=cal, ir=ir, d=tmp_path) for a in args])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("roommodes: error:"), res.stderr
    for n in names:
        assert n in lines[0]
    assert not (tmp_path / "cal.toml").exists()


@pytest.mark.slow
def test_report_shows_the_measured_maximum_level_with_the_calibration(tmp_path):
    ir = _peaked_ir(tmp_path)
    cal = wav(tmp_path / "cal.wav", tone(0.1))  # 0 dBFS = 114 dB SPL
    res = CliRunner().invoke(main, ["report", DEMO, str(ir), "--channel", "left", "-o", str(tmp_path / "r.html"), "--search",
                              "off", "--spl-ref", f"94@1000:{cal}", "--json"], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    levels = json.loads(res.stdout)["values"]["max_level_db"]
    assert levels["left"]["basis"] == "measured"
    # at 200 Hz, above the resonance, the synthetic chain's flat 74 dB SPL (within the 1/12-octave smoothing)
    assert levels["left"]["before_db"][-1] == pytest.approx(74.0, abs=0.2)
    assert levels["right"]["basis"] == "model"  # the unmeasured channel keeps the room file's figures
    page = (tmp_path / "r.html").read_text()
    assert "0 dBFS = 114.00 dB SPL" in page


# --------------------------------------------------------------------------- meter reading of noise
# Check values and their sources:
# - C-weighting of IEC 61672-1:2013, Table 3, at the exact base-10 frequencies 1000*10^(x/10)
#   (rounded to 0.1 dB; from memory): 20 Hz -6.2, 25 -4.4, 31.5 -3.0, 40 -2.0, 50 -1.3, 63 -0.8,
#   80 -0.5, 100 -0.3, 125 -0.2, 160 -0.1, 200-1250 0.0, 1600 -0.1, 2000 -0.2, 2500 -0.3,
#   3150 -0.5, 4000 -0.8, 5000 -1.3, 6300 -2.0, 8000 -3.0, 10000 -4.4, 12500 -6.2, 16000 -8.5,
#   20000 -11.2 dB;
# - pink noise has equal power in every 1/3-octave band (definition; IEC 61260-1 base-10
#   bands), so its C-weighted level is its unweighted level plus 10 log10 of the power mean of
#   the band weightings, the bands at the ends of a 20 Hz - 20 kHz noise counted by the
#   fraction of their log-width the noise covers (common practice: the band-sum method);
# - the SPL of full scale is the meter's reading minus the recording's level weighted the same
#   way (the calibrator relation L_fs = L_ref - L_rec, with the meter in place of the calibrator).
# Hearing: these signals are synthetic and never played; playing pink noise for a meter reading
# needs no more than 75-85 dB SPL at the seat (see the `noise` command's caution).

from roommodes.measure.calibration import meter_reference, noise_level_dbfs  # noqa: E402
from roommodes.measure.signals import pink_noise  # noqa: E402

_C_TABLE_DB = [-6.2, -4.4, -3.0, -2.0, -1.3, -0.8, -0.5, -0.3, -0.2, -0.1] + [0.0] * 9 + [
    -0.1, -0.2, -0.3, -0.5, -0.8, -1.3, -2.0, -3.0, -4.4, -6.2, -8.5, -11.2]  # 20 Hz .. 20 kHz


def _c_offset_of_pink_20_20k():
    """C-weighted minus unweighted level of pink noise in 20 Hz - 20 kHz, by the band-sum method."""
    w = np.ones(len(_C_TABLE_DB))
    w[0] = np.log(10**1.35 / 20.0) / np.log(10**0.1)       # 20 Hz band: 20 .. 22.4 Hz of 17.8 .. 22.4
    w[-1] = np.log(20000.0 / 10**4.25) / np.log(10**0.1)   # 20 kHz band: 17.8 .. 20 kHz of 17.8 .. 22.4
    return 10 * np.log10(np.sum(w * 10 ** (np.array(_C_TABLE_DB) / 10)) / np.sum(w))


def _pink(level_dbfs=-25.0, seconds=8.0, seed=3, **band):
    return pink_noise(FS, seconds, level_dbfs, seed=seed, **band)


@pytest.mark.parametrize("x, table_db", [(-15, -3.0), (-12, -0.8), (0, 0.0), (9, -3.0)])
def test_recording_is_c_weighted_as_the_meter(x, table_db):
    # a sine of amplitude 0.1 (-20 dBFS) at 31.5 Hz, 63 Hz, 1 kHz, 8 kHz (exact 1000*10^(x/10))
    f = 1000.0 * 10 ** (x / 10)
    t = np.arange(6 * FS) / FS
    level, _ = noise_level_dbfs(0.1 * np.sin(2 * np.pi * f * t), FS, (20.0, 20000.0), "C")
    assert level == pytest.approx(-20.0 + table_db, abs=0.06)


@pytest.mark.parametrize("weighting", ["C", "Z"])
@pytest.mark.parametrize("level_dbfs, meter_db", [(-25.0, 82.0), (-40.0, 75.0)])
def test_meter_reading_of_pink_noise_sets_the_spl_of_full_scale(weighting, level_dbfs, meter_db):
    ref = meter_reference(_pink(level_dbfs), FS, meter_db, weighting, source="pink.wav")
    offset = _c_offset_of_pink_20_20k() if weighting == "C" else 0.0
    expected = meter_db - (level_dbfs + offset)
    assert ref.full_scale_spl_db == pytest.approx(expected, abs=0.2)
    assert ref.kind == "meter" and ref.weighting == weighting and ref.band_hz == (20.0, 20000.0)
    assert f"dB({weighting})" in ref.describe()


def test_meter_reading_of_band_limited_noise():
    # subwoofer noise made with --band 30,200: unweighted, its whole power lies in the band
    ref = meter_reference(_pink(-25.0, 10.0, f_low_hz=30.0, f_high_hz=200.0), FS, 85.0, "Z", (30.0, 200.0))
    assert ref.full_scale_spl_db == pytest.approx(85.0 + 25.0, abs=0.2)


def _room_coloured(x):
    """``x`` through a +15 dB peak at 42 Hz (Q 8) and a -12 dB dip at 90 Hz (Q 4): peaking
    biquads of the Audio EQ Cookbook (R. Bristow-Johnson, memory), a room mode and a cancellation."""
    from scipy import signal

    for f0, gain_db, q in ((42.0, 15.0, 8.0), (90.0, -12.0, 4.0)):
        a_ = 10 ** (gain_db / 40)
        w0 = 2 * np.pi * f0 / FS
        al = np.sin(w0) / (2 * q)
        x = signal.lfilter([1 + al * a_, -2 * np.cos(w0), 1 - al * a_], [1 + al / a_, -2 * np.cos(w0), 1 - al / a_], x)
    return x


def test_meter_reading_of_room_coloured_subwoofer_noise():
    # the level a Z meter reads is the rms of the whole (band-limited) signal: 10 log10(2 mean x^2)
    # dBFS (AES17 full-scale sine convention), taken over the same middle 80 % the analysis uses
    y = _room_coloured(_pink(-25.0, 12.0, f_low_hz=30.0, f_high_hz=200.0))
    n0 = y.size // 10
    true_dbfs = 10 * np.log10(2 * np.mean(y[n0:y.size - n0] ** 2))
    ref = meter_reference(y, FS, 85.0, "Z", (30.0, 200.0))
    assert ref.full_scale_spl_db == pytest.approx(85.0 - true_dbfs, abs=0.05)


def _sweep():
    from roommodes.measure.sweep import exponential_sweep

    return exponential_sweep(FS, 8.0, 20.0, 20000.0, -20.0, silence_before_s=0.0, silence_after_s=0.5)[0]


@pytest.mark.parametrize("make, args, match", [
    (lambda: _pink(), (82.0, "A"), "C or Z"),
    (lambda: _pink(), (30.0, "C"), "40..130"),
    (lambda: _pink(), (135.0, "C"), "40..130"),
    (lambda: _pink(seconds=3.0), (82.0, "C"), "too short"),
    (lambda: np.clip(_pink(-5.0, max_crest_db=6.0) * 4, -1, 1), (82.0, "C"), "clipped"),
    (lambda: _pink(-75.0), (82.0, "C"), "too quiet"),
    (lambda: tone(0.1, seconds=8.0), (82.0, "C"), "not broadband noise"),
    (lambda: tone(0.1, 1120.0, seconds=8.0), (82.0, "C"), "not broadband noise"),  # on a 1/3-octave band edge
    (_sweep, (82.0, "C"), "not steady noise"),
    (lambda: _pink(), (82.0, "C", (30.0, 200.0)), "outside 30-200 Hz"),
])
def test_meter_reading_refuses_what_it_cannot_use(make, args, match):
    with pytest.raises(ValueError, match=match):
        meter_reference(make(), FS, *args, source="pink.wav")


def test_commands_take_a_meter_reading(tmp_path):
    rec = wav(tmp_path / "pink.wav", _pink(-25.0))  # Z: 0 dBFS = 82 + 25 = 107 dB SPL
    ir = _delta_ir(tmp_path)                        # -40 dB: a full-scale input gives 67 dB SPL
    ref = f"82Z@noise:{rec}"
    res = run("compare", DEMO, ir, "--channel", "left", "--spl-ref", ref, "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["spl_reference"]["kind"] == "meter"
    assert d["spl_reference"]["full_scale_spl_db"] == pytest.approx(107.0, abs=0.2)
    assert np.all(np.abs(np.array(d["measured_db"]) - d["offset_db"] - 67.0) < 0.3)
    res = run("eq", DEMO, "--measured", f"left={_peaked_ir(tmp_path)}", "--spl-ref", "82 dB(Z) @ noise:" + str(rec),
              "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["spl_reference"]["weighting"] == "Z"
    assert d["channels"][0]["max_clean_spl"]["before_db"][-1] == pytest.approx(67.0, abs=0.3)


@pytest.mark.slow
def test_fit_and_report_take_a_meter_reading(tmp_path):
    rec = wav(tmp_path / "pink.wav", _pink(-25.0))  # Z: 0 dBFS = 107 dB SPL
    res = run("fit", DEMO, _delta_ir(tmp_path), "--channel", "left", "-o", tmp_path / "cal.toml",
              "--spl-ref", f"82Z@noise:{rec}")
    assert res.exit_code == 0, res.output
    assert "0 dBFS = 107." in res.output and "dB(Z)" in res.output
    res = run("report", DEMO, _peaked_ir(tmp_path), "--channel", "left", "-o", tmp_path / "r.html", "--search", "off",
              "--spl-ref", f"82Z@noise:{rec}", "--json")
    assert res.exit_code == 0, res.output
    levels = json.loads(res.stdout)["values"]["max_level_db"]
    assert levels["left"]["basis"] == "measured"
    assert levels["left"]["before_db"][-1] == pytest.approx(67.0, abs=0.3)  # -40 dB IR + 107 dB SPL
    assert "dB(Z) at the microphone" in (tmp_path / "r.html").read_text()


@pytest.mark.parametrize("ref, names", [
    ("82@noise:{rec}", ["--spl-ref", "weighting", "C or Z"]),
    ("82A@noise:{rec}", ["--spl-ref", "A-weighting"]),
    ("200C@noise:{rec}", ["--spl-ref", "40..130"]),
    ("82C@noise:{cal}", ["--spl-ref", "cal.wav", "broadband"]),
    ("82C@200-30:{rec}", ["--spl-ref", "band"]),
    ("82C@noise:{d}/missing.wav", ["missing.wav"]),
    ("82C@loud:{rec}", ["--spl-ref", "DBW@noise:FILE"]),
])
def test_meter_reading_errors_are_one_line(tmp_path, ref, names):
    rec = wav(tmp_path / "pink.wav", _pink(-25.0, 6.0))
    cal = wav(tmp_path / "cal.wav", tone(0.1, seconds=6.0))
    ir = _delta_ir(tmp_path)
    res = CliRunner().invoke(main, ["compare", DEMO, str(ir), "--channel", "left", "--spl-ref",
                                    ref.format(rec=rec, cal=cal, d=tmp_path)])
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("roommodes: error:"), res.stderr
    for n in names:
        assert n in lines[0], lines[0]


def test_a_long_calibrator_recording_is_read_from_its_middle_minute():
    # bounded work: a 3-minute tone is analysed over 60 s and still reads its level
    from roommodes.measure.calibration import tone_level_dbfs

    fs = 8000.0
    t = np.arange(int(180 * fs)) / fs
    x = 0.1 * np.sin(2 * np.pi * 1000.0 * t)  # -20 dBFS: a full-scale sine is 0 dBFS (docstring)
    level, tone_hz, _ = tone_level_dbfs(x, fs, 1000.0)
    assert abs(level + 20.0) < 0.01 and abs(tone_hz - 1000.0) < 0.5
