"""Cost of ``place --uncertainty``: re-scoring layouts in drawn rooms against scoring them once.

Run: ``PYTHONPATH=. python tests/bench/bench_place_uncertainty.py [rounds]``. Prints, per solver,
the CPU seconds per layout and drawn room and the ratio of one drawn room's scoring to the
nominal scoring of the same layouts (baseline measured in the same run, rounds interleaved,
medians): the ratio is the overhead of drawing rooms and building a scorer per room.
"""

import sys
import time

import numpy as np

from roommodes.analysis.ensemble import ensemble_scores
from roommodes.analysis.search import score_layouts, search_space
from roommodes.io.roomfile import demo_room_path, load_room
from roommodes.model.placement import PRESETS, preset_layout


def main(rounds=3, samples=3):
    room = load_room(demo_room_path())
    space = search_space(room)
    layouts = [room.layout] + [preset_layout(room, n) for n in PRESETS]
    kw = {"area_m": space.area_m, "area_points": space.area_points, "band_hz": (48.0, 200.0)}
    for method in ("exact", "modal"):
        base, ens = [], []
        for _ in range(rounds):
            t = time.process_time()
            score_layouts(room, layouts, method=method, **kw)
            base.append(time.process_time() - t)
            t = time.process_time()
            ensemble_scores(room, layouts, n_samples=samples, seed=1, method=method, **kw)
            ens.append((time.process_time() - t) / samples)
        b, e = np.median(base), np.median(ens)
        print(f"{method}: {e / len(layouts):.3f} s CPU per layout and drawn room; one drawn room / nominal "
              f"scoring = {e / b:.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
