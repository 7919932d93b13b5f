"""Is the study score fair across room sizes? The score of boxes of fixed proportions against volume.

For each shape (good proportions from the literature, and shapes whose axial modes coincide)
and each volume, one candidate of a study is scored with :func:`evaluate_candidate` (the
study's defaults, ``samples`` drawn rooms). Printed: the score (response + spread, dB) per
shape and volume, how often a badly proportioned room scores worse than a well proportioned
one of the same volume, and the slope of each shape's score against log volume.

Shapes (height 1):
- 1 : 1.4 : 1.9, Louden 1971 (Acustica 24:101), the best ratio of his search (from memory);
- 1 : 1.28 : 1.54, Sepmeyer 1965 (J. SMPTE 74:291), one of his recommended ratios (from memory);
- 1 : 1 : 1, a cube: all three axial series coincide (Bolt 1946, J. Acoust. Soc. Am. 18:130,
  places it outside his favourable region; from memory);
- 1 : 2 : 2, length = width = twice the height: two series coincide and the third's every
  second mode lands on them (integer ratios, Bonello 1981, J. Audio Eng. Soc. 29:597; from
  memory);
- 1 : 1 : 2, width = height, length twice: the same fault in the other two axes.

Run: python tests/bench/study_fairness.py [SAMPLES]. Prints; asserts nothing.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from roommodes.analysis.study import evaluate_candidate
from roommodes.model.study import StudySpec

GOOD = {"1:1.4:1.9": (1.9, 1.4, 1.0), "1:1.28:1.54": (1.54, 1.28, 1.0)}
BAD = {"cube": (1.0, 1.0, 1.0), "1:2:2": (2.0, 2.0, 1.0), "1:1:2": (2.0, 1.0, 1.0)}
VOLUMES_M3 = (30, 45, 60, 80, 100, 130, 160)


def box(volume_m3, ratio):
    """Length, width, height (m) of the box of ``volume_m3`` with ``ratio`` (L, W, H)."""
    h = (volume_m3 / np.prod(ratio)) ** (1 / 3)
    return tuple(round(h * k, 3) for k in ratio)


def main(samples=8):
    shapes = {**GOOD, **BAD}
    t0 = time.perf_counter()
    score = {}
    print("volume_m3 " + " ".join(f"{n:>14}" for n in shapes))
    for v in VOLUMES_M3:
        row = []
        for name, ratio in shapes.items():
            size = box(v, ratio)
            c = evaluate_candidate(0, StudySpec(*[(s, s) for s in size], 1, samples=samples))
            score[v, name] = c.score_db
            row.append(f"{c.score_db:6.2f} ({c.layout[:5]})")
        print(f"{v:9d} " + " ".join(f"{x:>14}" for x in row), flush=True)
    good = np.array([[score[v, n] for n in GOOD] for v in VOLUMES_M3])
    bad = np.array([[score[v, n] for n in BAD] for v in VOLUMES_M3])
    pairs = bad[:, :, None] > good[:, None, :]
    print(f"mean score: good {good.mean():.2f} dB, bad {bad.mean():.2f} dB; bad worse than good in "
          f"{int(pairs.sum())} of {pairs.size} same-volume pairs; cube worse than both good shapes at "
          f"{int(np.sum(bad[:, 0] > good.max(axis=1)))} of {len(VOLUMES_M3)} volumes")
    lv = np.log(np.array(VOLUMES_M3, float))
    print("slope of score against ln(volume), dB: " + ", ".join(
        f"{n} {np.polyfit(lv, [score[v, n] for v in VOLUMES_M3], 1)[0]:+.2f}" for n in shapes))
    print(f"({samples} drawn rooms per candidate, {time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 8)
