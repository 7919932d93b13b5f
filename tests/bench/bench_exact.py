"""Benchmark of the exact solver against the modal solver. Prints figures; asserts nothing.

    python tests/bench/bench_exact.py [--rounds 7]

Cases, all on the demo room (rooms/demo-studio.toml, its own wall impedances):

- a single prediction: 1 source x 1 receiver, 15-300 Hz at 48 points per octave (209);
- a floor map: 1 source x 2,000 receivers on a 50 x 40 grid at ear height, at one
  frequency and at three;
- a search batch: 2,000 sources x 1 receiver x 200 frequencies (15-300 Hz).

- the image-source solver per receiver: 1 receiver against 100 receivers (alpha 0.3 on
  every wall of the demo room's box, 30-150 Hz), time per receiver and the ratio
  (a sum that reused its lattice across receivers would make 100 far cheaper than 100 x 1).

Each round times every solver on every case once, in turn (interleaved), so that
machine-load drift hits both alike; the figure is the median over rounds. A warm-up round
is run first and not counted (the 2,000-source case gets two counted rounds).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import roommodes
from roommodes.solvers.exact import exact_transfer
from roommodes.solvers.modal import modal_transfer


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


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--skip-large", action="store_true", help="leave out the 2,000-source case")
    ap.add_argument("--skip-image", action="store_true", help="leave out the image-source receivers case")
    args = ap.parse_args(argv)
    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = room.size_m, room.speed_of_sound
    todo = [cs for cs in cases(room) if not (args.skip_large and cs[0].startswith("sources"))]
    solvers = {"modal": modal_transfer, "exact": exact_transfer}
    zetas = [room.impedance(cs[3]) for cs in todo]
    times = {(i, n): [] for i in range(len(todo)) for n in solvers}
    diff = {}
    for rnd in range(args.rounds + 1):
        for i, (name, s, r, f) in enumerate(todo):
            if name.startswith("sources") and rnd > 2:  # the slow case: two counted rounds
                continue
            res = {}
            for n, fn in solvers.items():
                t0 = time.perf_counter()
                res[n] = fn(size, zetas[i], s, r, f, c)
                if rnd > 0:
                    times[(i, n)].append(time.perf_counter() - t0)
            if rnd == 0:
                d = 20 * np.log10(np.abs(res["exact"] / res["modal"]))
                diff[i] = (np.median(np.abs(d)), np.percentile(np.abs(d), 90))
    print(f"demo room {size} m, c = {c:.1f} m/s; medians over rounds (first round not counted)")
    print(f"{'case':30s} {'modal ms':>10s} {'exact ms':>10s} {'ratio':>7s}   |exact - modal| median / p90 dB")
    for i, (name, *_rest) in enumerate(todo):
        tm = np.median(times[(i, "modal")]) * 1e3
        te = np.median(times[(i, "exact")]) * 1e3
        print(f"{name:30s} {tm:10.1f} {te:10.1f} {te / tm:7.2f}   {diff[i][0]:.3f} / {diff[i][1]:.3f}")
    if not args.skip_image:
        image_receivers(size, c, rounds=max(2, args.rounds // 3))


def image_receivers(size, c, rounds=3):
    """Image-source time for 1 receiver and for 100, interleaved rounds, medians."""
    from roommodes.model.walls import impedance_from_absorption
    from roommodes.solvers.images import image_source_transfer

    zeta = impedance_from_absorption(np.full(6, 0.3))
    f = roommodes.log_frequencies(30, 150, 12)
    src = np.array([[0.5, 0.62, 1.15]])
    rng = np.random.default_rng(3)
    rec = 0.3 + rng.random((100, 3)) * (np.asarray(size) - 0.6)
    image_source_transfer(size, zeta, src, rec[:1], f, c)  # compile / load the kernel
    t1, t100 = [], []
    for _ in range(rounds):
        t0 = time.perf_counter()
        image_source_transfer(size, zeta, src, rec[:1], f, c)
        t1.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        image_source_transfer(size, zeta, src, rec, f, c)
        t100.append(time.perf_counter() - t0)
    a, b = np.median(t1), np.median(t100)
    print(f"image sources, alpha 0.3, 30-150 Hz: 1 receiver {a * 1e3:.0f} ms; 100 receivers {b:.2f} s "
          f"({b / 100 * 1e3:.0f} ms per receiver); 100 / 1 = {b / a:.0f}")


if __name__ == "__main__":
    main()
