"""How far from the true sum the image solver stops, for its truncation settings.

For each configuration (room, walls, reflection model, frequencies, random source and
receivers) a reference is summed with ``tol_db = 0.005`` (its own error is about a tenth of
that), and then each setting is run with the default ``tol_db = 0.05``. Printed per
configuration: the largest level difference from the reference over receivers and
frequencies, the largest order and the images summed; at the end, per setting, the worst
error as a fraction of ``tol_db`` and the images and time against the first setting.

Settings (module constants of :mod:`roommodes.solvers.images`, restored after each run):

- ``current``: the code as it is;
- ``safety 1``: no safety factor on the remainder estimate;
- ``checks x2``: the sum checked twice as often (``n / 16`` orders, at least 2).

``--set 2`` takes other rooms and absorptions (a second, independent set); ``--draws N``
repeats each configuration with N draws of source and receivers. One draw of a set takes
about a minute on the 2-core development machine; the reference sums take most of it.

Run: ``python tests/bench/check_image_truncation.py [--set 1|2] [--draws N] [setting ...]``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

import roommodes
import roommodes.solvers.images as im
from roommodes.model.walls import impedance_from_absorption

TOL_DB = 0.05
MIXED = np.array([0.05, 0.4, 0.1, 0.3, 0.02, 0.5])
SETS = {
    1: ([[4.1, 3.2, 2.5], [7.1, 2.3, 2.4], [3.0, 3.0, 3.0], [9.0, 6.5, 3.1]], (0.1, 0.2, 0.3, 0.5)),
    2: ([[5.3, 3.7, 2.7], [3.6, 2.2, 2.3], [6.0, 6.0, 2.4]], (0.15, 0.25, 0.4, 0.6)),
}
SETTINGS = {
    "current": {},
    "safety 1": {"_SAFETY": 1.0},
    "checks x2": {"_CHECK_DIV": 16, "_CHECK_MIN_STEP": 2},
}


def configurations(which):
    """(label, size_m, zeta or None, room or None, reflection, freq_hz) of one set."""
    demo = roommodes.load_room(roommodes.demo_room_path())
    f = roommodes.log_frequencies(30, 150, 12)
    wide = roommodes.log_frequencies(30, 250, 24) if which == 1 else roommodes.log_frequencies(20, 200, 24)
    out = [("demo room file", np.asarray(demo.size_m), None, demo, "energy", band) for band in (f, wide)]
    sizes, alphas = SETS[which]
    for size in sizes:
        for a in (*alphas, "mixed"):
            alpha = MIXED if a == "mixed" else np.full(6, a)
            out.append((f"{size} alpha {a}", np.asarray(size), impedance_from_absorption(alpha), None, "energy", f))
    for a in (0.2, 0.3, "mixed"):
        alpha = MIXED if a == "mixed" else np.full(6, a)
        out.append((f"impedance model alpha {a}", np.array([4.1, 3.2, 2.5]), impedance_from_absorption(alpha),
                    None, "impedance", f))
    return out


def solve(cfg, seed, **kwargs):
    label, size, zeta, room, reflection, f = cfg
    rng = np.random.default_rng(seed)
    c = 343.0
    if room is not None:
        zeta, c = room.impedance(f), room.speed_of_sound
    n_rec = 4 if reflection == "energy" else 2
    src = 0.1 * size + rng.random(3) * 0.8 * size
    rec = 0.05 * size + rng.random((n_rec, 3)) * 0.9 * size
    return im.image_source_transfer(size, zeta, src[None], rec, f, c, reflection=reflection, **kwargs)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--set", type=int, choices=sorted(SETS), default=1)
    ap.add_argument("--draws", type=int, default=1, help="random source and receivers per configuration")
    ap.add_argument("settings", nargs="*", default=list(SETTINGS), help=f"of {', '.join(SETTINGS)}")
    args = ap.parse_args(argv)
    totals = {s: {"worst": 0.0, "where": "", "images": 0, "time": 0.0} for s in args.settings}
    cases = [(cfg, 1000 * args.set + 50 * d + k) for d in range(args.draws)
             for k, cfg in enumerate(configurations(args.set))]
    for cfg, seed in cases:
        ref, info_ref = solve(cfg, seed, tol_db=0.005, max_order=500)
        if not info_ref["converged"]:
            print(f"{cfg[0]}: reference not converged by order 500, left out")
            continue
        line = f"{cfg[0]:34s} {cfg[5][0]:.0f}-{cfg[5][-1]:.0f} Hz (ref. order {info_ref['order']})"
        for name in args.settings:
            saved = {key: getattr(im, key) for key in SETTINGS[name]}
            for key, value in SETTINGS[name].items():
                setattr(im, key, value)
            try:
                t0 = time.perf_counter()
                h, info = solve(cfg, seed, tol_db=TOL_DB)
                dt = time.perf_counter() - t0
            finally:
                for key, value in saved.items():
                    setattr(im, key, value)
            err = float(np.max(np.abs(20 * np.log10(np.abs(h / ref)))))
            tot = totals[name]
            tot["images"] += info["images"]
            tot["time"] += dt
            if err > tot["worst"]:
                tot["worst"], tot["where"] = err, cfg[0]
            line += f" | {name}: {err:.4f} dB, order {info['order']}, {info['images'] / 1e6:.2f} M"
        print(line, flush=True)
    first = totals[args.settings[0]]
    print(f"\ntol_db = {TOL_DB}; set {args.set}")
    for name, tot in totals.items():
        print(f"{name:10s} worst {tot['worst']:.4f} dB = {tot['worst'] / TOL_DB:.2f} tol_db ({tot['where']}); "
              f"images {tot['images'] / first['images']:.3f}, time {tot['time'] / first['time']:.3f} of {args.settings[0]}")


if __name__ == "__main__":
    main()
