"""Why two channels differ: levels, difference, mono sum, regions, causes and moves.

Checks against the mode shapes (Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3:
``psi = cos(nx pi x/Lx) cos(ny pi y/Ly) cos(nz pi z/Lz)``), the quarter-wave rule
``c / 4d`` (common practice), and the package's own predict/transfer_function as the
independent path (checked in tests/test_modal.py).
"""

import numpy as np
import pytest

from roommodes import demo_room_path, load_room, predict, preset_layout, transfer_function
from roommodes.analysis.explain import explain, modal_decomposition
from roommodes.dsp.response import smooth_fractional_octave
from roommodes.io.roomfile import parse_room
from roommodes.model.modes import mode_shapes, room_modes

DEMO = load_room(demo_room_path())


def _asymmetric_room():
    # one speaker 30 cm from the left wall, the other on the centre line, 2.0 m from the
    # right wall; seat off the centre line so the first width mode reaches it
    data = {"room": {"name": "asymmetric", "size_m": [5.0, 4.0, 2.6]},
            "surfaces": {w: 0.15 for w in ("front", "back", "left", "right", "floor", "ceiling")},
            "speakers": {"left": {"position_m": [0.6, 0.3, 1.2]}, "right": {"position_m": [0.6, 2.0, 1.2]}},
            "seat": {"position_m": [2.4, 1.4, 1.2]}}
    return parse_room(data, "asymmetric.toml")


def test_levels_difference_and_mono_equal_the_prediction():
    e = explain(DEMO)
    p = predict(DEMO, freq_hz=e.freq_hz)
    np.testing.assert_allclose(e.level_db[0], p.channels[0].level_db, atol=1e-6)
    np.testing.assert_allclose(e.level_db[1], p.channels[1].level_db, atol=1e-6)
    np.testing.assert_allclose(e.difference_db, p.channels[0].level_db - p.channels[1].level_db, atol=1e-6)
    mono = 20 * np.log10(np.abs(p.channels[0].transfer + p.channels[1].transfer))  # both driven in phase
    np.testing.assert_allclose(e.mono_db, mono, atol=1e-6)
    sm = 10 * np.log10(smooth_fractional_octave(e.freq_hz, 10 ** (e.level_db / 10), 6))
    np.testing.assert_allclose(e.smoothed_db, sm, atol=1e-9)
    assert e.names == ("left", "right") and e.band_hz == (48.0, 200.0)
    # every region's sign and size come from the smoothed difference, inside the band
    for r in e.regions:
        assert abs(r.difference_db) >= 3.0 and 48.0 <= r.freq_hz[0] <= r.peak_hz <= r.freq_hz[1] <= 200.0
        lo, hi = f"{r.freq_hz[0]:.0f}", f"{r.freq_hz[1]:.0f}"
        assert r.sentence.startswith(f"{lo} Hz:" if lo == hi else f"{lo}-{hi} Hz:")


def test_modal_decomposition_sums_to_the_transfer():
    f = np.geomspace(30, 150, 30)
    src = [[0.5, 0.62, 1.15], [0.5, 2.27, 1.15]]
    idx, terms, rest = modal_decomposition(DEMO, src, [1.85, 1.45, 1.2], f)
    h = transfer_function(DEMO, src, [[1.85, 1.45, 1.2]], f, method="modal")[:, 0]
    np.testing.assert_allclose(terms.sum(axis=1) + rest[:, None], h, rtol=1e-6)
    assert tuple(idx[0]) == (0, 0, 0)


def test_mirror_pair_in_a_symmetric_room_has_no_difference_and_a_mono_sum_without_odd_width_modes():
    # The demo room's side walls are alike: the model is symmetric about y = Ly/2. With a
    # mirrored pair and the seat on the centre line both channels are equal (mismatch zero to
    # round-off); the odd width modes (ny odd) are antisymmetric, so the two speakers drive
    # them in opposite phase and they cancel in the mono sum (mode shapes; CHECKS.md).
    lay = preset_layout(DEMO, "wall")
    e = explain(DEMO, lay)
    assert np.max(np.abs(e.difference_db)) < 1e-9
    assert e.regions == ()
    ly = DEMO.size_m[1]
    ms = room_modes(DEMO, 200.0)
    psi = mode_shapes(ms.indices, DEMO.size_m, lay.source_positions_m)
    expected = {tuple(n) for n, p in zip(ms.indices, psi.T)
                if n[1] % 2 == 1 and max(abs(p)) >= 0.3}  # hand list: odd ny, coupled speakers
    got = {tuple(m["indices"]) for m in e.mono_cancelled}
    assert got == expected and len(got) >= 3
    # off the centre line each channel has odd width content, the mono sum has none
    point = [2.0, 1.0, 1.2]
    idx, terms, _ = modal_decomposition(DEMO, lay.source_positions_m, point, np.geomspace(40, 120, 12))
    odd = idx[:, 1] % 2 == 1
    single = np.max(np.abs(terms[0, odd]))
    assert single > 1e-3
    assert np.max(np.abs(terms[0, odd] + terms[1, odd])) < 1e-12 * single
    # hence the mono field is itself mirror-symmetric: the same level at (x, y) and (x, Ly - y)
    f = np.geomspace(40, 120, 12)
    h = transfer_function(DEMO, lay.source_positions_m, [point, [point[0], ly - point[1], point[2]]], f)
    mono = 20 * np.log10(np.abs(h[0] + h[1]))
    np.testing.assert_allclose(mono[0], mono[1], atol=1e-9)


def test_asymmetric_pair_is_attributed_to_the_width_mode_and_the_side_walls():
    room = _asymmetric_room()
    e = explain(room)
    ly, c = room.size_m[1], room.speed_of_sound
    f010 = c / (2 * ly)  # first width mode, Rayleigh: 42.9 Hz
    region = next(r for r in e.regions if r.freq_hz[0] <= f010 <= r.freq_hz[1])
    assert region.difference_db > 6.0  # the speaker on the mode's pressure maximum is louder
    # hand calculation from the mode shapes and the modal denominator at the region's peak:
    # the mode with the largest |psi(seat)| |psi(left) - psi(right)| eps / |k_n^2 - k^2 + j k b_n|
    ms = room_modes(room, 250.0)
    pts = [room.layout.speakers[0].position_m, room.layout.speakers[1].position_m, room.layout.seat_m]
    psi = mode_shapes(ms.indices, room.size_m, pts)
    k, kn = 2 * np.pi * region.peak_hz / c, 2 * np.pi * ms.freq_hz / c
    eps = np.prod(np.where(ms.indices != 0, 2.0, 1.0), axis=1)
    size = eps * np.abs(psi[2] * (psi[0] - psi[1])) / np.abs(kn**2 - k**2 + 2j * k * ms.decay_constant / c)
    hand = tuple(int(v) for v in ms.indices[np.argmax(size)])
    assert hand == (0, 1, 0)
    top = region.causes[0]
    assert top.kind == "mode" and tuple(top.data["indices"]) == hand
    assert top.data["freq_hz"] == pytest.approx(f010, rel=1e-9)
    assert top.data["psi_speakers"][0] == pytest.approx(np.cos(np.pi * 0.3 / ly), abs=1e-12)  # 0.972
    assert top.data["psi_speakers"][1] == pytest.approx(0.0, abs=1e-12)  # centre line: a node
    assert top.data["psi_seat"] == pytest.approx(np.cos(np.pi * 1.4 / ly), abs=1e-12)
    assert "near a pressure maximum" in region.sentence and "near a node" in region.sentence
    # the side-wall boundary is named too: the right speaker 2.0 m from its wall has its
    # quarter-wave notch at c / 4d = 42.9 Hz, the left one's (0.3 m) is far above, 286 Hz
    side = next(c_ for c_ in region.causes if c_.kind == "boundary" and c_.data["surface"] == "side")
    notch = {s["name"]: s["notch_hz"] for s in side.data["speakers"]}
    assert notch["right"] == pytest.approx(c / (4 * 2.0)) and notch["left"] == pytest.approx(c / (4 * 0.3))
    assert [s["wall"] for s in side.data["speakers"]] == ["left", "right"]


def test_suggested_move_has_the_predicted_effect():
    room = _asymmetric_room()
    e = explain(room)
    region = max(e.regions, key=lambda r: abs(r.difference_db))
    m = region.move
    assert m is not None and m.region_after_db < m.region_before_db - 0.5
    assert abs(m.delta_m) in (0.1, 0.2, 0.3)
    # re-predict the moved layout independently and compare with the reported effect
    speakers = list(room.layout.speakers)
    i = [s.name for s in speakers].index(m.speaker)
    pos = np.array(speakers[i].position_m)
    pos[m.axis] += m.delta_m
    np.testing.assert_allclose(pos, m.position_m, atol=1e-12)
    speakers[i] = speakers[i].moved(pos)
    p = predict(room, room.layout.__class__(tuple(speakers), room.layout.seat_m), freq_hz=e.freq_hz)
    sm = [10 * np.log10(smooth_fractional_octave(e.freq_hz, 10 ** (ch.level_db / 10), 6)) for ch in p.channels]
    d = sm[0] - sm[1]
    rows = (e.freq_hz >= region.freq_hz[0]) & (e.freq_hz <= region.freq_hz[1])
    assert np.max(np.abs(d[rows])) == pytest.approx(m.region_after_db, abs=1e-6)
    words = {(0, 1): "away from the front wall", (0, -1): "toward the front wall", (1, 1): "toward the right wall",
             (1, -1): "toward the left wall", (2, 1): "up", (2, -1): "down"}
    assert m.direction == words[m.axis, int(np.sign(m.delta_m))]
    assert f"{abs(m.delta_m) * 100:.0f} cm {m.direction}" in region.sentence


@pytest.mark.parametrize("kwargs,message", [
    ({"channels": ("left", "sub")}, "no speaker named 'sub'"),
    ({"channels": ("left", "left")}, "two different speaker names"),
    ({"threshold_db": 0.0}, "threshold must be a positive"),
    ({"band_hz": (200.0, 100.0)}, "band must satisfy"),
])
def test_bad_input(kwargs, message):
    with pytest.raises(ValueError, match=message):
        explain(DEMO, **kwargs)


def test_every_example_room_is_explained():
    from roommodes import example_rooms

    for path in example_rooms():
        room = load_room(path)
        e = explain(room)
        assert e.level_db.shape == (2, e.freq_hz.size)
        assert np.all(np.isfinite(e.mono_db))
        for r in e.regions:
            assert r.sentence and all(c.contribution_db > 0 for c in r.causes)
