"""The modal sum by sum factorisation equals the plain modal sum, and its kernels their twins.

No outside check values: the reference is the package's own float64 modal product
(``modal_sum_block(precision="double")`` and the static low-mode sum written out), held to
the term-by-term formula in tests/solvers/test_modal.py; the two differ only in the order
of the additions, so they must agree to round-off (1e-12 relative). The shared static
pairs are held to the solver's own ``static_green_pairs`` bit for bit (the same arithmetic
in the same order).
"""

import numpy as np
import pytest

from roommodes import demo_room_path, load_room
from roommodes.solvers import _separable_kernels as kern
from roommodes.solvers import separable
from roommodes.solvers.modal import modal_sum_block, modal_weights, mode_shape_block
from roommodes.solvers.separable import (
    SeparableModalSum,
    _group_sums_numpy,
    _pair_sums_numpy,
)

DEMO = load_room(demo_room_path())
SIZE = np.asarray(DEMO.size_m)
FREQ = np.geomspace(40.0, 220.0, 37)


def _weights():
    return modal_weights(SIZE, DEMO.impedance(FREQ), FREQ, DEMO.speed_of_sound)


def _plain(idx, weight, static_weight, src, rec):
    ps, pr = mode_shape_block(idx, SIZE, src), mode_shape_block(idx, SIZE, rec)
    return modal_sum_block(ps, pr, weight, precision="double"), ps @ (static_weight[:, None] * pr.T)


def _grid_points(rng, n, axis_values):
    """n points whose coordinate on each axis is one of a few values (None: any value)."""
    pts = 0.2 + rng.random((n, 3)) * (SIZE - 0.4)
    for a, vals in enumerate(axis_values):
        if vals is not None:
            pts[:, a] = rng.choice(vals, n)
    return pts


@pytest.mark.parametrize("last_axis", [0, 1, 2])
def test_separable_sum_equals_the_plain_modal_sum(last_axis):
    idx, weight, sw = _weights()
    rng = np.random.default_rng(last_axis)
    few = [np.array([0.4, 0.9, 1.3]), np.array([0.7, 1.1]), np.array([0.5, 1.15, 1.9, 2.2])]
    axis_values = [None if a == last_axis else few[a] for a in range(3)]
    src = _grid_points(rng, 40, axis_values)
    rec = _grid_points(rng, 7, axis_values)
    h, low = SeparableModalSum(idx, SIZE, weight, sw, last_axis).transfer(src, rec)
    h_ref, low_ref = _plain(idx, weight, sw, src, rec)
    assert h.shape == h_ref.shape and low.shape == low_ref.shape
    assert np.max(np.abs(h - h_ref)) <= 1e-12 * np.max(np.abs(h_ref))
    assert np.max(np.abs(low - low_ref)) <= 1e-12 * np.max(np.abs(low_ref))


def test_grouped_sum_pairs_each_group_with_itself_only():
    idx, weight, sw = _weights()
    sep = SeparableModalSum(idx, SIZE, weight, sw)
    rng = np.random.default_rng(5)
    src = rng.choice([0.6, 1.0, 1.4], (3, 2, 3)) + [0.0, 0.0, 0.0]
    rec = rng.choice([1.7, 2.1], (3, 4, 3)) + [0.3, 0.0, 0.0]
    h, low = sep.grouped_transfer(src, rec)
    for k in range(3):
        h_ref, low_ref = _plain(idx, weight, sw, src[k], rec[k])
        np.testing.assert_allclose(h[k], h_ref, rtol=0, atol=1e-12 * np.max(np.abs(h_ref)))
        np.testing.assert_allclose(low[k], low_ref, rtol=0, atol=1e-12 * np.max(np.abs(low_ref)))


def test_shared_source_values_give_the_same_sums_and_one_table():
    idx, weight, sw = _weights()
    sep = SeparableModalSum(idx, SIZE, weight, sw)
    rng = np.random.default_rng(9)
    ys, zs = np.array([0.5, 0.8, 1.2]), np.array([0.9, 1.0])
    rec = _grid_points(rng, 5, [None, np.array([1.5, 1.7]), np.array([1.2])])
    first = _grid_points(rng, 10, [None, ys[:2], zs])
    second = _grid_points(rng, 10, [None, ys[1:], zs])
    h1, _ = sep.transfer(first, rec, (ys, zs))
    table = sep._cache[1]
    h2, _ = sep.transfer(second, rec, (ys, zs))
    assert sep._cache[1] is table  # the second call reused the first one's table
    for src, h in ((first, h1), (second, h2)):
        h_ref, _ = _plain(idx, weight, sw, src, rec)
        assert np.max(np.abs(h - h_ref)) <= 1e-12 * np.max(np.abs(h_ref))
    with pytest.raises(ValueError, match="src_values must hold every source coordinate"):
        sep.transfer(first, rec, (ys[:1], zs))


def test_too_large_a_table_or_sum_gives_none(monkeypatch):
    idx, weight, sw = _weights()
    sep = SeparableModalSum(idx, SIZE, weight, sw)
    rng = np.random.default_rng(2)
    src = _grid_points(rng, 6, [None, np.array([0.5, 0.9]), np.array([1.0])])
    rec = _grid_points(rng, 3, [None, np.array([1.5]), np.array([1.2])])
    assert sep.transfer(src, rec, max_fma=1.0) is None
    monkeypatch.setattr(separable, "TABLE_BYTES", 1000)
    assert sep.transfer(src, rec) is None


def test_kernels_equal_their_numpy_twins():
    rng = np.random.default_rng(4)
    k, s, r, n_idx, n_col = 3, 4, 5, 6, 9
    cx_s, cx_r = rng.standard_normal((k, s, n_idx)), rng.standard_normal((k, r, n_idx))
    plane_s, plane_r = rng.integers(0, 3, (k, s)), rng.integers(0, 2, (k, r))
    table = rng.standard_normal((6, n_idx, n_col))
    h, low = np.empty((k, s, r, n_col - 1)), np.empty((k, s, r))
    kern.pair_sums_into(cx_s, cx_r, plane_s, plane_r, 2, table, h, low)
    h_ref, low_ref = _pair_sums_numpy(cx_s, cx_r, plane_s, plane_r, 2, table, n_col - 1)
    np.testing.assert_allclose(h, h_ref, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(low, low_ref, rtol=1e-13, atol=1e-13)

    weight, columns = rng.standard_normal((20, 3)), rng.standard_normal((20, 7))
    start = np.array([0, 4, 5, 12, 20])
    out = np.empty((4, 3, 7))
    kern.group_sums_into(weight, columns, start, out)
    np.testing.assert_allclose(out, _group_sums_numpy(weight, columns, start), rtol=1e-13, atol=1e-13)
