"""Subwoofers and several seats: filters, the seat measure, the delay sign, the published
multi-sub finding, and the advice checked on references it was not designed on."""

from dataclasses import replace

import numpy as np
import pytest

from roommodes import load_room, log_frequencies
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.subs import (
    FEWER_SUBS_MARGIN_DB,
    MIN_GAIN_DB,
    SubConfig,
    SubSetting,
    alignment_delay_ms,
    candidate_positions,
    delay_response,
    lr4_highpass,
    lr4_lowpass,
    mean_spatial_variance,
    mono_sum,
    optimise_subs,
    rank_configs,
    seat_weights,
    spatial_variance,
    tune_settings,
)
from roommodes.io.roomfile import RoomFileError, example_rooms, parse_room
from roommodes.model.room import Speaker, SubSearch

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
C = 343.0


# ------------------------------------------------------------------ Linkwitz-Riley crossover
def test_lr4_is_minus_6_db_at_crossover_and_sums_flat_in_phase():
    # Linkwitz, "Active crossover networks for noncoincident drivers", JAES 24(1), 1976: the
    # 4th-order alignment (two cascaded 2nd-order Butterworth sections) is -6.02 dB per output at
    # the crossover, the outputs are in phase at every frequency and their sum is an all-pass.
    f = np.geomspace(10, 1000, 301)
    lp, hp = lr4_lowpass(f, 80.0), lr4_highpass(f, 80.0)
    assert 20 * np.log10(abs(lr4_lowpass([80.0], 80.0)[0])) == pytest.approx(-6.0206, abs=1e-3)
    assert 20 * np.log10(abs(lr4_highpass([80.0], 80.0)[0])) == pytest.approx(-6.0206, abs=1e-3)
    np.testing.assert_allclose(np.abs(lp + hp), 1.0, atol=1e-12)
    np.testing.assert_allclose(np.angle(lp / hp), 0.0, atol=1e-9)
    # 24 dB per octave far from the crossover (4th order; common practice)
    assert 20 * np.log10(abs(lr4_lowpass([800.0], 80.0)[0]) / abs(lr4_lowpass([1600.0], 80.0)[0])) == \
        pytest.approx(24.08, abs=0.05)


def test_delay_is_a_phase_lag_for_the_ejwt_time_factor():
    # e^{+jwt} convention (DEVELOPERS.md): a delay tau multiplies by exp(-j w tau); 1 ms at 250 Hz
    # is a quarter period, -90 degrees (arithmetic).
    assert np.angle(delay_response(250.0, 1.0), deg=True) == pytest.approx(-90.0)


# ------------------------------------------------------------------ seat weights
def test_spatial_variance_edge_cases_of_seat_weights():
    rng = np.random.default_rng(1)
    L = rng.normal(0, 4, (3, 50))
    # equal weights: the population variance across the seats (Welti & Devantier 2006, their
    # spatial variance at each frequency)
    np.testing.assert_allclose(spatial_variance(L, [1, 1, 1]), np.var(L, axis=0))
    # only the ratios count (definition of a weighted mean)
    np.testing.assert_allclose(spatial_variance(L, [2, 2, 2]), spatial_variance(L, [1, 1, 1]))
    np.testing.assert_allclose(spatial_variance(L, [1, 0.5, 3]), spatial_variance(L, [2, 1, 6]))
    # a seat with weight 0 is the same as leaving it out
    np.testing.assert_allclose(spatial_variance(L, [1, 0, 1]), np.var(L[[0, 2]], axis=0))
    # one seat (or one seat left with weight): no spread at all
    assert np.all(spatial_variance(L[:1], [0.3]) == 0)
    assert np.allclose(spatial_variance(L, [0, 0, 5]), 0)
    # heavier weight pulls the mean toward that seat: variance equals sum w (L - mean)^2 (definition)
    w = np.array([3.0, 1.0, 1.0]) / 5
    m = w @ L
    np.testing.assert_allclose(spatial_variance(L, [3, 1, 1]), w @ (L - m) ** 2)
    for bad in ([0, 0, 0], [1, -1, 1], [1, np.nan, 1]):
        with pytest.raises(ValueError, match="weight"):
            seat_weights(bad)
    with pytest.raises(ValueError, match="seats"):
        spatial_variance(L, [1, 1])


# ------------------------------------------------------------------ delay sign
def _free_field(freq_hz, distance_m):
    """Free-field transfer H = 4 pi G = exp(-j k r) / r (e^{+jwt}; DEVELOPERS.md level reference)."""
    k = 2 * np.pi * np.asarray(freq_hz) / C
    return np.exp(-1j * k * distance_m) / distance_m


def test_a_sub_one_metre_further_away_needs_about_2_9_ms_less_delay():
    # Known answer: 1 m / 343 m/s = 2.915 ms (arithmetic). The optimiser, on free-field
    # transfers, must find the later-arriving sub needs that much less delay.
    f = log_frequencies(20, 200, 48)
    mains = np.stack([_free_field(f, 2.5), _free_field(f, 2.5)])[:, None, :]
    found = []
    for r_sub in (2.5, 3.5):
        sub = _free_field(f, r_sub)[None, None, :]
        g, d, s, parts = tune_settings(f, mains, sub, [1.0], 80.0, band_hz=(20, 200), max_delay_ms=10.0)
        assert s[0] == 1  # in phase, nothing to invert in free field
        found.append(d[0])
    assert found[1] - found[0] == pytest.approx(-1.0 / C * 1e3, abs=0.25)
    # the geometric alignment rule gives the same sign and size
    seats, mains_m = np.array([[2.5, 0, 0]]), np.array([[0.0, 0, 0]])
    a = alignment_delay_ms(np.array([[0.0, 0, 0], [-1.0, 0, 0]]), mains_m, seats, [1], C)
    assert a[1] - a[0] == pytest.approx(-2.915, abs=0.001)


def test_mono_sum_of_aligned_sources_through_lr4_is_all_pass():
    # Linkwitz 1976: with the sub and the mains arriving together, LR4 sums to an all-pass, so the
    # level at the seat is that of the mains alone (free field, equal distance).
    f = log_frequencies(20, 200, 24)
    h = _free_field(f, 2.0)[None, :]
    total = mono_sum(f, h[None], h[None], [0.0], [0.0], [1], 80.0)
    np.testing.assert_allclose(np.abs(total), np.abs(h), rtol=1e-12)


# ------------------------------------------------------------------ the published finding
def _box_room(size=(6.0, 4.5, 2.7), alpha=0.15):
    data = {"room": {"name": "box", "size_m": list(size)},
            "surfaces": {w: alpha for w in ("front", "back", "left", "right", "floor", "ceiling")}}
    return parse_room(data, "box.toml")


def test_multiple_subs_at_wall_midpoints_cut_the_mean_spatial_variance():
    # Welti & Devantier, "Low-frequency optimization using multiple subwoofers", JAES 54(5),
    # 2006: 2 subs at opposite wall midpoints and 4 at the four wall midpoints give a far lower
    # mean spatial variance (20-80 Hz) over a seating area near the room's centre than one sub
    # in a corner (qualitative; "far lower" taken here as less than half).
    room = _box_room()
    lx, ly, _ = room.size_m
    xs, ys = np.meshgrid(lx / 2 + np.array([-0.6, 0.0, 0.6]), ly / 2 + np.array([-0.6, 0.0, 0.6]), indexing="ij")
    seats = np.column_stack([xs.ravel(), ys.ravel(), np.full(xs.size, 1.1)])
    f = log_frequencies(20, 80, 24)
    z = 0.3
    layouts = {
        "1 corner": [(0.2, 0.2, z)],
        "2 opposite midpoints": [(0.2, ly / 2, z), (lx - 0.2, ly / 2, z)],
        "4 wall midpoints": [(0.2, ly / 2, z), (lx - 0.2, ly / 2, z), (lx / 2, 0.2, z), (lx / 2, ly - 0.2, z)],
    }
    msv = {}
    for name, pos in layouts.items():
        sp = [Speaker(f"s{i}", p, role="sub") for i, p in enumerate(pos)]
        h = speaker_levels(room, sp, seats, f).transfer.sum(axis=0)  # same signal, gain, no delay
        msv[name] = float(mean_spatial_variance(20 * np.log10(np.abs(h)), np.ones(len(seats))))
    assert msv["2 opposite midpoints"] < 0.5 * msv["1 corner"]
    assert msv["4 wall midpoints"] < 0.5 * msv["1 corner"]
    print("mean spatial variance (dB^2):", {k: round(v, 2) for k, v in msv.items()},
          "lowest:", min(msv, key=msv.get))


# ------------------------------------------------------------------ the search on the bundled room
@pytest.fixture(scope="module")
def sofa():
    room = load_room(SOFA)
    return room, optimise_subs(room)


def test_bundled_sofa_room_has_one_sub_three_seats_and_a_subs_table():
    room = load_room(SOFA)
    assert [s.name for s in room.layout.mains] == ["left", "right"]
    assert [s.name for s in room.layout.subs] == ["sub"]
    assert [s.name for s in room.seats] == ["middle", "left", "right"]
    assert room.layout.seat_m == room.seats[0].position_m
    assert room.subs_search.counts == (1, 2, 4)


def test_the_sub_search_lowers_the_seat_to_seat_spread_of_the_sofa(sofa):
    room, res = sofa
    before = res.before.seat_spread_db
    one = next(c for c in res.ranked if c.kind == "search" and len(c.subs) == 1)
    best = res.ranked[0]
    # the done-means of the work: the user's one sub, moved and set, lowers the spread (common
    # practice: a change under 1 dB is not worth moving furniture, so ask for half)
    assert one.seat_spread_db < 0.5 * before
    # the best is the lowest score, or has fewer subs and scores within the margin of it
    low = min(res.ranked, key=lambda c: c.score)
    assert best is low or (len(best.subs) < len(low.subs) and best.score - low.score <= FEWER_SUBS_MARGIN_DB)
    # settings within the [subs] limits
    for c in res.ranked:
        for s in c.subs:
            assert s.gain_db <= room.subs_search.max_gain_db + 1e-9
            assert 0 <= s.delay_ms <= room.subs_search.max_delay_ms + 1e-9
            assert s.polarity in (1, -1)
        assert room.subs_search.crossover_hz[0] <= c.crossover_hz <= room.subs_search.crossover_hz[1]
        # subs stay out of the keep-outs
        for s in c.subs:
            if c.kind == "search":
                assert not any(b.contains(s.position_m) for b in room.subs_search.keep_out)


def test_the_advice_holds_in_a_perturbed_room_and_under_the_modal_solver(sofa):
    # Independent references (DEVELOPERS.md: advice is judged on the room, not on its model): the
    # settings designed on the nominal room with the exact solver, evaluated (a) in the room 1 %
    # larger with 1.3 times the absorption and (b) with the modal solver, must still beat the file's
    # layout as it is by a wide margin (half the spread; common practice, as above).
    room, res = sofa
    best = res.ranked[0]
    assert best.perturbed_seat_spread_db < 0.5 * res.before.perturbed_seat_spread_db
    seats = np.array([s.position_m for s in res.seats])
    w = np.array([s.weight for s in res.seats])
    f = res.freq_hz
    mains = speaker_levels(room, room.layout.mains, seats, f, method="modal").transfer
    proto = room.layout.subs[0]

    def spread(cfg, full_range):
        sp = [replace(proto, name=s.name).moved(s.position_m) for s in cfg.subs]
        h = speaker_levels(room, sp, seats, f, method="modal").transfer
        if full_range:
            total = mains.sum(0) + sum(10 ** (s.gain_db / 20) * s.polarity * _own_lr4_lp(f, cfg.crossover_hz) * hk
                                       for s, hk in zip(cfg.subs, h))
        else:
            total = _own_sum(f, mains, h, cfg)
        return np.sqrt(mean_spatial_variance(20 * np.log10(np.abs(total)), w))

    assert spread(best, False) < 0.5 * spread(res.before, True)


def _own_lr4_lp(f, fc):
    """LR4 low-pass written out again: a 2nd-order Butterworth low-pass (Q = 1/sqrt 2) squared."""
    s = 1j * f / fc
    bw2 = 1.0 / (s**2 + s / (1 / np.sqrt(2)) + 1.0)
    return bw2 * bw2


def _own_lr4_hp(f, fc):
    s = 1j * f / fc
    bw2 = s**2 / (s**2 + s / (1 / np.sqrt(2)) + 1.0)
    return bw2 * bw2


def _own_sum(f, mains_h, subs_h, cfg):
    total = _own_lr4_hp(f, cfg.crossover_hz) * np.exp(-2j * np.pi * f * cfg.mains_delay_ms / 1000) * mains_h.sum(0)
    for s, h in zip(cfg.subs, subs_h):
        total = total + (10 ** (s.gain_db / 20) * s.polarity * np.exp(-2j * np.pi * f * s.delay_ms / 1000)
                         * _own_lr4_lp(f, cfg.crossover_hz) * h)
    return total


def test_candidates_respect_keep_outs_regions_and_distances():
    room = load_room(SOFA)
    seats = np.array([s.position_m for s in room.seats])
    mains = np.array([s.position_m for s in room.layout.mains])
    c = candidate_positions(room, room.subs_search, seats, mains)
    for box in room.subs_search.keep_out:
        assert not box.contains(c).any()
    assert np.min(np.hypot(*(c[:, None, :2] - seats[None, :, :2]).transpose(2, 0, 1))) >= 0.6 - 1e-9
    assert np.all(c[:, 2] == pytest.approx(0.3))
    # the default band along the walls: nothing in the middle of the room
    lx, ly, _ = room.size_m
    edge = np.minimum.reduce([c[:, 0], lx - c[:, 0], c[:, 1], ly - c[:, 1]])
    assert edge.max() <= 0.8 + 1e-9
    with pytest.raises(ValueError, match="no candidate"):
        from roommodes.model.room import Box
        candidate_positions(room, replace(room.subs_search, keep_out=(Box("all", (0, 0, 0), room.size_m),)),
                            seats, mains)


def test_a_room_without_subs_gets_an_assumed_sub_and_the_mains_alone_as_before():
    data = {"room": {"size_m": [4.6, 3.4, 2.45]},
            "surfaces": {w: 0.2 for w in ("front", "back", "left", "right", "floor", "ceiling")},
            "speakers": {"left": {"position_m": [0.5, 0.8, 1.1], "lowcut_hz": 50},
                         "right": {"position_m": [0.5, 2.6, 1.1], "lowcut_hz": 50}},
            "seat": {"position_m": [1.9, 1.7, 1.1]},
            "subs": {"counts": [1], "step_m": 0.5}}
    room = parse_room(data, "one-seat.toml")
    res = optimise_subs(room, check_perturbed=False, points_per_octave=12)
    assert res.assumed_sub and res.before.kind == "before" and not res.before.subs
    # one seat: no seat-to-seat spread (weighted variance over one seat is 0; definition)
    assert all(c.seat_spread_db == 0 for c in (*res.ranked, res.before))
    # the flatness at the seat improves on the mains alone (their own roll-off at 50 Hz leaves the
    # octave below unplayed; the sub fills it)
    assert res.ranked[0].parts["flatness"] < res.before.parts["flatness"]


def test_sub_search_defaults_are_conservative():
    # common practice: limited boost on subs, and a crossover range around the usual 80 Hz
    s = SubSearch()
    assert s.max_gain_db <= 6 and s.crossover_hz[0] < 80 < s.crossover_hz[1]


def test_room_file_rejects_bad_subs_and_seats_tables():
    base = {"room": {"size_m": [4.6, 3.4, 2.45]},
            "surfaces": {w: 0.2 for w in ("front", "back", "left", "right", "floor", "ceiling")},
            "speakers": {"left": {"position_m": [0.5, 0.8, 1.1]}, "right": {"position_m": [0.5, 2.6, 1.1]}}}
    seats = {"a": {"position_m": [2.0, 1.2, 1.0]}, "b": {"position_m": [2.0, 2.0, 1.0], "weight": 0.5}}
    cases = [
        ({"seat": {"position_m": [2, 1.7, 1]}, "seats": seats}, "both [seat] and [seats.NAME]"),
        ({"seats": {}}, "[seats]"),
        ({"seats": {"a": {"position_m": [2.0, 1.2, 1.0], "weight": -1}}}, "[seats.a] weight"),
        ({"seats": {"a": {"position_m": [2.0, 1.2, 1.0], "weight": 0}}}, "main seat"),
        ({"seats": {"a": {"position_m": [2.0, 1.2, 1.0], "height": 1}}}, "unknown key 'height'"),
        ({"seats": {"a": {"position_m": [2.0, 9.0, 1.0]}}}, "[seats.a] position_m"),
        ({"seats": {"a": {"position_m": [2.0, 1.2, 1.0]}, "b": {"position_m": [2.0, 1.22, 1.0]}}}, "within 5 cm"),
        ({"seats": seats, "subs": {"counts": [3]}}, "[subs] counts"),
        ({"seats": seats, "subs": {"counts": [1, 1]}}, "[subs] counts"),
        ({"seats": seats, "subs": {"crossover_hz": [120, 50]}}, "[subs] crossover_hz"),
        ({"seats": seats, "subs": {"crossover_hz": [10, 50]}}, "[subs] crossover_hz[0]"),
        ({"seats": seats, "subs": {"max_delay_ms": -1}}, "[subs] max_delay_ms"),
        ({"seats": seats, "subs": {"max_gain_db": 20}}, "[subs] max_gain_db"),
        ({"seats": seats, "subs": {"regions": [{"min_m": [1, 1]}]}}, "[subs] regions[0]"),
        ({"seats": seats, "subs": {"regions": []}}, "[subs] regions"),
        ({"seats": seats, "subs": {"keep_out": [{"min_m": [2, 2], "max_m": [1, 3]}]}}, "[subs] keep_out[0]"),
        ({"seats": seats, "subs": {"candidates_m": [[9, 1, 0.3]]}}, "[subs] candidates_m[0]"),
        ({"seats": seats, "subs": {"colour": 1}}, "unknown key 'colour'"),
        ({"seats": seats, "subs": {"band_hz": [40, 100]}}, "[subs] band_hz"),
        ({"seats": seats, "subs": 3}, "[subs]"),
    ]
    for extra, where in cases:
        with pytest.raises(RoomFileError) as exc:
            parse_room({**base, **extra}, "x.toml")
        msg = str(exc.value)
        assert msg.startswith("x.toml: ") and where in msg and "\n" not in msg, (extra, msg)
    bad_role = {**base, "seat": {"position_m": [2, 1.7, 1]}}
    bad_role["speakers"] = {**base["speakers"], "s": {"position_m": [0.3, 0.3, 0.3], "role": "woofer"}}
    with pytest.raises(RoomFileError, match=r"\[speakers.s\] role"):
        parse_room(bad_role, "x.toml")
    only_subs = {**base, "seat": {"position_m": [2, 1.7, 1]},
                 "speakers": {"s": {"position_m": [0.3, 0.3, 0.3], "role": "sub"}}}
    with pytest.raises(RoomFileError, match="at least one main"):
        parse_room(only_subs, "x.toml")


def test_several_seats_parse_with_weights_and_mains_come_first():
    base = {"room": {"size_m": [4.6, 3.4, 2.45]},
            "surfaces": {w: 0.2 for w in ("front", "back", "left", "right", "floor", "ceiling")},
            "speakers": {"sub": {"position_m": [0.3, 0.3, 0.3], "role": "sub"},
                         "left": {"position_m": [0.5, 0.8, 1.1]}, "right": {"position_m": [0.5, 2.6, 1.1]}},
            "seats": {"b": {"position_m": [2.0, 2.0, 1.0], "weight": 0.5}, "a": {"position_m": [2.0, 1.2, 1.0]},
                      "c": {"position_m": [2.5, 1.2, 1.0], "weight": 0}}}
    room = parse_room(base, "x.toml")
    assert [s.name for s in room.layout.speakers] == ["left", "right", "sub"]
    assert [(s.name, s.weight) for s in room.seats] == [("b", 0.5), ("a", 1.0), ("c", 0.0)]
    assert room.layout.seat_m == (2.0, 2.0, 1.0)  # the first listed is the main seat
    single = parse_room({k: v for k, v in base.items() if k != "seats"} | {"seat": {"position_m": [2, 1.7, 1]}},
                        "y.toml")
    assert [(s.name, s.position_m, s.weight) for s in single.seats] == [("seat", (2, 1.7, 1), 1.0)]


def test_the_one_writer_keeps_roles_seats_and_the_subs_table():
    import tomllib

    from roommodes.io.roomfile import room_to_toml

    room = load_room(SOFA)
    for text in (room_to_toml(room), room_to_toml(room, original_text=SOFA.read_text())):
        again = parse_room(tomllib.loads(text), "again.toml")
        assert [(s.name, s.role) for s in again.layout.speakers] == [(s.name, s.role) for s in room.layout.speakers]
        assert again.seats == room.seats
        assert again.subs_search == room.subs_search
    # a layout with one seat written over a file with several seats moves the main seat only
    moved = room.with_layout(replace(room.layout, seat_m=(3.5, 1.9, 1.0), seats=()))
    again = parse_room(tomllib.loads(room_to_toml(moved, original_text=SOFA.read_text())), "again.toml")
    assert again.seats[0].position_m == (3.5, 1.9, 1.0) and again.seats[1:] == room.seats[1:]


# ------------------------------------------------------------------ ranking, idle subs, the reference
def _config(label, n, score, gains=None):
    gains = [0.0] * n if gains is None else gains
    subs = tuple(SubSetting(f"s{k}", (1.0, 1.0, 0.3), g, 0.0, 1, 0.0) for k, g in enumerate(gains))
    return SubConfig(label, "search", subs, 60.0, 0.0, {"score": score, "spread": 0.0}, np.zeros((1, 1)),
                     np.zeros(1), np.zeros(1))


def test_the_ranking_prefers_fewer_subs_within_the_margin_only():
    four, two, one = _config("4 subs", 4, 3.46), _config("2 subs", 2, 3.50), _config("1 sub", 1, 4.68)
    ranked, notes = rank_configs([four, one, two])
    assert [c.label for c in ranked] == ["2 subs", "4 subs", "1 sub"]
    assert len(notes) == 1 and notes[0]["fewer"] == "2 subs" and notes[0]["more"] == "4 subs"
    assert notes[0]["score_difference_db"] == pytest.approx(0.04)
    # more subs that clearly help (by more than the margin) stay first
    clear = _config("4 subs", 4, 3.50 - FEWER_SUBS_MARGIN_DB - 0.01)
    ranked, notes = rank_configs([two, clear])
    assert [c.label for c in ranked] == ["4 subs", "2 subs"] and notes == ()
    # the same count: by score; a chain of near-equal scores never puts one above a config more than
    # the margin better
    a, b = _config("a", 2, 3.0), _config("b", 2, 2.9)
    assert [c.label for c in rank_configs([a, b])[0]] == ["b", "a"]
    chain = [_config("4", 4, 3.0), _config("2", 2, 3.4), _config("1", 1, 3.8)]
    ranked, _ = rank_configs(chain)
    assert [c.label for c in ranked] == ["2", "4", "1"]


def test_a_sub_at_the_gain_floor_or_far_below_the_others_is_marked_nearly_idle():
    c = _config("4 subs", 4, 3.0, gains=[-2.0, -2.0, -10.5, MIN_GAIN_DB])
    assert [s.gain_db for s in c.idle_subs] == [-10.5, MIN_GAIN_DB]
    d = c.to_dict()
    assert [s["nearly_idle"] for s in d["subs"]] == [False, False, True, True]
    # alike subs are all working; one loud sub alone is not idle
    assert _config("2 subs", 2, 3.0, gains=[-3.0, -4.0]).idle_subs == ()
    assert _config("1 sub", 1, 3.0, gains=[4.0]).idle_subs == ()


def test_the_front_wall_reference_leaves_a_keep_out_and_says_so(sofa):
    room, res = sofa
    ref = next(c for c in res.ranked if c.kind == "reference")
    pos = np.array(ref.subs[0].position_m)
    assert not any(b.contains(pos) for b in room.subs_search.keep_out)
    # the media unit covers the front-wall centre in the bundled room: the note names it
    assert "media unit" in ref.note and "moved" in ref.note
    # and the position is the nearest allowed one: no candidate is nearer the wall centre
    centre = np.array([room.subs_search.wall_gap_m, room.size_m[1] / 2])
    d = np.linalg.norm(res.candidates_m[:, :2] - centre, axis=1)
    assert np.linalg.norm(pos[:2] - centre) == pytest.approx(d.min())
