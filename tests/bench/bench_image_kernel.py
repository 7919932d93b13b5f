"""Where the per-image cost of the image solver's spreading kernel goes (one thread).

The images of the demo room's source up to one order (alpha 0.3 case of bench.py) are listed
once; each case then spreads all of them for 10 receivers on the calling thread. Cases, in
interleaved rounds (medians of per-round ratios against the kernel as the solver calls it):

- ``kernel``: :func:`roommodes.solvers._kernels.spread_images` with the solver's tap table;
- ``table off a cache line``: the same kernel with a copy of the table 16 bytes off a cache
  line (where NumPy may put it), so every vector load of coefficients spans two lines;
- ``taps from one bin``: the same loop with every image's coefficients from one bin (a table
  that stays in L1; wrong taps, a bound on what any table layout could gain);
- ``distances only``: distance, ``1 / R`` and the sample index, and one add per image (no taps:
  a bound on what any tap evaluation could gain).

Run: ``python tests/bench/bench_image_kernel.py [--order 53] [--rounds 7]``.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np
from numba import njit

import roommodes
from roommodes.solvers import images as im
from roommodes.solvers._kernels import DELAY_BINS, TAP_POWERS, TAPS, _delay_of, lattice_images, spread_images


@njit(cache=True, fastmath={"contract"})
def _one_bin(pos, amp, rx, ry, rz, samples_per_m, coef, offset, out):
    flat = out.reshape(out.size)
    c = coef[:TAPS * TAP_POWERS]
    k_min = 1 - TAPS // 2
    for i in range(pos.shape[0]):
        r, i0, _, e = _delay_of(pos, i, rx, ry, rz, samples_per_m, DELAY_BINS)
        s = amp[i, 0] / r
        o = flat[offset + i0 + k_min:offset + i0 + k_min + TAPS]
        for j in range(TAPS):
            o[j] += s * (c[j] + e * (c[TAPS + j] + e * (c[2 * TAPS + j] + e * (
                c[3 * TAPS + j] + e * (c[4 * TAPS + j] + e * c[5 * TAPS + j])))))
    return 0


@njit(cache=True, fastmath={"contract"})
def _distances_only(pos, amp, rx, ry, rz, samples_per_m, coef, offset, out):
    flat = out.reshape(out.size)
    for i in range(pos.shape[0]):
        dx = pos[i, 0] - rx
        dy = pos[i, 1] - ry
        dz = pos[i, 2] - rz
        r = np.sqrt(dx * dx + dy * dy + dz * dz)
        flat[offset + int(r * samples_per_m)] += amp[i, 0] / r
    return 0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--order", type=int, default=53)
    ap.add_argument("--rounds", type=int, default=7)
    args = ap.parse_args(argv)

    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = np.asarray(room.size_m), room.speed_of_sound
    src = np.array([0.5, 0.62, 1.15])
    rec = 0.3 + np.random.default_rng(3).random((10, 3)) * (size - 0.6)
    order = args.order
    axis_pos = im._lattice_tables(size, src, np.zeros(3), order)[0]
    m = im.image_count(order)
    pos, amp = np.empty((m, 3)), np.empty((m, 1))
    lattice_images(axis_pos, np.full((3, order + 1, 2, 1), np.sqrt(0.7)), 0, order, pos, amp)
    samples_per_m = 8.0 * 150.0 / c  # fs = 8 f_max, f_max = 150 Hz (bench.py's image case)
    coef = im._tap_tables(im._gaussian())
    buf = np.empty(coef.size + 8)
    start = ((16 - buf.ctypes.data) % 64) // 8
    off_line = buf[start:start + coef.size]
    off_line[:] = coef
    n_samples = 16 + int((order + 3) * size.max() * samples_per_m) + 40
    out = np.zeros((n_samples, 1))
    cases = {
        "kernel": lambda r: spread_images(pos, amp, *r, samples_per_m, coef, 16, out),
        "table off a cache line": lambda r: spread_images(pos, amp, *r, samples_per_m, off_line, 16, out),
        "taps from one bin": lambda r: _one_bin(pos, amp, *r, samples_per_m, coef, 16, out),
        "distances only": lambda r: _distances_only(pos, amp, *r, samples_per_m, coef, 16, out),
    }
    for fn in cases.values():  # compile / load
        fn(rec[0])
    times = {k: [] for k in cases}
    load0 = os.getloadavg()[0]
    for _ in range(args.rounds):
        for key, fn in cases.items():
            t = time.perf_counter()
            for r in rec:
                fn(r)
            times[key].append((time.perf_counter() - t) / (len(rec) * m))
    t = {k: np.array(v) for k, v in times.items()}
    print(f"{m:,} images (order {order}) x {len(rec)} receivers, one thread, {args.rounds} interleaved rounds; "
          f"table {coef.ctypes.data % 64} and {off_line.ctypes.data % 64} bytes past a cache line")
    print(f"{'case':28s} {'ns per image and pair':>22s} {'/ kernel':>9s}")
    for key in cases:
        print(f"{key:28s} {np.median(t[key]) * 1e9:22.2f} {np.median(t[key] / t['kernel']):9.3f}")
    print(f"(load average {load0:.1f} at the start, {os.getloadavg()[0]:.1f} at the end)")


if __name__ == "__main__":
    main()
