"""The Monte Carlo over the room file's uncertainty: calibrated, converged, reproducible.

Sources of the check values:

* Coverage. A 10-90 % percentile band is calibrated when a quantity drawn from the stated
  distributions falls inside it 80 % of the time: that is the definition of a calibrated
  interval (Gneiting, Balabdaoui & Raftery 2007, "Probabilistic forecasts, calibration and
  sharpness", J. R. Stat. Soc. B 69(2):243, sec. 2: probabilistic calibration; common
  practice). The accepted range 65-92 % is the issue's; the pooled frequencies of one room
  are strongly correlated, so the pooled figure scatters far more than a binomial count.
  The "true" rooms are drawn here by a second, independent implementation of the stated
  distributions, so a sampler that draws the wrong spread fails the check.
* Convergence. The standard error of a sample percentile is sqrt(p (1 - p) / N) / pdf(x_p)
  (Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, sec. 10.10; memory): at
  N = 200 the median of a normal spread of 1 dB has an error of about 0.09 dB, so two seeds
  agree well within the issue's 0.3 dB where the spread is a few dB; at deep dips the level
  spreads over tens of dB and the percentiles converge more slowly. For a normal spread the
  p10's error is about 0.67 W / sqrt(N) with W the 10-90 % width, so two seeds differ by more
  than 0.3 dB at 800 samples mainly where W exceeds about 4.6 dB (1.96 sqrt(2) standard
  errors). Each percentile is held to 0.3 dB at 95 % of the frequencies, and everywhere the band
  is narrower than 3 dB (the issue's 0.3 dB; the 95 % and the 3 dB are ours, from the
  measurement in docs/uncertainty.md: 97.5 % and 0.17 dB there).
"""

import numpy as np
import pytest

from roommodes import RoomFileError, load_room, room_to_toml
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.uncertainty import (
    DEFAULT_SAMPLES,
    draw_room,
    lognormal_sigma,
    predict_bands,
    sample_rooms,
)
from roommodes.dsp.response import log_frequencies
from roommodes.io.roomfile import demo_room_path
from roommodes.model.room import WALLS, Layout, Room, Speaker, Surface, Uncertainty

F_COARSE = log_frequencies(20.0, 200.0, 12)


def _random_room(rng):
    size = (rng.uniform(3.5, 7.0), rng.uniform(2.8, 5.0), rng.uniform(2.3, 3.0))
    surfaces = tuple(Surface(w, (float(rng.uniform(0.05, 0.35)),)) for w in WALLS)
    sx = rng.uniform(0.3, 1.0)
    left = Speaker("left", (sx, rng.uniform(0.3, size[1] / 2 - 0.3), rng.uniform(0.8, 1.5)))
    right = Speaker("right", (sx + rng.uniform(-0.1, 0.1), rng.uniform(size[1] / 2 + 0.3, size[1] - 0.3),
                              rng.uniform(0.8, 1.5)))
    seat = (rng.uniform(0.35, 0.65) * size[0], rng.uniform(0.3, 0.7) * size[1], rng.uniform(1.0, 1.3))
    return Room("random", size, surfaces, float(rng.uniform(15, 25)), Layout((left, right), seat))


def _true_room(room, rng):
    """An independent draw of a 'true' room from the stated distributions (not the module's sampler)."""
    u = room.uncertainty
    size = np.array(room.size_m) + u.size_m * rng.standard_normal(3)
    surfaces = []
    for s in room.surfaces:
        # log-normal with mean 1 and relative sd u.absorption_rel: mean exp(mu + s^2/2) = 1
        s2 = np.log(1.0 + u.absorption_rel**2)
        k = np.exp(np.sqrt(s2) * rng.standard_normal() - s2 / 2)
        surfaces.append(Surface(s.name, tuple(min(a * k, 0.99) for a in s.absorption)))
    temp = room.temperature_c + u.temperature_c * rng.standard_normal()
    lay = room.layout
    speakers = tuple(sp.moved(np.array(sp.position_m) + u.position_m * rng.standard_normal(3))
                     for sp in lay.speakers)
    seat = tuple(np.array(lay.seat_m) + u.position_m * rng.standard_normal(3))
    return Room("truth", tuple(size), tuple(surfaces), float(temp), Layout(speakers, seat))


def _coverage(uncertainty_scale, n_rooms=3, n_truths=15, seed=7):
    rng = np.random.default_rng(seed)
    inside = []
    for _ in range(n_rooms):
        room = _random_room(rng)
        # 200 samples keep the check quick: calibration is a property of the drawn distributions,
        # and more samples (the default is 800) only steady the percentiles
        bands = predict_bands(room, freq_hz=F_COARSE, seed=int(rng.integers(1 << 30)), n_samples=200,
                              uncertainty=Uncertainty(*(uncertainty_scale * np.array(
                                  [0.02, 0.01, 0.25, 1.5]))))
        for _ in range(n_truths):
            truth = _true_room(room, rng)
            lv = speaker_levels(truth, truth.layout.speakers, [truth.layout.seat_m], F_COARSE).level_db[:, 0, :]
            inside.append((lv >= bands.level_db_p10) & (lv <= bands.level_db_p90))
    return float(np.mean(inside))


def test_band_covers_random_true_rooms_about_80_percent():
    cover = _coverage(1.0)
    print(f"coverage of the 10-90 % band on random rooms: {cover:.3f}")
    assert 0.65 <= cover <= 0.92


def test_band_too_narrow_is_caught():
    # the same check against bands drawn with half the stated spread: a sampler that under-states
    # the uncertainty must fail it (for a normal spread, +-1.28 sd / 2 holds 48 %; Gaussian table)
    assert _coverage(0.5) < 0.65


@pytest.mark.slow
def test_percentiles_converge_between_seeds():
    # the demo room as shipped: its plasterboard and boarded floor drawn with the library's 50 %,
    # the widest band of the bundled rooms' defaults; at the default sample count
    room = load_room(demo_room_path())
    f = log_frequencies(20.0, 200.0, 24)
    a = predict_bands(room, freq_hz=f, seed=1)
    b = predict_bands(room, freq_hz=f, seed=2)
    assert a.n_samples == DEFAULT_SAMPLES
    width = np.maximum(a.width_db, b.width_db)
    for q in ("level_db_p10", "level_db_p50", "level_db_p90"):
        d = np.abs(getattr(a, q) - getattr(b, q))
        print(f"{q}: within 0.3 dB at {np.mean(d <= 0.3):.1%} of frequencies, largest {d.max():.2f} dB")
        assert np.mean(d <= 0.3) >= 0.95, q
        # where they differ more, it is where the band is wide (the percentile's error grows with
        # the spread): docs/uncertainty.md states stable to 0.3 dB wherever the band is under 3 dB
        assert np.all(d[width < 3.0] <= 0.3), q


def test_reproducible_and_independent_of_sample_count():
    room = load_room(demo_room_path())
    a = sample_rooms(room, 5, seed=3)
    b = sample_rooms(room, 12, seed=3)
    assert [r.size_m for r in a] == [r.size_m for r in b[:5]]
    assert [r.layout.seat_m for r in a] == [r.layout.seat_m for r in b[:5]]
    assert a[0].size_m != sample_rooms(room, 5, seed=4)[0].size_m


def test_draws_have_the_stated_spread():
    # sample statistics of 4000 draws: sd within 5 % (standard error of an sd is sd / sqrt(2N),
    # about 1.1 %; common practice)
    room = load_room(demo_room_path())
    u = Uncertainty(position_m=0.05, size_m=0.03, absorption_rel=0.4, temperature_c=2.0)
    rng = np.random.default_rng(11)
    draws = [draw_room(room, rng, u)[0] for _ in range(4000)]
    size = np.array([d.size_m for d in draws])
    assert np.std(size, axis=0) == pytest.approx([0.03] * 3, rel=0.05)
    seat = np.array([d.layout.seat_m for d in draws])
    assert np.std(seat, axis=0) == pytest.approx([0.05] * 3, rel=0.05)
    k = np.array([d.surfaces[0].absorption[0] / room.surfaces[0].absorption[0] for d in draws])
    assert np.mean(k) == pytest.approx(1.0, abs=0.02)
    assert np.std(k) == pytest.approx(0.4, rel=0.05)
    assert np.std(np.log(k)) == pytest.approx(lognormal_sigma(0.4), rel=0.05)
    assert np.std([d.temperature_c for d in draws]) == pytest.approx(2.0, rel=0.05)


def test_no_uncertainty_gives_a_zero_width_band():
    room = load_room(demo_room_path())
    bands = predict_bands(room, freq_hz=F_COARSE, n_samples=4, uncertainty=Uncertainty(0.0, 0.0, 0.0, 0.0))
    lv = speaker_levels(room, room.layout.speakers, [room.layout.seat_m], F_COARSE).level_db[:, 0, :]
    np.testing.assert_allclose(bands.level_db_p10, lv, atol=1e-9)
    np.testing.assert_allclose(bands.level_db_p90, lv, atol=1e-9)
    d = bands.to_dict()
    assert [c["name"] for c in d["channels"]] == ["left", "right"]
    assert len(d["channels"][0]["level_db_p50"]) == len(F_COARSE)


ROOM = """
[room]
size_m = [4.8, 3.6, 2.5]
[surfaces]
front = 0.1
back = 0.1
left = 0.1
right = 0.1
floor = 0.1
ceiling = 0.1
"""


def test_uncertainty_table_is_read_and_written(tmp_path):
    p = tmp_path / "r.toml"
    p.write_text(ROOM + "[uncertainty]\nposition_m = 0.05\ntemperature_c = 0\n")
    room = load_room(p)
    # absorption_rel not stated: the library materials' own ranges come first
    assert room.uncertainty == Uncertainty(position_m=0.05, temperature_c=0.0, material_ranges=True)
    q = tmp_path / "w.toml"
    q.write_text(room_to_toml(room))
    assert load_room(q).uncertainty == room.uncertainty
    assert "absorption_rel" not in q.read_text()
    p.write_text(ROOM)
    assert load_room(p).uncertainty == Uncertainty(material_ranges=True)
    assert "uncertainty" not in room_to_toml(load_room(p))


@pytest.mark.parametrize("table, expect", [
    ("[uncertainty]\nposition = 0.02\n", "[uncertainty]: unknown key 'position' (did you mean 'position_m'?)"),
    ("[uncertainty]\nsize_m = -0.01\n", "[uncertainty] size_m: -0.01 is out of range; allowed 0 to 0.5"),
    ("[uncertainty]\nabsorption_rel = \"high\"\n", "[uncertainty] absorption_rel: expected a standard deviation"),
    ("uncertainty = 0.02\n", "[uncertainty]: must be a table"),
    ("[uncertainty]\ntemperature_c = 40\n", "[uncertainty] temperature_c: 40 is out of range"),
])
def test_bad_uncertainty_table_gives_one_line(tmp_path, table, expect):
    p = tmp_path / "bad.toml"
    p.write_text(table + ROOM if not table.startswith("[") else ROOM + table)
    with pytest.raises(RoomFileError) as err:
        load_room(p)
    msg = str(err.value)
    assert "\n" not in msg and msg.startswith(f"{p}: ") and expect in msg, msg


# --------------------------------------------------------------------------------------
# The floor map over drawn rooms (map --uncertainty)
# --------------------------------------------------------------------------------------
def _axial_box():
    """A lightly damped box, one speaker low near the front wall, driven at the (1,0,0) mode."""
    from roommodes.model.room import WALLS as _W

    room = Room("box", (4.8, 3.6, 2.5), tuple(Surface(w, (0.1,)) for w in _W), 20.0,
                Layout((Speaker("sub", (0.3, 1.8, 0.3)),), (3.5, 1.8, 1.2)))
    return room, room.speed_of_sound / (2 * 4.8)


def test_floor_map_bands_are_zero_wide_when_nothing_is_uncertain():
    from roommodes.analysis.maps import floor_level_map, floor_map_bands

    room, f = _axial_box()
    fm = floor_level_map(room, f, step_m=0.25)
    b = floor_map_bands(room, fm, n_samples=3, seed=1, uncertainty=Uncertainty(0.0, 0.0, 0.0, 0.0))
    ok = np.isfinite(fm.level_db)
    assert np.array_equal(ok, np.isfinite(b.level_db_p50))
    # every drawn room is the nominal one: no spread, and the median is the nominal map
    assert np.max(b.spread_db[ok]) < 1e-4
    np.testing.assert_allclose(b.level_db_p50[ok], fm.level_db[ok], atol=1e-4)


def test_floor_map_spread_is_larger_at_the_axial_node_than_at_its_antinode():
    # Kuttruff, Room Acoustics (5th ed. 2009), sec. 3.3: the (1,0,0) mode's pressure goes as
    # cos(pi x / L), its node at x = L/2. A drawn length L + dL moves the node by dL/2. Near the
    # node |cos| ~ pi |x - L/2| / L, so 5 cm from it a node moved by a 3 cm sd on L changes the
    # mode's level by several dB; at the antinode (x -> L) the slope is zero and the level changes
    # to second order only. Only the length is drawn here (sd 3 cm), so nothing else spreads the
    # level: the 10-90 % spread at the cells beside the node is several times that at the antinode.
    from roommodes.analysis.maps import floor_level_map, floor_map_bands

    room, f = _axial_box()
    fm = floor_level_map(room, f, step_m=0.1)
    b = floor_map_bands(room, fm, n_samples=30, seed=4, uncertainty=Uncertainty(0.0, 0.03, 0.0, 0.0))
    j = int(np.argmin(np.abs(fm.y_m - 1.8)))
    beside_node = np.flatnonzero(np.abs(fm.x_m - 2.4) < 0.06)  # the cells 5 cm either side
    antinode = int(np.argmin(np.abs(fm.x_m - 4.55)))
    assert beside_node.size == 2
    assert np.all(fm.level_db[beside_node, j] < fm.level_db[antinode, j] - 15.0)  # it is a node
    assert np.all(b.spread_db[beside_node, j] > 3.0 * b.spread_db[antinode, j])
    ok = np.isfinite(b.level_db_p50)
    assert np.all(b.level_db_p10[ok] <= b.level_db_p50[ok]) and np.all(b.level_db_p50[ok] <= b.level_db_p90[ok])


def test_floor_map_pattern_spread_leaves_out_the_shift_of_a_resonance():
    # Kuttruff, Room Acoustics (5th ed. 2009), sec. 3.3: driven at its own frequency a mode's
    # pressure is its shape times an amplitude set by its damping. With only the absorption drawn
    # (sd 25 %) the shape, fixed by the geometry, stays: the whole floor rises and falls
    # together by a few dB, each cell's spread is about that shift, and against the floor's
    # median (the pattern) almost nothing is left away from the node. Checked against the
    # drawn rooms' own levels: the floor shift is the spread of their floor medians.
    from roommodes.analysis.maps import floor_level_map, floor_map_bands

    room, f = _axial_box()
    fm = floor_level_map(room, f, step_m=0.2)
    b = floor_map_bands(room, fm, n_samples=40, seed=2, uncertainty=Uncertainty(0.0, 0.0, 0.25, 0.0))
    lo, hi = b.floor_shift_db
    assert hi - lo > 2.0
    away = np.abs(fm.x_m[:, None] - 2.4) > 0.5  # cells well off the (1,0,0) node at x = L/2
    away = away & np.isfinite(b.pattern_spread_db)
    assert np.median(b.spread_db[away]) > 0.7 * (hi - lo)
    assert np.median(b.pattern_spread_db[away]) < 0.25 * np.median(b.spread_db[away])
    assert not b.unsure[away].any()
    assert b.floor_median_db.shape == (40,)
    assert np.percentile(b.floor_median_db, [10, 90]) == pytest.approx([lo, hi])


def test_subs_share_below_is_a_paired_comparison():
    # the same drawn rooms for every configuration: a configuration 0.1 dB better in every room
    # beats the first in all of them even when the rooms' own spread (1 dB) swamps the gap, and
    # an independent one of the same distribution wins about half the time
    # (common practice: paired comparison under common random numbers)
    from roommodes.analysis.uncertainty import SubsBands

    rng = np.random.default_rng(3)
    room_effect = rng.normal(5.0, 1.0, 400)
    spread = np.column_stack([room_effect, room_effect - 0.1, rng.normal(5.0, 1.0, 400)])
    b = SubsBands(np.array([50.0]), ("a", "b", "c"), np.zeros((400, 3, 1, 1)), spread, (30.0, 120.0), 1, "modal",
                  None)
    share = b.share_below(0)
    assert share[0] == 0.0
    assert share[1] == 1.0
    assert 0.4 < share[2] < 0.6
