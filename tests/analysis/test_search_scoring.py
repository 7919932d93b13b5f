"""The search's batched scoring steps equal their plain forms.

No outside check values: the references are the plain, one-at-a-time forms written out
below (the greedy distinct-layout loop; the EQ proxy's boost limit from every area
point's shortfall) and the package's part functions (:func:`eq_proxy_db`,
:func:`flatness_db`, :func:`area_spread_db`), themselves checked against known answers in
tests/analysis/test_search.py.
"""

import numpy as np
import pytest

from roommodes import demo_room_path, load_room
from roommodes.analysis.search import (
    _TINY,
    EQ_MAX_BOOST_DB,
    EQ_MAX_CUT_DB,
    _distinct,
    _line_projection,
    _proxy_from_smoothed,
    _Scorer,
    _smoothed_db,
    area_spread_db,
    check_weights,
    eq_proxy_db,
    flatness_db,
    layout_distance_m,
)

DEMO = load_room(demo_room_path())


def _distinct_plain(vecs, scores, min_m, limit=None):
    """Best first; keep a layout when it is far enough from every one kept so far."""
    kept = []
    for i in np.argsort(scores, kind="stable"):
        if all(layout_distance_m(vecs[k], vecs[i]) >= min_m - 1e-9 for k in kept):
            kept.append(int(i))
            if limit is not None and len(kept) >= limit:
                break
    return kept


@pytest.mark.parametrize("min_m", [0.0, 0.05, 0.3, 1.0, 10.0])
@pytest.mark.parametrize("limit", [None, 1, 5, 40])
def test_distinct_equals_the_plain_greedy_loop(min_m, limit):
    rng = np.random.default_rng(int(100 * min_m) + (limit or 0))
    vecs = rng.random((300, 9)) * 2.0
    vecs[150:170] = vecs[0]  # duplicates (distance 0)
    vecs[200:210] = vecs[5] + 0.05 / np.sqrt(3)  # exactly at 0.05 m from layout 5
    scores = np.round(rng.random(300), 2)  # many ties: the stable order decides
    ref = _distinct_plain(vecs, scores, min_m, limit)
    for chunk in (1, 7, 64, 1000):
        assert _distinct(vecs, scores, min_m, limit, chunk=chunk) == ref, chunk


def test_distinct_of_nothing_is_empty():
    assert _distinct(np.zeros((0, 9)), np.zeros(0), 0.1) == []


def _proxy_plain(level3_db, proj, points3_db):
    trend = level3_db - level3_db @ proj
    corr = trend - level3_db
    short = trend[..., None, :] - points3_db
    corr = np.where(corr > 0, np.clip(np.min(short, axis=-2), 0.0, None),
                    0.5 * (corr + np.clip(np.max(short, axis=-2), None, 0.0)))
    return np.clip(corr, -EQ_MAX_CUT_DB, EQ_MAX_BOOST_DB)


def test_proxy_from_the_extremes_equals_the_proxy_from_every_point():
    rng = np.random.default_rng(3)
    proj = _line_projection(np.geomspace(30.0, 200.0, 40))
    points = 10 * rng.standard_normal((50, 9, 40))
    mean = 10 * np.log10(np.mean(10 ** (points / 10), axis=-2))
    np.testing.assert_array_equal(_proxy_from_smoothed(mean, proj, points), _proxy_plain(mean, proj, points))


def test_batched_features_equal_the_part_functions_layout_by_layout():
    sc = _Scorer(DEMO, DEMO.layout.speakers, (30.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    rng = np.random.default_rng(7)
    size = np.asarray(DEMO.size_m)
    vecs = np.column_stack([0.3 + rng.random((6, 3)) * (size - 0.6), 0.3 + rng.random((6, 3)) * (size - 0.6),
                            0.5 + rng.random((6, 3)) * (size - 1.0)])
    h = sc.transfer_layouts(vecs)  # (K, 2, A, F)
    f, sel, band = sc.freq_hz, sc.sel, sc.band
    for c in range(2):
        feat = sc.features(h[:, c], c)
        kept = sc.features(h[:, c], c, correction_db=feat["correction"][::-1])  # another layout's EQ
        for k in range(vecs.shape[0]):
            lv = 10 * np.log10(np.maximum(np.abs(h[k, c]) ** 2 * sc.speaker_power[c], _TINY))  # (A, F)
            corr = eq_proxy_db(f, lv, band)
            seat = _smoothed_db(f, lv[sc.seat_row], 6)[sel]
            np.testing.assert_allclose(feat["correction"][k], corr, rtol=0, atol=1e-9)
            np.testing.assert_allclose(feat["seat"][k], seat + corr, rtol=0, atol=1e-9)
            assert feat["boost"][k] == pytest.approx(max(0.0, corr.max()), abs=1e-9)
            resid = (seat + corr) @ _line_projection(f[sel])
            assert feat["flat_ms"][k] == pytest.approx(np.mean(resid**2), rel=1e-9, abs=1e-12)
            assert np.sqrt(feat["flat_raw_ms"][k]) == pytest.approx(flatness_db(f, lv[sc.seat_row], band), rel=1e-9)
            assert np.sqrt(feat["area_var"][k]) == pytest.approx(area_spread_db(f, lv, band), rel=1e-9)
            other = feat["correction"][::-1][k]
            np.testing.assert_allclose(kept["seat"][k], seat + other, rtol=0, atol=1e-9)
            np.testing.assert_array_equal(kept["correction"][k], other)


def test_features_with_rows_equal_features_of_the_reordered_transfers():
    sc = _Scorer(DEMO, DEMO.layout.speakers, (30.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    rng = np.random.default_rng(11)
    h = rng.standard_normal((5, 9, sc.freq_hz.size)) + 1j * rng.standard_normal((5, 9, sc.freq_hz.size))
    rows = sc.mirror_rows()
    assert rows is not None and not np.array_equal(rows, np.arange(9))
    got, ref = sc.features(h, 1, rows=rows), sc.features(h[:, rows], 1)
    for k in ref:
        np.testing.assert_array_equal(got[k], ref[k], err_msg=k)
