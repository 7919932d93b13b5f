"""The 10-90 % bands of drawn rooms on the eq and place figures.

The plotted band is read back from the figure's artists and held to the percentiles of the
ensemble it was drawn from, recomputed here from the drawn rooms' levels (no value from
outside: this checks the drawing, tests/analysis/test_uncertainty.py checks the band's
calibration). Without drawn rooms no band is drawn.
"""

import numpy as np
import pytest

from roommodes import load_room, log_frequencies
from roommodes.analysis.correction import _smooth_db, correct_prediction, head_positions
from roommodes.analysis.uncertainty import ensemble_levels
from roommodes.present.plots import plot_correction

DEMO = "rooms/demo-studio.toml"
N_ROOMS = 8
SEED = 11


def _bands(ax):
    """{label: (x, y-vertices)} of the axes' filled bands whose label names drawn rooms."""
    out = {}
    for coll in ax.collections:
        label = coll.get_label()
        if "drawn rooms" in label:
            out[label] = coll.get_paths()[0].vertices
    return out


def _edges(vertices, freq_hz):
    """Lower and upper edge of a filled band at each frequency, from its polygon."""
    lo = np.empty(freq_hz.size)
    hi = np.empty(freq_hz.size)
    for i, fi in enumerate(freq_hz):
        y = vertices[np.isclose(vertices[:, 0], fi, rtol=0, atol=1e-9 * fi), 1]
        assert y.size >= 2, f"no band edge at {fi} Hz"
        lo[i], hi[i] = y.min(), y.max()
    return lo, hi


@pytest.fixture(scope="module")
def held():
    room = load_room(DEMO)
    f = log_frequencies(20.0, 250.0, 12)
    corrs, _ = correct_prediction(room, freq_hz=f, uncertainty={"n_samples": N_ROOMS, "seed": SEED})
    return room, f, corrs


def test_eq_band_is_the_ensembles_percentiles_before_and_after(held):
    room, f, corrs = held
    # the drawn rooms again, from the library: the seat and its head positions, as the design saw them
    seat = np.asarray(room.layout.seat_m, dtype=float)
    heads = head_positions(seat)
    pts = np.vstack([seat[None, :], heads[room.contains(heads, 0.02)]])
    ens = ensemble_levels(room, f, room.layout, pts, n_samples=N_ROOMS, seed=SEED)
    fig = plot_correction(corrs)
    axes = fig.axes[0::2]  # the before/after panel of each channel
    assert len(axes) == len(corrs) == ens.shape[1]
    for i, (ax, corr) in enumerate(zip(axes, corrs)):
        seat_db = _smooth_db(f, ens[:, i, 0], 12)  # smoothed as the plotted seat curve is
        bands = _bands(ax)
        label_before = f"seat before: 10-90 % of {N_ROOMS} drawn rooms"
        label_after = f"seat after: 10-90 % of {N_ROOMS} drawn rooms"
        assert set(bands) == {label_before, label_after}
        lo, hi = _edges(bands[label_before], f)
        np.testing.assert_allclose(lo, np.percentile(seat_db, 10, axis=0), atol=1e-9)
        np.testing.assert_allclose(hi, np.percentile(seat_db, 90, axis=0), atol=1e-9)
        after = seat_db + corr.parametric.correction_db[None, :]
        lo, hi = _edges(bands[label_after], f)
        np.testing.assert_allclose(lo, np.percentile(after, 10, axis=0), atol=1e-9)
        np.testing.assert_allclose(hi, np.percentile(after, 90, axis=0), atol=1e-9)
        # the correction acts: where it cuts by more than 3 dB the band after lies lower
        cut = corr.parametric.correction_db < -3.0
        if cut.any():
            assert np.all(hi[cut] < np.percentile(seat_db, 90, axis=0)[cut])


def test_eq_without_drawn_rooms_has_no_band():
    room = load_room(DEMO)
    f = log_frequencies(20.0, 250.0, 12)
    corrs, _ = correct_prediction(room, freq_hz=f)
    assert all(c.ensemble_seat_db is None and c.seat_band_db() is None for c in corrs)
    fig = plot_correction(corrs)
    assert not any(_bands(ax) for ax in fig.axes)


def test_place_spread_panel_draws_the_percentiles_of_the_scores():
    from roommodes.analysis.ensemble import rank_by_median
    from roommodes.present.plots import new_figure
    from roommodes.present.plots_place import _score_spread

    rng = np.random.default_rng(4)
    scores = 6.0 + rng.gamma(2.0, 0.4, size=(25, 4)) + np.array([0.0, 0.5, 0.2, 1.0])
    names = ["1", "2", "3", "4"]
    ranking = rank_by_median(names, scores)
    nominal = {"1": 5.5, "2": 6.1, "3": 6.0, "4": 7.2}
    spread = [(f"#{n}", nominal[n], ranking.p10[k], ranking.median[k], ranking.p90[k])
              for k, n in enumerate(ranking.layouts)]
    fig, ax = new_figure()
    _score_spread(ax, spread, 25)
    cols = [names.index(n) for n in ranking.layouts]
    bars = next(c for c in ax.collections if c.get_label() == "10-90 % of 25 drawn rooms")
    seg = np.array(bars.get_segments())
    np.testing.assert_allclose(seg[:, 0, 1], np.percentile(scores[:, cols], 10, axis=0), atol=1e-12)
    np.testing.assert_allclose(seg[:, 1, 1], np.percentile(scores[:, cols], 90, axis=0), atol=1e-12)
    med = next(c for c in ax.collections if c.get_label() == "median of 25 drawn rooms")
    np.testing.assert_allclose(med.get_offsets()[:, 1], np.median(scores[:, cols], axis=0), atol=1e-12)
    nom = next(c for c in ax.collections if c.get_label().startswith("nominal"))
    np.testing.assert_allclose(nom.get_offsets()[:, 1], [nominal[n] for n in ranking.layouts])
    lo, hi = ax.get_ylim()  # every range is inside the panel
    assert lo < seg[:, :, 1].min() and seg[:, :, 1].max() < hi


def test_place_curves_shade_each_channels_percentiles_over_drawn_rooms():
    from roommodes.analysis.predict import predict
    from roommodes.analysis.uncertainty import predict_bands
    from roommodes.present.plots import new_figure
    from roommodes.present.plots_place import _curves

    room = load_room(DEMO)
    f = log_frequencies(20.0, 250.0, 12)
    pred = predict(room, freq_hz=f)
    band = predict_bands(room, freq_hz=f, n_samples=N_ROOMS, seed=SEED)
    levels = ensemble_levels(room, f, n_samples=N_ROOMS, seed=SEED)[:, :, 0, :]  # (N, speakers, F) at the seat
    fig, ax = new_figure()
    _curves(ax, [("best", pred)], (30.0, 200.0), 180.0, [band])
    fills = [c for c in ax.collections if c.get_paths()
             and np.isclose(c.get_paths()[0].vertices[:, 0].max(), f[-1])]
    assert len(fills) == 2  # one filled band per channel, on the prediction's grid
    assert fills[0].get_label() == f"best: 10-90 % of {N_ROOMS} drawn rooms"
    for k, coll in enumerate(fills):
        lo, hi = _edges(coll.get_paths()[0].vertices, f)
        np.testing.assert_allclose(lo, np.percentile(levels[:, k], 10, axis=0), atol=1e-9)
        np.testing.assert_allclose(hi, np.percentile(levels[:, k], 90, axis=0), atol=1e-9)
    fig, ax = new_figure()
    _curves(ax, [("best", pred)], (30.0, 200.0), 180.0)
    assert not any("drawn rooms" in c.get_label() for c in ax.collections)


def test_place_eq_panel_shades_before_and_after_percentiles_over_drawn_rooms():
    from roommodes.analysis.search import layout_curves, search_space
    from roommodes.analysis.uncertainty import predict_bands
    from roommodes.dsp.response import smooth_db
    from roommodes.present.plots import new_figure
    from roommodes.present.plots_place import _eq_curves

    room = load_room(DEMO)
    f = log_frequencies(20.0, 250.0, 12)
    band_hz = (30.0, 200.0)
    fb, before, corr, after = layout_curves(room, room.layout, search_space(room), band_hz)
    band = predict_bands(room, freq_hz=f, n_samples=N_ROOMS, seed=SEED)
    # the drawn levels again, from the library; smoothed and put on (b)'s grid as its curves are
    levels = ensemble_levels(room, f, n_samples=N_ROOMS, seed=SEED)[:, :2, 0, :]
    smoothed = smooth_db(f, levels, 6)
    drawn = np.array([[np.interp(np.log(fb), np.log(f), smoothed[n, c]) for c in range(2)]
                      for n in range(N_ROOMS)])
    fig, ax = new_figure()
    _eq_curves(ax, [("best", (fb, before, corr, after))], band_hz, [band])
    fills = [c for c in ax.collections if c.get_paths()]
    assert len(fills) == 4  # before and after, per channel
    labels = [c.get_label() for c in fills]
    assert labels[0] == f"best before EQ: 10-90 % of {N_ROOMS} drawn rooms"
    assert labels[1] == f"best after EQ: 10-90 % of {N_ROOMS} drawn rooms"
    for c in range(2):
        for k, curves in enumerate((drawn[:, c], drawn[:, c] + corr[c][None, :])):
            lo, hi = _edges(fills[2 * c + k].get_paths()[0].vertices, fb)
            np.testing.assert_allclose(lo, np.percentile(curves, 10, axis=0), atol=1e-9)
            np.testing.assert_allclose(hi, np.percentile(curves, 90, axis=0), atol=1e-9)
    # the nominal curve before EQ lies inside the band's neighbourhood (same room, same smoothing)
    lo, hi = _edges(fills[0].get_paths()[0].vertices, fb)
    assert np.mean((before[0] >= lo - 3.0) & (before[0] <= hi + 3.0)) > 0.9
    fig, ax = new_figure()
    _eq_curves(ax, [("best", (fb, before, corr, after))], band_hz)
    assert not any("drawn rooms" in c.get_label() for c in ax.collections)
