"""The placement search's batched products (single precision, compiled kernels, one BLAS
thread) equal the float64 modal solver within the bound it states for single precision.

No outside check values: the reference is the package's own ``modal_transfer`` with
``precision="double"`` (held to the term-by-term formula in tests/solvers). The bound,
5e-4 dB, is the one ``modal_transfer`` states for single precision.
"""

import numpy as np

from roommodes import demo_room_path, load_room
from roommodes.analysis.search import _Scorer, area_offsets, check_weights, search_layouts
from roommodes.solvers.modal import modal_transfer

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
