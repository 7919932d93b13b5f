"""The image-source solver's two reflection models against the exact solution of the box.

``python tests/reference/image_reflection_study.py [--wide]`` prints, for the acceptance
cases of tests/solvers/test_against_fem.py (or the wider study set), the median and 90th
percentile of |dL| between the image-source sum and the exact impedance-box solution
(roommodes.solvers.exact, itself within 0.003 dB p90 of the finite-element reference,
docs/validation.md), for ``reflection="impedance"`` and ``reflection="energy"``, and the
time each took. The reference is the same locally reacting box, so the figures measure
each reflection model's own error.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

if __name__ == "__main__":  # run as a script: make tests/ importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reference.agreement_study import (
    ABSORPTION,
    ROOMS,
    SPEED_OF_SOUND,
    WIDE_ABSORPTION,
    WIDE_ROOMS,
    frequencies,
    level_db,
    positions,
    stats,
    zeta_of,
)
from roommodes.solvers.exact import exact_transfer
from roommodes.solvers.images import image_source_transfer


def study(rooms, absorption, reflections=("impedance", "energy")):
    """Pooled |dL| per reflection model, and per absorption set; returns a dict of results."""
    f = frequencies()
    pooled = {r: [] for r in reflections}
    per_case = []
    times = {r: 0.0 for r in reflections}
    for rname, size in rooms.items():
        src, rec = positions(size)
        for aname, alpha in absorption.items():
            zeta = zeta_of(alpha)
            ref = level_db(exact_transfer(size, zeta, src, rec, f, SPEED_OF_SOUND))
            row = [rname, aname]
            for r in reflections:
                t0 = time.perf_counter()
                h, _ = image_source_transfer(size, zeta, src, rec, f, SPEED_OF_SOUND, reflection=r, tol_db=0.05)
                times[r] += time.perf_counter() - t0
                d = np.abs(level_db(h) - ref).ravel()
                pooled[r].append(d)
                row += list(stats(d)[:2])
            per_case.append(row)
    return {r: stats(np.concatenate(v))[:2] for r, v in pooled.items()}, per_case, times


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wide", action="store_true", help="the wider study set (four rooms, six absorption sets)")
    args = ap.parse_args()
    rooms, absorption = (WIDE_ROOMS, WIDE_ABSORPTION) if args.wide else (ROOMS, ABSORPTION)
    pooled, cases, times = study(rooms, absorption)
    print(f"{'room':<12} {'walls':<6} {'impedance med/p90':>18} {'energy med/p90':>16}")
    for rname, aname, m1, p1, m2, p2 in cases:
        print(f"{rname:<12} {aname:<6} {m1:8.2f} / {p1:5.2f}   {m2:7.2f} / {p2:5.2f}")
    for r, (med, p90) in pooled.items():
        print(f"pooled {r:<10} median {med:.2f} dB, p90 {p90:.2f} dB, {times[r]:.1f} s")


if __name__ == "__main__":
    main()
