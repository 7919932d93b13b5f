"""The ``study`` command: rank candidate room sizes on a Dask cluster (docs/study.md)."""

from __future__ import annotations

import csv
import io
import math
import os
import time
from pathlib import Path

import click
from dask.distributed import Client, LocalCluster

from ..analysis.study import run_study
from ..io.roomfile import write_text_atomic
from ..io.studyfile import StudyFileError, load_study
from ..model.study import SCHROEDER
from ._util import CONTEXT, check_output, dump_json, echo_err, fail, json_option, method_option, protect_inputs

try:  # Parquet is optional (pip install "roommodes[parquet]")
    import pyarrow
    import pyarrow.parquet
except ImportError:  # pragma: no cover - depends on the installation
    pyarrow = None

#: Columns of the CSV (and Parquet) table, in order.
COLUMNS = ("rank", "length_m", "width_m", "height_m", "walls", "layout", "score_db", "score_p10_db", "score_p90_db",
           "spread_db", "response_db", "band_low_hz", "band_high_hz", "seat_x_m", "seat_y_m", "seat_z_m",
           "left_x_m", "left_y_m", "left_z_m", "right_x_m", "right_y_m", "right_z_m", "seed", "note")


def _rows(result):
    crit = sorted({k for c in result.candidates for k in c.criteria})
    rows = []
    for rank, c in enumerate(result.candidates, 1):
        row = {"rank": rank, "length_m": c.size_m[0], "width_m": c.size_m[1], "height_m": c.size_m[2],
               "walls": c.walls, "layout": c.layout, "score_db": c.score_db, "score_p10_db": c.score_p10_db,
               "score_p90_db": c.score_p90_db, "spread_db": c.spread_db, "response_db": c.response_db,
               "seed": c.seed, "note": c.note}
        row["band_low_hz"], row["band_high_hz"] = (tuple(c.band_hz) + (None, None))[:2]
        for name, p in (("seat", c.seat_m), ("left", (c.speakers_m or (None, None))[0]),
                        ("right", (c.speakers_m or (None, None))[1])):
            for k, v in zip("xyz", p if p is not None else (None, None, None)):
                row[f"{name}_{k}_m"] = v
        row.update({f"criterion_{k}": c.criteria.get(k) for k in crit})
        rows.append(row)
    return rows, list(COLUMNS) + [f"criterion_{k}" for k in crit]


def _csv_text(rows, columns):
    buf = io.StringIO()
    w = csv.DictWriter(buf, columns, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: ("" if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()})
    return buf.getvalue()


def _write_parquet(path, rows, columns):
    table = pyarrow.table({k: [r[k] for r in rows] for k in columns})
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        pyarrow.parquet.write_table(table, tmp)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


@click.command(context_settings=CONTEXT)
@click.argument("study_file", type=click.Path(path_type=Path))
@click.option("-o", "--output", type=click.Path(path_type=Path),
              help="CSV file of the ranked candidates (default: STUDY_FILE's name with -results.csv, beside it); "
                   "a .parquet file is written beside it when pyarrow is installed.")
@click.option("--workers", type=click.IntRange(1, 256), default=None,
              help="Workers of the local Dask cluster (default: one per CPU core).")
@click.option("--scheduler", metavar="ADDRESS", help="Use a running Dask scheduler, e.g. tcp://10.0.0.5:8786, "
              "instead of a local cluster.")
@click.option("--top", type=click.IntRange(1, 1000), default=10, show_default=True, help="Candidates printed.")
@method_option
@click.option("--force", is_flag=True, help="Overwrite existing result files.")
@json_option
def study(study_file, output, workers, scheduler, top, method, force, as_json):
    """Rank candidate room sizes by their predicted bass after their own EQ, on a Dask cluster.

    The study file gives ranges of length, width and height and the grid points per
    dimension ([study] length_m, width_m, height_m, steps); optionally wall materials, the
    placement (the same listening triangle in every room, a preset, or a placement search per
    room), a seat area, the band and the uncertainty (docs/study.md). Each candidate is scored
    over rooms drawn from the uncertainty: the seat area's deviation from flat plus its spread
    across the area, after the room's own EQ, from 30 Hz to the room's Schroeder frequency by
    default (dB, lower is better). The proportion criteria are
    shown beside each room, not used in the score. Results do not depend on the number of
    workers.
    """
    if workers is not None and scheduler:
        fail("--workers sets the size of a local cluster; leave it out with --scheduler (the cluster there has "
             "its own workers)")
    try:
        spec = load_study(study_file)
    except StudyFileError as exc:
        fail(str(exc))
    out = output if output is not None else study_file.with_name(f"{study_file.stem}-results.csv")
    protect_inputs(out, study_file)
    check_output(out, force, (".csv",), "--output")
    parquet = out.with_suffix(".parquet") if pyarrow is not None else None
    if parquet is not None:
        protect_inputs(parquet, study_file)
        check_output(parquet, force, (".parquet",), "the Parquet file")
    t0 = time.perf_counter()
    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except (OSError, TimeoutError, ValueError) as exc:
            fail(f"--scheduler {scheduler}: cannot reach the Dask scheduler ({exc}); check the address and that "
                 "the scheduler runs")
        cluster = None
    else:
        n = workers or os.cpu_count() or 1
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None)
        client = Client(cluster)
    try:
        n_workers = len(client.scheduler_info().get("workers", {}))
        engine = {"name": "dask.distributed", "workers": n_workers, "scheduler": scheduler or "local"}
        echo_err(f"study: {spec.n_candidates} candidate rooms, {spec.samples} drawn rooms each, on {n_workers} "
                 f"worker(s) ({scheduler or 'local cluster'})")
        with click.progressbar(length=spec.n_candidates, label="scoring", file=click.get_text_stream("stderr")) as bar:
            done = [0]

            def progress(k):
                bar.update(k - done[0])
                done[0] = k

            result = run_study(spec, client, method=method, progress=progress, engine=engine)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    elapsed = time.perf_counter() - t0
    rows, columns = _rows(result)
    write_text_atomic(out, _csv_text(rows, columns), overwrite=force)
    echo_err(f"wrote {out}")
    if parquet is not None:
        _write_parquet(parquet, rows, columns)
        echo_err(f"wrote {parquet}")
    echo_err(f"study took {elapsed:.1f} s")
    if as_json:
        dump_json({**result.to_dict(), "elapsed_s": elapsed})
        return
    lo, hi = spec.band_hz
    band = f"{lo:g} Hz to each room's Schroeder frequency" if hi == SCHROEDER else f"{lo:g}-{hi:g} Hz"
    how = "a placement search in each room" if spec.placement == "search" else f"the '{spec.layout}' layout rule"
    click.echo(f"Best of {spec.n_candidates} candidate rooms (score = deviation from flat + spread over the seat area "
               f"after the room's EQ, dB, {band}, 1/6-octave smoothed; {how}; median of the drawn rooms, 10-90 % in "
               "brackets; lower is better)")
    click.echo(f"{'rank':>4}  {'L x W x H (m)':<20} {'walls':<24} {'layout':<9} {'score':>6} {'(10-90 %)':>13} "
               f"{'spread':>6}  criteria passed")
    for rank, c in enumerate(result.candidates[:top], 1):
        size = f"{c.size_m[0]:.2f} x {c.size_m[1]:.2f} x {c.size_m[2]:.2f}"
        if not c.feasible:
            click.echo(f"{rank:>4}  {size:<20} {c.walls:<24} not scored: {c.note}")
            continue
        passed = ", ".join(k for k, v in c.criteria.items() if v) or "none"
        click.echo(f"{rank:>4}  {size:<20} {c.walls:<24} {c.layout:<9} {c.score_db:6.2f} "
                   f"({c.score_p10_db:5.2f}-{c.score_p90_db:5.2f}) {c.spread_db:6.2f}  {passed}")
