"""Benchmark of the commands people wait for, against a baseline tree, in one run.
Prints figures; asserts nothing (no check values from an outside source: the reference is the
baseline tree, run in the same rounds).

    git worktree add /tmp/roommodes-base COMMIT     # the code to compare with, outside this tree
    python tests/bench/bench_commands.py --baseline /tmp/roommodes-base [--rounds 3]

Every command runs as its own process (``python -c "...roommodes.cli.main()" ARGS`` with
``PYTHONPATH`` set to one tree and the working folder set to an empty temporary one, so
that neither tree shadows the other), timed by wall clock from start to exit: start-up,
imports, work and writing the outputs. Bytecode caches are kept in the temporary folder, as
an installed package has them, even when ``PYTHONDONTWRITEBYTECODE`` is set. Rounds interleave the trees (the order flips every
round) so that changes in machine load hit both alike; each figure is the median of the
per-round ratios.

Targets (issue 14):

- ``report`` on the demo room: at most 0.5 times the baseline's wall time;
- ``predict`` on the demo room: at most 2.5 times the wall time of
  ``python -c "import numpy"`` measured in the same rounds.

Also printed: how many times each report figure is drawn and laid out (counted in the
process, matplotlib's ``Figure.draw`` and the constrained-layout solve; ``--search off`` so
that it is quick), old and new.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[2]
ROOM = HERE / "rooms" / "demo-studio.toml"

#: The command line, whatever the tree (the baseline may have no ``python -m roommodes``).
RUN = "import sys; from roommodes.cli import main; sys.argv[0] = 'roommodes'; sys.exit(main())"

#: Counts drawings and layout solves per report figure, in one process.
COUNT = """
import sys, json
import matplotlib.figure as mf, matplotlib.layout_engine as le
n = {"draw": 0, "layout": 0}
draw, execute = mf.Figure.draw, le.ConstrainedLayoutEngine.execute
def counted_draw(self, renderer):
    n["draw"] += 1
    return draw(self, renderer)
def counted_execute(self, fig):
    n["layout"] += 1
    return execute(self, fig)
mf.Figure.draw, le.ConstrainedLayoutEngine.execute = counted_draw, counted_execute
import roommodes
from roommodes.present.report import build_report
rep = build_report(roommodes.load_room(sys.argv[1]), search="off")
print(json.dumps({"figures": len(rep.figures), **n}))
"""


def environment(tree, cwd):
    """The processes' environment: ``tree`` first on the path, and bytecode caches kept (in
    ``cwd``, outside both trees), as an installed package has them: without them
    (``PYTHONDONTWRITEBYTECODE``) every start compiles every module again."""
    env = dict(os.environ, PYTHONPATH=str(tree), MPLBACKEND="Agg", PYTHONPYCACHEPREFIX=str(Path(cwd) / "pycache"))
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def run(tree, args, cwd):
    """Wall time of one process, s; fails loudly if the command fails."""
    env = environment(tree, cwd)
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, *args], cwd=cwd, env=env, stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True)
    dt = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"{tree}: {' '.join(args[:3])}... exited {proc.returncode}:\n{proc.stderr[-2000:]}")
    return dt


def which_tree(tree, cwd):
    env = environment(tree, cwd)
    out = subprocess.run([sys.executable, "-c", "import roommodes; print(roommodes.__file__)"], cwd=cwd, env=env,
                         capture_output=True, text=True, check=True)
    return out.stdout.strip()


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--baseline", type=Path, required=True, help="a checkout of the code to compare with")
    ap.add_argument("--rounds", type=int, default=3, help="rounds of the report (each runs both trees)")
    ap.add_argument("--predict-rounds", type=int, default=9, help="rounds of predict and of import numpy")
    ap.add_argument("--no-count", action="store_true", help="skip counting the figures' drawings")
    a = ap.parse_args()
    old, new = a.baseline.resolve(), HERE
    with tempfile.TemporaryDirectory(prefix="bench-commands-") as tmp:
        tmp = Path(tmp)
        print(f"roommodes commands benchmark: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f}")
        print(f"  old: {which_tree(old, tmp)}")
        print(f"  new: {which_tree(new, tmp)}")
        trees = {"old": old, "new": new}

        # -- predict against import numpy
        numpy_args = ["-c", "import numpy"]
        predict_args = ["-c", RUN, "predict", str(ROOM)]
        for t in trees.values():  # warm-up (file and bytecode caches), not counted
            run(t, predict_args, tmp)
        run(new, numpy_args, tmp)
        times = {"numpy": [], "old": [], "new": []}
        for r in range(a.predict_rounds):
            order = ["numpy", "old", "new"] if r % 2 == 0 else ["new", "old", "numpy"]
            for k in order:
                times[k].append(run(new if k == "numpy" else trees[k], numpy_args if k == "numpy" else predict_args,
                                    tmp))
        print(f"\npredict on the demo room, {a.predict_rounds} interleaved rounds (median wall time):")
        print(f"  python -c 'import numpy' {statistics.median(times['numpy']):.3f} s")
        for k in ("old", "new"):
            ratio = statistics.median(t / n for t, n in zip(times[k], times["numpy"]))
            print(f"  {k}: {statistics.median(times[k]):.3f} s, {ratio:.2f} x import numpy (median of per-round "
                  f"ratios){'; target <= 2.5: ' + ('met' if ratio <= 2.5 else 'NOT met') if k == 'new' else ''}")

        # -- report
        outs = {k: tmp / k for k in trees}
        for d in outs.values():
            d.mkdir()

        def report_args(k):
            return ["-c", RUN, "report", str(ROOM), "-o", str(outs[k] / "report.html"), "--force", "--json"]

        times = {"old": [], "new": []}
        for r in range(a.rounds):
            for k in (["old", "new"] if r % 2 == 0 else ["new", "old"]):
                times[k].append(run(trees[k], report_args(k), tmp))
            print(f"  report round {r + 1}: old {times['old'][-1]:.1f} s, new {times['new'][-1]:.1f} s "
                  f"(load {os.getloadavg()[0]:.1f})", flush=True)
        ratios = [n / o for n, o in zip(times["new"], times["old"])]
        ratio = statistics.median(ratios)
        print(f"\nreport on the demo room, {a.rounds} interleaved rounds: old median {statistics.median(times['old']):.1f}"
              f" s, new median {statistics.median(times['new']):.1f} s")
        print(f"  new / old = {ratio:.2f} (median of per-round ratios {', '.join(f'{x:.2f}' for x in ratios)}); "
              f"target <= 0.5: {'met' if ratio <= 0.5 else 'NOT met'}")

        # -- drawings per figure
        if not a.no_count:
            import json

            print("\nreport figures (--search off), drawings and layout solves per figure "
                  "(all drawn in the main process, where they are counted: ROOMMODES_RENDER_WORKER=0):")
            for k, t in trees.items():
                env = dict(environment(t, tmp), ROOMMODES_RENDER_WORKER="0")
                out = subprocess.run([sys.executable, "-c", COUNT, str(ROOM)], cwd=tmp, env=env, capture_output=True,
                                     text=True, check=True)
                c = json.loads(out.stdout.strip().splitlines()[-1])
                print(f"  {k}: {c['figures']} figures, {c['draw'] / c['figures']:.1f} drawings and "
                      f"{c['layout'] / c['figures']:.1f} layout solves each (PNG and SVG together)")


if __name__ == "__main__":
    main()
