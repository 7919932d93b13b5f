"""How closely roommodes' solvers follow the finite-element reference: a study script.

Run from the repository root::

    python tests/reference/agreement_study.py                # the wide comparison
    python tests/reference/agreement_study.py --quick        # the acceptance-test cases only
    python tests/reference/agreement_study.py --convergence  # the FEM mesh study

It prints tables; it asserts nothing (tests/test_against_fem.py holds the bar). The case
definitions below are shared with that test.

The solver figures change whenever the solvers do, so none are kept here: run the script
for current ones. The FEM's own accuracy does not, and is recorded below.

FEM mesh convergence (``--convergence``): 5.0 x 4.0 x 2.6 m with all walls at alpha =
0.1, and 3.6 x 3.0 x 2.4 m at 0.45; the three sources of :func:`positions`, its three
seats and the receiver 0.6 m from the corner source; 20-200 Hz at 1/24 octave; |dL| in
dB against a mesh of h = 0.04 m (43 elements per wavelength at 200 Hz):

=========  ===========  ===============================  ===============================
h (m)      el./lambda   5.0x4.0x2.6, 0.1: p90 / max      3.6x3.0x2.4, 0.45: p90 / max
=========  ===========  ===============================  ===============================
0.200      8.6          0.022 / 0.38                     0.018 / 0.12
0.150      11.4         0.016 / 0.15                     0.016 / 0.048
0.107      16           0.0046 / 0.042                   0.0029 / 0.017
0.086      20           0.0019 / 0.016                   0.0020 / 0.013
=========  ===========  ===============================  ===============================

(16 and 20 are quadratic elements per wavelength at 200 Hz; 20 is the default.)
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

if __name__ == "__main__":  # run as a script: make tests/ importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reference.fem_box import default_mesh_size, fem_transfer

SPEED_OF_SOUND = 343.0

ROOMS = {
    "5.0x4.0x2.6": (5.0, 4.0, 2.6),
    "3.6x3.0x2.4": (3.6, 3.0, 2.4),
}
WIDE_ROOMS = {
    **ROOMS,
    "7.0x5.2x2.7": (7.0, 5.18, 2.74),
    "4.2x3.3x2.5": (4.2, 3.3, 2.5),
}

#: Random-incidence absorption per wall (front, back, left, right, floor, ceiling).
ABSORPTION = {
    "0.10": (0.10,) * 6,
    "0.30": (0.30,) * 6,
    "0.45": (0.45,) * 6,
    "mixed": (0.15, 0.45, 0.25, 0.10, 0.05, 0.35),
}
WIDE_ABSORPTION = {
    **ABSORPTION,
    "0.20": (0.20,) * 6,
    "mixed2": (0.30, 0.08, 0.12, 0.40, 0.20, 0.10),
}


def frequencies():
    """20-200 Hz at 1/24 octave (81 points), the grid of the prediction bar."""
    from roommodes.dsp.response import log_frequencies

    return log_frequencies(20.0, 200.0, 24)


def positions(size_m):
    """Return the sources and receivers used for one room.

    Sources: in the corner region (0.3 m from three surfaces), against the front wall
    (acoustic centre 0.15 m from it), mid-room. Receivers: three typical seats (on the
    centre line at 62 % of the length, off-centre, a back seat) and one receiver
    0.5-0.6 m from each source. Every pair is used: seats and speakers anywhere.

    Returns
    -------
    sources_m : ndarray (3, 3)
    receivers_m : ndarray (6, 3)
    """
    lx, ly, _ = size_m
    sources = np.array([
        [0.30, 0.30, 0.30],
        [0.15, 0.40 * ly, 0.50],
        [0.55 * lx, 0.45 * ly, 1.30],
    ])
    receivers = np.array([
        [0.62 * lx, 0.50 * ly, 1.20],
        [0.62 * lx, 0.32 * ly, 1.10],
        [0.80 * lx, 0.65 * ly, 1.05],
        [0.70, 0.60, 0.50],
        [0.55, 0.40 * ly + 0.25, 0.70],
        [0.55 * lx - 0.40, 0.45 * ly + 0.20, 1.10],
    ])
    return sources, receivers


def wide_positions(size_m, rng):
    """Return the fixed positions plus random ones.

    Random sources and receivers keep 0.1 m from every wall, receivers 0.3 m from
    every source.
    """
    src, rec = positions(size_m)
    size = np.asarray(size_m)
    src = np.vstack([src, 0.1 + rng.random((2, 3)) * (size - 0.2)])
    extra = []
    while len(extra) < 3:
        p = 0.1 + rng.random(3) * (size - 0.2)
        if np.min(np.linalg.norm(src - p, axis=1)) >= 0.3:
            extra.append(p)
    return src, np.vstack([rec, extra])


def zeta_of(absorption):
    """Return the wall impedances for random-incidence absorption coefficients."""
    from roommodes.model.walls import impedance_from_absorption

    return impedance_from_absorption(np.asarray(absorption, dtype=float))


def level_db(h):
    """Return 20 log10 |h|."""
    return 20.0 * np.log10(np.abs(h))


def stats(dl):
    """Return median, 90th percentile and maximum of |dl|."""
    dl = np.abs(np.asarray(dl)).ravel()
    return float(np.median(dl)), float(np.percentile(dl, 90)), float(dl.max())


# ----------------------------------------------------------------------------------


def _solvers():
    from roommodes.solvers.images import image_source_transfer
    from roommodes.solvers.modal import modal_transfer

    return {
        "modal": lambda *a: modal_transfer(*a),
        "images": lambda *a: image_source_transfer(*a)[0],
        "images-energy": lambda *a: image_source_transfer(*a, reflection="energy")[0],
    }


def compare(rooms, absorption_sets, wide=False, solver_names=None):
    """Return table rows and pooled figures of every solver against the FEM."""
    freq = frequencies()
    rng = np.random.default_rng(20240611)
    solvers = _solvers()
    names = solver_names or list(solvers)
    rows = []
    pooled = {n: [] for n in names}
    for room, size in rooms.items():
        src, rec = wide_positions(size, rng) if wide else positions(size)
        for absname, alpha in absorption_sets.items():
            zeta = zeta_of(alpha)
            t0 = time.perf_counter()
            ref = level_db(fem_transfer(size, zeta, src, rec, freq, SPEED_OF_SOUND))
            t_fem = (time.perf_counter() - t0) / (len(src) * len(rec))
            rows.append((room, absname, "fem", np.nan, np.nan, np.nan, t_fem))
            for n in names:
                t0 = time.perf_counter()
                h = solvers[n](size, zeta, src, rec, freq, SPEED_OF_SOUND)
                t = (time.perf_counter() - t0) / (len(src) * len(rec))
                dl = np.abs(level_db(h) - ref)
                pooled[n].append(dl.ravel())
                rows.append((room, absname, n, *stats(dl), t))
                print(f"{room:12s} {absname:7s} {n:14s} median {rows[-1][3]:6.3f}  p90 {rows[-1][4]:6.3f}"
                      f"  max {rows[-1][5]:6.2f} dB  {t * 1e3:8.1f} ms/transfer", file=sys.stderr, flush=True)
    return rows, {n: stats(np.concatenate(v)) for n, v in pooled.items()}


def print_table(rows, pooled, n_freq):
    """Print the comparison table."""
    print(f"\n|dL| against the FEM reference, 20-200 Hz at 1/24 octave ({n_freq} frequencies), dB")
    print(f"{'room':12s} {'alpha':7s} {'solver':14s} {'median':>7s} {'p90':>7s} {'max':>7s} {'ms/transfer':>12s}")
    for room, absname, n, med, p90, mx, t in rows:
        if n == "fem":
            print(f"{room:12s} {absname:7s} {'(fem)':14s} {'':>7s} {'':>7s} {'':>7s} {t * 1e3:12.1f}")
        else:
            print(f"{room:12s} {absname:7s} {n:14s} {med:7.3f} {p90:7.3f} {mx:7.2f} {t * 1e3:12.1f}")
    print("pooled:")
    for n, (med, p90, mx) in pooled.items():
        print(f"  {n:14s} median {med:6.3f}  p90 {p90:6.3f}  max {mx:6.2f} dB")


def convergence():
    """Print the FEM mesh-convergence table."""
    from roommodes.model.walls import impedance_from_absorption

    freq = frequencies()
    h_ref = 0.04
    for room, alpha in (("5.0x4.0x2.6", 0.1), ("3.6x3.0x2.4", 0.45)):
        size = ROOMS[room]
        zeta = np.full(6, float(impedance_from_absorption(alpha)))
        src, rec = positions(size)
        rec = rec[[0, 1, 2, 3]]
        ref = level_db(fem_transfer(size, zeta, src, rec, freq, SPEED_OF_SOUND, h_m=h_ref))
        print(f"\n{room}, alpha {alpha}: |dL| against h = {h_ref} m, dB")
        print(f"{'h (m)':>8s} {'el/lambda':>9s} {'median':>8s} {'p90':>8s} {'max':>8s} {'max@200Hz':>10s} {'s':>6s}")
        lam = SPEED_OF_SOUND / freq.max()
        for h in (0.2, 0.15, lam / 16, default_mesh_size(freq.max(), SPEED_OF_SOUND)):
            t0 = time.perf_counter()
            lv = level_db(fem_transfer(size, zeta, src, rec, freq, SPEED_OF_SOUND, h_m=h))
            t = time.perf_counter() - t0
            dl = np.abs(lv - ref)
            med, p90, mx = stats(dl)
            print(f"{h:8.3f} {lam / h:9.1f} {med:8.4f} {p90:8.4f} {mx:8.4f} {dl[..., -1].max():10.4f} {t:6.1f}",
                  flush=True)


def main(argv=None):
    """Run the study chosen on the command line."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="only the acceptance-test cases")
    ap.add_argument("--convergence", action="store_true", help="FEM mesh convergence study")
    args = ap.parse_args(argv)
    if args.convergence:
        convergence()
        return
    if args.quick:
        rows, pooled = compare(ROOMS, ABSORPTION)
    else:
        rows, pooled = compare(WIDE_ROOMS, WIDE_ABSORPTION, wide=True)
    print_table(rows, pooled, frequencies().size)


if __name__ == "__main__":
    main()
