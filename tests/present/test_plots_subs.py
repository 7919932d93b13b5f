"""The subwoofer figure: numbered subs with their settings in a legend, and no legend entry for
what is not drawn.

No outside check values: these tests hold what the figure draws and labels."""

from dataclasses import replace

import numpy as np
import pytest

from roommodes import load_room
from roommodes.analysis.subs import MIN_GAIN_DB, MIN_SUB_SPACING_M, SubSetting, tune_measured
from roommodes.io.roomfile import example_rooms
from roommodes.present.plots_subs import plot_subs

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")


@pytest.fixture(scope="module")
def measured():
    """A result as --measured gives it (no pair measured here: all predicted, quick)."""
    room = load_room(SOFA)
    return room, tune_measured(room, {}, method="modal")


def _plan_labels(ax):
    return [t.get_text() for t in ax.get_legend().get_texts()]


def test_measured_plots_list_no_candidate_positions(measured, tmp_path):
    room, res = measured
    assert len(res.candidates_m) == 0
    mains = np.array([m.position_m for m in room.layout.mains])
    fig = plot_subs(res, room, mains, path=tmp_path / "m.png")
    labels = _plan_labels(fig.axes[1])
    assert "mains" in labels and "seats" in labels
    assert "candidate sub positions" not in labels


def test_four_close_subs_are_numbered_without_overlap_and_listed(measured, tmp_path):
    room, res = measured
    cfg = res.ranked[0]
    # four subs along the front wall at the closest spacing the search allows, one nearly idle
    pos = [(0.2, 0.3 + MIN_SUB_SPACING_M * k, 0.3) for k in range(4)]
    gains = [-2.0, -2.0, -3.0, MIN_GAIN_DB]
    subs = tuple(SubSetting(n, p, g, 1.0, -1, 0.0) for n, p, g in zip(("sub", "sub-2", "sub-3", "sub-4"), pos, gains))
    four = replace(cfg, label="4 subs", subs=subs)
    res4 = replace(res, ranked=(four,))
    mains = np.array([m.position_m for m in room.layout.mains])
    fig = plot_subs(res4, room, mains, path=tmp_path / "four.png")
    plan = fig.axes[1]
    r = fig.canvas.get_renderer()
    nums = [t for t in plan.texts if t.get_gid() == "sub-number"]
    assert [t.get_text() for t in nums] == ["1", "2", "3", "4"]
    boxes = [t.get_window_extent(r) for t in nums]
    for i in range(4):
        assert plan.get_window_extent(r).contains(*boxes[i].get_points().mean(axis=0))
        for j in range(i + 1, 4):
            assert not boxes[i].overlaps(boxes[j]), (i, j)
    labels = _plan_labels(plan)
    assert "1: sub, -2.0 dB, 1.00 ms, -" in labels
    assert "4: sub-4, -12.0 dB, 1.00 ms, - (nearly idle)" in labels
