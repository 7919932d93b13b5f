"""The prediction plot: curves that coincide share one line and one label.

No value from outside: these tests hold what the figure draws and labels; the levels themselves
are checked against published references in tests/solvers/."""

import numpy as np

from roommodes import load_room
from roommodes.analysis.predict import predict
from roommodes.io.roomfile import example_rooms
from roommodes.present.plots import plot_prediction


def _room(stem):
    return next(p for p in example_rooms() if p.stem == stem)


def _labels(fig):
    return [t.get_text() for t in fig.axes[0].get_legend().get_texts()]


def test_twin_channels_share_one_curve_beside_a_third_that_differs():
    # the sofa room's seat sits on the room's centre line between a symmetric pair, so left and
    # right are equal there while the corner sub is not: the pair is one curve, labelled as such
    room = load_room(_room("sofa-and-sub"))
    f = np.geomspace(20, 200, 40)
    pred = predict(room, freq_hz=f, method="modal")
    lv = {c.name: c.level_db for c in pred.channels}
    assert np.allclose(lv["left"], lv["right"], atol=0.01) and not np.allclose(lv["left"], lv["sub"], atol=0.01)
    labels = _labels(plot_prediction([pred]))
    assert any(t.startswith("left = right (identical)") for t in labels)
    assert any(t.startswith("sub,") for t in labels) and not any(t.startswith("left,") for t in labels)


def test_channels_that_differ_keep_their_own_curves():
    room = load_room(_room("demo-studio"))  # the desk sits off centre: left and right differ
    pred = predict(room, freq_hz=np.geomspace(20, 200, 40), method="modal")
    labels = _labels(plot_prediction([pred]))
    assert any(t.startswith("left,") for t in labels) and any(t.startswith("right,") for t in labels)
    assert not any("identical" in t for t in labels)


def _system_bands(fig, n):
    """Each seat's shaded band in the system panel, read back from the figure: {gid: (f, low, high)}."""
    out = {}
    for c in fig.axes[1].collections:
        gid = c.get_gid()
        if gid and gid.startswith("system-band-"):
            v = c.get_paths()[0].vertices
            # fill_between's polygon: a start vertex, the n lower points forwards, an end vertex,
            # the n upper points backwards, then the closing vertex
            assert len(v) == 2 * n + 3
            out[gid] = (v[1:n + 1, 0], v[1:n + 1, 1], v[n + 2:2 * n + 2, 1][::-1])
    return out


def test_system_panel_shades_each_seats_band_over_the_drawn_rooms():
    from roommodes.analysis.predict import predict_seats
    from roommodes.analysis.uncertainty import sample_rooms, system_levels
    from roommodes.dsp.response import log_frequencies

    room = load_room(_room("sofa-and-sub"))
    f = log_frequencies(20, 200, 6)
    sp = predict_seats(room, freq_hz=f)
    drawn = system_levels(room, freq_hz=f, n_samples=6, seed=3)
    # recomputed here: the same drawn rooms, each summed by predict_seats
    ref = np.array([predict_seats(r, freq_hz=f).system_db for r in sample_rooms(room, 6, 3)])
    fig = plot_prediction(predict(room, freq_hz=f), system=sp, system_levels=drawn)
    shaded = _system_bands(fig, len(f))
    assert len(shaded) == len(sp.seats) >= 2
    p10, p90 = np.percentile(ref, [10, 90], axis=0)
    for j in range(len(sp.seats)):
        fx, lo, hi = shaded[f"system-band-{j}"]
        np.testing.assert_allclose(fx, f)
        np.testing.assert_allclose(lo, p10[j], atol=1e-9)
        np.testing.assert_allclose(hi, p90[j], atol=1e-9)
    labels = [t.get_text() for t in fig.axes[1].get_legend().get_texts()]
    assert any(t.startswith("10-90 % of 6 drawn rooms") for t in labels)
    assert not (p90 - p10 == 0).all()
    plain = plot_prediction(predict(room, freq_hz=f), system=sp)
    assert not _system_bands(plain, len(f))
    assert not any("drawn rooms" in t.get_text() for t in plain.axes[1].get_legend().get_texts())
