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
