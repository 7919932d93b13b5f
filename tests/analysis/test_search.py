"""Placement search: batched evaluation, score parts, the search itself, constraints.

References named beside each check. The independent path used as reference throughout is
the modal solver as the rest of the package calls it (``roommodes.transfer_function``, one
layout at a time, itself checked in tests/test_modal.py against the eigenfunction series
and closed forms), the speaker response of ``roommodes.model.speaker`` and plain NumPy.
"""

import itertools
from dataclasses import replace

import numpy as np
import pytest

from roommodes import demo_room_path, load_room, log_frequencies, preset_layout, transfer_function
from roommodes.analysis.search import (
    DEFAULT_WEIGHTS,
    PARTS,
    _Scorer,
    area_offsets,
    area_spread_db,
    check_weights,
    eq_boost_db,
    eq_proxy_db,
    flatness_db,
    front_distance_profile,
    mismatch_db,
    perturbations,
    score_layouts,
    score_parts,
    search_layouts,
    search_space,
    seat_score_map,
)
from roommodes.dsp.response import smooth_fractional_octave
from roommodes.io.roomfile import parse_room
from roommodes.model.modes import mode_shapes
from roommodes.model.room import Layout
from roommodes.model.speaker import speaker_response
from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers.modal import (
    modal_transfer,
    modal_transfer_direct,
    modal_weights,
    static_green,
    static_green_block,
    static_green_pairs,
)

SIZE = np.array([5.0, 4.0, 2.6])
C = 343.0
DEMO = load_room(demo_room_path())


def _room(search=None, surfaces=0.15, size=(5.0, 4.0, 2.6)):
    data = {"room": {"name": "test box", "size_m": list(size)},
            "surfaces": {w: surfaces for w in ("front", "back", "left", "right", "floor", "ceiling")}}
    if search is not None:
        data["search"] = search
    return parse_room(data, "test.toml")


# ------------------------------------------------------------------ batched modal sum
def test_static_green_pairs_and_block_equal_the_per_pair_series():
    # Reference: static_green (per pair), checked against the eigenfunction series of the
    # Neumann Green's function (Morse & Ingard 1968, sec. 9.5) in tests/test_modal.py.
    rng = np.random.default_rng(3)
    s = rng.uniform(0.05, 0.95, (60, 3)) * SIZE
    r = rng.uniform(0.05, 0.95, (60, 3)) * SIZE
    ref = np.array([static_green(SIZE, a, b) for a, b in zip(s, r)])
    np.testing.assert_allclose(static_green_pairs(SIZE, s, r), ref, rtol=1e-7, atol=1e-9)
    front = rng.uniform([0.1, 0.1, 0.1], [1.0, 3.9, 2.5], (12, 3))
    back = rng.uniform([1.6, 0.1, 0.1], [4.9, 3.9, 2.5], (7, 3))
    ref = np.array([[static_green(SIZE, a, b) for b in back] for a in front])
    np.testing.assert_allclose(static_green_block(SIZE, front, back), ref, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(static_green_block(SIZE, back, front), ref.T, rtol=1e-7, atol=1e-9)
    mixed = np.concatenate([front[:3], back[:3]])  # no separating plane: the per-pair path
    ref = np.array([[static_green(SIZE, a, b) for b in back[3:]] for a in mixed])
    np.testing.assert_allclose(static_green_block(SIZE, mixed, back[3:]), ref, rtol=1e-7, atol=1e-9)


def test_batched_transfer_equals_modal_transfer():
    # Same modes, damping, cutoff and static tail as modal_transfer; only the order of the
    # sums differs, so the results agree to the truncation of the static series (e^-18).
    f = np.geomspace(20, 200, 40)
    zeta = impedance_from_absorption([0.1, 0.2, 0.15, 0.15, 0.1, 0.3])
    rng = np.random.default_rng(5)
    src = rng.uniform(0.1, 0.9, (6, 3)) * SIZE
    rec = rng.uniform(0.1, 0.9, (5, 3)) * SIZE
    ref = modal_transfer_direct(SIZE, zeta, src, rec, f, C)
    got = modal_transfer(SIZE, zeta, src, rec, f, C)
    np.testing.assert_allclose(got, ref, rtol=1e-6)
    idx, w, sw = modal_weights(SIZE, zeta, f, C)
    assert w.shape == (idx.shape[0], f.size) and sw[0] == 0.0


def test_scorer_transfers_equal_transfer_function():
    speakers = DEMO.layout.speakers
    sc = _Scorer(DEMO, speakers, (48.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    pts = np.random.default_rng(1).uniform(0.1, 0.9, (20, 3)) * DEMO.size_m
    np.testing.assert_allclose(sc.shapes(pts), mode_shapes(sc.idx, DEMO.size_m, pts), atol=1e-12)
    vec = np.array([0.5, 0.62, 1.15, 0.5, 2.27, 1.15, 1.85, 1.45, 1.2])
    h = sc.transfer_layouts(vec[None])[0]  # (2, A, F)
    rec = vec[6:9] + area_offsets((0.6, 0.6), (3, 3))
    ref = transfer_function(DEMO, vec[:6].reshape(2, 3), rec, sc.freq_hz, method="modal")
    np.testing.assert_allclose(h, ref, rtol=1e-6)
    block = sc.transfer_block(vec[:6].reshape(2, 3), rec)
    np.testing.assert_allclose(block, ref, rtol=1e-6)


# ------------------------------------------------------------------ score parts, known answers
F = log_frequencies(20 / 2 ** (1 / 6), 200 * 2 ** (1 / 6), 48)
BAND = (20.0, 200.0)


def _smoothed(level, fraction):
    return 10 * np.log10(smooth_fractional_octave(F, 10 ** (np.asarray(level) / 10), fraction))


def _polyfit_flatness(level):
    # Cox, D'Antonio & Avis 2004: deviation from the least-squares straight line (in log f);
    # the line from numpy.polyfit, the RMS of the residual.
    sel = (F >= BAND[0] * (1 - 1e-9)) & (F <= BAND[1] * (1 + 1e-9))
    ls = _smoothed(level, 6)[sel]
    coef = np.polyfit(np.log(F[sel]), ls, 1)
    return np.sqrt(np.mean((ls - np.polyval(coef, np.log(F[sel]))) ** 2)), np.polyval(coef, np.log(F[sel]))


def test_flatness_of_a_line_is_zero_and_of_a_ripple_is_its_rms():
    line = 3.0 + 4.0 * np.log2(F / 20)
    # a power law smoothed over a window of fixed width in log f keeps its slope: still a line
    assert flatness_db(F, line, BAND) < 1e-9
    amp = 0.5
    ripple = line + amp * np.sin(2 * np.pi * np.log2(F / 20))
    got = float(flatness_db(F, ripple, BAND))
    assert got == pytest.approx(_polyfit_flatness(ripple)[0], rel=1e-9)
    # a small sinusoid of period 1 octave under a 1/6-octave window keeps sin(pi/6)/(pi/6)
    # of its amplitude (the window's transfer), RMS = amplitude / sqrt(2); the line and the
    # non-linearity of power averaging take a few per cent more (computed).
    assert got == pytest.approx(amp * np.sin(np.pi / 6) / (np.pi / 6) / np.sqrt(2), rel=0.06)


def test_mismatch_of_an_offset_is_the_offset():
    a = 2.0 * np.sin(3 * np.log(F))
    assert float(mismatch_db(F, a, a - 2.5, BAND)) == pytest.approx(2.5, abs=1e-9)
    assert float(mismatch_db(F, a, a, BAND)) == 0.0


def test_area_spread_zero_for_one_point_and_half_a_constant_difference():
    lv = 5.0 * np.cos(2 * np.log(F))
    assert float(area_spread_db(F, lv[None, :], BAND)) == 0.0
    # two points 2 dB apart everywhere: population variance 1 dB^2 (definition)
    assert float(area_spread_db(F, np.stack([lv, lv + 2.0]), BAND)) == pytest.approx(1.0, abs=1e-9)


def test_boost_counts_broad_dips_not_narrow_nulls():
    flat = np.zeros(F.size)
    assert float(eq_boost_db(F, flat, BAND)) == pytest.approx(0.0, abs=1e-9)
    u = np.log2(F / 60.0)
    broad = -10.0 * np.exp(-0.5 * (u / 0.5) ** 2)  # 10 dB deep, sigma half an octave
    narrow = np.where(np.abs(u) < 1 / 96, -30.0, 0.0)  # 30 dB deep, 1/48 octave wide
    b_broad, b_narrow = float(eq_boost_db(F, broad, BAND)), float(eq_boost_db(F, narrow, BAND))
    # the reference: the trend from numpy.polyfit of the 1/6-octave curve minus the
    # 1/3-octave curve, deepest point
    sel = (F >= BAND[0] * (1 - 1e-9)) & (F <= BAND[1] * (1 + 1e-9))
    for level, got in ((broad, b_broad), (narrow, b_narrow)):
        trend = _polyfit_flatness(level)[1]
        assert got == pytest.approx(max(0.0, np.max(trend - _smoothed(level, 3)[sel])), abs=1e-9)
    # a 1/48-octave null in a 1/3-octave power average removes about 1/16 of the window's
    # power: 10 log10(16/15) = 0.28 dB (arithmetic); the broad dip keeps most of its depth
    assert b_narrow < 1.0
    assert b_broad > 5.0


def test_score_parts_from_transfer_function_equal_the_batched_scores():
    # The independent path: transfer_function layout by layout, the speakers' responses,
    # 20 log10 |H|, and the part functions above (each checked against known answers).
    room = DEMO
    layout = room.layout
    w = {"robustness": 0.0}
    got = score_layouts(room, [layout], weights=w)[0]
    f = log_frequencies(48 / 2 ** (1 / 6), 200 * 2 ** (1 / 6), 24)  # the documented search grid
    rec = np.asarray(layout.seat_m) + area_offsets((0.6, 0.6), (3, 3))
    h = transfer_function(room, layout.source_positions_m, rec, f, method="modal")
    lv = [20 * np.log10(np.abs(h[c] * speaker_response(layout.speakers[c], f))) for c in range(2)]
    ref = score_parts(f, lv[0], lv[1], (48.0, 200.0))
    for k in PARTS[:4]:
        assert got.parts[k] == pytest.approx(ref[k], rel=1e-6, abs=1e-9), k
    assert got.score == pytest.approx(sum(DEFAULT_WEIGHTS[k] * ref[k] for k in PARTS[:4]), rel=1e-6)


def test_area_part_zero_for_the_seat_alone_and_growing_with_the_area():
    lay = preset_layout(DEMO, "desk")
    one = score_layouts(DEMO, [lay], area_points=(1, 1), robustness=False)[0]
    assert one.parts["area"] == 0.0
    # a wider area samples more of the standing-wave pattern: the spread grows with it
    # (Welti & Devantier 2006 report larger seat-to-seat variation over wider seating)
    spreads = [score_layouts(DEMO, [lay], area_m=(a, a), robustness=False)[0].parts["area"] for a in (0.2, 0.6, 1.2)]
    assert 0 < spreads[0] < spreads[1] < spreads[2]


def test_mirror_symmetric_pair_has_zero_mismatch_and_robustness_is_its_mean_worsening():
    # The demo room's side walls are alike, so the room model is symmetric about y = Ly/2;
    # a mirrored pair with the seat on the centre line has identical channels (mode shapes:
    # psi(Ly - y) = (-1)^ny psi(y); CHECKS.md "mirror symmetry").
    lay = preset_layout(DEMO, "wall")
    w = {"flatness": 0.0, "area": 0.0, "boost": 0.0, "mismatch": 1.0, "robustness": 1.0}
    got = score_layouts(DEMO, [lay], weights=w)[0]
    assert got.parts["mismatch"] < 1e-9
    # robustness by its definition: mean positive worsening over the eight documented moves
    f = log_frequencies(48 / 2 ** (1 / 6), 200 * 2 ** (1 / 6), 24)
    base = np.concatenate([lay.source_positions_m.ravel(), lay.seat_m])
    worse = []
    for move in perturbations():
        v = np.clip(base + move.ravel(), 0.02, np.tile(DEMO.size_m, 3) - 0.02)
        rec = v[6:9] + area_offsets((0.6, 0.6), (3, 3))
        h = transfer_function(DEMO, v[:6].reshape(2, 3), rec, f, method="modal")
        lv = [20 * np.log10(np.abs(h[c, 4] * speaker_response(lay.speakers[c], f))) for c in range(2)]
        worse.append(float(mismatch_db(f, lv[0], lv[1], (48.0, 200.0))))
    assert got.parts["robustness"] == pytest.approx(np.mean(worse), rel=1e-6)
    assert got.parts["robustness"] > 0.1  # 5 cm moves break the symmetry


def test_perturbations_move_every_object_by_5_cm_in_every_diagonal_direction():
    p = perturbations()
    np.testing.assert_allclose(np.linalg.norm(p, axis=-1), 0.05)
    for obj in range(3):
        signs = {tuple(np.sign(v)) for v in p[:, obj]}
        assert len(signs) == 8


# ------------------------------------------------------------------ the search
SMALL = {"speaker_front_m": [0.4, 0.8], "spacing_m": [1.6, 2.0], "speaker_height_m": [1.1, 1.1],
         "seat_front_m": [1.8, 2.2], "step_m": 0.2}


def _grid(lo, hi, step):  # the documented rule: n = round((hi - lo) / step) + 1 points, ends included
    return np.linspace(lo, hi, int(round((hi - lo) / step)) + 1)


def _box_clear_of_front_wall(woofer, seat, inboard_sign, width=0.25, depth=0.30, clearance=0.10):
    # The default box (docs/placement.md: 25 cm wide, 30 cm deep, woofer centred on its
    # front face) turned to face the seat: its two rear corners lie depth behind the woofer
    # along the facing direction and half a width to each side of it (plane geometry).
    f = (seat - woofer)[:2] / np.linalg.norm((seat - woofer)[:2])
    across = inboard_sign * np.array([-f[1], f[0]])
    rear = [woofer[:2] - depth * f + s * width / 2 * across for s in (-1, 1)]
    return min(r[0] for r in rear) >= clearance


def _reference_score(room, vec, speakers, f, band, offsets, method="modal"):
    def s4(v):
        rec = v[6:9] + offsets
        h = transfer_function(room, v[:6].reshape(2, 3), rec, f, method=method)
        lv = [20 * np.log10(np.abs(h[c] * speaker_response(speakers[c], f))) for c in range(2)]
        parts = score_parts(f, lv[0], lv[1], band)
        return sum(DEFAULT_WEIGHTS[k] * parts[k] for k in PARTS[:4]), lv

    base, lv0 = s4(vec)

    def s4_fixed_eq(v):  # robustness keeps the planned layout's EQ (docs/placement.md)
        rec = v[6:9] + offsets
        h = transfer_function(room, v[:6].reshape(2, 3), rec, f, method=method)
        lv = [20 * np.log10(np.abs(h[c] * speaker_response(speakers[c], f))) for c in range(2)]
        sel = (f >= band[0] * (1 - 1e-9)) & (f <= band[1] * (1 + 1e-9))
        after = []
        for c in range(2):
            corr = eq_proxy_db(f, lv0[c], band)
            seat = 10 * np.log10(smooth_fractional_octave(f, 10 ** (lv[c][4] / 10), 6))[sel]
            after.append(seat + corr)
        x = np.stack([np.ones(sel.sum()), np.log(f[sel])], axis=1)
        resid = [a - x @ np.linalg.lstsq(x, a, rcond=None)[0] for a in after]
        flat = np.sqrt(np.mean(np.square(resid)))
        mism = np.sqrt(np.mean((after[0] - after[1]) ** 2))
        ar = np.sqrt(np.mean(area_spread_db(f, np.stack(lv), band) ** 2))
        boost = max(max(0.0, float(np.max(eq_proxy_db(f, lv0[c], band)))) for c in range(2))
        return (DEFAULT_WEIGHTS["flatness"] * flat + DEFAULT_WEIGHTS["mismatch"] * mism
                + DEFAULT_WEIGHTS["area"] * ar + DEFAULT_WEIGHTS["boost"] * boost)

    moved = [s4_fixed_eq(np.clip(vec + m.ravel(), 0.02, np.tile(room.size_m, 3) - 0.02)) for m in perturbations()]
    return base + DEFAULT_WEIGHTS["robustness"] * np.mean(np.maximum(0.0, np.array(moved) - base))


def test_search_finds_the_brute_force_best_of_a_small_grid():
    room = replace(DEMO, search=SMALL)
    lx, ly, lz = room.size_m
    # brute force: every grid layout that meets the documented constraints (mirrored pair
    # about the seat's axis, seat on the centre line at 1.20 m, |distance - spacing| <= 15 %
    # of the spacing, the default box's back 10 cm or more off the front wall), scored one
    # by one through transfer_function
    f = log_frequencies(48 / 2 ** (1 / 6), 200 * 2 ** (1 / 6), 24)
    offsets = area_offsets((0.6, 0.6), (3, 3))
    cands = []
    for x, half, z, sx in itertools.product(_grid(0.4, 0.8, 0.2), _grid(0.8, 1.0, 0.2), [1.1], _grid(1.8, 2.2, 0.2)):
        left, right, seat = np.array([x, ly / 2 - half, z]), np.array([x, ly / 2 + half, z]), np.array([sx, ly / 2, 1.2])
        spacing = 2 * half
        if not all(abs(np.linalg.norm(p - seat) - spacing) <= 0.15 * spacing for p in (left, right)):
            continue
        if _box_clear_of_front_wall(left, seat, 1) and _box_clear_of_front_wall(right, seat, -1):
            cands.append(np.concatenate([left, right, seat]))
    assert 4 <= len(cands) <= 30
    ref = [_reference_score(room, v, room.layout.speakers, f, (48.0, 200.0), offsets) for v in cands]
    best = cands[int(np.argmin(ref))]
    res = search_layouts(room, top=10, refine=False, method="modal")
    assert res.n_candidates == len(cands)
    got = res.ranked[0]
    np.testing.assert_allclose(np.concatenate([np.ravel([s.position_m for s in got.layout.speakers]),
                                               got.layout.seat_m]), best, atol=1e-4)
    assert got.score == pytest.approx(min(ref), rel=1e-6)
    refined = search_layouts(room, top=1, method="modal")
    assert refined.ranked[0].score <= min(ref) + 1e-9
    # the finalists are scored again with the default (exact) solver: the same score,
    # computed independently through transfer_function with that solver
    exact = search_layouts(room, top=1, refine=False)
    assert exact.method == "exact"
    v = np.concatenate([np.ravel([sp.position_m for sp in exact.ranked[0].layout.speakers]),
                        exact.ranked[0].layout.seat_m])
    assert exact.ranked[0].score == pytest.approx(
        _reference_score(room, v, room.layout.speakers, f, (48.0, 200.0), offsets, method="exact"), rel=1e-6)


@pytest.fixture(scope="module")
def demo_search():
    return search_layouts(DEMO)


def test_search_beats_every_preset_and_the_file_layout_on_the_demo_room(demo_search):
    res = demo_search
    best = res.ranked[0]
    assert len(res.presets) == 4 and res.current is not None
    assert best.score < min(s.score for s in res.presets)
    assert best.score < res.current.score
    scores = [s.score for s in res.ranked]
    assert scores == sorted(scores) and len(scores) == 5
    # every ranked layout meets the constraints: mirrored, seat on the centre line,
    # listening triangle within 15 %, inside the default region
    lx, ly, lz = DEMO.size_m
    for s in res.ranked:
        (l_, r_), seat = [np.array(p.position_m) for p in s.layout.speakers], np.array(s.layout.seat_m)
        assert s.in_region
        assert l_[0] == pytest.approx(r_[0]) and l_[1] == pytest.approx(ly - r_[1]) and seat[1] == pytest.approx(ly / 2)
        spacing = np.linalg.norm(l_ - r_)
        assert abs(np.linalg.norm(l_ - seat) - spacing) <= 0.15 * spacing + 1e-6
        assert 0.2 <= l_[0] <= 0.4 * lx + 1e-6
        # the default box's tweeter sits 18 cm above its woofer; within 10 cm of the ear
        assert abs(l_[2] + 0.18 - 1.2) <= 0.10 + 1e-6
        assert 1.0 - 1e-6 <= spacing <= 2.0 + 1e-6
    # the reported score is the layout's own score (re-scored on its own)
    again = score_layouts(DEMO, [best.layout], method=res.method)[0]
    assert again.score == pytest.approx(best.score, rel=1e-6)
    assert res.band_hz == (48.0, 200.0)


def test_free_placement_searches_both_speakers_independently():
    room = replace(DEMO, search={"symmetric": False, "step_m": 0.3})
    res = search_layouts(room, top=2)
    sym = search_layouts(replace(DEMO, search={"step_m": 0.3}), top=1, refine=False)
    assert res.ranked[0].score < min(s.score for s in res.presets)
    assert res.ranked[0].in_region
    assert res.n_candidates > sym.n_candidates  # pairs of independent positions


# ------------------------------------------------------------------ constraints and input
def test_search_space_defaults_are_the_documented_ones():
    sp = search_space(DEMO)
    lx, ly, lz = DEMO.size_m
    # the default box is 40 cm tall: a near-field pair 1.0-2.0 m apart (common practice)
    assert sp.speaker_front_m == (0.2, round(0.4 * lx, 2)) and sp.spacing_m == (1.0, 2.0)
    assert sp.cabinet_assumed and sp.rear_clearance_m == 0.10 and sp.ear_height_tolerance_m == 0.10
    assert sp.distinct_m == 0.25 and sp.seat_fixed_m is None and sp.toe_in
    assert sp.symmetric and sp.triangle and sp.seat_on_centre_line and sp.triangle_tolerance == 0.15
    assert sp.area_m == (0.6, 0.6) and sp.area_points == (3, 3) and sp.seat_height_m == 1.2


@pytest.mark.parametrize("table,message", [
    ({"speaker_front_m": [1.0, 0.5]}, "is empty"),
    ({"speaker_front_m": [0.5, 9.0]}, "reaches outside the room"),
    ({"area_points": [2, 3]}, "odd numbers"),
    ({"spacing": [1, 2]}, "unknown key 'spacing'"),
    ({"keep_out": [{"min_m": [1, 1, 1], "max_m": [0, 2, 2]}]}, "must be below max_m"),
    ({"triangle_tolerance": 2}, "out of range"),
])
def test_bad_search_tables(table, message):
    with pytest.raises(ValueError, match=message):
        search_space(replace(DEMO, search=table))


@pytest.mark.parametrize("table,message", [
    ({"spacing_m": [3.3, 3.4]}, "no speaker position fits"),
    ({"speaker_front_m": [0.2, 0.9], "keep_out": [{"name": "desk", "min_m": [0, 0, 0], "max_m": [0.95, 3.4, 2.45]}]},
     "cover every allowed speaker"),
    ({"seat_front_m": [4.0, 4.1], "speaker_front_m": [0.2, 0.3]}, "no layout satisfies every constraint"),
])
def test_impossible_regions(table, message):
    with pytest.raises(ValueError, match=message):
        search_layouts(replace(DEMO, search=table))


@pytest.mark.parametrize("weights,message", [
    ({"mismatch": -1}, "must be >= 0"),
    ({"flatness": 0, "mismatch": 0, "area": 0, "boost": 0}, "all zero"),
    ({"loudness": 1}, "unknown score part"),
])
def test_bad_weights(weights, message):
    with pytest.raises(ValueError, match=message):
        check_weights(weights)


def test_mode_shapes_used_are_the_package_ones():
    # the scorer's separable shapes are the package's mode_shapes (Kuttruff 2009, sec. 3.3)
    sc = _Scorer(DEMO, DEMO.layout.speakers, (48.0, 200.0), check_weights(None), (0.6, 0.6), (1, 1), 12)
    p = np.array([[0.0, 0.0, 0.0], DEMO.size_m, [1.1, 2.2, 0.7]])
    np.testing.assert_allclose(sc.shapes(p), mode_shapes(sc.idx, DEMO.size_m, p), atol=1e-12)
    assert np.all(np.abs(sc.shapes(p[:2])) == pytest.approx(1.0))  # corners: |psi| = 1 for every mode


def test_layout_with_one_speaker_is_rejected():
    lay = Layout(DEMO.layout.speakers[:1], DEMO.layout.seat_m)
    with pytest.raises(ValueError, match="two speakers"):
        score_layouts(DEMO, [lay])


def test_seat_map_and_front_distance_profile_are_the_same_figure_of_merit():
    lay = preset_layout(DEMO, "desk")
    x, y, score = seat_score_map(DEMO, lay, step_m=0.2)
    i, j = int(np.argmin(np.abs(x - 2.3))), int(np.argmin(np.abs(y - 1.1)))
    moved = Layout(lay.speakers, (x[i], y[j], lay.seat_m[2]), "moved seat")
    ref = score_layouts(DEMO, [moved], robustness=False)[0].score
    assert score[i, j] == pytest.approx(ref, rel=1e-6)
    assert np.isnan(score[np.argmin(np.abs(x - 0.5)), np.argmin(np.abs(y - 1.2))])  # at a speaker
    space = search_space(replace(DEMO, search={"ear_height_tolerance_m": 0.3}))
    d, prof, parts, allowed = front_distance_profile(DEMO, lay, distances_m=[0.3, 0.55], space=space)
    for k, dist in enumerate(d):
        sp = tuple(s_.moved((dist, s_.position_m[1], s_.position_m[2])) for s_ in lay.speakers)
        assert prof[k] == pytest.approx(score_layouts(DEMO, [Layout(sp, lay.seat_m)])[0].score, rel=1e-6)
    # the desk preset's 1.1 m spacing and its seat 0.95 m behind the speakers meet the triangle
    # rule (1.02 m to each speaker, within 15 %) only where the preset puts them
    assert allowed.tolist() == [False, True]
