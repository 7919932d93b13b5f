"""Modal solver in memory-bounded blocks: the blocks change nothing but round-off.

Reference values: the term-by-term form :func:`modal_transfer_direct` (the formula of the
module docstring, one receiver at a time), and the model layer's own mode shapes and weights.
Tolerances are round-off of IEEE float64 accumulated over about a thousand modes.
"""

import numpy as np
import pytest

from roommodes.model.modes import mode_indices, mode_shapes, wall_weights
from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers import modal
from roommodes.solvers.modal import block_sizes, modal_transfer, modal_transfer_direct, modal_weights

SIZE = np.array([4.6, 3.4, 2.45])
C = 343.0
ZETA = impedance_from_absorption(np.array([0.1, 0.2, 0.15, 0.3, 0.05, 0.4]))


def _points(n, seed):
    return 0.2 + np.random.default_rng(seed).random((n, 3)) * (SIZE - 0.4)


def test_shapes_are_c_order_and_equal_the_model_layer():
    pts = _points(50, 1)
    table = modal._mode_table(tuple(SIZE.tolist()), 400.0, C)
    psi = modal._shapes(table, SIZE, pts)
    idx, _ = mode_indices(SIZE, 400.0, C)
    assert psi.flags.c_contiguous
    # the same cosine tables and the same products: equal to the last bit
    np.testing.assert_array_equal(psi, mode_shapes(idx, SIZE, pts))


def test_weights_follow_the_formula():
    f = np.geomspace(20, 200, 40)
    idx, w, sw = modal_weights(SIZE, ZETA, f, C)
    _, fn = mode_indices(SIZE, 600.0, C)
    kn2 = (2 * np.pi * fn / C) ** 2
    k = 2 * np.pi * f / C
    eps = np.prod(np.where(idx != 0, 2.0, 1.0), axis=1)
    damp = wall_weights(idx, SIZE) @ (1.0 / ZETA)
    ref = (4 * np.pi * eps / np.prod(SIZE))[:, None] / (kn2[:, None] - k**2 + 1j * k * damp[:, None])
    # Kuttruff 2009, sec. 3.4-3.5 (the module docstring's W); round-off of IEEE float64
    np.testing.assert_allclose(w, ref, rtol=1e-14)
    np.testing.assert_allclose(sw[1:], 4 * np.pi * eps[1:] / np.prod(SIZE) / kn2[1:], rtol=1e-14)


@pytest.mark.parametrize("budget", [None, 200_000, 4_000])
@pytest.mark.parametrize("n_src,n_rec", [(7, 2), (2, 7), (1, 1)])
def test_blocks_agree_with_the_direct_sum(monkeypatch, budget, n_src, n_rec):
    f = np.geomspace(25, 150, 17)
    src, rec = _points(n_src, 2), _points(n_rec, 3)
    whole = modal_transfer(SIZE, ZETA, src, rec, f, C)
    if budget is not None:
        monkeypatch.setattr(modal, "BLOCK_BYTES", budget)
    h = modal_transfer(SIZE, ZETA, src, rec, f, C)
    # the blocks regroup the same sums: round-off of IEEE float64
    np.testing.assert_allclose(h, whole, rtol=1e-12)
    ref = modal_transfer_direct(SIZE, ZETA, src, rec, f, C)
    # the direct form sums the static series pair by pair; the series is cut where its terms
    # fall below exp(-18) = 1.5e-8 of the first (modal._STATIC_DECAY), so the two forms of
    # it differ at that level; the modal part (static weights folded into the product,
    # W - W_static cancels up to (f_cut / f)^2 = 324) differs by round-off of IEEE float64
    np.testing.assert_allclose(h, ref, rtol=1e-7)
    h0 = modal_transfer(SIZE, ZETA, src, rec, f, C, static_tail=False)
    np.testing.assert_allclose(h0, modal_transfer_direct(SIZE, ZETA, src, rec, f, C, static_tail=False),
                               rtol=1e-12)


def test_a_large_call_is_split_into_blocks_within_the_budget():
    # 1 source x 100,000 receivers x 50 frequencies with modes to 900 Hz (about 3,300)
    n_modes, n_freq, n_rows = 3300, 50, 100_000
    rb, gb, fb = block_sizes(n_rows, 1, n_freq, n_modes)
    assert rb < n_rows
    assert (gb, fb) == (1, n_freq)
    # bytes of one block: row shapes and product, folded weights and the (N, F) weights
    used = rb * (8 * n_modes + 16 * gb * fb) + 16 * n_modes * gb * fb + 32 * n_modes * fb
    assert used <= modal.BLOCK_BYTES
    # a fold too large for half the budget is cut along the folded points, then frequencies
    rb, gb, fb = block_sizes(10, 10_000, 200, 3300)
    assert gb < 10_000 and 16 * 3300 * gb * fb <= modal.BLOCK_BYTES // 2


def test_work_buffers_are_reused_per_thread_within_their_cap(monkeypatch):
    monkeypatch.setattr(modal, "_work_local", __import__("threading").local())
    monkeypatch.setattr(modal, "WORK_KEEP_BYTES", 10_000)
    a = modal._work("x", (10, 20), np.float64)  # 1,600 bytes: kept
    b = modal._work("x", (5, 20), np.float32)
    assert a.flags.c_contiguous and b.shape == (5, 20) and b.dtype == np.float32
    assert np.shares_memory(a, b)  # the same buffer, viewed again
    big = modal._work("y", (100, 100), np.float64)  # 80,000 bytes: over the cap, not kept
    assert not np.shares_memory(big, modal._work("y", (100, 100), np.float64))
    # results do not depend on the kept buffers: two calls give the same values
    f = np.geomspace(25, 150, 17)
    src, rec = _points(70, 4), _points(1, 5)
    np.testing.assert_array_equal(modal_transfer(SIZE, ZETA, src, rec, f, C, precision="single"),
                                  modal_transfer(SIZE, ZETA, src, rec, f, C, precision="single"))
