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


def step_rows(room, rounds=41):
    """The changed steps alone on a coarse-pass block of the demo room: both channels'
    features of one seat's candidates, and the distinct-layout pick of the final pool;
    old and new alternating, medians of the per-round ratio."""
    speakers = search._pair_speakers(room)
    space = search.search_space(room)
    sc = search._Scorer(room, speakers, search._check_band(search.default_band(speakers)), search.check_weights(None),
                        space.area_m, space.area_points, search.DEFAULT_POINTS_PER_OCTAVE)
    _, plan = search._choose_step(room, space, sc.flop_per_pair * sc.offsets.shape[0])
    seat, left, _, _ = max(plan, key=lambda p: p[1].shape[0])
    h = sc.transfer_block(left, seat[None] + sc.offsets)
    mirror = sc.mirror_rows()

    def feat_old():
        return old.features(sc, h, 0), old.features(sc, h[:, mirror], 1)

    def feat_new():
        return sc.features(h, 0), sc.features(h, 1, rows=mirror)

    rng = np.random.default_rng(1)
    vecs = rng.random((1000, 9)) * 3.0
    scores = rng.random(1000)
    seat_vecs = np.column_stack([left, left * [1, -1, 1] + [0, 2 * seat[1], 0], np.repeat(seat[None], len(left), 0)])
    seat_scores = rng.random(len(left))
    dm = space.distinct_m
    cases = (("features, both channels, one seat", feat_old, feat_new, f"{h.shape[0]} candidates"),
             ("distinct pick, 1000 random layouts, top 32", lambda: old.distinct(vecs, scores, 0.3, 32),
              lambda: search._distinct(vecs, scores, 0.3, 32), "0.3 m apart in a 3 m cube: few rejected"),
             ("distinct pick, one seat's grid, top 32", lambda: old.distinct(seat_vecs, seat_scores, dm, 32),
              lambda: search._distinct(seat_vecs, seat_scores, dm, 32), f"{len(left)} layouts, {dm:g} m apart"))
    print(f"{'step':44s} {'before ms':>10s} {'after ms':>10s} {'speed ratio':>12s}")
    for label, f_old, f_new, note in cases:
        t = {True: [], False: []}
        for rnd in range(rounds + 1):
            for before in ((True, False) if rnd % 2 == 0 else (False, True)):
                t0 = time.perf_counter()
                (f_old if before else f_new)()
                if rnd:
                    t[before].append(time.perf_counter() - t0)
        ratio = float(np.median(np.array(t[True]) / np.array(t[False])))
        print(f"{label:44s} {1e3 * np.median(t[True]):10.2f} {1e3 * np.median(t[False]):10.2f} {ratio:12.2f}  ({note})")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--method", choices=("modal", "exact", "both", "none"), default="both",
                    help="whole searches to time after the steps alone (none: the steps only)")
    args = ap.parse_args(argv)
    room = roommodes.load_room(roommodes.demo_room_path())
    print(f"roommodes {roommodes.__version__} search scoring benchmark, demo room, {os.cpu_count()} CPUs, "
          f"load average {os.getloadavg()[0]:.1f} at start")
    search.small_products(step_rows)(room)  # one BLAS thread, as inside the search
    print(f"{'search':28s} {'before':>10s} {'after':>10s} {'after/before speed':>19s}  best score before / after (dB)")
    methods = {"both": ("exact", "modal"), "none": ()}.get(args.method, (args.method,))
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
