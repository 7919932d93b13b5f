"""Benchmark of the exact solver (old and current) against the modal solver, and of the
image-source solver (old and current). Prints figures; asserts nothing.

    python tests/bench/bench_exact.py [--rounds 7] [--skip-large] [--skip-image]

Cases, all on the demo room (rooms/demo-studio.toml, its own wall impedances):

- a single prediction: 1 source x 1 receiver, 15-300 Hz at 48 points per octave (209);
- a floor map: 1 source x 2,000 receivers on a 50 x 40 grid at ear height, at one
  frequency and at three;
- a search batch: 2,000 sources x 1 receiver x 200 frequencies (15-300 Hz).

Solvers: the modal sum; the exact solver as it was before the speed work
(tests/bench/baseline/exact.py, "old"); the current exact solver with its tables cleared
before the call ("cold": what a first call costs) and with them kept ("warm": what a repeated
call on the same room and frequencies costs, e.g. ``eq``'s neighbour positions or ``report``).

Image-source solver, alpha 0.3 on every wall of the demo room's box, 30-150 Hz: 1 receiver
and 100 receivers, old (tests/bench/baseline/images.py) and current; wall time and CPU time
(all threads), and the CPU time per image and pair.

Each round times every solver on every case once, in turn (interleaved), so that load drift
hits all alike; figures are medians over rounds, ratios are medians of per-round ratios. A
warm-up round is run first and not counted (the 2,000-source case gets two counted rounds).
The machine's load average is printed at the start and the end.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from baseline import exact as old_exact  # noqa: E402
from baseline import images as old_images  # noqa: E402

import roommodes  # noqa: E402
from roommodes.solvers import exact as new_exact  # noqa: E402
from roommodes.solvers.modal import modal_transfer  # noqa: E402


def cases(room):
    size = np.asarray(room.size_m)
    src = np.array([[0.5, 0.62, 1.15]])
    rec = np.array([[1.85, 1.45, 1.2]])
    f_pred = roommodes.log_frequencies(15, 300, 48)
    gx, gy = np.meshgrid(np.linspace(0.1, size[0] - 0.1, 50), np.linspace(0.1, size[1] - 0.1, 40), indexing="ij")
    grid = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, 1.2)])
    rng = np.random.default_rng(7)
    many = 0.1 + rng.random((2000, 3)) * (size - 0.2)
    f200 = np.geomspace(15, 300, 200)
    return [
        ("single prediction 1x1x209", src, rec, f_pred),
        ("floor map 1x2000x1 (50 Hz)", src, grid, np.array([50.0])),
        ("floor map 1x2000x3", src, grid, np.array([40.0, 63.0, 100.0])),
        ("sources 2000x1x200", many, rec, f200),
    ]


def _cold(*args):
    new_exact.clear_caches()
    return new_exact.exact_transfer(*args)


SOLVERS = {
    "modal": modal_transfer,
    "old": old_exact.exact_transfer,
    "cold": _cold,
    "warm": new_exact.exact_transfer,
}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--skip-large", action="store_true", help="leave out the 2,000-source case")
    ap.add_argument("--skip-image", action="store_true", help="leave out the image-source receivers case")
    args = ap.parse_args(argv)
    print(f"load average at start: {os.getloadavg()}, {os.cpu_count()} CPUs")
    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = room.size_m, room.speed_of_sound
    todo = [cs for cs in cases(room) if not (args.skip_large and cs[0].startswith("sources"))]
    zetas = [room.impedance(cs[3]) for cs in todo]
    times = {(i, n): [] for i in range(len(todo)) for n in SOLVERS}
    diff = {}
    for rnd in range(args.rounds + 1):
        for i, (name, s, r, f) in enumerate(todo):
            if name.startswith("sources") and rnd > 2:  # the slow case: two counted rounds
                continue
            res = {}
            for n, fn in SOLVERS.items():
                t0 = time.perf_counter()
                res[n] = fn(size, zetas[i], s, r, f, c)
                if rnd > 0:
                    times[(i, n)].append(time.perf_counter() - t0)
            if rnd == 0:
                d_mod = np.abs(20 * np.log10(np.abs(res["warm"] / res["modal"])))
                d_old = np.abs(20 * np.log10(np.abs(res["warm"] / res["old"])))
                diff[i] = (np.median(d_mod), np.percentile(d_mod, 90), float(np.max(d_old)))
    print(f"demo room {size} m, c = {c:.1f} m/s; medians over rounds (first round not counted)")
    print(f"{'case':28s} {'modal':>8s} {'old':>8s} {'cold':>8s} {'warm':>8s}  (ms)  cold/old warm/old "
          f"cold/modal warm/modal  |new-old| max dB  |exact-modal| med/p90 dB")
    t = {k: np.array(v) for k, v in times.items()}

    def ratio(i, a, b):
        return float(np.median(t[(i, a)] / t[(i, b)]))

    for i, (name, *_rest) in enumerate(todo):
        ms = [np.median(t[(i, n)]) * 1e3 for n in SOLVERS]
        print(f"{name:28s} " + " ".join(f"{m:8.1f}" for m in ms)
              + f"        {ratio(i, 'cold', 'old'):8.3f} {ratio(i, 'warm', 'old'):8.3f}"
              f" {ratio(i, 'cold', 'modal'):10.2f} {ratio(i, 'warm', 'modal'):10.2f}"
              f"  {diff[i][2]:14.1e}  {diff[i][0]:.3f} / {diff[i][1]:.3f}")
    print("\ntargets (issue 14):")
    i_pred = 0
    i_map = [i for i, cs in enumerate(todo) if cs[0] == "floor map 1x2000x3"][0]
    rows = [
        ("one prediction, exact, ms (cold call)", "<= 3", np.median(t[(i_pred, "old")]) * 1e3,
         np.median(t[(i_pred, "cold")]) * 1e3, ratio(i_pred, "cold", "old")),
        ("one prediction, exact, ms (repeat call)", "<= 3", np.median(t[(i_pred, "old")]) * 1e3,
         np.median(t[(i_pred, "warm")]) * 1e3, ratio(i_pred, "warm", "old")),
        ("floor map 1x2000x3, exact / modal (cold)", "<= 3", ratio(i_map, "old", "modal"),
         ratio(i_map, "cold", "modal"), ratio(i_map, "cold", "old")),
    ]
    if not args.skip_large:
        i_src = len(todo) - 1
        rows.append(("sources 2000x1x200, exact / modal (cold)", "", ratio(i_src, "old", "modal"),
                     ratio(i_src, "cold", "modal"), ratio(i_src, "cold", "old")))
    print(f"  {'target':44s} {'goal':>6s} {'before':>9s} {'after':>9s} {'after/before':>13s}")
    for name, goal, before, after, r in rows:
        print(f"  {name:44s} {goal:>6s} {before:9.3g} {after:9.3g} {r:13.3f}")
    if not args.skip_image:
        image_receivers(size, c, rounds=max(2, args.rounds // 2))
    print(f"load average at end: {os.getloadavg()}")


def image_receivers(size, c, rounds=3):
    """Image-source time for 1 receiver and for 100, old and current, interleaved rounds."""
    from roommodes.model.walls import impedance_from_absorption
    from roommodes.solvers.images import image_source_transfer

    zeta = impedance_from_absorption(np.full(6, 0.3))
    f = roommodes.log_frequencies(30, 150, 12)
    src = np.array([[0.5, 0.62, 1.15]])
    rng = np.random.default_rng(3)
    rec = 0.3 + rng.random((100, 3)) * (np.asarray(size) - 0.6)
    runs = {
        "old1": lambda: old_images.image_source_transfer(size, zeta, src, rec[:1], f, c),
        "new1": lambda: image_source_transfer(size, zeta, src, rec[:1], f, c),
        "old100": lambda: old_images.image_source_transfer(size, zeta, src, rec, f, c),
        "new100": lambda: image_source_transfer(size, zeta, src, rec, f, c),
    }
    out = {k: fn() for k, fn in runs.items()}  # compile / load the kernels, keep results
    wall = {k: [] for k in runs}
    cpu = {k: [] for k in runs}
    for _ in range(rounds):
        for k, fn in runs.items():
            t0, c0 = time.perf_counter(), time.process_time()
            fn()
            wall[k].append(time.perf_counter() - t0)
            cpu[k].append(time.process_time() - c0)
    w = {k: np.array(v) for k, v in wall.items()}
    u = {k: np.array(v) for k, v in cpu.items()}
    images = out["new100"][1]["images"]
    assert images == out["old100"][1]["images"]
    dmax = max(float(np.max(np.abs(out[f"new{n}"][0] / out[f"old{n}"][0] - 1))) for n in (1, 100))
    print(f"\nimage sources, alpha 0.3, 30-150 Hz, {images:,} images over 100 pairs "
          f"(orders {out['new100'][1]['orders'].min()}-{out['new100'][1]['order']}); "
          f"max |new / old - 1| = {dmax:.1e}")
    print(f"  {'':34s} {'old':>9s} {'new':>9s} {'new/old':>8s}")
    for n in ("1", "100"):
        print(f"  {n + ' receiver(s), wall ms':34s} {np.median(w['old' + n]) * 1e3:9.1f} "
              f"{np.median(w['new' + n]) * 1e3:9.1f} {np.median(w['new' + n] / w['old' + n]):8.3f}")
        print(f"  {n + ' receiver(s), CPU ms (all threads)':34s} {np.median(u['old' + n]) * 1e3:9.1f} "
              f"{np.median(u['new' + n]) * 1e3:9.1f} {np.median(u['new' + n] / u['old' + n]):8.3f}")
    r_old = float(np.median(w["old100"] / w["old1"]))
    r_new = float(np.median(w["new100"] / w["new1"]))
    print(f"  target: 100 receivers / 1 receiver (wall) <= 20: old {r_old:.1f}, new {r_new:.1f} "
          f"(after/before {r_new / r_old:.3f}); CPU-time ratio old "
          f"{np.median(u['old100'] / u['old1']):.1f}, new {np.median(u['new100'] / u['new1']):.1f}")
    print(f"  per image and pair (100 receivers): wall {np.median(w['old100']) / images * 1e9:.1f} -> "
          f"{np.median(w['new100']) / images * 1e9:.1f} ns, CPU {np.median(u['old100']) / images * 1e9:.1f} -> "
          f"{np.median(u['new100']) / images * 1e9:.1f} ns")


if __name__ == "__main__":
    main()
