"""Benchmark of the placement search's scoring steps on the demo room. Prints figures; asserts nothing.

No check values (nothing is compared with an outside source); see
tests/analysis/test_search_scoring.py for the equality of the two paths.

    python tests/bench/bench_scoring.py [--rounds 3] [--method modal|exact|both]

The whole search with the scoring steps as they were (tests/bench/baseline/scoring.py:
``_Scorer.features``, the EQ proxy, ``_distinct``, ``_choose_step``) and as they are now, the products being
today's in both; interleaved rounds after one warm-up round, medians over rounds and the
median of the per-round ratio. The best layout and score of both are printed: they must
agree.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import time
from unittest import mock

import numpy as np
from baseline import scoring as old  # tests/bench/baseline (this script's folder is on sys.path)

import roommodes
from roommodes.analysis import search


def _run(room, method, before):
    with contextlib.ExitStack() as stack:
        if before:
            stack.enter_context(mock.patch.object(search._Scorer, "features", old.features))
            stack.enter_context(mock.patch.object(search, "_distinct", old.distinct))
            stack.enter_context(mock.patch.object(search, "_choose_step", old.choose_step))
        t0 = time.perf_counter()
        res = search.search_layouts(room, method=method)
        return time.perf_counter() - t0, res


def _same(a, b):
    """The same layouts in the same order with the same scores (the parts may differ by
    round-off: a mismatch of 0 comes out as 1e-15 dB or so)."""
    return len(a.ranked) == len(b.ranked) and all(
        x.layout == y.layout and x.score == y.score for x, y in zip(a.ranked, b.ranked))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--method", choices=("modal", "exact", "both"), default="both")
    args = ap.parse_args(argv)
    room = roommodes.load_room(roommodes.demo_room_path())
    print(f"roommodes {roommodes.__version__} search scoring benchmark, demo room, {os.cpu_count()} CPUs, "
          f"load average {os.getloadavg()[0]:.1f} at start")
    print(f"{'search':28s} {'before':>10s} {'after':>10s} {'after/before speed':>19s}  best score before / after (dB)")
    methods = ("exact", "modal") if args.method == "both" else (args.method,)
    for method in methods:
        t = {True: [], False: []}
        res = {}
        for rnd in range(args.rounds + 1):
            for before in ((True, False) if rnd % 2 == 0 else (False, True)):
                dt, r = _run(room, method, before)
                res[before] = r
                if rnd:
                    t[before].append(dt)
        n_b, n_a = res[True].n_layout_evaluations, res[False].n_layout_evaluations
        ratios = np.array(t[True]) / n_b / (np.array(t[False]) / n_a)
        speed = float(np.median(ratios))
        label = "as place runs it" if method == "exact" else "modal scan only"
        print(f"{label + ', layouts/s':28s} {n_b / np.median(t[True]):10.0f} {n_a / np.median(t[False]):10.0f} "
              f"{speed:19.3f}  {res[True].ranked[0].score:.6f} / {res[False].ranked[0].score:.6f}")
        print(f"  {n_a} layouts; per-round speed ratios {' '.join(f'{r:.3f}' for r in ratios)}; "
              f"same ranking: {_same(res[True], res[False])}")
    print(f"load average {os.getloadavg()[0]:.1f} at end")


if __name__ == "__main__":
    main()
