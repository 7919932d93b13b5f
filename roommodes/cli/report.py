"""The ``report`` command: one self-contained HTML page with a folder of its figures (PNG,
SVG) and tables (CSV) beside it.

Same conventions as every command: ``--json`` prints one JSON object on stdout; messages go
to stderr; bad input gives one line and exit code 2; outputs are written atomically, never
over an input, and over an existing file only with ``--force``.
"""

from __future__ import annotations

import datetime
import hashlib
import os
import shlex
import shutil
from pathlib import Path

import click

from .. import __version__
from ..analysis.fit import FitTarget
from ..analysis.uncertainty import DEFAULT_SAMPLES
from ..dsp.response import log_frequencies
from ..present.report import EMBED_FORMATS, SEARCH_MODES, MeasuredCurve, build_report
from ._measured import (
    load_measurements,
    measured_files_options,
    measurement_specs,
    mic_cal_option,
    read_spl_ref,
    require_file,
    spl_ref_input,
    spl_ref_option,
    wav_channel_option,
    window_option,
)
from ._progress import Progress
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_output,
    display_units_option,
    dump_json,
    echo_err,
    fail,
    guard,
    json_option,
    load_or_fail,
    method_option,
    protect_inputs,
    room_inputs,
    uncertainty_options,
)

__all__ = ["report", "write_report"]

#: Drawn rooms ``report --uncertainty`` uses where none is chosen: for the file's own layout (its
#: response figure and which peaks and dips are solid) and the mode chart; the other figures draw
#: at most their own counts (docs/report.md).
REPORT_SAMPLES = DEFAULT_SAMPLES


def _sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 16), b""):
            h.update(block)
    return h.hexdigest()


# ---------------------------------------------------------------------------- report
def _refuse_inside(folder, path):
    """Fail if the input ``path`` lies inside the report folder that --force would replace."""
    try:
        inside = Path(path).resolve().is_relative_to(Path(folder).resolve())
    except (OSError, RuntimeError):
        inside = False
    if inside:
        fail(f"the input {path} lies inside {folder}, which the report replaces; move it out first")


#: A file the report writes into its own folder: only a folder holding it is ever replaced.
REPORT_MARKER = ".roommodes-report"


def _files_folder(out):
    return out.with_name(out.stem + "_files")


def check_report_folder(folder, force):
    """Fail unless ``folder`` is absent, or (with ``force``) a report folder this program wrote.

    A folder is replaced only when it is a real folder (not a symbolic link) holding
    :data:`REPORT_MARKER`; anything else is the user's and is never removed.
    """
    folder = Path(folder)
    if folder.is_symlink():
        fail(f"{folder} is a symbolic link; roommodes does not replace it: remove it or choose another report name")
    if not folder.exists():
        return
    if not folder.is_dir():
        fail(f"{folder} exists and is not a folder; remove it or choose another report name")
    if not force:
        fail(f"{folder} already exists; choose another report name or pass --force")
    if not (folder / REPORT_MARKER).is_file():
        fail(f"{folder} exists and was not written by roommodes report (no {REPORT_MARKER} file in it); it is left "
             "alone even with --force: move it away or choose another report name")


def write_report(out, rep, force):
    """Write the page and its folder so that either both appear complete or nothing changes.

    An existing folder is replaced only if :func:`check_report_folder` allows it (checked
    again here, just before the swap).
    """
    folder = _files_folder(out)
    parent = out.parent
    tmp_dir = parent / f".{folder.name}.tmp-{os.getpid()}"
    if tmp_dir.exists():  # left over by a killed run of this same process id
        shutil.rmtree(tmp_dir)
    tmp_dir.mkdir()
    tmp_html = parent / f".{out.name}.tmp-{os.getpid()}"
    old = None
    try:
        (tmp_dir / REPORT_MARKER).write_text(f"written by roommodes {__version__} report; replaced by the next "
                                             "report of the same name with --force\n", encoding="utf-8")
        for fig in rep.figures:
            (tmp_dir / f"{fig.name}.png").write_bytes(fig.png)
            (tmp_dir / f"{fig.name}.svg").write_bytes(fig.svg)
        for t in rep.tables:
            (tmp_dir / f"{t.name}.csv").write_text(t.csv_text(), encoding="utf-8")
        tmp_html.write_text(rep.html, encoding="utf-8")
        check_report_folder(folder, force)
        if folder.exists():
            old = parent / f".{folder.name}.old-{os.getpid()}"
            os.replace(folder, old)
        os.replace(tmp_dir, folder)
        try:
            os.replace(tmp_html, out)
        except OSError:
            os.replace(folder, tmp_dir)  # put the new folder back so nothing half-done remains
            if old is not None:
                os.replace(old, folder)
                old = None
            raise
    except BaseException:
        if old is not None and not folder.exists():
            os.replace(old, folder)
            old = None
        raise
    finally:
        if tmp_dir.exists():
            shutil.rmtree(tmp_dir, ignore_errors=True)
        if tmp_html.exists():
            tmp_html.unlink()
        if old is not None and old.exists():
            shutil.rmtree(old, ignore_errors=True)
    return folder


@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.argument("files", nargs=-1, type=click.Path(path_type=Path))
@click.option("-o", "--out", "out", type=click.Path(path_type=Path), required=True,
              help="The HTML report to write; its figures (PNG, SVG) and tables (CSV) go to NAME_files/ beside it.")
@measured_files_options
@click.option("--fit", "do_fit", is_flag=True,
              help="Also calibrate the model to the measurements (as `roommodes fit` does) and report what changed.")
@wav_channel_option
@window_option
@display_units_option
@click.option("--search", type=click.Choice(SEARCH_MODES), default="full", show_default=True,
              help="Placement search: as `roommodes place` does it, without its refinement (quick), or none.")
@method_option
@click.option("--embed", type=click.Choice(EMBED_FORMATS), default="svg", show_default=True,
              help="Format of the figures inside the page (both are written to the folder).")
@click.option("--force", is_flag=True, help="Overwrite an existing report and its folder (never an input).")
@mic_cal_option
@uncertainty_options(samples=REPORT_SAMPLES, samples_note=(
    "The file's own layout is drawn this many times; the standard placements, the placement figure and the "
    "left/right figure, the floor maps and the mode coupling at most 100, the EQ and subs at most 200 "
    "(docs/report.md)."))
@spl_ref_option
@json_option
@guard
def report(room_file, files, out, channel, at, measure, do_fit, wav_channel, window_s, units, search, method, embed,
           force, mic_cal, uncertainty, samples, seed, as_json, spl_ref):
    """Write a self-contained HTML report of the room, for a client or for your notes.

    \b
    roommodes report ROOM.toml -o REPORT.html
    roommodes report ROOM.toml MEAS... --channel left [--at X,Y,Z] -o REPORT.html [--fit]

    The report holds the room drawn to scale with its surfaces and proportion checks, the
    modes that matter at the seat and maps of where they are loud, the predicted response
    of the file's layout and the standard placements, the placement suggestion with
    positions from named walls, why left and right differ, the EQ and its headroom, the
    comparison with measurements (and the fitted model, with --fit), what the model
    assumes and where it stops being trustworthy, the cautions, and everything needed to
    reproduce it. It opens offline in any browser and prints on A4 or Letter. Every figure
    is also written as PNG and SVG, and every table as CSV, into NAME_files/ beside it.

    With --uncertainty, the response figures shade the 10-90 % band of rooms drawn from the
    room file's [uncertainty] (with --fit, the narrowed one of the calibrated model), and the
    page says which peaks and dips are solid and which fragile (docs/uncertainty.md).
    """

    out = Path(out)
    if out.suffix.lower() not in (".html", ".htm"):
        fail(f"{out}: the report must be an .html file")
    inputs_given = [Path(room_file), *files, *(Path(m[2]) for m in measure), *([Path(mic_cal)] if mic_cal else []),
                    *spl_ref_input(spl_ref)]
    if spl_ref and not (files or measure):
        fail("--spl-ref calibrates measurements; give them (FILES with --channel, or --measure)")
    protect_inputs(out, *inputs_given)
    check_output(out, force, what="-o")
    folder = _files_folder(out)
    check_report_folder(folder, force)
    if not (0.01 <= window_s <= 60):
        fail(f"--window must be 0.01..60 s, got {window_s:g}")
    if do_fit and not (files or measure):
        fail("--fit needs measurements: list files (with --channel) or use --measure CHANNEL X,Y,Z FILE")
    if (at or channel) and not files:
        fail("--channel and --at describe measurement FILES; none were given")
    room = load_or_fail(room_file)
    for p in room_inputs(room_file, room)[1:] + inputs_given:
        protect_inputs(out, p)
        _refuse_inside(folder, p)
    specs = []
    if files or measure:
        if room.layout is None:
            fail(f"{room_file}: the room file has no [speakers] and [seat]; measurements need the measured speakers")
        specs = measurement_specs(room, files, channel, at, measure)
    band = (20.0, 200.0)
    grid = log_frequencies(max(5.0, band[0] / 2 ** 0.5), min(2000.0, band[1] * 2 ** 0.5), 48)
    ref = read_spl_ref(spl_ref, wav_channel)
    # the curves stay in the chain's dBFS: the report aligns them with the prediction, and the
    # calibration enters the maximum-level figures of the EQ section (build_report's spl_reference)
    meas = load_measurements([s[2] for s in specs], wav_channel, window_s, grid, mic_cal) if specs else []
    curves = [MeasuredCurve(ch, pos, m) for (ch, pos, _), m in zip(specs, meas)]
    targets = None
    if do_fit:
        fit_meas = load_measurements([s[2] for s in specs], wav_channel, window_s, log_frequencies(*band, 24),
                                     mic_cal)
        targets = [FitTarget(ch, pos, m.freq_hz, m.level_db, f"{p.name} ({ch})", m.band_fraction)
                   for (ch, pos, p), m in zip(specs, fit_meas)]
    inputs = []
    for p in [Path(room_file)] + [s[2] for s in specs]:
        require_file(p, "input")
        inputs.append({"name": str(p), "bytes": p.stat().st_size, "sha256": _sha256(p)})
    argv = ["roommodes", "report", str(room_file), *map(str, files), "-o", str(out)]
    if channel:
        argv += ["--channel", channel]
    for a in at:
        argv += ["--at", a]
    for m in measure:
        argv += ["--measure", *m]
    argv += (["--fit"] if do_fit else []) + ["--units", units, "--search", search, "--method", method,
                                             "--embed", embed]
    if wav_channel:
        argv += ["--wav-channel", str(wav_channel)]
    if window_s != 1.0:
        argv += ["--window", f"{window_s:g}"]
    if uncertainty:
        argv += ["--uncertainty", "--samples", str(samples), "--seed", str(seed)]
    if spl_ref:
        argv += ["--spl-ref", spl_ref]
    try:
        room_text = Path(room_file).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        room_text = None
    echo_err(f"roommodes {__version__}: report on '{room.name}'")
    with Progress("roommodes report") as prog:
        rep = build_report(room, curves, targets, units=units, search=search, method=method, embed=embed,
                           room_text=room_text, inputs=inputs, command=shlex.join(argv),
                           created=datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z").strip(),
                           files_folder=folder.name, progress=prog.step,
                           uncertainty={"n_samples": samples, "seed": seed} if uncertainty else None,
                           spl_reference=ref)
        prog.step("writing")
        written = write_report(out, rep, force)
    echo_err(f"wrote {out} ({len(rep.html) / 1e6:.1f} MB) and {written}/ ({len(rep.figures)} figures as PNG and SVG, "
             f"{len(rep.tables)} tables as CSV)")
    if as_json:  # what was written, and the page's numbers (its data block)
        dump_json({"output": str(out), "folder": str(written), "method": method,
                   "figures": [f.name for f in rep.figures], "tables": [t.name for t in rep.tables],
                   "values": rep.values})
    echo_err(MODEL_CAUTION)


# ---------------------------------------------------------------------------- map


# ---------------------------------------------------------------------------- init


