"""The solver choice on the commands: ``--method image`` gives image-solver numbers.

The reference is the image-source solver called directly through the library's one chain
(roommodes.analysis.levels.speaker_levels), which tests/solvers/test_images.py checks
against pyroomacoustics and closed forms; here the two routes must agree, so no outside
value enters. The box is small and absorbent (alpha 0.4 on every surface) so that the
image sum converges at a low order and the test stays quick.
"""

from __future__ import annotations

import json

import numpy as np
from click.testing import CliRunner

from roommodes import load_room, log_frequencies, smooth_fractional_octave
from roommodes.analysis.levels import speaker_levels
from roommodes.cli import main

ROOM = """
[room]
name = "Absorbent test box"
size_m = [3.6, 3.0, 2.4]

[surfaces]
front = 0.4
back = 0.4
left = 0.4
right = 0.4
floor = 0.4
ceiling = 0.4

[speakers.left]
position_m = [0.5, 0.9, 1.2]
lowcut_hz = 50
lowcut_order = 2

[speakers.right]
position_m = [0.5, 2.0, 1.2]

[seat]
position_m = [2.0, 1.45, 1.2]
"""


def _run(*args):
    res = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def test_explain_and_eq_with_the_image_solver_give_image_numbers(tmp_path):
    path = tmp_path / "box.toml"
    path.write_text(ROOM)
    room = load_room(path)
    ex = _run("explain", path, "--method", "image", "--freq-range", "30,150", "--points-per-octave", "6", "--json")
    assert ex["method"] == "image"
    f = np.asarray(ex["frequencies_hz"])
    np.testing.assert_allclose(f, log_frequencies(30.0, 150.0, 6))
    image = speaker_levels(room, room.layout.speakers, [room.layout.seat_m], f, method="image").level_db[:, 0]
    modal = speaker_levels(room, room.layout.speakers, [room.layout.seat_m], f, method="modal").level_db[:, 0]
    got = np.array([ex["level_db"]["left"], ex["level_db"]["right"]])
    np.testing.assert_allclose(got, image, atol=1e-6)
    assert np.max(np.abs(got - modal)) > 0.05  # the two solvers differ here, so the check can tell them apart

    eq = _run("eq", path, "--method", "image", "--points-per-octave", "6", "--json")
    ch = eq["channels"][0]
    assert "image solver" in eq["source"]
    f = np.asarray(eq["frequencies_hz"])
    # the EQ designs on the 1/12-octave power-smoothed curve (its documented default)
    raw = speaker_levels(room, room.layout.speakers[:1], [room.layout.seat_m], f, method="image").level_db[0, 0]
    want = 10 * np.log10(smooth_fractional_octave(f, 10 ** (raw / 10), 12))
    np.testing.assert_allclose(ch["before_db"], want, atol=1e-6)
