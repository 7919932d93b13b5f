"""Benchmark of the solvers against the code before the speed work and against plain BLAS.

    python tests/bench/bench.py [--rounds 7] [--search-rounds 3] [--skip-memory] [--skip-exact-large]

Prints figures; asserts nothing. Every timed figure is the median, over interleaved rounds
(a 50 ms pause before each case, so that BLAS threads left spinning do not slow the next),
of a ratio (or a fraction) formed inside one round, so that load drift on a shared machine
hits both sides alike. In each round, in turn:

- ``gemm``: a real float64 GEMM of the modal product's own shape (2,000 x N modes times
  N x 400), the machine's GEMM rate in that round;
- ``plain``: the plain NumPy/BLAS modal product with modes to 600 Hz (mode shapes and
  folded weights given, C order, one ``@``), the issue's reference;
- the modal solver, 2,000 sources x 1 receiver x 200 frequencies (20-200 Hz, so modes to
  600 Hz), old code (``tests/bench/baseline``) and current code (default ``precision``,
  which is single for this size, and ``precision="double"``);
- one prediction, 1 x 1 x 209 (15-300 Hz at 48 per octave), exact (the default) and
  modal, old and current;
- the image-source solver at alpha 0.3 (30-150 Hz), 1 receiver and 100 receivers, old
  and current; the per-image cost of the current code. The image ratio is printed twice: in
  wall time (the issue's target; 100 receivers may use every core, one receiver's short
  sums run on one) and in CPU time of all the process' threads (what sharing alone buys).

Then the placement search on the demo room, in its own interleaved rounds (before: the
scorer's product paths of tests/bench/baseline/scorer.py on the old modal module and the
BLAS's own thread count; after: the current code), twice: as ``place`` runs it (the
finalists re-scored by the default exact solver) and the modal scan alone
(``method="modal"``); layouts/s counts every layout scored, perturbed copies included.
Then a table of one BLAS thread against the BLAS's own count for the products the modal
solver and the search run (the measurement behind roommodes.solvers.threads).

Then, once (not in rounds): the exact solver's 2,000-source case, old and current, and the
peak memory (tracemalloc, which sees NumPy's buffers) of 1 source x 100,000 receivers x 50
frequencies (15-300 Hz) for each solver that can run it.
"""

from __future__ import annotations

import argparse
import os
import time
import tracemalloc
from unittest import mock

# what `import roommodes` sets before numpy loads, as the command line gets it (numpy is
# imported first here; roommodes.solvers.threads)
os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "22")

import numpy as np  # noqa: E402
from baseline import exact as old_exact
from baseline import images as old_images
from baseline import modal as old_modal
from baseline import scorer as old_scorer

import roommodes
from roommodes.analysis import search
from roommodes.model.modes import mode_indices, mode_shapes
from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers.exact import exact_transfer
from roommodes.solvers.images import image_count, image_source_transfer
from roommodes.solvers.modal import modal_transfer
from roommodes.solvers.threads import blas_threads, multi_thread_min_flop, spare_cores

#: CPU time (all threads of the process) of the last call of :func:`timed`.
_last_cpu = [0.0]


def timed(fn):
    t0 = time.perf_counter()
    c0 = time.process_time()
    out = fn()
    _last_cpu[0] = time.process_time() - c0
    return time.perf_counter() - t0, out


def peak_bytes(fn):
    """Peak traced allocation (bytes) while ``fn`` runs."""
    tracemalloc.start()
    tracemalloc.reset_peak()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def max_db(a, b):
    """Largest level difference, dB."""
    return float(np.max(np.abs(20 * np.log10(np.abs(a) / np.abs(b)))))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--skip-memory", action="store_true", help="leave out the 100,000-receiver case")
    ap.add_argument("--skip-exact-large", action="store_true", help="leave out the exact 2,000-source case")
    ap.add_argument("--skip-old-memory", action="store_true", help="memory of the current code only")
    ap.add_argument("--search-rounds", type=int, default=3, help="rounds of the placement search (0: leave it out)")
    args = ap.parse_args(argv)

    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = np.asarray(room.size_m), room.speed_of_sound
    src = np.array([[0.5, 0.62, 1.15]])
    rec = np.array([[1.85, 1.45, 1.2]])
    many = 0.1 + np.random.default_rng(7).random((2000, 3)) * (size - 0.2)
    f200 = np.geomspace(20.0, 200.0, 200)
    z200 = room.impedance(f200)
    f_pred = roommodes.log_frequencies(15, 300, 48)
    z_pred = room.impedance(f_pred)

    # the plain modal product: modes to 600 Hz, shapes and folded weights given
    idx, fn = mode_indices(size, 600.0, c)
    n_modes = idx.shape[0]
    psi = np.ascontiguousarray(mode_shapes(idx, size, many))
    _, w, _ = old_modal.modal_weights(size, z200, f200, c, cutoff_hz=600.0)
    fold = np.ascontiguousarray(mode_shapes(idx, size, rec)[0][:, None] * w).view(np.float64)
    rng = np.random.default_rng(1)
    ga, gb = rng.standard_normal(psi.shape), rng.standard_normal(fold.shape)
    flops = 2.0 * psi.shape[0] * n_modes * fold.shape[1]

    # the image case
    zeta_img = impedance_from_absorption(np.full(6, 0.3))
    f_img = roommodes.log_frequencies(30, 150, 12)
    rec_img = 0.3 + np.random.default_rng(3).random((100, 3)) * (size - 0.6)

    print(f"roommodes {roommodes.__version__}, demo room {size} m, c = {c:.1f} m/s; "
          f"{args.rounds} rounds after one warm-up round; medians over rounds")

    cases = {
        "gemm": lambda: ga @ gb,
        "plain": lambda: psi @ fold,
        "modal2000_old": lambda: old_modal.modal_transfer(size, z200, many, rec, f200, c),
        "modal2000_new": lambda: modal_transfer(size, z200, many, rec, f200, c),
        "modal2000_f64": lambda: modal_transfer(size, z200, many, rec, f200, c, precision="double"),
        "pred_exact_old": lambda: old_exact.exact_transfer(size, z_pred, src, rec, f_pred, c),
        "pred_exact_new": lambda: exact_transfer(size, z_pred, src, rec, f_pred, c),
        "pred_modal_old": lambda: old_modal.modal_transfer(size, z_pred, src, rec, f_pred, c),
        "pred_modal_new": lambda: modal_transfer(size, z_pred, src, rec, f_pred, c),
        "img1_old": lambda: old_images.image_source_transfer(size, zeta_img, src, rec_img[:1], f_img, c),
        "img1_new": lambda: image_source_transfer(size, zeta_img, src, rec_img[:1], f_img, c),
        "img100_old": lambda: old_images.image_source_transfer(size, zeta_img, src, rec_img, f_img, c),
        "img100_new": lambda: image_source_transfer(size, zeta_img, src, rec_img, f_img, c),
    }
    times = {k: [] for k in cases}
    cpu = {k: [] for k in cases}
    results = {}
    load_start = os.getloadavg()[0]
    for rnd in range(args.rounds + 1):
        for key, fn_case in cases.items():
            # a pause, so that BLAS threads still spinning after the previous case's
            # multithreaded product do not slow this one down
            time.sleep(0.05)
            dt, out = timed(fn_case)
            if rnd == 0:
                results[key] = out
            else:
                times[key].append(dt)
                cpu[key].append(_last_cpu[0])
    t = {k: np.array(v) for k, v in times.items()}
    t_cpu = {k: np.array(v) for k, v in cpu.items()}
    med = {k: float(np.median(v)) for k, v in t.items()}

    def ratio(a, b):
        return float(np.median(t[a] / t[b]))

    def cpu_ratio(a, b):
        return float(np.median(t_cpu[a] / t_cpu[b]))

    def gemm_fraction(key):
        # the modal product's flops over the case's time, as a fraction of the same round's GEMM rate
        return float(np.median(t["gemm"] / t[key]))

    print(f"\nGEMM (float64, {psi.shape[0]} x {n_modes} times {n_modes} x {fold.shape[1]}): "
          f"{flops / med['gemm'] / 1e9:.1f} GFLOP/s; plain modal product {med['plain'] * 1e3:.1f} ms "
          f"({gemm_fraction('plain'):.0%} of the GEMM rate)")

    d_modal = max_db(results["modal2000_new"], results["modal2000_old"])
    d_f64 = max_db(results["modal2000_f64"], results["modal2000_old"])
    d_pred = max_db(results["pred_exact_new"], results["pred_exact_old"])
    d_pm = max_db(results["pred_modal_new"], results["pred_modal_old"])
    h1o, i1o = results["img1_old"]
    h1n, i1n = results["img1_new"]
    hno, ino = results["img100_old"]
    hnn, inn = results["img100_new"]
    d_img = max(max_db(h1n, h1o), max_db(hnn, hno))
    per_image_ns = med["img100_new"] / inn["images"] * 1e9
    per_image_old_ns = med["img100_old"] / ino["images"] * 1e9
    cpu_med = {k: float(np.median(v)) for k, v in t_cpu.items()}
    cpu_image_ns = cpu_med["img100_new"] / inn["images"] * 1e9
    cpu_image_old_ns = cpu_med["img100_old"] / ino["images"] * 1e9
    one_image_ns = cpu_med["img1_new"] / i1n["images"] * 1e9
    one_image_old_ns = cpu_med["img1_old"] / i1o["images"] * 1e9

    rows = [
        ("modal 2000x1x200 / plain BLAS product", "<= 1.2",
         ratio("modal2000_old", "plain"), ratio("modal2000_new", "plain"), d_modal),
        ("modal 2000x1x200, fraction of GEMM rate", ">= 0.70",
         gemm_fraction("modal2000_old"), gemm_fraction("modal2000_new"), None),
        ("  same, precision=double / plain BLAS product", "",
         ratio("modal2000_old", "plain"), ratio("modal2000_f64", "plain"), d_f64),
        ("  same, precision=double, fraction of GEMM rate", "",
         gemm_fraction("modal2000_old"), gemm_fraction("modal2000_f64"), None),
        ("one prediction, exact (default), ms", "<= 3",
         med["pred_exact_old"] * 1e3, med["pred_exact_new"] * 1e3, d_pred),
        ("one prediction, modal, ms", "(<= 3)",
         med["pred_modal_old"] * 1e3, med["pred_modal_new"] * 1e3, d_pm),
        ("image alpha 0.3: 100 receivers / 1", "<= 20",
         ratio("img100_old", "img1_old"), ratio("img100_new", "img1_new"), d_img),
        ("  same, CPU time of all threads", "",
         cpu_ratio("img100_old", "img1_old"), cpu_ratio("img100_new", "img1_new"), None),
        ("image: ns per image and pair (100 receivers)", "",
         per_image_old_ns, per_image_ns, None),
        ("  same, CPU ns (all threads)", "", cpu_image_old_ns, cpu_image_ns, None),
        ("  CPU ns per image, 1 receiver (whole call)", "", one_image_old_ns, one_image_ns, None),
    ]
    print(f"\n{'target':46s} {'goal':>8s} {'before':>10s} {'after':>10s} {'after/before':>13s}  max |dL| dB")
    for name, goal, before, after, d in rows:
        dd = "" if d is None else f"{d:.1e}"
        print(f"{name:46s} {goal:>8s} {before:10.3g} {after:10.3g} {after / before:13.3f}  {dd}")
    print("speed-ups measured as medians of per-round ratios, current / old: "
          f"modal 2000x1x200 {ratio('modal2000_new', 'modal2000_old'):.3f}, "
          f"prediction exact {ratio('pred_exact_new', 'pred_exact_old'):.3f}, "
          f"modal {ratio('pred_modal_new', 'pred_modal_old'):.3f}, "
          f"image 100 receivers {ratio('img100_new', 'img100_old'):.3f}")
    print(f"image sum: {inn['images']:,} images over 100 pairs (order {inn['order']}; "
          f"{image_count(inn['order']):,} images at that order), {per_image_ns:.1f} ns per image and pair; "
          f"1 receiver: {i1n['images']:,} images (order {i1n['order']}), "
          f"{med['img1_new'] * 1e3:.1f} ms ({cpu_med['img1_new'] * 1e3:.1f} ms CPU); "
          f"100 receivers {med['img100_new'] * 1e3:.0f} ms ({cpu_med['img100_new'] * 1e3:.0f} ms CPU)")

    print(f"(load average {load_start:.1f} at the start of the rounds, {os.getloadavg()[0]:.1f} at their end, "
          f"on {os.cpu_count()} CPUs)")

    if args.search_rounds > 0:
        search_rows(room, args.search_rounds)
    thread_table(psi, fold)

    if not args.skip_exact_large:
        t_old, h_old = timed(lambda: old_exact.exact_transfer(size, z200, many, rec, f200, c))
        t_new, h_new = timed(lambda: exact_transfer(size, z200, many, rec, f200, c))
        print(f"\nexact 2000x1x200 (one run each): before {t_old:.2f} s, after {t_new:.2f} s, "
              f"after/before {t_new / t_old:.3f}; max |dL| {max_db(h_new, h_old):.1e} dB")

    if not args.skip_memory:
        f50 = np.geomspace(15.0, 300.0, 50)
        z50 = room.impedance(f50)
        gx, gy = np.meshgrid(np.linspace(0.05, size[0] - 0.05, 400), np.linspace(0.05, size[1] - 0.05, 250),
                             indexing="ij")
        grid = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, 1.2)])
        out_mb = grid.shape[0] * f50.size * 16 / 1e6
        print(f"\npeak memory, 1 source x {grid.shape[0]:,} receivers x 50 frequencies (15-300 Hz), "
              f"goal <= 2 GB (the result alone is {out_mb:.0f} MB):")
        todo = [("modal", old_modal.modal_transfer, modal_transfer),
                ("exact", old_exact.exact_transfer, exact_transfer)]
        for name, old, new in todo:
            line = f"  {name:6s}"
            if not args.skip_old_memory:
                t0 = time.perf_counter()
                try:
                    pk = peak_bytes(lambda o=old: o(size, z50, src, grid, f50, c))
                    line += f" before {pk / 1e9:5.2f} GB ({time.perf_counter() - t0:5.1f} s)"
                except MemoryError:
                    line += " before: MemoryError"
            t0 = time.perf_counter()
            pk = peak_bytes(lambda n=new: n(size, z50, src, grid, f50, c))
            line += f"  after {pk / 1e9:5.2f} GB ({time.perf_counter() - t0:5.1f} s)"
            print(line)


def search_rows(room, rounds):
    """The placement search before and after, interleaved rounds, medians."""

    def run(method, old):
        fn = search.search_layouts.__wrapped__ if old else search.search_layouts  # old: BLAS's own threads
        if old:
            with mock.patch.multiple(search._Scorer, shapes=old_scorer.shapes, transfer_block=old_scorer.transfer_block,
                                     transfer_layouts=old_scorer.transfer_layouts,
                                     plane_transfer=old_scorer.plane_transfer):
                return timed(lambda: fn(room, method=method))
        return timed(lambda: fn(room, method=method))

    print(f"\nplacement search, demo room; {rounds} rounds after one warm-up round; medians over rounds")
    print(f"{'target':46s} {'goal':>8s} {'before':>10s} {'after':>10s} {'after/before':>13s}  best score (dB)")
    for method, label in (("exact", "search as place runs it, layouts/s"), ("modal", "search, modal scan only, layouts/s")):
        t_old, t_new, res = [], [], {}
        for rnd in range(rounds + 1):
            for old in (True, False):
                dt, r = run(method, old)
                res[old] = r
                if rnd:
                    (t_old if old else t_new).append(dt)
        n_old, n_new = res[True].n_layout_evaluations, res[False].n_layout_evaluations
        rate_old = n_old / float(np.median(t_old))
        rate_new = n_new / float(np.median(t_new))
        speed = float(np.median(np.array(t_old) / n_old / (np.array(t_new) / n_new)))
        print(f"{label:46s} {'>= 10000':>8s} {rate_old:10.0f} {rate_new:10.0f} {speed:13.3f}  "
              f"{res[True].ranked[0].score:.6f} / {res[False].ranked[0].score:.6f}")
        print(f"  {n_new} layouts scored, {float(np.median(t_new)):.2f} s (before {float(np.median(t_old)):.2f} s)")


def thread_table(psi, fold, rounds=5):
    """One BLAS thread against the BLAS's own count, for product shapes the modal solver and
    the search run; interleaved rounds (each side repeated to about 0.3 GFLOP), medians of
    the per-round ratio, and the load average around it (the rule of
    roommodes.solvers.threads depends on it)."""
    rng = np.random.default_rng(5)
    n = psi.shape[1]
    shapes = [(2000, n, 400), (600, n, 2200), (300, n, 2200), (4608, n, 220), (240, n, 220), (100, n, 100),
              (30, n, 60), (8, n, 50), (1, n, 418)]
    load0 = os.getloadavg()[0]
    print(f"\nBLAS threads: time with one thread / time with the BLAS's own count ({os.cpu_count()} CPUs; "
          f"< 1 means one thread is faster); load average {load0:.1f} at the start, so the code now uses "
          f"one thread below {multi_thread_min_flop():.1e} flop (cores to spare: {spare_cores()})")
    print(f"{'product (m x k x n)':24s} {'flop':>9s} {'float64':>8s} {'float32':>8s}")
    for m, k, nn in shapes:
        line = f"{f'{m} x {k} x {nn}':24s} {2.0 * m * k * nn:9.1e}"
        reps = max(1, int(3e8 / (2.0 * m * k * nn)))
        for dt in (np.float64, np.float32):
            a, b = rng.standard_normal((m, k)).astype(dt), rng.standard_normal((k, nn)).astype(dt)

            def many(a=a, b=b, reps=reps):
                for _ in range(reps):
                    a @ b

            r = []
            for rnd in range(rounds + 1):
                time.sleep(0.02)
                t_all, _ = timed(many)
                with blas_threads(0):
                    t_one, _ = timed(many)
                if rnd:
                    r.append(t_one / t_all)
            line += f" {float(np.median(r)):8.2f}"
        print(line)
    print(f"(load average {load0:.1f} at the start of the table, {os.getloadavg()[0]:.1f} at its end)")


if __name__ == "__main__":
    main()
