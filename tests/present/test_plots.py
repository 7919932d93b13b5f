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
