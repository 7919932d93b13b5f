"""How sure the chosen sub settings' result is: the same settings in rooms drawn from the room
file's [uncertainty], and each seat's 10-90 % band on the subs figure.

No outside check values: the reference for every band is the same sum recomputed here
(`predict_seats` in each drawn room), and zero spread must give the nominal result."""

import numpy as np
import pytest

from roommodes import load_room
from roommodes.analysis.predict import predict_seats
from roommodes.analysis.subs import room_with_config, tune_measured
from roommodes.analysis.uncertainty import _generators, draw_subs_rooms, subs_bands
from roommodes.io.roomfile import example_rooms
from roommodes.model.room import Uncertainty
from roommodes.present.plots_subs import plot_subs

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
N = 12


@pytest.fixture(scope="module")
def result():
    """Tuned settings as the search gives them (the file's sub where it stands; modal: quick)."""
    room = load_room(SOFA)
    return room, tune_measured(room, {}, method="modal")


@pytest.fixture(scope="module")
def bands(result):
    room, res = result
    return subs_bands(room, res.ranked, res.freq_hz, res.band_hz, n_samples=N, seed=7, method="modal")


def test_no_uncertainty_gives_the_nominal_room_in_every_draw(result):
    """With every sd zero, each drawn room is the nominal one: each seat's level and the spread
    are the nominal result's (the settings applied with room_with_config and predicted at the seats)."""
    room, res = result
    zero = Uncertainty(position_m=0.0, size_m=0.0, absorption_rel=0.0, temperature_c=0.0, material_ranges=False)
    b = subs_bands(room, res.ranked, res.freq_hz, res.band_hz, n_samples=2, seed=1, uncertainty=zero,
                   method="modal")
    for k, c in enumerate(res.ranked):
        nominal = predict_seats(room_with_config(room, c), freq_hz=res.freq_hz, method="modal").system_db
        np.testing.assert_allclose(b.level_db[:, k], np.broadcast_to(nominal, b.level_db[:, k].shape), atol=1e-6)
        np.testing.assert_allclose(b.seat_spread_db[:, k], c.seat_spread_db, atol=0.05)


def test_each_drawn_level_is_the_system_sum_predicted_in_that_drawn_room(result, bands):
    """The batched ensemble (one solver call per drawn room) equals predict_seats in the drawn
    room with each configuration's subs and settings in it."""
    room, res = result
    for i in (0, N - 1):
        rooms = draw_subs_rooms(room, res.ranked, _generators(7, N)[i])
        for k, r in enumerate(rooms):
            np.testing.assert_allclose(bands.level_db[i, k],
                                       predict_seats(r, freq_hz=res.freq_hz, method="modal").system_db, atol=1e-6)


def test_common_random_numbers_same_room_and_seats_for_every_configuration(result):
    room, res = result
    rooms = draw_subs_rooms(room, res.ranked, np.random.default_rng(3))
    assert len({r.size_m for r in rooms}) == 1
    assert len({tuple(s.position_m for s in r.layout.all_seats) for r in rooms}) == 1
    assert len({tuple(m.position_m for m in r.layout.mains) for r in rooms}) == 1
    assert rooms[0].size_m != room.size_m


def test_spread_percentiles_are_ordered_and_reproducible(result, bands):
    room, res = result
    p10, p50, p90 = bands.spread_percentiles()
    assert np.all(p10 <= p50) and np.all(p50 <= p90)
    assert np.all(p90 > p10)  # the drawn rooms differ
    again = subs_bands(room, res.ranked, res.freq_hz, res.band_hz, n_samples=N, seed=7, method="modal")
    np.testing.assert_array_equal(again.seat_spread_db, bands.seat_spread_db)
    other = subs_bands(room, res.ranked, res.freq_hz, res.band_hz, n_samples=N, seed=8, method="modal")
    assert not np.allclose(other.seat_spread_db, bands.seat_spread_db)


def _band_of(ax, p):
    """(lower, upper) of the shaded band of seat ``p``, read back from the figure."""
    coll = next(c for c in ax.collections if c.get_gid() == f"seat-band-{p}")
    v = coll.get_paths()[0].vertices
    return v


def test_plotted_band_is_each_seats_10_90_percentile_of_the_drawn_rooms(result, bands, tmp_path):
    room, res = result
    mains = np.array([m.position_m for m in room.layout.mains])
    fig = plot_subs(res, room, mains, path=tmp_path / "s.png", bands=bands)
    f = res.freq_hz
    for k in range(len(res.ranked)):
        ax = fig.axes[2 * k]
        assert f"10-90 % of {N} drawn rooms" in [t.get_text() for t in ax.get_legend().get_texts()]
        for p in range(len(res.seats)):
            lo = np.percentile(bands.level_db[:, k, p], 10, axis=0)
            hi = np.percentile(bands.level_db[:, k, p], 90, axis=0)
            v = _band_of(ax, p)
            for x, y in zip(f, lo):
                assert np.any(np.isclose(v[:, 0], x) & np.isclose(v[:, 1], y))
            for x, y in zip(f, hi):
                assert np.any(np.isclose(v[:, 0], x) & np.isclose(v[:, 1], y))
    before_ax = fig.axes[2 * len(res.ranked)]
    assert not [c for c in before_ax.collections if str(c.get_gid()).startswith("seat-band")]


def test_no_band_without_the_ensemble(result, tmp_path):
    room, res = result
    mains = np.array([m.position_m for m in room.layout.mains])
    fig = plot_subs(res, room, mains)
    for ax in fig.axes:
        assert not [c for c in ax.collections if str(c.get_gid()).startswith("seat-band")]
        if ax.get_legend():
            assert not any("drawn rooms" in t.get_text() for t in ax.get_legend().get_texts())
