"""A microphone calibration file (--mic-cal) is removed from every measurement it is given to.

Check: a measured curve L(f) read with a calibration whose deviation D(f) is known reads
L - D exactly where the calibration is defined (the definition of a deviation file: the
microphone reads D too high; common practice for calibration files), on compare, fit, eq
and the library's loader alike; a calibration that is an input is never overwritten.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room
from roommodes.analysis.compare import load_measurement
from roommodes.analysis.predict import predict
from roommodes.cli import main
from roommodes.io.importers import read_response_text

F = np.geomspace(15.0, 400.0, 120)


def _files(tmp_path):
    level = predict(load_room(demo_room_path()), freq_hz=F).channels[0].level_db + 70.0
    dev = 3.0 * np.sin(np.log(F))  # a smooth deviation of up to 3 dB
    meas = tmp_path / "left.txt"
    meas.write_text("".join(f"{a:.6f} {b:.6f}\n" for a, b in zip(F, level + dev)))  # as the microphone read it
    cal = tmp_path / "mic.txt"
    cal.write_text("# frequency, deviation\n" + "".join(f"{a:.6f} {b:.6f}\n" for a, b in zip(F, dev)))
    return meas, cal, level


def test_loader_removes_the_deviation_exactly(tmp_path):
    meas, cal, level = _files(tmp_path)
    grid = np.geomspace(20.0, 300.0, 40)
    raw = load_measurement(meas, freq_hz=grid)
    m = load_measurement(meas, freq_hz=grid, mic_cal=read_response_text(cal))
    want = np.interp(np.log(grid), np.log(F), level)
    np.testing.assert_allclose(m.level_db, want, atol=1e-5)
    assert np.max(np.abs(raw.level_db - want)) > 1.0  # without it the deviation is there
    assert any("microphone calibration" in n for n in m.notes)


def test_commands_take_the_calibration(tmp_path):
    meas, cal, level = _files(tmp_path)
    room = str(demo_room_path())
    r = CliRunner().invoke(main, ["compare", room, str(meas), "--channel", "left", "--json",
                                  "--mic-cal", str(cal)], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    with_cal = json.loads(r.stdout)["median_abs_diff_db"]
    r = CliRunner().invoke(main, ["compare", room, str(meas), "--channel", "left", "--json"],
                           catch_exceptions=False)
    without = json.loads(r.stdout)["median_abs_diff_db"]
    assert with_cal < without
    r = CliRunner().invoke(main, ["eq", room, "--measured", f"left={meas}", "--mic-cal", str(cal), "--json"],
                           catch_exceptions=False)
    assert r.exit_code == 0, r.output
    before = cal.read_text()
    r = CliRunner().invoke(main, ["fit", room, str(meas), "--channel", "left", "--mic-cal", str(cal),
                                  "-o", str(cal), "--force"])
    assert r.exit_code == 2 and cal.read_text() == before  # an input is never written


@pytest.mark.parametrize("text", ["", "not a number\n"])
def test_bad_calibration_file_is_one_line(tmp_path, text):
    meas, _, _ = _files(tmp_path)
    bad = tmp_path / "bad.txt"
    bad.write_text(text)
    r = CliRunner().invoke(main, ["compare", str(demo_room_path()), str(meas), "--channel", "left", "--mic-cal", str(bad)])
    assert r.exit_code == 2 and "--mic-cal" in r.stderr and "Traceback" not in r.output
