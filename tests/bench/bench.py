"""Benchmark of the solvers on the demo room. Prints figures; asserts nothing.

    python tests/bench/bench.py

Reports, for the demo room:
- time per transfer function (1 source x 1 receiver, 15-300 Hz at 48 points per octave)
  for the modal and the image-source solver (first call, with any compilation, separately);
- throughput of the modal solver for 2,000 sources x 1 receiver;
- the machine's own matrix-multiply rate measured in the same run, so the modal figure can
  be read as a fraction of it.
"""

from __future__ import annotations

import time

import numpy as np

import roommodes
from roommodes.model.modes import mode_shapes
from roommodes.solvers.modal import modal_sum_block, modal_weights


def best_of(fn, repeat=5):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def matmul_gflops(n=1500, m=1500, k=1500):
    """Real double-precision GEMM rate of this machine's BLAS, GFLOP/s."""
    a = np.random.default_rng(0).standard_normal((n, k))
    b = np.random.default_rng(1).standard_normal((k, m))
    t = best_of(lambda: a @ b, 3)
    return 2 * n * m * k / t / 1e9


def main():
    room = roommodes.load_room(roommodes.demo_room_path())
    f = roommodes.log_frequencies(15, 300, 48)
    src = np.array([[0.5, 0.62, 1.15]])
    rec = np.array([[1.85, 1.45, 1.2]])
    print(f"roommodes {roommodes.__version__} benchmark, demo room {room.size_m} m, {f.size} frequencies")

    gflops = matmul_gflops()
    print(f"machine matrix multiply (float64 GEMM 1500^3): {gflops:.1f} GFLOP/s")

    for method in ("modal", "image"):
        t0 = time.perf_counter()
        roommodes.transfer_function(room, src, rec, f, method=method)
        first = time.perf_counter() - t0
        t = best_of(lambda m=method: roommodes.transfer_function(room, src, rec, f, method=m), 3)
        print(f"{method:>5} solver, 1 x 1 transfer: {t * 1e3:8.1f} ms (first call {first * 1e3:.0f} ms)")

    rng = np.random.default_rng(2)
    many = rng.uniform(0.1, 0.9, (2000, 3)) * np.asarray(room.size_m)
    t = best_of(lambda: roommodes.transfer_function(room, many, rec, f, method="modal"), 2)
    idx, weight, _ = modal_weights(room.size_m, room.impedance(f), f, room.speed_of_sound)
    psi_s, psi_r = mode_shapes(idx, room.size_m, many), mode_shapes(idx, room.size_m, rec)
    t_core = best_of(lambda: modal_sum_block(psi_s, psi_r, weight), 3)
    # the core product: (2000 x N modes) real times (N x 2F) real
    flops = 2 * many.shape[0] * len(idx) * 2 * f.size
    print(f"modal solver, 2000 sources x 1 receiver: {t:.3f} s for the whole call, {2000 / t:,.0f} transfers/s "
          f"({len(idx)} modes, static tail included)")
    print(f"  its core matrix product alone: {t_core * 1e3:.1f} ms, {flops / t_core / 1e9:.1f} GFLOP/s "
          f"= {flops / t_core / 1e9 / gflops:.0%} of the machine's GEMM rate measured above")

    t_pred = best_of(lambda: roommodes.analysis.predict(room), 3)
    print(f"predict (both channels, demo layout): {t_pred * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
