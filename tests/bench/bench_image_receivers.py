"""The image solver's 100-receiver call against its one-receiver call, alone.

bench.py times these two calls among the other solvers' cases, whose threads and caches
perturb a call of a few milliseconds (one receiver measured 5.5-9.5 ms there between runs).
Here only the two calls alternate (the demo room, alpha 0.3, 30-150 Hz: bench.py's image
case), and the ratios are medians of per-round ratios. Asserts nothing; the reference is the
one-receiver call of the same round.

Run: ``python tests/bench/bench_image_receivers.py [--rounds 10]``.
"""

from __future__ import annotations

import argparse
import os
import time

# what `import roommodes` sets before numpy loads, as the command line gets it
# (roommodes.solvers.threads)
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "22")

import numpy as np  # noqa: E402

import roommodes  # noqa: E402
from roommodes.model.walls import impedance_from_absorption  # noqa: E402
from roommodes.solvers.images import image_source_transfer  # noqa: E402


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=10)
    args = ap.parse_args(argv)
    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = np.asarray(room.size_m), room.speed_of_sound
    src = np.array([[0.5, 0.62, 1.15]])
    zeta = impedance_from_absorption(np.full(6, 0.3))
    f = roommodes.log_frequencies(30, 150, 12)
    rec = 0.3 + np.random.default_rng(3).random((100, 3)) * (size - 0.6)
    wall = {1: [], 100: []}
    cpu = {1: [], 100: []}
    load0 = os.getloadavg()[0]
    for r in range(args.rounds + 1):  # round 0 warms up (compiles or loads the kernels)
        for n in (1, 100):
            t, c0 = time.perf_counter(), time.process_time()
            image_source_transfer(size, zeta, src, rec[:n], f, c)
            if r:
                wall[n].append(time.perf_counter() - t)
                cpu[n].append(time.process_time() - c0)
    w1, w100, c1, c100 = (np.array(v) for v in (wall[1], wall[100], cpu[1], cpu[100]))
    print(f"image solver, demo room, alpha 0.3, 30-150 Hz; {args.rounds} rounds, {os.cpu_count()} CPUs")
    print(f"  1 receiver:    {np.median(w1) * 1e3:7.2f} ms wall, {np.median(c1) * 1e3:7.2f} ms CPU")
    print(f"  100 receivers: {np.median(w100) * 1e3:7.1f} ms wall, {np.median(c100) * 1e3:7.1f} ms CPU")
    print(f"  100 / 1: {np.median(w100 / w1):.1f} in wall time (goal <= 20), {np.median(c100 / c1):.1f} in CPU time; "
          f"per round: {' '.join(f'{v:.0f}' for v in w100 / w1)}")
    print(f"(load average {load0:.1f} at the start, {os.getloadavg()[0]:.1f} at the end)")


if __name__ == "__main__":
    main()
