"""The one room-file writer (roommodes.io.roomfile.room_to_toml); sources of the checks below.

No outside check values: the properties are the format's own (docs/room-file.md) and TOML's
(the text must parse with the standard library's tomllib, TOML 1.0): what is written reads
back to the same room; a file written over another keeps the user's comments and keys;
names and paths are quoted, never injected as extra keys; a relative response_file still
points at the same curve from the new file's folder.
"""

from __future__ import annotations

import tomllib
from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import example_rooms, load_room
from roommodes.cli import main
from roommodes.io.roomfile import parse_room, room_to_toml


@pytest.mark.parametrize("path", example_rooms(), ids=lambda p: p.name)
def test_written_room_reads_back_to_the_same_room(path, tmp_path):
    room = load_room(path)
    for text in (room_to_toml(room), room_to_toml(room, original_text=path.read_text(encoding="utf-8"))):
        back = parse_room(tomllib.loads(text), "x.toml", path.parent)
        assert back.size_m == room.size_m and back.temperature_c == room.temperature_c
        for a, b in zip(back.surfaces, room.surfaces):
            assert (a.name, a.material, a.bands_hz) == (b.name, b.material, b.bands_hz)
            np.testing.assert_allclose(a.absorption, b.absorption)
        assert back.layout.seat_m == room.layout.seat_m
        assert [s.position_m for s in back.layout.speakers] == [s.position_m for s in room.layout.speakers]


def test_names_and_paths_are_quoted_not_injected(tmp_path):
    room = load_room(example_rooms()[0])
    sp = replace(room.layout.speakers[0], name='le"ft\nsensitivity_db = 119', response_file='a"b\nc = 1.txt')
    room = room.with_layout(replace(room.layout, speakers=(sp,) + room.layout.speakers[1:]))
    data = tomllib.loads(room_to_toml(replace(room, name='x"\n[seat]')))
    assert data["room"]["name"] == 'x"\n[seat]'
    assert list(data["speakers"])[0] == 'le"ft\nsensitivity_db = 119'
    assert data["speakers"]['le"ft\nsensitivity_db = 119']["response_file"] == 'a"b\nc = 1.txt'
    assert data["speakers"]['le"ft\nsensitivity_db = 119'].get("sensitivity_db") == sp.sensitivity_db != 119


ROOM = """# My studio, measured 2026-11-02 with a laser meter.
[room]
name = "Spare room"
size_m = [4.9, 3.6, 2.55]   # wall to wall, at skirting height

[surfaces]
front = 0.1   # bare plaster
back = 0.3    # bookshelf
left = 0.1
right = 0.1
floor = 0.15  # rug on boards
ceiling = 0.1

[speakers.left]
position_m = [0.6, 0.9, 1.2]   # on the desk stands
lowcut_hz = 45
lowcut_order = 2
response_file = "curves/left.txt"

[speakers.right]
position_m = [0.6, 2.7, 1.2]
lowcut_hz = 45
lowcut_order = 2

[seat]
position_m = [1.9, 1.8, 1.2]   # the office chair
"""


def _room_files(tmp_path):
    (tmp_path / "curves").mkdir()
    (tmp_path / "curves" / "left.txt").write_text("20 -12\n45 -3\n100 0\n1000 0\n")
    path = tmp_path / "spare.toml"
    path.write_text(ROOM)
    return path


def test_place_write_layout_keeps_comments_and_rewrites_relative_paths(tmp_path):
    path = _room_files(tmp_path)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    out = out_dir / "best.toml"
    res = CliRunner().invoke(main, ["place", str(path), "--write-layout", str(out)], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    text = out.read_text()
    for note in ("# My studio, measured 2026-11-02", "# wall to wall, at skirting height", "# bookshelf",
                 "# rug on boards"):
        assert note in text, note
    data = tomllib.loads(text)
    assert data["speakers"]["left"]["response_file"] == "../curves/left.txt"
    assert load_room(out).layout.speakers[0].response is not None  # the curve still loads from the new folder
    assert path.read_text() == ROOM  # the input is untouched


def test_fit_output_keeps_comments(tmp_path):
    path = _room_files(tmp_path)
    room = load_room(path)
    f = np.geomspace(20, 200, 60)
    from roommodes.analysis.predict import predict

    level = predict(room, freq_hz=f).channels[0].level_db
    meas = tmp_path / "left.txt"
    meas.write_text("".join(f"{a:.4f} {b:.4f}\n" for a, b in zip(f, level)))
    out = tmp_path / "cal.toml"
    res = CliRunner().invoke(main, ["fit", str(path), str(meas), "--channel", "left", "-o", str(out)],
                             catch_exceptions=False)
    assert res.exit_code == 0, res.output
    text = out.read_text()
    assert "# wall to wall, at skirting height" in text and "# the office chair" in text
    assert text.startswith("# Calibrated by roommodes")
    load_room(out)


def test_keep_outs_follow_a_moved_wall_into_the_calibrated_file(tmp_path):
    # The project's own rule (issue: "keep-outs and other geometry follow a changed room"):
    # a box that reached the back wall reaches the moved back wall; one that did not stays.
    from roommodes.analysis.fit import follow_walls

    text = ROOM + """
[search]
keep_out = [{ name = "sofa", min_m = [3.9, 0.5, 0.0], max_m = [4.9, 3.1, 0.9] },
            { name = "desk", min_m = [0.3, 1.0, 0.0], max_m = [1.0, 2.6, 0.75] }]
"""
    _room_files(tmp_path)
    path = tmp_path / "spare.toml"
    path.write_text(text)
    room = load_room(path)
    new_size = (5.05, 3.6, 2.55)  # the fit found the room 15 cm longer
    search = follow_walls(room.search, room.size_m, new_size)
    sofa, desk = search["keep_out"]
    assert sofa["max_m"] == [5.05, 3.1, 0.9] and sofa["min_m"] == [3.9, 0.5, 0.0]
    assert desk["max_m"] == [1.0, 2.6, 0.75]
    assert room.search["keep_out"][0]["max_m"] == [4.9, 3.1, 0.9]  # the input is not changed
    calibrated = replace(room, size_m=new_size, search=search)
    out = room_to_toml(calibrated, original_text=text)
    back = tomllib.loads(out)
    assert back["search"]["keep_out"][0]["max_m"] == [5.05, 3.1, 0.9]
    assert "# the office chair" in out
    assert follow_walls({}, room.size_m, new_size) == {}


def test_sub_regions_keep_outs_and_candidates_follow_a_moved_wall(tmp_path):
    # The project's own rule (issue: "keep-outs and other geometry follow a changed room"): a
    # [subs] region or keep-out that reached a far wall reaches it after the fit moved it; a
    # candidate near a far wall keeps its distance from it; the user's names, comments and 2-D
    # corners stay.
    from roommodes.analysis.fit import follow_walls_subs

    text = ROOM + """
[subs]
# where the subs may go
regions = [
  { name = "front strip", min_m = [0.1, 0.1], max_m = [1.0, 3.3] },   # along the front wall
  { name = "back strip", min_m = [3.8, 0.1, 0.0], max_m = [4.9, 3.6, 0.6] },
]
keep_out = [{ min_m = [2.0, 0.0], max_m = [4.9, 0.5] }]
candidates_m = [[4.6, 1.7, 0.3], [0.3, 0.3, 0.3]]  # my picks
"""
    _room_files(tmp_path)
    path = tmp_path / "subs.toml"
    path.write_text(text)
    room = load_room(path)
    assert room.size_m[:2] == (4.9, 3.6)
    new_size = (5.05, 3.5, room.size_m[2])  # 15 cm longer, 10 cm narrower
    ss = follow_walls_subs(room.subs_search, room.size_m, new_size)
    front, back = ss.regions
    assert front.max_m[:2] == (1.0, 3.3) and back.max_m == (5.05, 3.5, 0.6)
    assert ss.keep_out[0].max_m[:2] == (5.05, 0.5)
    assert ss.candidates_m == ((pytest.approx(4.75), 1.7, 0.3), (0.3, 0.3, 0.3))  # 30 cm from the back wall, as before
    assert room.subs_search.regions[1].max_m == (4.9, 3.6, 0.6)  # the input is not changed
    assert follow_walls_subs(None, room.size_m, new_size) is None
    out = room_to_toml(replace(room, size_m=new_size, subs_search=ss), original_text=text)
    back_t = tomllib.loads(out)["subs"]
    assert back_t["regions"][0] == {"name": "front strip", "min_m": [0.1, 0.1], "max_m": [1.0, 3.3]}
    assert back_t["regions"][1]["max_m"] == [5.05, 3.5, 0.6]
    assert back_t["keep_out"][0] == {"min_m": [2.0, 0.0], "max_m": [5.05, 0.5]}
    assert back_t["candidates_m"][0] == pytest.approx([4.75, 1.7, 0.3])
    assert "# where the subs may go" in out and "# along the front wall" in out and "# my picks" in out
    written = tmp_path / "cal.toml"
    written.write_text(out)
    again = load_room(written).subs_search
    assert again.regions == ss.regions and again.keep_out == ss.keep_out
    assert np.allclose(again.candidates_m, ss.candidates_m)
