"""The eq command on the demo room: the checks of the EQ feature, end to end.

Filter definitions: Audio EQ Cookbook (R. Bristow-Johnson, W3C Audio WG note); responses
recomputed independently with scipy.signal.sosfreqz.
"""

import json

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from roommodes import demo_room_path, load_room
from roommodes.analysis.correction import correct_prediction
from roommodes.cli import main

DEMO = str(demo_room_path())


@pytest.fixture(scope="module")
def demo_eq():
    res = CliRunner().invoke(main, ["eq", DEMO, "--json"], catch_exceptions=False)
    assert res.exit_code == 0
    return json.loads(res.stdout)


def test_json_keys(demo_eq):
    assert [c["name"] for c in demo_eq["channels"]] == ["left", "right"]
    for ch in demo_eq["channels"]:
        for key in ("filters", "sos", "max_boost_db", "before_db", "after_db", "target_db"):
            assert key in ch
        assert set(ch["sos"]) == {"44100", "48000", "96000"}
        assert all(set(f) >= {"type", "freq_hz", "gain_db", "q"} for f in ch["filters"])
    assert any("hearing" in c for c in demo_eq["cautions"])


def test_corrected_response_improves_seat_and_head_positions(demo_eq):
    # issue 10's done criteria, here on the design model (tests/analysis/test_eq_in_the_room.py
    # judges on independent references): rms deviation where EQ may act falls by at least 40 %
    # at the seat and 20 % at every head position 15 cm away (common practice for "worth doing")
    for ch in demo_eq["channels"]:
        before, after = ch["error_before"]["rms_db"], ch["error_after"]["rms_db"]
        print(f"{ch['name']}: seat rms {before:.1f} -> {after:.1f} dB")
        assert after <= 0.6 * before
        pos = ch["positions"]
        assert len(pos["error_before"]) == 6
        for b, a in zip(pos["error_before"], pos["error_after"]):
            assert a["rms_db"] <= 0.8 * b["rms_db"]
        within = np.mean(np.abs(np.array(ch["after_db"]) - np.array(ch["target_db"]))[np.array(ch["allowed"])] <= 3)
        assert within >= 0.85


def test_no_boost_above_limit_or_into_nulls(demo_eq):
    f = np.array(demo_eq["frequencies_hz"])
    for ch in demo_eq["channels"]:
        corr = np.array(ch["correction_db"], float)
        assert np.max(corr) <= 6.0 + 1e-6
        for reg in ch["regions"]:
            if reg["kind"] == "narrow null":
                inside = (f >= reg["freq_hz"][0]) & (f <= reg["freq_hz"][1])
                assert np.all(corr[inside] <= 0.5 + 1e-6)
        # headroom equals the maximum of the realised cascade (not the largest single gain):
        # recomputed from the exported sections at 48 kHz with scipy.signal.sosfreqz
        sos = np.array(ch["sos"]["48000"], float)
        w = np.geomspace(5, 2000, 20000)
        _, h = signal.sosfreqz(sos, worN=w, fs=48000)
        assert 20 * np.log10(np.max(np.abs(h))) == pytest.approx(ch["headroom"]["max_boost_db"], abs=0.02)


def test_vented_speaker_is_not_boosted_below_tuning():
    # The demo speakers are vented with lowcut 48 Hz: no boost below the tuning (Thiele/Small
    # practice, recalled from memory), so the design band starts at 48 Hz by default.
    corr, _ = correct_prediction(load_room(DEMO))
    for c in corr:
        f = c.parametric.freq_hz
        assert c.parametric.band_hz[0] == 48.0
        assert np.all(c.parametric.correction_db[f < 48.0] <= 0.5 + 1e-9)  # the design tolerance


def test_export_and_plot_and_refusals(tmp_path):
    out, png = tmp_path / "eq.txt", tmp_path / "eq.png"
    r = CliRunner().invoke(main, ["eq", DEMO, "--export", str(out), "--plot", str(png),
                                  "--points-per-octave", "24"], catch_exceptions=False)
    assert r.exit_code == 0
    text = out.read_text()
    assert "roommodes" in text and "48000" in text
    assert png.read_bytes()[:4] == b"\x89PNG"
    assert "Protect your hearing" in r.stderr
    again = CliRunner().invoke(main, ["eq", DEMO, "--export", str(out)])
    assert again.exit_code == 2 and "already exists" in again.stderr


def test_bad_target_files(tmp_path):
    unsorted = tmp_path / "unsorted.txt"
    unsorted.write_text("20 3\n100 0\n50 1\n250 0\n")
    short = tmp_path / "short.txt"
    short.write_text("20 3\n")
    for path, msg in ((unsorted, "changes direction"), (short, "at least 3")):
        r = CliRunner().invoke(main, ["eq", DEMO, "--target", str(path)])
        assert r.exit_code == 2 and msg in r.stderr and str(path.name) in r.stderr


@pytest.mark.parametrize("args,msg", [
    (["--max-boost", "-3"], "--max-boost"),
    (["--q-range", "10,0.5"], "--q-range"),
    (["--band", "10,400"], "outside the computed range"),
    (["--target", "missing-target.txt"], "missing-target.txt"),
])
def test_bad_input(args, msg):
    r = CliRunner().invoke(main, ["eq", DEMO, *args])
    assert r.exit_code == 2, r.output
    assert msg in r.stderr and "Traceback" not in r.stderr


def test_measured_curves_with_several_positions(tmp_path):
    # A "measurement" made from the model itself (invented test data): the design on it must
    # match the design on the prediction it came from, and several positions of one channel
    # are averaged (their spread feeds the null classification).
    pred = json.loads(CliRunner().invoke(main, ["predict", DEMO, "--json"]).stdout)
    files = []
    for shift, ch in zip((0.0, 1.0), pred["channels"][:1] * 2):
        p = tmp_path / f"left-{shift}.txt"
        p.write_text("".join(f"{f} {lv + 75 + shift}\n" for f, lv in zip(pred["frequencies_hz"], ch["level_db"])))
        files.append(p)
    r = CliRunner().invoke(main, ["eq", DEMO, "--json", "--measured", f"left={files[0]}",
                                  "--measured", f"left={files[1]}"], catch_exceptions=False)
    assert r.exit_code == 0
    data = json.loads(r.stdout)
    assert data["source"] == "measured" and [c["name"] for c in data["channels"]] == ["left"]
    ch = data["channels"][0]
    assert "max_clean_spl" not in ch  # a measured level has no known absolute reference
    assert ch["error_after"]["rms_db"] < ch["error_before"]["rms_db"]
    bad = CliRunner().invoke(main, ["eq", DEMO, "--measured", f"centre={files[0]}"])
    assert bad.exit_code == 2 and "no speaker 'centre'" in bad.stderr


def test_area_average_correction():
    # The average over a one-point "area" is the seat itself (definition of the mean); a
    # 0.6 x 0.6 m area gives a different, still valid design.
    room = load_room(DEMO)
    f = np.geomspace(40, 250, 60)
    # the modal sum, whose value at a point does not depend on which other points share the
    # call (the exact solver's series is truncated per call, within its 0.01 dB bound)
    seat, _ = correct_prediction(room, freq_hz=f, method="modal")
    one, _ = correct_prediction(room, freq_hz=f, area_m=(0.6, 0.6), area_points=(1, 1), method="modal")
    np.testing.assert_allclose(one[0].parametric.before_db, seat[0].parametric.before_db, atol=1e-9)
    r = CliRunner().invoke(main, ["eq", DEMO, "--json", "--area", "0.6,0.6", "--points-per-octave", "12"])
    assert r.exit_code == 0
    data = json.loads(r.stdout)
    assert "average over 0.6 x 0.6 m" in data["source"]
    for ch in data["channels"]:
        assert np.max(np.array(ch["correction_db"], float)) <= 6.0 + 1e-6
