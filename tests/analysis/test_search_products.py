"""The placement search's batched products (single precision, compiled kernels, one BLAS
thread) equal the float64 modal solver within the bound it states for single precision.

No outside check values: the reference is the package's own ``modal_transfer`` with
``precision="double"`` (held to the term-by-term formula in tests/solvers). The bound,
5e-4 dB, is the one ``modal_transfer`` states for single precision.
"""

import numpy as np

from roommodes import demo_room_path, load_room
from roommodes.analysis import search
from roommodes.analysis.search import _Scorer, area_offsets, check_weights, search_layouts
from roommodes.solvers import separable
from roommodes.solvers.modal import modal_sum_block, modal_transfer, mode_shape_block, static_green_pairs

DEMO = load_room(demo_room_path())


def _max_db(a, b):
    return float(np.max(np.abs(20 * np.log10(np.abs(a) / np.abs(b)))))


def test_batched_layout_products_within_the_single_precision_bound():
    sc = _Scorer(DEMO, DEMO.layout.speakers, (30.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    assert 0 < sc.n_double < sc.idx.shape[0]
    rng = np.random.default_rng(2)
    size = np.asarray(DEMO.size_m)
    seat = np.array([2.3, 1.7, 1.2])
    left = 0.3 + rng.random((40, 3)) * [1.2, 1.2, 1.2]
    right = left * [1, -1, 1] + [0, 2 * seat[1], 0]
    vecs = np.column_stack([left, right, np.repeat(seat[None], 40, axis=0)])
    h = sc.transfer_layouts(vecs)  # (K, 2, A, F): 40 x 2 x 9 pairs, single precision
    rec = seat + area_offsets((0.6, 0.6), (3, 3))
    z = DEMO.impedance(sc.freq_hz)
    for i in (0, 17, 39):
        ref = modal_transfer(size, z, vecs[i, :6].reshape(2, 3), rec, sc.freq_hz, DEMO.speed_of_sound,
                             precision="double")
        assert _max_db(h[i], ref) <= 5e-4
    block = sc.transfer_block(left, rec)  # the coarse pass's product
    ref = modal_transfer(size, z, left, rec, sc.freq_hz, DEMO.speed_of_sound, precision="double")
    assert _max_db(block, ref) <= 5e-4


def test_one_blas_thread_changes_no_result():
    # the search entry points run on one BLAS thread (small_products); the BLAS's own thread
    # count sums in another order: the same ranking, scores equal to round-off
    res = search_layouts(DEMO, method="modal", refine=False, top=3)
    own = search_layouts.__wrapped__(DEMO, method="modal", refine=False, top=3)
    assert [r.layout for r in res.ranked] == [r.layout for r in own.ranked]
    np.testing.assert_allclose([r.score for r in res.ranked], [r.score for r in own.ranked], rtol=1e-9)


def test_layouts_on_few_planes_are_summed_by_factorisation_in_double_precision():
    # a line search moves every layout along x only: its points lie on few y and z planes,
    # and the batch is summed by sum factorisation, in float64: it equals the float64
    # product of the mode shapes with the same static tail (static_green_pairs) to round-off
    sc = _Scorer(DEMO, DEMO.layout.speakers, (30.0, 200.0), check_weights(None), (0.6, 0.6), (3, 3), 24)
    base = np.array([0.5, 0.62, 1.15, 0.5, 2.27, 1.15, 1.85, 1.45, 1.2])
    vecs = base + np.arange(-10, 11)[:, None] * 0.03 * np.array([1, 0, 0, 1, 0, 0, 1, 0, 0])
    h = sc._separable_layouts(vecs)
    assert h is not None
    np.testing.assert_array_equal(sc.transfer_layouts(vecs), h)
    z = DEMO.impedance(sc.freq_hz)
    size = np.asarray(DEMO.size_m)
    for i in (0, 10, 20):
        src, rec = vecs[i, :6].reshape(2, 3), vecs[i, 6:9] + area_offsets((0.6, 0.6), (3, 3))
        ps, pr = mode_shape_block(sc.idx, size, src), mode_shape_block(sc.idx, size, rec)
        tail = (4 * np.pi * static_green_pairs(size, np.repeat(src, 9, axis=0), np.tile(rec, (2, 1))).reshape(2, 9)
                - ps @ (sc.static_weight[:, None] * pr.T))
        ref = modal_sum_block(ps, pr, sc.weight, precision="double") + tail[:, :, None]
        assert _max_db(h[i], ref) <= 1e-9
        # and the solver (whose static tail is summed block-wise, to 1e-7 dB the same)
        ref = modal_transfer(size, z, src, rec, sc.freq_hz, DEMO.speed_of_sound, precision="double")
        assert _max_db(h[i], ref) <= 1e-6


def test_coarse_pass_without_the_factorised_sum_ranks_alike(monkeypatch):
    # a table too large for the memory cap: the coarse pass falls back to the blocked
    # product (single precision, within 5e-4 dB) and ranks the same layouts
    res = search_layouts(DEMO, method="modal", refine=False, top=3)
    monkeypatch.setattr(separable, "TABLE_BYTES", 0)
    monkeypatch.setattr(search, "SEPARABLE_FMA_RATIO", np.inf)
    calls = []
    block = _Scorer.transfer_block
    monkeypatch.setattr(_Scorer, "transfer_block", lambda self, *a, **k: calls.append(1) or block(self, *a, **k))
    blocked = search_layouts(DEMO, method="modal", refine=False, top=3)
    assert calls  # the blocked product ran
    assert [r.layout for r in res.ranked] == [r.layout for r in blocked.ranked]
    np.testing.assert_allclose([r.score for r in res.ranked], [r.score for r in blocked.ranked], rtol=0, atol=1e-3)
