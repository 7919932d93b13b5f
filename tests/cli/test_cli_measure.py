"""The measurement commands as a user meets them: files written, JSON, cautions, bad input.

The closed loop (sweep -> recording -> ir -> compare) uses invented test data: the
recording is the sweep convolved with an impulse response made from the modal model of
the demo room (left speaker to the seat, with the speaker's roll-off), delayed by 20 ms,
with mild second-order distortion and noise. Measured on the project machine: median
|difference| between the measured and the predicted curve 0.03 dB, 90th percentile 0.2 dB
over 20-200 Hz at 1/12 octave.

Sources of the check values are named beside each test (see also tests/reference).
"""

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room, room_modes, transfer_function
from roommodes.analysis.compare import predicted_level
from roommodes.cli.measure import COMMANDS, bands, compare, decay, fit, ir, noise, sweep
from roommodes.dsp.response import log_frequencies
from roommodes.io.importers import read_response_text
from roommodes.io.wavio import read_wav, write_wav_atomic
from roommodes.model.room import Surface
from roommodes.model.speaker import speaker_response

DEMO = str(demo_room_path())
ROOM = load_room(DEMO)
FS = 8000


def run(cmd, *args):
    return CliRunner().invoke(cmd, [str(a) for a in args], catch_exceptions=False)


def assert_user_error(res, *words):
    """Exit code 2 and one line on stderr naming what went wrong."""
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("roommodes: error:"), res.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])


def model_ir(n):
    """Impulse response of the demo room's left speaker at the seat, band-limited to 400 Hz."""
    sp = ROOM.layout.speakers[0]
    f = np.fft.rfftfreq(n, 1 / FS)
    h = np.zeros(f.size, complex)
    sel = (f > 0) & (f <= 400)
    # the modal solver's model: the closed loop below compares and fits with --method modal
    h[sel] = transfer_function(ROOM, [sp.position_m], [ROOM.layout.seat_m], f[sel], method="modal")[0, 0]
    h[sel] *= speaker_response(sp, f[sel])
    fade = np.sin(np.pi / 2 * np.clip((400 - f) / 100, 0, 1)) ** 2  # 300-400 Hz
    return np.fft.irfft(h * fade * np.exp(-2j * np.pi * f * 0.020), n)


@pytest.fixture(scope="module")
def loop(tmp_path_factory):
    """Sweep, synthetic recording and impulse response in one folder."""
    d = tmp_path_factory.mktemp("loop")
    res = run(sweep, d / "sweep.wav", "--rate", FS, "--length", 4, "--f1", 10, "--f2", 1000, "--silence-after", 2)
    assert res.exit_code == 0, res.output
    x, _fs, _ = read_wav(d / "sweep.wav")
    y = np.convolve(x, model_ir(1 << 15))[: x.size]
    y = 0.3 * y / np.abs(y).max()
    y = y + 0.02 * y**2 + 1e-5 * np.random.default_rng(1).standard_normal(y.size)
    write_wav_atomic(d / "rec.wav", np.stack([y, 0.5 * x], axis=1), FS, "float32")
    res = run(ir, d / "rec.wav", "--sweep", d / "sweep.wav", "-o", d / "ir.wav", "--wav-channel", 1, "--json")
    assert res.exit_code == 0, res.output
    return d, json.loads(res.stdout), res


# ----------------------------------------------------------------------------- help


def test_help_for_every_command():
    for cmd in COMMANDS:
        r = run(cmd, "--help")
        assert r.exit_code == 0 and len(cmd.help) > 60, cmd.name


# ----------------------------------------------------------------------------- sweep


def test_sweep_writes_wav_and_description_with_cautions(tmp_path):
    out = tmp_path / "s.wav"
    res = run(sweep, out, "--rate", 8000, "--length", 2, "--f2", 1000, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    desc = json.loads((tmp_path / "s.sweep.json").read_text())
    assert desc["schema"] == "roommodes.sweep" and desc == data["sweep"]
    x, fs, _ = read_wav(out)
    assert fs == 8000 and x.size == desc["n_before"] + desc["n_sweep"] + desc["n_after"]
    # default level -12 dBFS peak (pcm24 quantisation only)
    assert 20 * math.log10(np.abs(x).max()) == pytest.approx(-12.0, abs=0.01)
    for words in ("NIOSH", "85 dBA for 8 hours", "94 dBA: 1 hour", "100 dBA: 15 minutes", "Start quiet",
                  "makers' limits", "Tweeters", "pointing at the ceiling", "75-85 dB SPL"):
        assert words in res.stderr, words


def test_sweep_refuses_overwrite_and_bad_options(tmp_path):
    out = tmp_path / "s.wav"
    assert run(sweep, out, "--rate", 8000, "--length", 1, "--f2", 1000).exit_code == 0
    before = out.read_bytes()
    assert_user_error(run(sweep, out, "--rate", 8000, "--length", 1, "--f2", 1000), "already exists")
    assert out.read_bytes() == before
    assert run(sweep, out, "--rate", 8000, "--length", 1, "--f2", 1000, "--force").exit_code == 0
    assert_user_error(run(sweep, tmp_path / "loud.wav", "--level", 0), "level_dbfs")
    assert not (tmp_path / "loud.wav").exists() and not (tmp_path / "loud.sweep.json").exists()
    assert_user_error(run(sweep, tmp_path / "s.txt"), "must be a .wav file")
    assert_user_error(run(sweep, tmp_path / "nofolder" / "s.wav"), "does not exist")


# ----------------------------------------------------------------------------- ir


def test_ir_closed_loop_delay_and_report(loop):
    d, data, res = loop
    _h, fs, _ = read_wav(d / "ir.wav")
    assert fs == FS
    # the model response was delayed by 20 ms (the IR's time zero is the start of the played file,
    # so the file's leading silence does not count)
    assert data["onset_s"] == pytest.approx(0.020, abs=0.004)
    assert data["peak_to_noise_db"] > 60
    assert data["distortion"]["thd_percent"] and max(data["distortion"]["thd_percent"]) > 0.05
    assert "Reminder" in res.stderr


def test_ir_bad_input_names_the_file_and_writes_nothing(loop, tmp_path):
    d, _, _ = loop
    out = tmp_path / "ir.wav"
    x, _, _ = read_wav(d / "rec.wav", 0)
    write_wav_atomic(tmp_path / "r44.wav", x, 44100, "float32")
    assert_user_error(run(ir, tmp_path / "r44.wav", "--sweep", d / "sweep.wav", "-o", out), "r44.wav",
                      "44100 Hz", "8000 Hz")
    (tmp_path / "text.wav").write_text("not audio")
    assert_user_error(run(ir, tmp_path / "text.wav", "--sweep", d / "sweep.wav", "-o", out), "text.wav",
                      "not a WAV file")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", d / "sweep.wav", "-o", out), "rec.wav", "2 channels",
                      "--wav-channel")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", d / "sweep.wav", "-o", out, "--wav-channel", 3), "rec.wav",
                      "does not exist")
    write_wav_atomic(tmp_path / "short.wav", x[: x.size // 3], FS, "float32")
    assert_user_error(run(ir, tmp_path / "short.wav", "--sweep", d / "sweep.wav", "-o", out), "short.wav",
                      "sweep ends")
    write_wav_atomic(tmp_path / "quiet.wav", np.zeros(x.size), FS, "pcm16")
    assert_user_error(run(ir, tmp_path / "quiet.wav", "--sweep", d / "sweep.wav", "-o", out), "quiet.wav", "silent")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", tmp_path / "none.wav", "-o", out, "--wav-channel", 1),
                      "none.wav", "no such file")
    lonely = tmp_path / "lonely.wav"
    write_wav_atomic(lonely, x, FS, "float32")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", lonely, "-o", out, "--wav-channel", 1), "lonely.sweep.json")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", d / "sweep.wav", "-o", d / "rec.wav", "--wav-channel", 1),
                      "refusing to write over the input")
    assert_user_error(run(ir, d / "rec.wav", "--sweep", d / "sweep.wav", "-o", d / "ir.wav", "--wav-channel", 1),
                      "already exists")
    assert not out.exists()


# ----------------------------------------------------------------------------- compare


def test_closed_loop_compare_with_the_prediction(loop):
    d, _, _ = loop
    res = run(compare, DEMO, d / "ir.wav", "--channel", "left", "--method", "modal", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    for key in ("frequencies_hz", "difference_db", "median_abs_diff_db", "p90_abs_diff_db", "correlation",
                "features", "interpretation", "predicted_db", "resolution_hz"):
        assert key in data, key
    assert len(data["difference_db"]) == len(data["frequencies_hz"])
    print(f"\nclosed loop: median |d| {data['median_abs_diff_db']:.3f} dB, p90 {data['p90_abs_diff_db']:.3f} dB, "
          f"r {data['correlation']:.4f}")
    assert data["median_abs_diff_db"] < 0.2 and data["p90_abs_diff_db"] < 0.5
    assert data["correlation"] > 0.99
    paired = [f for f in data["features"] if f["ratio"] is not None]
    assert paired and all(abs(f["ratio"] - 1) < 0.01 for f in paired)
    assert data["resolution_hz"] == pytest.approx(1.0, rel=0.01)


def test_fit_accepts_impulse_responses(loop, tmp_path):
    # the closed-loop response is the demo room's own model: the fit has little to change
    d, _, _ = loop
    res = run(fit, DEMO, d / "ir.wav", "--channel", "left", "--method", "modal", "-o", tmp_path / "cal.toml",
              "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["error_before"]["median_abs_db"] < 0.3
    assert data["error_after"]["median_abs_db"] <= data["error_before"]["median_abs_db"]
    par = {p["name"]: p for p in data["parameters"]}
    assert abs(par["length"]["change"]) < 0.02 and abs(par["width"]["change"]) < 0.02


def test_compare_text_plot_and_two_measurements(loop, tmp_path):
    d, _, _ = loop
    out = tmp_path / "cmp.png"
    res = run(compare, DEMO, d / "ir.wav", "--channel", "left", "--plot", out)
    assert res.exit_code == 0, res.output
    assert "median |difference|" in res.stdout and "axial mode (1, 0, 0)" in res.stdout
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert_user_error(run(compare, DEMO, d / "ir.wav", "--channel", "left", "--plot", out), "already exists")
    # the same measurement against itself: no difference at all
    res = run(compare, d / "ir.wav", "--against", d / "ir.wav", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["median_abs_diff_db"] == 0 and data["mode"] == "measurements"


def test_compare_averages_positions_and_shows_spread(tmp_path):
    f = log_frequencies(15, 300, 48)
    pts = [(1.85, 1.45, 1.2), (1.65, 1.25, 1.1)]
    files = []
    for i, p in enumerate(pts):
        lv = predicted_level(ROOM, "right", [p], f)
        files.append(tmp_path / f"m{i}.txt")
        files[-1].write_text("\n".join(f"{a:.6f};{b:.5f}" for a, b in zip(f, lv)) + "\n")
    at = [a for p in pts for a in ("--at", ",".join(str(v) for v in p))]
    res = run(compare, DEMO, *files, "--channel", "right", *at, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    # the prediction is averaged over the same positions (what is left: interpolating the files'
    # grid onto the comparison's)
    assert data["median_abs_diff_db"] < 0.05
    assert max(data["spread_db"]) > 3  # two positions differ by several dB somewhere
    assert len(data["positions_m"]) == 2


def test_compare_bad_input(loop, tmp_path):
    d, _, _ = loop
    bad = tmp_path / "bad.txt"
    bad.write_text("20 1\n25 2\n31.5 x\n")
    assert_user_error(run(compare, DEMO, bad, "--channel", "left"), "bad.txt, line 3")
    assert_user_error(run(compare, DEMO, d / "ir.wav", "--channel", "centre"), "centre", "left, right")
    assert_user_error(run(compare, DEMO, d / "ir.wav"), "left, right")
    assert_user_error(run(compare, DEMO, tmp_path / "missing.txt", "--channel", "left"), "missing.txt",
                      "no such file")
    assert_user_error(run(compare, d / "ir.wav"), "--against")
    assert_user_error(run(compare, DEMO, d / "ir.wav", "--channel", "left", "--at", "9,1,1"), "outside the room")
    assert_user_error(run(compare, DEMO, d / "rec.wav", "--channel", "left"), "rec.wav", "2 channels")
    assert_user_error(run(compare, tmp_path / "no-room.toml", d / "ir.wav", "--channel", "left"), "no-room.toml")


# ----------------------------------------------------------------------------- decay


def test_decay_gives_the_modes_decay_times_and_a_waterfall(loop, tmp_path):
    # the narrow-band decay of the strongest low peaks against the modes' perturbation
    # damping, T60 = 3 ln 10 / delta_n (Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.5)
    d, _, _ = loop
    wf = tmp_path / "wf.png"
    res = run(decay, d / "ir.wav", "--freq-range", "63,250", "--json", "--waterfall", wf)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert [b["nominal_hz"] for b in data["reverberation"]] == [63, 125, 250]
    modes = room_modes(ROOM, 120)
    for axial in ((1, 0, 0), (2, 0, 0)):
        j = [tuple(int(v) for v in ix) for ix in modes.indices].index(axial)
        near = [m for m in data["modes"] if abs(m["freq_hz"] / modes.freq_hz[j] - 1) < 0.04]
        assert near, axial
        assert near[0]["t60_s"] == pytest.approx(modes.t60_s[j], rel=0.15)
    assert wf.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    res = run(decay, d / "ir.wav", "--freq-range", "63,250")
    assert "T20" in res.stdout and "Strongest low-frequency peaks" in res.stdout


def test_decay_bad_input(tmp_path):
    t = tmp_path / "ir.txt"
    t.write_text("20 1\n")
    assert_user_error(run(decay, t), "ir.txt", "not a WAV file")
    assert_user_error(run(decay, tmp_path / "none.wav"), "none.wav", "no such file")


# ----------------------------------------------------------------------------- noise and bands


def test_noise_and_bands_of_pink_noise_are_flat(tmp_path):
    # pink noise has equal power in every fractional-octave band: each 1/3-octave band holds
    # the total power divided by the number of bands the noise spans (definition)
    wav = tmp_path / "pink.wav"
    res = run(noise, wav, "--rate", 16000, "--length", 20, "--band", "20,5000", "--json")
    assert res.exit_code == 0, res.output
    assert "NIOSH" in res.stderr and "Start quiet" in res.stderr
    x, _fs, _ = read_wav(wav)
    assert 20 * math.log10(math.sqrt(2 * np.mean(x**2))) == pytest.approx(-20.0, abs=0.1)
    txt = tmp_path / "bands.txt"
    res = run(bands, wav, "--band", "40,2500", "-o", txt, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    n_bands = 3 * math.log2(5000 / 20)
    np.testing.assert_allclose(data["level_db"], -20.0 - 10 * math.log10(n_bands), atol=0.3)
    assert data["nominal_hz"][:3] == [40, 50, 63]
    curve = read_response_text(txt)
    np.testing.assert_allclose(curve.level_db, data["level_db"], atol=1e-3)
    assert_user_error(run(bands, wav, "-o", txt), "already exists")
    assert_user_error(run(bands, tmp_path / "none.wav"), "none.wav")
    assert_user_error(run(noise, tmp_path / "loud.wav", "--level", "-3"), "level_dbfs_rms")
    assert not (tmp_path / "loud.wav").exists()


# ----------------------------------------------------------------------------- fit


def _truth_files(tmp_path):
    surfaces = tuple(Surface(s.name, tuple(a * 1.6 for a in s.absorption), s.bands_hz) for s in ROOM.surfaces)
    from dataclasses import replace

    truth = replace(ROOM, surfaces=surfaces, size_m=(4.6 * 1.03, 3.4, 2.45))
    f = log_frequencies(15, 300, 96)
    out = []
    for name, ch in (("left.txt", "left"), ("right.txt", "right")):
        lv = predicted_level(truth, ch, None, f) + 20
        p = tmp_path / name
        p.write_text("# invented\n" + "\n".join(f"{a:.6f}\t{b:.5f}" for a, b in zip(f, lv)) + "\n")
        out.append(p)
    return truth, out


def test_fit_writes_a_calibrated_room_that_loads(tmp_path):
    truth, (left, right) = _truth_files(tmp_path)
    cal = tmp_path / "cal.toml"
    res = run(fit, DEMO, "--measure", "left", "seat", left, "--measure", "right", "seat", right, "-o", cal,
              "--json", "--plot", tmp_path / "fit.png")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    print(f"\nfit CLI on the demo room: {data['elapsed_s']:.1f} s, {data['iterations']} iterations; median |d| "
          f"{data['error_before']['median_abs_db']:.2f} -> {data['error_after']['median_abs_db']:.2f} dB")
    assert data["error_after"]["median_abs_db"] < data["error_before"]["median_abs_db"] / 3
    par = {p["name"]: p for p in data["parameters"]}
    assert par["length"]["value"] == pytest.approx(truth.size_m[0], abs=0.03)
    calibrated = load_room(cal)
    assert calibrated.size_m[0] == pytest.approx(par["length"]["value"], abs=0.001)
    assert calibrated.layout.seat_m == ROOM.layout.seat_m
    # the uncertainty the fit justifies is written, never wider than given (docs/uncertainty.md)
    un = data["uncertainty"]
    assert calibrated.uncertainty.size_m == pytest.approx(un["narrowed"]["size_m"])
    assert calibrated.uncertainty.size_m <= ROOM.uncertainty.size_m
    for s0, s1 in zip(ROOM.surfaces, calibrated.surfaces):
        assert calibrated.uncertainty.surface_rel(s1) <= ROOM.uncertainty.surface_rel(s0)
    text = run(fit, DEMO, "--measure", "left", "seat", left, "--measure", "right", "seat", right, "-o",
               tmp_path / "cal2.toml")
    assert "Uncertainty the fit can justify" in text.stdout
    assert (tmp_path / "fit.png").read_bytes()[:4] == b"\x89PNG"
    assert "Model:" in res.stderr
    # the calibrated room predicts the measurement better than the file did
    res2 = json.loads(run(compare, cal, left, "--channel", "left", "--json").stdout)
    res1 = json.loads(run(compare, DEMO, left, "--channel", "left", "--json").stdout)
    assert res2["median_abs_diff_db"] < res1["median_abs_diff_db"] / 3


def test_fit_refuses_to_write_over_input_or_existing_output(tmp_path):
    _, (left, _) = _truth_files(tmp_path)
    room = tmp_path / "room.toml"
    room.write_text(demo_room_path().read_text(encoding="utf-8"))
    before = room.read_bytes()
    assert_user_error(run(fit, room, left, "--channel", "left", "-o", room), "refusing to write over the input")
    assert room.read_bytes() == before
    (tmp_path / "cal.toml").write_text("x")
    assert_user_error(run(fit, room, left, "--channel", "left", "-o", tmp_path / "cal.toml"), "already exists")
    assert_user_error(run(fit, room, left, "-o", tmp_path / "c2.toml"), "left, right")
    assert_user_error(run(fit, room, "-o", tmp_path / "c2.toml"), "no measurements")
    assert_user_error(run(fit, room, left, "--channel", "left", "-o", tmp_path / "c2.toml", "--band", "5,200"),
                      "left.txt", "covers 15", "must lie inside")
    assert_user_error(run(fit, room, tmp_path / "gone.wav", "--channel", "left", "-o", tmp_path / "c2.toml"),
                      "gone.wav")
    assert not (tmp_path / "c2.toml").exists()
