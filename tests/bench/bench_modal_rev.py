"""The modal solver's 2,000-source case against another git revision of the package, in one run.

    python tests/bench/bench_modal_rev.py [--rev main] [--rounds 9]

The package of revision ``--rev`` is exported (``git archive``) into a temporary folder and
imported beside the working tree's under another name (the package imports itself only
relatively). In each round, in turn, after a 50 ms pause: a float64 GEMM of the modal
product's shape (the machine's GEMM rate in that round), the plain NumPy/BLAS modal product
with modes to 600 Hz, and ``modal_transfer`` on 2,000 sources x 1 receiver x 200 frequencies
(20-200 Hz) of the revision and of the working tree, with the default precision and with
``precision="double"``. Prints medians of the per-round ratios; asserts nothing.
"""

from __future__ import annotations

import argparse
import importlib
import io
import os
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

import numpy as np

import roommodes
from roommodes.model.modes import mode_indices, mode_shapes
from roommodes.solvers.modal import modal_transfer


def _import_revision(rev, folder):
    """``roommodes`` of git revision ``rev``, imported as ``roommodes_rev``."""
    root = Path(__file__).resolve().parents[2]
    blob = subprocess.run(["git", "-C", str(root), "archive", rev, "roommodes"], check=True,
                          capture_output=True).stdout
    with tarfile.open(fileobj=io.BytesIO(blob)) as tar:
        tar.extractall(folder, filter="data")
    os.rename(os.path.join(folder, "roommodes"), os.path.join(folder, "roommodes_rev"))
    sys.path.insert(0, folder)
    return importlib.import_module("roommodes_rev.solvers.modal")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rev", default="main", help="git revision to compare with (default: main)")
    ap.add_argument("--rounds", type=int, default=9)
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as folder:
        old = _import_revision(args.rev, folder)
        run(old, args.rev, args.rounds)


def run(old, rev, rounds):
    room = roommodes.load_room(roommodes.demo_room_path())
    size, c = np.asarray(room.size_m), room.speed_of_sound
    rec = np.array([[1.85, 1.45, 1.2]])
    many = 0.1 + np.random.default_rng(7).random((2000, 3)) * (size - 0.2)
    f = np.geomspace(20.0, 200.0, 200)
    z = room.impedance(f)
    idx, _ = mode_indices(size, 600.0, c)
    psi = np.ascontiguousarray(mode_shapes(idx, size, many))
    rng = np.random.default_rng(1)
    fold = rng.standard_normal((idx.shape[0], 400))
    ga, gb = rng.standard_normal(psi.shape), rng.standard_normal(fold.shape)
    cases = {
        "gemm": lambda: ga @ gb,
        "plain": lambda: psi @ fold,
        "rev": lambda: old.modal_transfer(size, z, many, rec, f, c),
        "tree": lambda: modal_transfer(size, z, many, rec, f, c),
        "rev_double": lambda: old.modal_transfer(size, z, many, rec, f, c, precision="double"),
        "tree_double": lambda: modal_transfer(size, z, many, rec, f, c, precision="double"),
    }
    times = {k: [] for k in cases}
    results = {}
    load0 = os.getloadavg()[0]
    for rnd in range(rounds + 1):
        for key, fn in cases.items():
            time.sleep(0.05)
            t0 = time.perf_counter()
            out = fn()
            dt = time.perf_counter() - t0
            if rnd:
                times[key].append(dt)
            else:
                results[key] = out
    t = {k: np.array(v) for k, v in times.items()}
    print(f"modal 2000 x 1 x 200, {rounds} rounds after a warm-up round; medians of per-round ratios; "
          f"load average {load0:.1f} -> {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs")
    print(f"GEMM {np.median(t['gemm']) * 1e3:.1f} ms, plain modal product {np.median(t['plain']) * 1e3:.1f} ms")
    print(f"{'case':34s} {'ms':>7s} {'/ plain':>8s} {'GEMM rate':>10s}   goal: <= 1.2 and >= 0.70")
    for key, label in (("rev", f"{rev}, default precision"), ("tree", "working tree, default precision"),
                       ("rev_double", f"{rev}, precision=double"), ("tree_double", "working tree, precision=double")):
        print(f"{label:34s} {np.median(t[key]) * 1e3:7.1f} {np.median(t[key] / t['plain']):8.3f} "
              f"{np.median(t['gemm'] / t[key]):10.3f}")
    print(f"working tree / {rev}: default {np.median(t['tree'] / t['rev']):.3f}, "
          f"double {np.median(t['tree_double'] / t['rev_double']):.3f}")
    for a, b in (("tree", "rev"), ("tree_double", "rev_double"), ("tree", "tree_double")):
        d = np.max(np.abs(20 * np.log10(np.abs(results[a]) / np.abs(results[b]))))
        print(f"max |dL| {a} against {b}: {d:.1e} dB")


if __name__ == "__main__":
    main()
