"""Benchmark of the placement search on the demo room. Prints figures; asserts nothing.

No check values (nothing is compared with an outside source); see tests/test_search.py.

    python tests/bench/bench_search.py

Reports, measured in the same run:
- the machine's matrix-multiply rates (float64 and complex128 GEMM), GFLOP/s;
- the whole search (coarse pass, robustness, refinement, presets): time, layouts scored,
  and the throughput counting every frequency and every listening-area point;
- the core kernel (the coarse pass's modal sum, one real GEMM per seat position) in
  GFLOP/s and as a fraction of the machine's float64 GEMM rate;
- batched scoring against scoring the same layouts one by one through
  ``roommodes.transfer_function`` (same figure of merit), and the speed-up.
"""

from __future__ import annotations

import os
import time

import numpy as np
from bench import best_of, matmul_gflops  # tests/bench/bench.py (this script's folder is on sys.path)

import roommodes
from roommodes.analysis.search import (
    _choose_step,
    _Scorer,
    area_offsets,
    check_weights,
    score_parts,
    search_layouts,
    search_space,
)
from roommodes.model.speaker import speaker_response
from roommodes.solvers.modal import modal_sum_block


def gemm_rates(n=1500):
    """float64 GEMM rate (bench.py's measurement) and complex128 GEMM rate, GFLOP/s."""
    m = n * 2 // 3
    rng = np.random.default_rng(0)
    ca = rng.standard_normal((m, m)) + 1j * rng.standard_normal((m, m))
    cb = rng.standard_normal((m, m)) + 1j * rng.standard_normal((m, m))
    return matmul_gflops(n, n, n), 8 * m**3 / best_of(lambda: ca @ cb, 3) / 1e9


def main():
    room = roommodes.load_room(roommodes.demo_room_path())
    print(f"roommodes {roommodes.__version__} placement-search benchmark, demo room {room.size_m} m, "
          f"{os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f}")
    real, cplx = gemm_rates()
    print(f"machine matrix multiply: float64 {real:.1f} GFLOP/s, complex128 {cplx:.1f} GFLOP/s (1500^3 / 1000^3)")

    # -- the whole search
    search_layouts(room)  # warm-up (imports, caches)
    t0 = time.perf_counter()
    res = search_layouts(room)
    t_search = time.perf_counter() - t0
    space = search_space(room)
    n_area = int(np.prod(space.area_points))
    values = res.n_layout_evaluations * 2 * n_area * res.n_frequencies
    print(f"search: {t_search:.2f} s; coarse step {res.step_m * 100:g} cm, {res.n_candidates} candidates, "
          f"{res.n_layout_evaluations} layouts scored in all (perturbed copies included)")
    print(f"  {res.n_layout_evaluations / t_search:,.0f} layouts/s; each is 2 channels x {n_area} listening points x "
          f"{res.n_frequencies} frequencies: {values / t_search / 1e6:.1f} million channel-point-frequency "
          f"values/s; best score {res.ranked[0].score:.2f} dB vs best preset "
          f"{min(s.score for s in res.presets):.2f} dB")

    # -- the core kernel: the coarse pass's modal sums, timed alone
    sc = _Scorer(room, room.layout.speakers, res.band_hz, check_weights(None), space.area_m, space.area_points, 24)
    _, plan = _choose_step(room, space, sc.flop_per_pair * n_area)
    blocks = []
    for seat, left, right, mask in plan:
        rec = seat + sc.offsets
        src = left if mask is None else np.concatenate([left, right])
        blocks.append((sc.shapes(src), sc.shapes(rec)))
    flop = sum(4 * ps.shape[0] * pr.shape[0] * sc.weight.size for ps, pr in blocks)

    def kernel():
        for ps, pr in blocks:
            modal_sum_block(ps, pr, sc.weight)

    # plain GEMMs of the kernel's own shapes: what the machine does with the same products
    rng = np.random.default_rng(3)
    plain = [(rng.standard_normal(ps.shape), rng.standard_normal((ps.shape[1], 2 * pr.shape[0] * sc.freq_hz.size)))
             for ps, pr in blocks]
    t_kernel = best_of(kernel, 5)
    t_plain = best_of(lambda: [a @ b for a, b in plain], 5)
    real = max(real, matmul_gflops())  # the machine is shared: take its best measured rate
    rate = flop / t_kernel / 1e9
    print(f"core kernel (modal sum of the coarse pass, {len(blocks)} GEMMs, {sc.idx.shape[0]} modes x "
          f"{sc.freq_hz.size} frequencies): {t_kernel:.2f} s, {rate:.1f} GFLOP/s = {rate / real:.0%} of the "
          f"machine's float64 GEMM rate ({real:.1f} GFLOP/s, best of two measurements); "
          f"{t_plain / t_kernel:.0%} of plain GEMMs of the same shapes ({flop / t_plain / 1e9:.1f} GFLOP/s)")

    # -- batched against one by one through transfer_function (robustness off: same work)
    rng = np.random.default_rng(7)
    seat, left, right, mask = plan[len(plan) // 2]
    pick = rng.choice(left.shape[0], size=min(60, left.shape[0]), replace=False)
    vecs = np.concatenate([left[pick], right[pick], np.repeat(seat[None], pick.size, 0)], axis=1)
    t_batch = best_of(lambda: sc.score_vecs(vecs, robustness=False), 3)
    offsets = area_offsets(space.area_m, space.area_points)
    spk = room.layout.speakers

    def one_by_one():
        out = []
        for v in vecs:
            h = roommodes.transfer_function(room, v[:6].reshape(2, 3), v[6:9] + offsets, sc.freq_hz)
            lv = [20 * np.log10(np.abs(h[c] * speaker_response(spk[c], sc.freq_hz))) for c in range(2)]
            out.append(score_parts(sc.freq_hz, lv[0], lv[1], res.band_hz))
        return out

    t_single = best_of(one_by_one, repeat=1)
    per_batch, per_single = t_batch / vecs.shape[0], t_single / vecs.shape[0]
    coarse_rate = res.n_candidates / max(t_kernel, 1e-9)
    print(f"scoring {vecs.shape[0]} layouts: batched {per_batch * 1e3:.2f} ms/layout, one by one through "
          f"transfer_function {per_single * 1e3:.1f} ms/layout: {per_single / per_batch:.0f}x faster")
    print(f"  coarse pass (grouped by seat, mirror symmetry used): about {coarse_rate:,.0f} layouts/s from its "
          f"kernel time, {per_single * coarse_rate:.0f}x the one-by-one rate")


if __name__ == "__main__":
    main()
