"""Correction EQ judged in the room, not in the model it was designed from (issue 10).

Each correction is designed on the modal prediction at the seat and six head positions
15 cm around it, then applied to an independent reference: the same room with length
+1 %, width -1 %, height +1 % and every absorption x1.3 (what a tape measure and a
materials table are easily off by), and, when the checkout has it, the exact solver (the
image-source solver took more than 5 minutes per room at these absorptions, too slow for
a test). Rooms: the three bundled rooms and an
invented spare-bedroom studio, 4.9 x 3.6 x 2.55 m with sealed speakers rolling off at
45 Hz, whose (1,0,0) mode at 35 Hz lies below the roll-off.

Thresholds (issue 10, common practice): no part of the curve in 15-300 Hz lifted more
than 1.5 dB further above the target than it was; no head position worse; the rms
deviation from the target (deep dips left out) at least 40 % lower at the seat and 20 %
lower at the head positions, on the design model.
"""

import tomllib

import numpy as np
import pytest

import roommodes
from roommodes.analysis import eq
from roommodes.analysis.correction import correct_curve, correct_prediction, default_band, head_positions
from roommodes.analysis.eqcheck import judge_in_room, judge_levels, perturbed_room
from roommodes.dsp.response import log_frequencies
from roommodes.io.roomfile import example_rooms, parse_room
from roommodes.solvers import METHODS

F = log_frequencies(15.0, 300.0, 48)

BEDROOM = """
[room]
name = "Spare-bedroom studio"
size_m = [4.90, 3.60, 2.55]
[surfaces]
front = "plasterboard-on-studs"
back = "plasterboard-on-studs"
left = "plasterboard-on-studs"
right = "plasterboard-on-studs"
floor = "carpet-on-underlay"
ceiling = "plasterboard-on-studs"
[speakers.left]
position_m = [0.45, 1.10, 1.15]
lowcut_hz = 45
lowcut_order = 2
[speakers.right]
position_m = [0.45, 2.50, 1.15]
lowcut_hz = 45
lowcut_order = 2
[seat]
position_m = [1.70, 1.80, 1.20]
"""


def _rooms():
    out = {p.stem: roommodes.load_room(p) for p in example_rooms()}
    out["bedroom"] = parse_room(tomllib.loads(BEDROOM), name="bedroom")
    return out


ROOMS = _rooms()


@pytest.fixture(scope="module")
def designs():
    return {k: correct_prediction(r, freq_hz=F)[0] for k, r in ROOMS.items()}


def _references():
    refs = [("perturbed", lambda r: perturbed_room(r), "modal")]
    if "exact" in METHODS:
        refs.append(("exact", lambda r: r, "exact"))
    return refs


@pytest.mark.parametrize("key", sorted(ROOMS))
def test_design_model_meets_the_done_criteria(designs, key):
    room = ROOMS[key]
    res = judge_in_room(room, room.layout, designs[key], F)
    for name, js in res.items():
        seat, heads = js[0], js[1:]
        print(key, name, f"seat {seat.rms_before_db:.2f}->{seat.rms_after_db:.2f}",
              " ".join(f"{j.rms_before_db:.2f}->{j.rms_after_db:.2f}" for j in heads))
        assert len(heads) == 6
        assert seat.reduction >= 0.40
        assert all(j.reduction >= 0.20 for j in heads)
        assert all(j.worst_raise_db <= 0.5 + 1e-6 for j in js)  # the design's own ceiling


@pytest.mark.parametrize("ref", [r[0] for r in _references()])
@pytest.mark.parametrize("key", sorted(ROOMS))
def test_correction_does_no_harm_on_an_independent_reference(designs, key, ref):
    room = ROOMS[key]
    make, method = next((m, meth) for name, m, meth in _references() if name == ref)
    res = judge_in_room(make(room), room.layout, designs[key], F, method=method)
    for name, js in res.items():
        for pos, j in enumerate(js):
            print(key, ref, name, pos, f"{j.rms_before_db:.2f}->{j.rms_after_db:.2f}",
                  f"lift {j.worst_raise_db:+.2f} dB at {j.worst_raise_freq_hz:.0f} Hz")
            # nowhere in 15-300 Hz more than 1.5 dB further above the target (issue 10)
            assert j.worst_raise_db <= 1.5
            # no position gets worse, the seat gains
            assert j.rms_after_db <= j.rms_before_db + 1e-9
        assert js[0].reduction >= 0.2


def test_bedroom_mode_below_the_rolloff_is_not_lifted(designs):
    # the case: sealed speakers -3 dB at 45 Hz, (1,0,0) at c/(2 x 4.9 m) = 35 Hz
    room = ROOMS["bedroom"]
    lv = roommodes.analysis.levels.speaker_levels(room, room.layout.speakers, [room.layout.seat_m], F)
    for c, levels in zip(designs["bedroom"], lv.level_db[:, 0]):
        p = c.parametric
        assert p.band_hz[0] == pytest.approx(45.0)
        corr = eq.correction_db(p.filters, F, 48000)
        low = (F >= 30.0) & (F <= 42.0)
        # where the mode holds the curve up, the correction adds nothing (<= 0.5 dB)
        assert np.max(corr[low]) <= 0.5 + 1e-6
        (j,) = judge_levels(F, levels[None, :], corr, p.target_db, p.band_hz)
        assert j.worst_raise_db <= 0.5 + 1e-6


def test_boost_spilling_onto_a_peak_below_the_band_is_refused():
    # invented curve: a flat response at the target with a mode-like peak at 36 Hz (below
    # the band, at +2 dB) and a broad 6 dB shortfall centred on 54 Hz; the old design put a
    # +6 dB, Q 1 boost there and lifted 36 Hz by 3.5 dB
    f = F
    level = eq.correction_db([eq.Filter("peaking", 36.0, 2.0, 6.0), eq.Filter("peaking", 54.0, -6.0, 1.0)], f)
    c = correct_curve("x", f, level, band_hz=(45.0, 180.0), smoothing=None)
    p = c.parametric
    corr = p.correction_db
    raise_db = np.maximum(level + corr - p.target_db, 0) - np.maximum(level - p.target_db, 0)
    assert np.max(raise_db) <= 0.5 + 1e-6
    boosts = [x for x in p.filters if x.gain_db > 0]
    assert all(x.q <= 2.0 + 1e-9 for x in boosts)
    assert np.max(corr) > 1.0  # it still boosts the broad dip, within what is allowed


def test_tiny_features_are_not_broad_dips():
    # a 3 dB dip only 0.1 octave wide (Cookbook Q 14) and a 0.02-octave sliver are "narrow
    # dips": left alone (issue 10: "151.2-153.4 Hz over 0.02 oct" was boosted)
    f = F
    level = eq.correction_db([eq.Filter("peaking", 150.0, -3.0, 14.0), eq.Filter("peaking", 247.0, -2.5, 60.0)], f)
    flat = np.zeros_like(f)
    cls = eq.classify_regions(f, level, flat, (20.0, 280.0))
    kinds = {round(r.freq_extreme_hz): r.kind for r in cls.regions}
    assert "broad dip" not in kinds.values()
    assert any(k == "narrow dip" for k in kinds.values())
    d = eq.design_parametric(f, level, flat, (20.0, 280.0), classification=cls)
    assert not any(x.gain_db > 0 for x in d.filters)


def test_broad_stable_dip_gets_a_broad_boost_only():
    f = F
    level = eq.correction_db([eq.Filter("peaking", 70.0, -5.0, 1.2)], f)
    flat = np.zeros_like(f)
    heads = np.array([level + d for d in (-0.5, 0.0, 0.5)])
    d = eq.design_parametric(f, level, flat, (20.0, 250.0), position_levels_db=heads)
    (r,) = d.classification.regions
    assert r.kind == "broad dip"
    assert d.filters and all(x.gain_db > 0 and x.q <= 2.0 + 1e-9 for x in d.filters)
    assert d.filters[0].role == "boost"
    # a dip that one head position does not share is not stable: not boosted
    shifted = np.array([level, eq.correction_db([eq.Filter("peaking", 70.0, 1.0, 1.2)], f)])
    d2 = eq.design_parametric(f, level, flat, (20.0, 250.0), position_levels_db=shifted)
    assert [r.kind for r in d2.classification.regions][0] == "narrow dip"
    assert not d2.filters


def test_cut_q_follows_the_peak_and_the_mode():
    # a Cookbook +7 dB, Q 4 peak: the cut's Q comes from the peak's own width (half-gain
    # bandwidth, Cookbook definition), i.e. about 4, not from a fit pushed to the Q limit
    f = F
    level = eq.correction_db([eq.Filter("peaking", 80.0, 7.0, 4.0)], f)
    d = eq.design_parametric(f, level, np.zeros_like(f), (20.0, 250.0))
    (cut,) = d.filters
    assert cut.role == "cut" and cut.gain_db == pytest.approx(-7.0, abs=0.3)
    assert cut.q == pytest.approx(4.0, rel=0.1) and "width" in cut.basis
    assert not cut.at_limit
    # with a mode of half-power bandwidth 40 Hz at 80 Hz (mode Q 2) inside the peak, the
    # cut takes the mode's Q: 10^(-7/40) x 80/40 = 1.34 (zeros on the mode's poles)
    d = eq.design_parametric(f, level, np.zeros_like(f), (20.0, 250.0), modes=[(80.0, 40.0, "(1,0,0)")])
    (cut,) = d.filters
    assert "mode (1,0,0)" in cut.basis
    q_mode = 10 ** (-7.0 / 40) * 80.0 / 40.0
    assert cut.q <= 1.5 * q_mode * 1.01  # held within x1.5 of it ...
    if cut.q >= 1.5 * q_mode * 0.99:
        assert cut.at_limit  # ... and saying so when it sits at that edge


def test_a_filter_at_a_limit_says_so():
    f = F
    level = eq.correction_db([eq.Filter("peaking", 80.0, 12.0, 8.0)], f)
    d = eq.design_parametric(f, level, np.zeros_like(f), (20.0, 250.0), q_range=(0.5, 4.0),
                             gain_range=(-6.0, 6.0))
    assert d.filters
    flt = d.filters[0]
    assert any("Q" in t for t in flt.at_limit) and any("gain" in t for t in flt.at_limit)
    assert any(w.code == "filter_at_limit" for w in d.warnings)
    assert flt.to_dict()["at_limit"] == list(flt.at_limit)


def test_default_band_runs_from_the_rolloff_to_schroeder(designs):
    from roommodes.analysis.predict import room_schroeder_frequency
    from roommodes.model.modes import room_modes
    from roommodes.model.room import SubSearch

    for key, corr in designs.items():
        room = ROOMS[key]
        fs = room_schroeder_frequency(room)
        ms = room_modes(room, 300.0)
        lowest = float(ms.freq_hz[ms.freq_hz > 0][0])
        for c in corr:
            sp = next(s for s in room.layout.speakers if s.name == c.name)
            # a subwoofer is corrected only below the top of its crossover range (docs/eq.md)
            top = min(fs, (room.subs_search or SubSearch()).crossover_hz[1]) if sp.role == "sub" else fs
            assert c.parametric.band_hz == pytest.approx(default_band(sp.lowcut_hz, top, lowest))
            assert c.parametric.band_hz[1] == pytest.approx(top)
            assert not c.cautions
    assert default_band(None, 180.0, 35.0) == (35.0, 180.0)


def test_wider_band_on_request_carries_a_caution():
    room = ROOMS["demo-studio"]
    corr, _ = correct_prediction(room, freq_hz=log_frequencies(15.0, 300.0, 24), band_hz=(48.0, 250.0))
    assert all(any("Schroeder" in t for t in c.cautions) for c in corr)


def test_filters_listed_in_rising_frequency(designs):
    for corr in designs.values():
        for c in corr:
            fr = [x.freq_hz for x in c.parametric.filters]
            assert fr == sorted(fr)


def test_head_positions_are_15_cm_around_the_seat():
    h = head_positions((1.0, 2.0, 1.2))
    d = np.linalg.norm(h - np.array([1.0, 2.0, 1.2]), axis=1)
    np.testing.assert_allclose(d, 0.15)
    assert len({tuple(np.round(v, 6)) for v in h}) == 6


def test_peak_cut_off_by_the_band_edge_is_cut_as_a_whole():
    # a Cookbook +6 dB, Q 4 peak at 52 Hz (half-gain bandwidth 0.36 oct, Audio EQ Cookbook
    # definition) with the band starting at 55 Hz, on the peak's upper flank: the cut is
    # placed on the whole peak (its top and its width), not squeezed against the band edge
    f = F
    level = eq.correction_db([eq.Filter("peaking", 52.0, 6.0, 4.0)], f)
    d = eq.design_parametric(f, level, np.zeros_like(f), (55.0, 250.0))
    (peak,) = [r for r in d.classification.regions if r.kind == "peak"]
    assert peak.whole_hz is not None and peak.whole_hz[0] == pytest.approx(52.0, rel=0.02)
    assert peak.width_octaves == pytest.approx(eq.q_to_bandwidth_octaves(4.0), rel=0.15)
    (cut,) = d.filters
    assert cut.freq_hz == pytest.approx(52.0, rel=0.05)
    assert cut.gain_db == pytest.approx(-6.0, abs=1.0)
    assert cut.q == pytest.approx(4.0, rel=0.3)
    # the in-band error falls nearly to nothing (it was up to 5 dB)
    assert d.error_after.max_abs_db < 1.0
    # a peak that runs on past the top of the band is not chased there (above the band the
    # prediction is indicative only, or the channel stops playing)
    d = eq.design_parametric(f, level, np.zeros_like(f), (20.0, 50.0))
    (peak,) = [r for r in d.classification.regions if r.kind == "peak"]
    assert peak.whole_hz is None
    assert all(flt.freq_hz <= 50.0 * 1.001 for flt in d.filters)
