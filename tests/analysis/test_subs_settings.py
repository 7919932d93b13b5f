"""A sub's settings in the room file: the keys, their errors, the one writer, and predict's sum."""

import numpy as np
import pytest

from roommodes import load_room
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.predict import predict_seats
from roommodes.analysis.subs import SubConfig, SubSetting, room_with_config
from roommodes.io.roomfile import RoomFileError, example_rooms, parse_room, room_to_toml
from roommodes.model.room import SystemSettings

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")


def _data(**sub):
    return {"room": {"size_m": [5.0, 4.0, 2.5]}, "surfaces": {w: 0.1 for w in
                                                              ("front", "back", "left", "right", "floor", "ceiling")},
            "speakers": {"left": {"position_m": [0.5, 1.2, 1.1]}, "right": {"position_m": [0.5, 2.8, 1.1]},
                         "sub": {"position_m": [0.3, 0.3, 0.3], "role": "sub", **sub}},
            "seat": {"position_m": [3.0, 2.0, 1.1]}}


def test_sub_settings_and_the_system_table_parse():
    d = _data(gain_db=-3.5, delay_ms=4.2, polarity=-1)
    d["system"] = {"crossover_hz": 70, "mains_delay_ms": 1.5}
    room = parse_room(d, "r.toml")
    sub = room.layout.subs[0]
    assert (sub.gain_db, sub.delay_ms, sub.polarity) == (-3.5, 4.2, -1)
    assert room.system == SystemSettings(70.0, 1.5)
    plain = parse_room(_data(), "r.toml")
    assert (plain.layout.subs[0].gain_db, plain.layout.subs[0].delay_ms, plain.layout.subs[0].polarity) == (0, 0, 1)
    assert plain.system is None


@pytest.mark.parametrize("change, where, hint", [
    (lambda d: d["speakers"]["left"].update(gain_db=2.0), "[speakers.left] gain_db", "role = \"sub\""),
    (lambda d: d["speakers"]["sub"].update(polarity=0), "[speakers.sub] polarity", "1 (normal) or -1"),
    (lambda d: d["speakers"]["sub"].update(polarity=True), "[speakers.sub] polarity", "1 (normal) or -1"),
    (lambda d: d["speakers"]["sub"].update(gain_db=20), "[speakers.sub] gain_db", "allowed -30 to 12"),
    (lambda d: d["speakers"]["sub"].update(delay_ms=-1), "[speakers.sub] delay_ms", "allowed 0 to 100"),
    (lambda d: d.update(system={"crossover_hz": 10}), "[system] crossover_hz", "allowed 30 to 200"),
    (lambda d: d.update(system={"crossover": 80}), "[system]", "crossover_hz"),
    (lambda d: d.update(system=80), "[system]", "must be a table"),
    (lambda d: (d["speakers"].pop("sub"), d.update(system={"crossover_hz": 80})), "[system]", "no subwoofer"),
])
def test_bad_sub_settings_give_the_one_line_room_file_error(change, where, hint):
    d = _data()
    change(d)
    with pytest.raises(RoomFileError) as exc:
        parse_room(d, "r.toml")
    msg = str(exc.value)
    assert msg.startswith(f"r.toml: {where}") and hint in msg and "\n" not in msg


def _config(room):
    subs = (SubSetting("sub", (4.9, 1.9, 0.3), -2.5, 3.25, -1, 0.0),
            SubSetting("sub-2", (0.7, 1.9, 0.3), 1.0, 0.0, 1, 1.0))
    return SubConfig("2 subs", "search", subs, 65.0, 0.8, {"score": 0.0, "spread": 0.0}, np.zeros((3, 2)),
                     np.zeros(3), np.zeros(3))


def test_the_writer_puts_the_settings_into_a_copy_and_keeps_the_comments(tmp_path):
    room = load_room(SOFA)
    new = room_with_config(room, _config(room))
    text = room_to_toml(new, original_text=SOFA.read_text(), written_to=tmp_path / "out.toml")
    assert "# small monitors: their own -3 dB point" in text
    assert "# The middle seat is listed first: it is the main seat." in text
    assert "# front-left corner, woofer facing the room" not in text  # the comment went with the old place
    assert "moved by roommodes subs; was [0.3, 0.3, 0.25]" in text
    (tmp_path / "out.toml").write_text(text)
    back = load_room(tmp_path / "out.toml")
    got = {s.name: (s.position_m, s.gain_db, s.delay_ms, s.polarity, s.lowcut_hz, s.max_spl_db)
           for s in back.layout.subs}
    assert got == {"sub": ((4.9, 1.9, 0.3), -2.5, 3.25, -1, 24.0, 108.0),
                   "sub-2": ((0.7, 1.9, 0.3), 1.0, 0.0, 1, 24.0, 108.0)}
    assert back.system == SystemSettings(65.0, 0.8)
    assert [s.name for s in back.layout.mains] == ["left", "right"]
    # written again, the file does not change (the writer is stable)
    assert room_to_toml(back, original_text=text, written_to=tmp_path / "again.toml") == text


def _own_lr4(f, fc, high):
    """LR4 written out for the test: a 2nd-order Butterworth section (Q = 1/sqrt 2) squared
    (Linkwitz, J. Audio Eng. Soc. 24(1), 1976)."""
    s = 1j * f / fc
    bw2 = (s**2 if high else 1.0) / (s**2 + np.sqrt(2) * s + 1.0)
    return bw2 * bw2


def test_predict_sums_the_system_with_the_files_settings():
    room = load_room(SOFA)
    room = room_with_config(room, _config(room))
    f = np.geomspace(20, 200, 40)
    sp = predict_seats(room, freq_hz=f, method="modal")
    seats = [s.position_m for s in room.seats]
    h = speaker_levels(room, room.layout.speakers, seats, f, method="modal").transfer
    d = lambda ms: np.exp(-2j * np.pi * f * ms / 1000)  # noqa: E731  a delay for the e^{+jwt} time factor
    own = _own_lr4(f, 65.0, True) * d(0.8) * (h[0] + h[1])
    own = own + _own_lr4(f, 65.0, False) * (10 ** (-2.5 / 20) * -1 * d(3.25) * h[2] + 10 ** (1 / 20) * h[3])
    assert np.allclose(sp.system, own, rtol=1e-9, atol=1e-12)
    assert sp.crossover_hz == 65.0 and sp.mains_delay_ms == 0.8
    assert [s["polarity"] for s in sp.sub_settings] == [-1, 1]
    # without [system] the sum has no crossover, as before: mains and subs full range
    plain = predict_seats(load_room(SOFA), freq_hz=f, method="modal")
    h0 = speaker_levels(load_room(SOFA), load_room(SOFA).layout.speakers, seats, f, method="modal").transfer
    assert plain.crossover_hz is None and np.allclose(plain.system, h0.sum(axis=0))


def test_the_prediction_plot_gets_a_panel_of_the_system_at_every_seat(tmp_path):
    from roommodes.analysis.predict import predict
    from roommodes.present.plots import plot_prediction

    room = room_with_config(load_room(SOFA), _config(load_room(SOFA)))
    f = np.geomspace(15, 300, 60)
    sp = predict_seats(room, freq_hz=f, method="modal")
    fig = plot_prediction([predict(room, freq_hz=f, method="modal")], system=sp, path=tmp_path / "p.png")
    assert len(fig.axes) == 2 and (tmp_path / "p.png").stat().st_size > 0
    lower = fig.axes[1]
    assert f"seat-to-seat spread {sp.seat_spread_db:.1f} dB" in lower.get_title()
    assert "LR4 crossover 65 Hz" in lower.get_title()
    labels = [t.get_text() for t in lower.get_legend().get_texts()]
    assert labels[:3] == ["middle (main seat), weight 1", "left, weight 0.7", "right, weight 0.7"]
    # without a system: one panel, as before
    assert len(plot_prediction([predict(room, freq_hz=f, method="modal")]).axes) == 1
