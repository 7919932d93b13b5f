"""One estimate of the effective dimensions, shared by `compare` and `fit`.

Check values and their sources: the synthetic "true" room is the demo room 3 % longer with
1.5 times the absorption (the issue's new-user case); its response at the seat comes from
the exact solution of that room. An axial length mode lies at ``n c / 2L`` (Rayleigh;
Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3), so the true effective length is
1.03 x 4.60 m = 4.738 m. That the two commands give the same figure is the project's own
rule (one estimate, used by both).
"""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room, log_frequencies
from roommodes.analysis.compare import predicted_level
from roommodes.cli import main
from roommodes.model.room import Surface

ROOM_PATH = demo_room_path()


def _truth(room):
    surfaces = tuple(Surface(s.name, tuple(a * 1.5 for a in s.absorption), s.bands_hz) for s in room.surfaces)
    return replace(room, surfaces=surfaces, size_m=tuple(np.multiply(room.size_m, [1.03, 1.0, 1.0])))


@pytest.mark.slow
def test_compare_and_fit_report_the_same_effective_length(tmp_path):
    room = load_room(ROOM_PATH)
    truth = _truth(room)
    f = log_frequencies(10, 400, 96)
    meas = tmp_path / "left-seat.txt"
    np.savetxt(meas, np.c_[f, predicted_level(truth, "left", [room.layout.seat_m], f)], fmt="%.6f",
               header="freq_hz level_db")
    runner = CliRunner()
    c = runner.invoke(main, ["compare", str(ROOM_PATH), str(meas), "--channel", "left", "--json"],
                      catch_exceptions=False)
    assert c.exit_code == 0, c.output
    fi = runner.invoke(main, ["fit", str(ROOM_PATH), str(meas), "--channel", "left", "-o", str(tmp_path / "cal.toml"),
                              "--json"], catch_exceptions=False)
    assert fi.exit_code == 0, fi.output
    ce = json.loads(c.stdout)["effective_size"]
    fe = json.loads(fi.stdout)["effective_size"]
    assert ce["fitted"] and fe["fitted"]
    assert ce["size_m"] == pytest.approx(fe["size_m"], abs=1e-9)
    # and it is the room's: within 0.5 % of the true length (the file is 3 % short)
    assert ce["size_m"][0] == pytest.approx(1.03 * room.size_m[0], rel=0.005)
    assert ce["size_m"][1:] == pytest.approx(list(room.size_m[1:]), rel=0.005)
    # the written room file carries the same length
    assert load_room(tmp_path / "cal.toml").size_m[0] == pytest.approx(fe["size_m"][0], abs=5e-4)
    # the text output says it once, with the same figure
    ct = runner.invoke(main, ["compare", str(ROOM_PATH), str(meas), "--channel", "left"], catch_exceptions=False)
    assert f"length {ce['size_m'][0]:.3f} m" in ct.stdout
    assert "effective length about" not in ct.stdout


def test_band_data_leave_the_effective_size_unestimated(tmp_path):
    lines = "\n".join(f"{c}, {v}" for c, v in zip([20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250],
                                                   [70, 72, 75, 78, 77, 74, 73, 72, 72, 71, 71, 70]))
    p = tmp_path / "bands.txt"
    p.write_text(lines + "\n")
    res = CliRunner().invoke(main, ["compare", str(ROOM_PATH), str(p), "--channel", "left", "--json"],
                             catch_exceptions=False)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["effective_size"] is None
    assert any("no effective dimensions are read" in t for t in data["interpretation"])
