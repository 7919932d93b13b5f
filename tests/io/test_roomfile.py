"""Room files: every example loads; every kind of bad input gets one clear message.

No outside check values here apart from the speed of sound (Kinsler et al. 2000,
reference for roommodes.model.room.speed_of_sound): these tests hold the room-file reader to
the format documented in docs/room-file.md.
"""

import numpy as np
import pytest

from roommodes import RoomFileError, example_rooms, load_room, room_to_toml
from roommodes.io.roomfile import write_text_atomic

GOOD = """
[room]
name = "t"
size_m = [4.8, 3.6, 2.5]
temperature_c = 20

[surfaces]
front = 0.10
back = 0.3
left = "plasterboard-on-studs"
right = { absorption = [0.25, 0.15, 0.10], bands_hz = [63, 125, 250] }
floor = 0.1
ceiling = 0.2

[speakers.left]
position_m = [0.5, 0.9, 1.2]
lowcut_hz = 45
lowcut_order = 2

[speakers.right]
position_m = [0.5, 2.7, 1.2]

[seat]
position_m = [1.9, 1.8, 1.2]
"""


def _write(tmp_path, text, name="room.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_every_example_room_loads():
    paths = example_rooms()
    assert len(paths) >= 3
    for p in paths:
        room = load_room(p)
        assert room.layout is not None and len(room.layout.speakers) >= 2
        assert np.all(room.absorption([63, 125, 250]) < 1)


def test_good_file_values(tmp_path):
    room = load_room(_write(tmp_path, GOOD))
    assert room.size_m == (4.8, 3.6, 2.5)
    assert room.speed_of_sound == pytest.approx(343.2, abs=0.05)
    assert room.surfaces[3].absorption_at(125.0) == pytest.approx(0.15)
    # linear in log frequency between band centres: halfway (in log f) between 63 and 125 Hz
    assert room.surfaces[3].absorption_at(np.sqrt(63 * 125)) == pytest.approx(0.20)
    assert room.layout.speakers[0].lowcut_hz == 45
    assert room.layout.seat_m == (1.9, 1.8, 1.2)


def test_round_trip(tmp_path):
    room = load_room(_write(tmp_path, GOOD))
    again = load_room(_write(tmp_path, room_to_toml(room), "again.toml"))
    assert again.size_m == room.size_m
    assert [s.absorption for s in again.surfaces] == [s.absorption for s in room.surfaces]
    assert again.layout.speakers == room.layout.speakers
    assert again.layout.seat_m == room.layout.seat_m


BAD = [
    ("size_m = [4.8, 3.6, 2.5]", "sise_m = [4.8, 3.6, 2.5]", r"unknown key 'sise_m' \(did you mean 'size_m'\?\)"),
    ("size_m = [4.8, 3.6, 2.5]", "size_m = [4.8, -3.6, 2.5]", r"\[room\] size_m\[1\]: width -3.6 m"),
    ("size_m = [4.8, 3.6, 2.5]", "size_m = [4.8, 0, 2.5]", r"size_m\[1\]: width 0 m"),
    ("size_m = [4.8, 3.6, 2.5]", "size_m = [4.8, nan, 2.5]", r"size_m\[1\]: expected a finite number"),
    ("size_m = [4.8, 3.6, 2.5]", "size_m = [480, 3.6, 2.5]", r"length 480 m is not a plausible"),
    ("size_m = [4.8, 3.6, 2.5]", "size_m = [4.8, 3.6]", r"expected a list of 3 numbers"),
    ("front = 0.10", "front = 1.0", r"\[surfaces\] front: absorption coefficient 1 is out of range; allowed 0 <= alpha < 1"),
    ("front = 0.10", "front = -0.1", r"\[surfaces\] front: absorption coefficient -0.1"),
    ("front = 0.10", 'front = "unobtainium"', r"\[surfaces\] front: .*unobtainium"),
    ("front = 0.10", "", r"\[surfaces\]: missing front"),
    ("bands_hz = [63, 125, 250]", "bands_hz = [63, 125]", r"'absorption' has 3 values but 'bands_hz' has 2"),
    ("bands_hz = [63, 125, 250]", "bands_hz = [63, 250, 125]", r"must rise strictly"),
    ("temperature_c = 20", "temperature_c = 80", r"\[room\] temperature_c: 80 is out of range; allowed -20 to 50"),
    ("position_m = [1.9, 1.8, 1.2]", "position_m = [1.9, 3.75, 1.2]", r"\[seat\] position_m: y = 3.75 m lies outside"),
    ("position_m = [0.5, 2.7, 1.2]", "position_m = [0.5, 2.7, 0.01]", r"\[speakers.right\] position_m: z = 0.01 m .*inside a wall"),
    ("position_m = [0.5, 2.7, 1.2]", "position_m = [0.5, 0.9, 1.2]", r"two speakers cannot share a point"),
    ("lowcut_order = 2", "lowcut_order = 3", r"lowcut_order: must be 2 \(sealed box\) or 4 \(vented box\)"),
]


@pytest.mark.parametrize("old,new,message", BAD)
def test_bad_room_files(tmp_path, old, new, message):
    assert old in GOOD
    p = _write(tmp_path, GOOD.replace(old, new, 1))
    with pytest.raises(RoomFileError, match=message) as err:
        load_room(p)
    assert str(p) in str(err.value)  # the message names the file


def test_not_toml_empty_missing_directory(tmp_path):
    with pytest.raises(RoomFileError, match="is not valid TOML"):
        load_room(_write(tmp_path, "[room\nsize = 3"))
    with pytest.raises(RoomFileError, match="the file is empty"):
        load_room(_write(tmp_path, "  \n"))
    with pytest.raises(RoomFileError, match="no such file"):
        load_room(tmp_path / "nope.toml")
    with pytest.raises(RoomFileError, match="is a folder"):
        load_room(tmp_path)
    p = tmp_path / "bin.toml"
    p.write_bytes(b"\xff\xfe\x00\x01")
    with pytest.raises(RoomFileError, match="not a text file"):
        load_room(p)


def test_atomic_write_refuses_to_overwrite(tmp_path):
    p = _write(tmp_path, "original")
    with pytest.raises(FileExistsError):
        write_text_atomic(p, "new")
    assert p.read_text() == "original"
    write_text_atomic(p, "new", overwrite=True)
    assert p.read_text() == "new"
    assert [q.name for q in tmp_path.iterdir()] == ["room.toml"]


def test_speaker_response_file_sets_the_speaker_roll_off(tmp_path):
    # An imported anechoic curve (frequency, dB) replaces the high-pass: the predicted level
    # with it minus the level without it is the curve itself (interpolated in log frequency).
    from roommodes import predict

    (tmp_path / "curve.txt").write_text("# anechoic\n20 -12\n40 -3\n80 0\n300 0\n")
    text = GOOD.replace("lowcut_hz = 45\nlowcut_order = 2", 'response_file = "curve.txt"')
    room = load_room(_write(tmp_path, text))
    assert room.layout.speakers[0].response_file == "curve.txt"
    f = np.array([20.0, 28.2842712, 40.0, 100.0])
    with_curve = predict(room, freq_hz=f).channels[0].level_db
    without = predict(room, freq_hz=f, include_speaker=False).channels[0].level_db
    np.testing.assert_allclose(with_curve - without, [-12.0, -7.5, -3.0, 0.0], atol=1e-6)
    bad = text.replace('"curve.txt"', '"missing.txt"')
    with pytest.raises(RoomFileError, match=r"\[speakers.left\] response_file: cannot read 'missing.txt'"):
        load_room(_write(tmp_path, bad, "bad.toml"))


BOX = 'lowcut_order = 2\ncabinet_m = [0.2, 0.32, 0.25]\nwoofer_on_face_m = [0.0, 0.1]\ntweeter_on_face_m = [0.0, 0.24]'


def test_cabinet_keys_are_read_and_written_back(tmp_path):
    room = load_room(_write(tmp_path, GOOD.replace("lowcut_order = 2", BOX)))
    cab = room.layout.speakers[0].cabinet
    assert cab.size_m == (0.2, 0.32, 0.25) and cab.woofer_m == (0.0, 0.1) and cab.tweeter_m == (0.0, 0.24)
    assert cab.centre_above_woofer_m == pytest.approx(0.14)
    assert room.layout.speakers[1].cabinet is None
    again = load_room(_write(tmp_path, room_to_toml(room), "again.toml"))
    assert again.layout.speakers[0].cabinet == cab


@pytest.mark.parametrize("new,message", [
    ("cabinet_m = [0.2, 0.32]", r"\[speakers.left\] cabinet_m: expected \[width, height, depth\]"),
    ("cabinet_m = [0.2, 0.32, 0.25]", r"\[speakers.left\] woofer_on_face_m: missing"),
    ("woofer_on_face_m = [0.0, 0.1]", r"\[speakers.left\] woofer_on_face_m: needs cabinet_m"),
    ("cabinet_m = [0.2, 0.32, 0.25]\nwoofer_on_face_m = [0.0, 0.4]", r"woofer_on_face_m\[1\]: 0.4 is out of range"),
    ("cabinet_m = [0.2, 0.32, 0.01]\nwoofer_on_face_m = [0.0, 0.1]", r"cabinet_m\[2\]: 0.01 is out of range"),
])
def test_bad_cabinet_keys(tmp_path, new, message):
    with pytest.raises(RoomFileError, match=r"^" + str(tmp_path / "room.toml").replace(".", r"\.") + ": .*" + message):
        load_room(_write(tmp_path, GOOD.replace("lowcut_order = 2", "lowcut_order = 2\n" + new)))


@pytest.mark.parametrize("search,message", [
    ("spacing = [1, 2]", r"\[search\] unknown key 'spacing'"),
    ("speaker_front_m = [1.0, 0.5]", r"\[search\] speaker_front_m: the range 1-0.5 m is empty"),
    ("toe_in = 1", r"\[search\] toe_in: expected true or false"),
    ("seat_fixed = true\nseat_front_m = [1, 2]", r"\[search\] seat_front_m: has no effect when seat_fixed"),
])
def test_search_table_errors_at_load_time(tmp_path, search, message):
    # one line naming the file, the key path and what is allowed, like every other key
    with pytest.raises(RoomFileError, match=r"^.*room\.toml: " + message):
        load_room(_write(tmp_path, GOOD + "\n[search]\n" + search + "\n"))
