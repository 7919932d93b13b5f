"""The modal solver's compiled kernels and its single-precision path equal the plain forms.

No outside check values: every reference is the package's own float64 / NumPy form
(:func:`mode_shapes`, :func:`modal_weights`, :func:`static_green`, ``precision="double"``).
Tolerances: round-off of IEEE float64 (a few ulp per term, summed over the terms), and
for the single-precision path the bound the package states for it (5e-4 dB,
``modal_transfer``'s docstring).
"""

import numpy as np
import pytest

from roommodes.model.modes import mode_shapes
from roommodes.model.walls import impedance_from_absorption, impedance_table
from roommodes.solvers import modal, threads
from roommodes.solvers._modal_kernels import fold_into, static_green_pairs_kernel
from roommodes.solvers.modal import (
    SINGLE_MIN_FLOP,
    grouped_pair_sum,
    modal_sum_block,
    modal_transfer,
    modal_weights,
    resonant_count,
    static_green,
    static_green_pairs,
)

SIZE = np.array([4.6, 3.4, 2.45])
C = 343.0


def _points(n, seed, margin=0.1):
    return margin + np.random.default_rng(seed).random((n, 3)) * (SIZE - 2 * margin)


def test_shapes_kernel_equals_the_model_layer_and_rounds_once_to_float32():
    table = modal._mode_table(tuple(SIZE.tolist()), 500.0, C)
    pts = _points(40, 1)
    psi = modal._shapes(table, SIZE, pts)
    # same cosines, same products in the same order: equal to the last bit
    np.testing.assert_array_equal(psi, mode_shapes(table.indices, SIZE, pts))
    np.testing.assert_array_equal(psi, modal._shapes_numpy(table, SIZE, pts))
    np.testing.assert_array_equal(modal._shapes(table, SIZE, pts, np.float32), psi.astype(np.float32))
    np.testing.assert_array_equal(modal._shapes(table, SIZE, pts, start=5, stop=30), psi[:, 5:30])


def test_fused_fold_equals_weights_times_shapes():
    f = np.geomspace(20, 200, 31)
    zeta = impedance_from_absorption(np.array([0.1, 0.2, 0.15, 0.3, 0.05, 0.4]))
    table = modal._mode_table(tuple(SIZE.tolist()), 600.0, C)
    k = 2 * np.pi * f / C
    w = modal._weights(table, impedance_table(zeta, f.size), k)
    psi = modal._shapes(table, SIZE, _points(3, 2))
    n, n_lo = w.shape[0], 40
    ref = (psi.T[:, :, None] * (w - table.static_weight[:, None])[:, None, :]).reshape(n, -1).view(np.float64)
    lo, hi = np.empty((n_lo, ref.shape[1])), np.empty((n - n_lo, ref.shape[1]))
    fold_into(table.kn2, table.scale, table.static_weight, table.walls, 1.0 / impedance_table(zeta, f.size), k,
              psi, lo, hi)
    # the complex division written out: a few ulp of IEEE float64 per weight
    scale = np.abs(ref).max(axis=1, keepdims=True)
    np.testing.assert_allclose(np.vstack([lo, hi]) / scale, ref / scale, rtol=0, atol=1e-14)
    hi32 = np.empty((n - n_lo, ref.shape[1]), dtype=np.float32)
    fold_into(table.kn2, table.scale, table.static_weight, table.walls, 1.0 / impedance_table(zeta, f.size), k,
              psi, lo, hi32)
    np.testing.assert_allclose(hi32, hi.astype(np.float32), rtol=2e-7, atol=0)


def test_static_pairs_kernels_equal_the_per_pair_series():
    rng = np.random.default_rng(4)
    s, r = rng.random((120, 3)) * SIZE, rng.random((120, 3)) * SIZE
    s[:20, 0] = 0.01  # against a wall
    r[20:40, 2] = SIZE[2] - 0.02  # against the opposite wall
    r[40:50] = s[40:50] + [0.05, -0.03, 0.02]  # close pairs: the untabled kernel
    r[50:55] = s[50:55] + [0.0, 0.0, 0.4]  # separated along z only
    ref = np.array([static_green(SIZE, a, b) for a, b in zip(s, r)])
    # each pair summed as static_green sums it: round-off of IEEE float64
    np.testing.assert_allclose(static_green_pairs(SIZE, s, r), ref, rtol=1e-12, atol=1e-14)
    out = np.empty(s.shape[0])
    static_green_pairs_kernel(SIZE, s, r, modal._STATIC_DECAY, modal._STATIC_MAX_INDEX, out)
    np.testing.assert_allclose(out, ref, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("alpha", [0.9, 0.3, 0.01])  # very absorbent, typical, nearly rigid
def test_single_precision_stays_within_its_stated_bound(alpha):
    zeta = impedance_from_absorption(np.full(6, alpha))
    f = np.geomspace(15, 300, 150)
    src, rec = _points(150, 5), _points(2, 6)
    hd = modal_transfer(SIZE, zeta, src, rec, f, C, precision="double")
    hs = modal_transfer(SIZE, zeta, src, rec, f, C, precision="single")
    level_db = 20 * np.log10(np.abs(hd))
    assert level_db.max() - level_db.min() > 40  # notches included
    # the bound modal_transfer states for single precision
    assert np.max(np.abs(20 * np.log10(np.abs(hs) / np.abs(hd)))) <= 5e-4
    # and it is not float64 in disguise
    assert np.any(hs != hd)


def test_auto_precision_is_single_for_large_products_only():
    zeta = impedance_from_absorption(np.full(6, 0.2))
    f = np.geomspace(20, 200, 100)
    src, rec = _points(1, 7), _points(1, 8)
    small = modal_transfer(SIZE, zeta, src, rec, f, C)
    np.testing.assert_array_equal(small, modal_transfer(SIZE, zeta, src, rec, f, C, precision="double"))
    many = _points(300, 9)
    n_modes = modal_weights(SIZE, zeta, f, C)[0].shape[0]
    assert 4.0 * many.shape[0] * f.size * n_modes >= SINGLE_MIN_FLOP
    np.testing.assert_array_equal(modal_transfer(SIZE, zeta, many, rec, f, C),
                                  modal_transfer(SIZE, zeta, many, rec, f, C, precision="single"))
    with pytest.raises(ValueError, match="precision"):
        modal_transfer(SIZE, zeta, src, rec, f, C, precision="half")


def test_modal_sum_block_single_within_the_bound():
    zeta = impedance_from_absorption(np.full(6, 0.3))
    f = np.geomspace(20, 200, 80)
    idx, w, _ = modal_weights(SIZE, zeta, f, C)
    ps, pr = mode_shapes(idx, SIZE, _points(60, 10)), mode_shapes(idx, SIZE, _points(4, 11))
    hd = modal_sum_block(ps, pr, w)
    hs = modal_sum_block(ps, pr, w, precision="single")
    # the modal part alone (no static term): its float32 error relative to its rms over frequency
    rms = np.sqrt(np.mean(np.abs(hd) ** 2, axis=-1, keepdims=True))
    assert np.max(np.abs(hs - hd) / rms) < 1e-5
    assert np.any(hs != hd)


def test_blas_threads_one_thread_for_small_products_and_restored_after():
    ctl = threads._controller()
    if ctl is None:
        pytest.skip("threadpoolctl not installed")
    before = [lib.num_threads for lib in ctl.select(user_api="blas").lib_controllers]
    with threads.blas_threads(0.5 * threads.MULTI_THREAD_MIN_FLOP):
        assert all(lib.num_threads == 1 for lib in threads._controller().select(user_api="blas").lib_controllers)
    after = [lib.num_threads for lib in threads._controller().select(user_api="blas").lib_controllers]
    assert after == before


@pytest.mark.parametrize("precision", ["double", "single"])
def test_grouped_pair_sum_equals_the_block_product_of_each_group(precision):
    zeta = impedance_from_absorption(np.full(6, 0.2))
    f = np.geomspace(20, 200, 60)
    idx, w, sw = modal_weights(SIZE, zeta, f, C)
    ps = np.stack([mode_shapes(idx, SIZE, _points(2, 20 + g)) for g in range(5)])  # (5, 2, N)
    pr = np.stack([mode_shapes(idx, SIZE, _points(9, 30 + g)) for g in range(5)])  # (5, 9, N)
    n_double = resonant_count(idx, SIZE, C, f.max())
    h, low = grouped_pair_sum(ps, pr, w, sw, precision=precision, n_double=n_double)
    for g in range(5):
        ref = modal_sum_block(ps[g], pr[g], w)
        rms = np.sqrt(np.mean(np.abs(ref) ** 2, axis=-1, keepdims=True))
        # double: round-off of IEEE float64; single: float32 rounding of the non-resonant modes
        tol = 1e-12 if precision == "double" else 1e-6
        assert np.max(np.abs(h[g] - ref) / rms) < tol
        np.testing.assert_allclose(low[g], (ps[g] * sw) @ pr[g].T, rtol=1e-12, atol=1e-15)


def test_blas_threads_large_products_get_the_blas_own_count_inside_a_one_thread_context():
    ctl = threads._controller()
    if ctl is None:
        pytest.skip("threadpoolctl not installed")
    own = threads._own_threads()
    with threads.blas_threads(0):
        with threads.blas_threads(threads.BUSY_MULTI_THREAD_MIN_FLOP):
            counts = [lib.num_threads for lib in ctl.select(user_api="blas").lib_controllers]
        assert all(n == own for n in counts)
        assert all(lib.num_threads == 1 for lib in ctl.select(user_api="blas").lib_controllers)


@pytest.mark.parametrize("load,spare", [(0.5, True), (1.9, True), (3.5, False)])
def test_thread_threshold_follows_the_load(monkeypatch, load, spare):
    # per CPU: 0.25 and 0.95 leave cores to spare, 1.75 (above BUSY_LOAD_PER_CPU) does not
    monkeypatch.setattr(threads.os, "getloadavg", lambda: (load, load, load))
    monkeypatch.setattr(threads.os, "cpu_count", lambda: 2)
    monkeypatch.setattr(threads, "_load_cache", [-1e9, None])
    monkeypatch.setattr(threads, "_own_threads", lambda: 2)
    assert threads.spare_cores() is spare
    want = threads.MULTI_THREAD_MIN_FLOP if spare else threads.BUSY_MULTI_THREAD_MIN_FLOP
    assert threads.multi_thread_min_flop() == want
    assert threads.MULTI_THREAD_MIN_FLOP < threads.BUSY_MULTI_THREAD_MIN_FLOP
    # a process whose BLAS was given one thread (Dask's workers) keeps to one core
    monkeypatch.setattr(threads, "_own_threads", lambda: 1)
    assert threads.spare_cores() is False


def test_parallel_kernels_equal_the_serial_ones():
    from roommodes.solvers import _modal_kernels as kern

    table = modal._mode_table(tuple(SIZE.tolist()), 500.0, C)
    pts = _points(150, 12)
    cos = modal._cos_tables(table, pts)
    ix, iy, iz = table.indices_by_axis
    n, n_lo = ix.size, 37
    # the shapes of a block, the resonant part written into a column slice of a wider block,
    # from the (x, y) table: the same products in the same order, equal to the last bit
    psi = modal._shapes(table, SIZE, pts)
    for par in (False, True):
        wide, hi = np.full((150, n_lo + 3), -1.0), np.empty((150, n - n_lo), dtype=np.float32)
        if par:
            kern.shapes_split_into_parallel(*cos, table.indices_xy, iz, wide[:, :n_lo], hi, 2)
        else:
            kern.shapes_split_into(*cos, table.indices_xy, iz, wide[:, :n_lo], hi)
        np.testing.assert_array_equal(wide[:, :n_lo], psi[:, :n_lo])
        np.testing.assert_array_equal(hi, psi[:, n_lo:].astype(np.float32))
        assert np.all(wide[:, n_lo:] == -1.0)
    # the fused fold, same arithmetic per mode: equal to the last bit
    f = np.geomspace(20, 200, 23)
    beta = 1.0 / impedance_table(impedance_from_absorption(np.full(6, 0.2)), f.size)
    k = 2 * np.pi * f / C
    pf = psi[:3]
    outs = []
    for par in (False, True):
        lo, hi = np.empty((n_lo, 2 * 3 * f.size)), np.empty((n - n_lo, 2 * 3 * f.size))
        args = (table.kn2, table.scale, table.static_weight, table.walls, beta, k, pf, lo, hi)
        kern.fold_into_parallel(*args, 2) if par else kern.fold_into(*args)
        outs.append(np.vstack([lo, hi]))
    np.testing.assert_array_equal(outs[0], outs[1])
    # the static pairs, dealt out over threads: equal to the last bit (same SIMD loop per pair);
    # the kernel's cosine tables cover every index of modal's term tables
    assert kern.COS_TABLE == modal._STATIC_TABLE_INDEX + 1
    s, r = _points(130, 13), _points(130, 14)
    tables = modal._static_tables(tuple(SIZE.tolist()))
    a, b = np.empty(130), np.empty(130)
    kern.static_green_pairs_tabled(SIZE, s, r, modal._STATIC_DECAY, *tables, a)
    kern.static_green_pairs_tabled_parallel(SIZE, s, r, modal._STATIC_DECAY, *tables, b, 3)
    np.testing.assert_array_equal(a, b)


def test_branch_free_exponential_is_within_two_ulp_of_the_c_library():
    from roommodes.solvers._modal_kernels import exp_neg_into

    x = -np.concatenate([np.geomspace(1e-12, 700.0, 20001), [0.0, np.log(2) / 2, 0.5, 1.0, 18.0, 40.0]])
    out = np.empty_like(x)
    exp_neg_into(x, out)
    ref = np.exp(x)
    # Cody-Waite reduction and a degree-12 polynomial: a couple of ulp (IEEE float64)
    assert np.max(np.abs(out - ref) / np.spacing(ref)) <= 2.0
    big = np.array([-745.0, -1e4])
    exp_neg_into(big, out[:2])
    assert np.all(out[:2] > 0) and np.all(out[:2] < 1e-300)  # clamped at e^-700, not 0


def test_single_precision_bound_holds_with_receivers_as_rows_and_small_blocks(monkeypatch):
    # more receivers than sources: the receivers are the product's rows, the result is
    # written through a transposed view; a small budget cuts rows and folded points into blocks
    zeta = impedance_from_absorption(np.full(6, 0.3))
    f = np.geomspace(15, 300, 90)
    src, rec = _points(3, 15), _points(120, 16)
    hd = modal_transfer(SIZE, zeta, src, rec, f, C, precision="double")
    monkeypatch.setattr(modal, "BLOCK_BYTES", 3_000_000)
    hs = modal_transfer(SIZE, zeta, src, rec, f, C, precision="single")
    # the bound modal_transfer states for single precision
    assert np.max(np.abs(20 * np.log10(np.abs(hs) / np.abs(hd)))) <= 5e-4
    assert np.any(hs != hd)


@pytest.mark.parametrize("preset,expected", [(None, "22"), ("10", "10")])
def test_import_quietens_idle_blas_workers_unless_the_environment_says(preset, expected):
    # `import roommodes` before numpy sets OPENBLAS_THREAD_TIMEOUT (roommodes.solvers.threads,
    # measured there) and leaves a value the user set alone; a fresh interpreter, since this one
    # loaded numpy long ago
    import os
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_THREAD_TIMEOUT"}
    if preset is not None:
        env["OPENBLAS_THREAD_TIMEOUT"] = preset
    code = "import os, roommodes, numpy; print(os.environ['OPENBLAS_THREAD_TIMEOUT'])"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == expected
