"""``eq --uncertainty``: a correction held to rooms drawn from the room file's [uncertainty].

Issue 15 asks that the EQ cut only peaks that are stable across the drawn rooms and size each
cut to the ensemble; issue 10 asks that advice be judged on rooms it was not designed from.
So the corrections here are judged on rooms drawn with a different seed than the design's.
The bars (no lift above 1.5 dB in 15-300 Hz, the seat at least 20 % better) are issue 10's
acceptance figures; the reference is rooms the design never saw.
"""

from __future__ import annotations

import numpy as np
import pytest

import roommodes
from roommodes.analysis import eq
from roommodes.analysis.correction import correct_prediction
from roommodes.analysis.eqcheck import judge_in_room, judge_levels
from roommodes.analysis.uncertainty import sample_rooms
from roommodes.dsp.response import log_frequencies
from roommodes.io.roomfile import example_rooms

F = log_frequencies(15.0, 300.0, 48)


def _peaks(specs):
    return eq.correction_db([eq.Filter("peaking", f0, g, q) for f0, g, q in specs], F)


def test_a_peak_that_moves_more_than_its_bandwidth_is_not_cut():
    # two Cookbook peaks: +6 dB, Q 3 at 60 Hz, whose centre moves by 1 % (sd) across the
    # drawn curves, and +8 dB, Q 10 at 150 Hz (half-gain bandwidth 0.14 oct, Audio EQ
    # Cookbook), whose centre moves by 8 % (sd): its 10-90 % range, about 2.56 x 0.115 =
    # 0.29 oct, is twice its bandwidth
    rng = np.random.default_rng(5)
    level = _peaks([(60.0, 6.0, 3.0), (150.0, 8.0, 10.0)])
    ens = np.array([_peaks([(60.0 * (1 + 0.01 * rng.standard_normal()), 6.0, 3.0),
                            (150.0 * (1 + 0.08 * rng.standard_normal()), 8.0, 10.0)]) for _ in range(40)])
    band = (30.0, 250.0)
    single = eq.design_parametric(F, level, np.zeros_like(F), band)
    assert any(abs(x.freq_hz - 150.0) < 10 and x.gain_db < -3 for x in single.filters)  # the model alone cuts it
    held = eq.design_parametric(F, level, np.zeros_like(F), band, ensemble_db=ens)
    assert not any(abs(x.freq_hz - 150.0) < 20 for x in held.filters)
    (left,) = [w for w in held.warnings if w.code == "peak_left_uncertain"]
    assert "moves" in left.message and 130 < left.freq_hz[0] < 150 < left.freq_hz[1] < 170
    (cut,) = [x for x in held.filters if abs(x.freq_hz - 60.0) < 5]
    st = dict(cut.stability)
    assert st["present_share"] >= 0.9 and st["freq_spread_octaves"] < st["bandwidth_octaves"]
    assert 0.0 < st["depth_share"] <= 1.0
    assert cut.gain_db >= st["design_gain_db"] - 1e-9  # never deeper than the single model's cut
    assert cut.to_dict()["stability"]["samples"] == 40


def test_a_cut_is_sized_to_the_ensemble():
    # the drawn curves carry the peak at half the model's height: the held cut is shallower
    # than the model's (never deeper), and it leaves the drawn curves closer to the target on
    # median, as the independent judge (eqcheck.judge_levels) measures it
    level = _peaks([(80.0, 8.0, 4.0)])
    ens = np.array([_peaks([(80.0 * k, 4.0, 4.0)]) for k in (0.99, 1.0, 1.01)] * 3)
    band = (30.0, 250.0)
    tg = eq.make_target(F, level, band)
    single = eq.design_parametric(F, level, tg, band)
    held = eq.design_parametric(F, level, tg, band, ensemble_db=ens)
    (c1,), (c2,) = single.filters, held.filters
    assert c1.gain_db < 0.75 * c1.gain_db < c2.gain_db < 0

    def median_after(design):
        return np.median([j.rms_after_db for j in judge_levels(F, ens, design.correction_db, tg, band, None)])

    assert median_after(held) < median_after(single) - 0.2


@pytest.mark.parametrize("key", ["treated-booth", "demo-studio"])
def test_held_design_helps_on_rooms_drawn_independently(key):
    room = roommodes.load_room(next(p for p in example_rooms() if p.stem == key))
    corr, _ = correct_prediction(room, freq_hz=F, uncertainty={"n_samples": 12, "seed": 11})
    assert all(x.stability for c in corr for x in c.parametric.filters)
    seat, lifts, before, after = [], [], [], []
    for drawn in sample_rooms(room, 12, seed=12345):  # a different seed: rooms the design did not see
        for js in judge_in_room(drawn, drawn.layout, corr, F, method="exact").values():
            seat.append(js[0].reduction)
            lifts.append(max(j.worst_raise_db for j in js))
            before.append([j.rms_before_db for j in js])
            after.append([j.rms_after_db for j in js])
    # nowhere in 15-300 Hz more than 1.5 dB further above the target, in any drawn room (issue 10)
    assert max(lifts) <= 1.5
    # helps on median at the seat, and no position is worse on median
    assert np.median(seat) >= 0.2
    assert np.all(np.median(after, axis=0) < np.median(before, axis=0))
