"""Benchmark of the placement search on the demo room. Prints figures; asserts nothing.

No check values (nothing is compared with an outside source); see tests/analysis/test_search.py.

    python tests/bench/bench_search.py [--rounds 3]

The search before the modal-kernel work (the scorer's product paths of
tests/bench/baseline/scorer.py on the old modal module, the BLAS's own thread count) and
now, in interleaved rounds, medians: layouts scored per second as ``place`` runs it (the
finalists re-scored by the default exact solver) and for the modal scan alone. The same
rows are part of tests/bench/bench.py.
"""

from __future__ import annotations

import argparse
import os

from bench import search_rows  # tests/bench/bench.py (this script's folder is on sys.path)

import roommodes


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args(argv)
    room = roommodes.load_room(roommodes.demo_room_path())
    print(f"roommodes {roommodes.__version__} placement-search benchmark, demo room {room.size_m} m, "
          f"{os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f}")
    search_rows(room, args.rounds)


if __name__ == "__main__":
    main()
