"""The ``report``, ``map`` and ``init`` commands.

``report`` writes one self-contained HTML page with a folder of its figures (PNG, SVG) and
tables (CSV) beside it; ``map`` draws or prints the level over the floor at one frequency;
``init`` writes a commented room file from questions (or from options, without any).

Same conventions as every command: ``--json`` prints one JSON object on stdout; messages go
to stderr; bad input gives one line and exit code 2; outputs are written atomically, never
over an input, and over an existing file only with ``--force``.
"""

from __future__ import annotations

import datetime
import difflib
import hashlib
import os
import re
import shlex
import shutil
import tempfile
import tomllib
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..present.report import EMBED_FORMATS, SEARCH_MODES
from ..present.units import UNITS, format_length, parse_length, parse_lengths, walls_text
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    UserError,
    check_output,
    dump_json,
    echo_err,
    fail,
    json_option,
    layouts_for,
    load_or_fail,
    method_option,
    protect_inputs,
)
from .measure import _guard, _measured_files_options, _measurement_specs, _wav_channel_option, _window_option

__all__ = ["report", "map_", "init", "COMMANDS", "room_sketch", "commented_room_toml"]

_units_option = click.option("--units", type=click.Choice(UNITS), default="cm", show_default=True,
                             help="Units of the distances shown (centimetres, metres, or feet and inches).")


def _check_folder_writable(folder):
    """Fail with a clear message unless files can be created in ``folder``."""
    folder = Path(folder)
    if not folder.exists():
        fail(f"cannot write into {folder}: the folder does not exist")
    if not folder.is_dir():
        fail(f"cannot write into {folder}: it is not a folder")
    try:
        fd, probe = tempfile.mkstemp(prefix=".roommodes-probe-", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        fail(f"cannot write into {folder}: the folder is not writable ({exc.strerror or exc})")


def _sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 16), b""):
            h.update(block)
    return h.hexdigest()


# ---------------------------------------------------------------------------- report
def _files_folder(out):
    return out.with_name(out.stem + "_files")


def write_report(out, rep, force):
    """Write the page and its folder so that either both appear complete or nothing changes."""
    folder = _files_folder(out)
    parent = out.parent
    tmp_dir = parent / f".{folder.name}.tmp-{os.getpid()}"
    if tmp_dir.exists():  # left over by a killed run of this same process id
        shutil.rmtree(tmp_dir)
    tmp_dir.mkdir()
    tmp_html = parent / f".{out.name}.tmp-{os.getpid()}"
    old = None
    try:
        for fig in rep.figures:
            (tmp_dir / f"{fig.name}.png").write_bytes(fig.png)
            (tmp_dir / f"{fig.name}.svg").write_bytes(fig.svg)
        for t in rep.tables:
            (tmp_dir / f"{t.name}.csv").write_text(t.csv_text(), encoding="utf-8")
        tmp_html.write_text(rep.html, encoding="utf-8")
        if folder.exists():
            if not force:
                fail(f"{folder} already exists; choose another report name or pass --force")
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
@_measured_files_options
@click.option("--fit", "do_fit", is_flag=True,
              help="Also calibrate the model to the measurements (as `roommodes fit` does) and report what changed.")
@_wav_channel_option
@_window_option
@_units_option
@click.option("--search", type=click.Choice(SEARCH_MODES), default="full", show_default=True,
              help="Placement search: as `roommodes place` does it, without its refinement (quick), or none.")
@method_option
@click.option("--embed", type=click.Choice(EMBED_FORMATS), default="svg", show_default=True,
              help="Format of the figures inside the page (both are written to the folder).")
@click.option("--force", is_flag=True, help="Overwrite an existing report and its folder (never an input).")
@_guard
def report(room_file, files, out, channel, at, measure, do_fit, wav_channel, window_s, units, search, method, embed,
           force):
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
    """
    from ..analysis.fit import FitTarget
    from ..dsp.response import log_frequencies
    from ..present.report import MeasuredCurve, build_report
    from .measure import _load_measurements, _require_file

    out = Path(out)
    if out.suffix.lower() not in (".html", ".htm"):
        fail(f"{out}: the report must be an .html file")
    protect_inputs(out, room_file, *files, *(Path(m[2]) for m in measure))
    _check_folder_writable(out.parent if str(out.parent) else Path("."))
    folder = _files_folder(out)
    if out.exists() and not force:
        fail(f"{out} already exists; choose another name or pass --force")
    if folder.exists() and not force:
        fail(f"{folder} already exists; choose another report name or pass --force")
    if folder.exists() and not folder.is_dir():
        fail(f"{folder} exists and is not a folder; remove it or choose another report name")
    if not (0.01 <= window_s <= 60):
        fail(f"--window must be 0.01..60 s, got {window_s:g}")
    if do_fit and not (files or measure):
        fail("--fit needs measurements: list files (with --channel) or use --measure CHANNEL X,Y,Z FILE")
    if (at or channel) and not files:
        fail("--channel and --at describe measurement FILES; none were given")
    room = load_or_fail(room_file)
    specs = []
    if files or measure:
        if room.layout is None:
            fail(f"{room_file}: the room file has no [speakers] and [seat]; measurements need the measured speakers")
        specs = _measurement_specs(room, files, channel, at, measure)
    band = (20.0, 200.0)
    grid = log_frequencies(max(5.0, band[0] / 2 ** 0.5), min(2000.0, band[1] * 2 ** 0.5), 48)
    meas = _load_measurements([s[2] for s in specs], wav_channel, window_s, grid) if specs else []
    curves = [MeasuredCurve(ch, pos, m) for (ch, pos, _), m in zip(specs, meas)]
    targets = None
    if do_fit:
        fit_meas = _load_measurements([s[2] for s in specs], wav_channel, window_s, log_frequencies(*band, 24))
        targets = [FitTarget(ch, pos, m.freq_hz, m.level_db, f"{p.name} ({ch})")
                   for (ch, pos, p), m in zip(specs, fit_meas)]
    inputs = []
    for p in [Path(room_file)] + [s[2] for s in specs]:
        _require_file(p, "input")
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
    try:
        room_text = Path(room_file).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError):
        room_text = None
    echo_err(f"roommodes {__version__}: report on '{room.name}'")
    rep = build_report(room, curves, targets, units=units, search=search, method=method, embed=embed,
                       room_text=room_text, inputs=inputs, command=shlex.join(argv),
                       created=datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z").strip(),
                       files_folder=folder.name, progress=lambda text: echo_err(f"  {text}"))
    written = write_report(out, rep, force)
    echo_err(f"wrote {out} ({len(rep.html) / 1e6:.1f} MB) and {written}/ ({len(rep.figures)} figures as PNG and SVG, "
             f"{len(rep.tables)} tables as CSV)")
    echo_err(MODEL_CAUTION)


# ---------------------------------------------------------------------------- map
_SHADES = " .:-=+*#%@"


def _shade_range(level_db, range_db=30.0):
    """Return the levels mapped to the lightest and darkest shades.

    The 99th percentile (the speakers' own near field is louder still) down to the quietest
    cell, at most ``range_db`` below.
    """
    hi = float(np.nanpercentile(level_db, 99))
    lo = max(float(np.nanmin(level_db)), hi - range_db)
    return lo, max(hi, lo + 1.0)


def _ascii_map(fm, width=36):
    """Rows of characters, front wall first: quiet ' ' to loud '@' (see :func:`_shade_range`)."""
    nx, ny = fm.level_db.shape
    cols = min(width, ny)
    rows = max(4, min(24, int(round(cols * (fm.x_m[-1] + fm.x_m[0]) / (fm.y_m[-1] + fm.y_m[0]) * 0.5))))
    xi = np.clip(np.round(np.linspace(0, nx - 1, rows)).astype(int), 0, nx - 1)
    yi = np.clip(np.round(np.linspace(0, ny - 1, cols)).astype(int), 0, ny - 1)
    lv = fm.level_db[np.ix_(xi, yi)]
    lo, hi = _shade_range(fm.level_db)
    lv = np.where(np.isfinite(lv), lv, hi)  # the cells next to a speaker
    k = np.clip(((lv - lo) / (hi - lo) * (len(_SHADES) - 1)).round().astype(int), 0, len(_SHADES) - 1)
    grid = [[_SHADES[v] for v in row] for row in k]
    lx = fm.x_m[-1] + fm.x_m[0]
    ly = fm.y_m[-1] + fm.y_m[0]

    def put(pos, ch):
        r = int(round(pos[0] / lx * (rows - 1)))
        c = int(round(pos[1] / ly * (cols - 1)))
        grid[min(max(r, 0), rows - 1)][min(max(c, 0), cols - 1)] = ch

    for i, (name, pos) in enumerate(zip(fm.channels, fm.sources_m)):
        put(pos, name[:1].upper() or str(i + 1))
    if fm.seat_m is not None:
        put(fm.seat_m, "S")
    return ["+" + "-" * cols + "+"] + ["|" + "".join(r) + "|" for r in grid] + ["+" + "-" * cols + "+"]


def _length_or_fail(text, name):
    try:
        return parse_length(text)
    except ValueError as exc:
        fail(f"{name}: {exc}")


@click.command("map", context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.option("--freq", "freq_hz", type=float, required=True, help="Frequency, Hz (e.g. a mode's frequency).")
@click.option("--height", "height", metavar="LENGTH",
              help="Height of the plane [default: the seat's ear height], e.g. 1.2, 120 cm or 4 ft.")
@click.option("--channel", "channels", metavar="NAME[,NAME...]",
              help="Speakers that play, summed in phase [default: all].")
@click.option("--layout", type=click.Choice(["file", "corner", "wall", "mid-room", "desk"]), default="file",
              show_default=True, help="Speaker and seat positions.")
@click.option("--step", "step", default="5 cm", show_default=True, metavar="LENGTH", help="Grid step (1 cm to 50 cm).")
@_units_option
@method_option
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write the map (PNG/SVG/PDF).")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@json_option
@_guard
def map_(room_file, freq_hz, height, channels, layout, step, units, method, plot_path, force, as_json):
    """Map the level over the floor plan at one frequency: where a mode is loud and where its nodes are.

    The level is predicted on a grid over the whole floor at ear height (or --height), with
    the speakers playing the same signal in phase (or only --channel). Prints the level at
    the seat, the loudest and quietest spots, the modes near the frequency and a coarse
    character map (front wall at the top, left wall on the left; ' ' quietest to '@'
    loudest); --plot draws it with the speakers, the seat and the nearest mode's nodal lines.
    """
    from ..analysis.maps import floor_level_map

    room = load_or_fail(room_file)
    (lay,) = layouts_for(room, layout)
    h_m = None if height is None else _length_or_fail(height, "--height")
    step_m = _length_or_fail(step, "--step")
    names = None
    if channels is not None:
        names = [c.strip() for c in channels.split(",") if c.strip()]
        if not names:
            fail("--channel needs speaker names separated by commas, e.g. left or left,right")
    if plot_path:
        protect_inputs(plot_path, room_file)
        check_output(plot_path, force)
        if Path(plot_path).suffix.lower() not in (".png", ".svg", ".pdf"):
            fail(f"{plot_path}: the plot must be a .png, .svg or .pdf file")
    try:
        fm = floor_level_map(room, freq_hz, lay, h_m, step_m, names, method)
    except ValueError as exc:
        fail(str(exc))
    xm, ym, top = fm.extreme("max")
    xn, yn, low = fm.extreme("min")
    if as_json:
        dump_json({
            "room": room.name, "layout": lay.name, "method": method,
            "freq_hz": fm.freq_hz, "height_m": fm.height_m, "channels": list(fm.channels),
            "speakers": [{"name": n, "position_m": p} for n, p in zip(fm.channels, fm.sources_m)],
            "x_m": fm.x_m, "y_m": fm.y_m, "level_db": fm.level_db,
            "level_reference": "dB re free-field pressure of one speaker at 1 m; speakers summed in phase",
            "seat_m": fm.seat_m, "seat_level_db": fm.seat_level_db,
            "max": {"position_m": [xm, ym, fm.height_m], "level_db": top},
            "min": {"position_m": [xn, yn, fm.height_m], "level_db": low},
            "near_modes": [dict(m) for m in fm.near_modes],
        })
    else:
        who = "all speakers in phase" if len(fm.channels) > 1 else f"the {fm.channels[0]} speaker"
        click.echo(f"Level over the floor of '{room.name}' at {fm.freq_hz:g} Hz, {format_length(fm.height_m, units)} "
                   f"high ({who}, {lay.name} layout, {method} solver)")
        click.echo("Level: dB relative to one speaker's free-field level at 1 m.")
        if fm.seat_m is not None:
            click.echo(f"  seat ({walls_text(room, fm.seat_m, units)}): {fm.seat_level_db:+.1f} dB")
        click.echo(f"  loudest {top:+.1f} dB at {format_length(xm, units)} from the front wall, "
                   f"{format_length(ym, units)} from the left wall")
        click.echo(f"  quietest {low:+.1f} dB at {format_length(xn, units)} from the front wall, "
                   f"{format_length(yn, units)} from the left wall")
        for m in fm.near_modes:
            click.echo(f"  near mode ({','.join(str(v) for v in m['indices'])}) {m['kind']} at {m['freq_hz']:.1f} Hz "
                       f"(half-power bandwidth {m['bandwidth_hz']:.1f} Hz)")
        if not fm.near_modes:
            click.echo("  no mode within its bandwidth of this frequency: several modes add up here")
        click.echo("")
        click.echo("  front wall")
        for line in _ascii_map(fm):
            click.echo("  " + line)
        click.echo("  back wall     (speakers by initial, S = seat; ' ' quietest to '@' loudest)")
    if plot_path:
        from ..present.plots_report import plot_floor_map

        plot_floor_map(fm, room, lay, units, path=plot_path)
        echo_err(f"wrote {plot_path}")
    echo_err(MODEL_CAUTION)


# ---------------------------------------------------------------------------- init
_SURFACE_PROMPTS = {
    "front": "front wall (behind the speakers)", "back": "back wall", "left": "left wall (seen from the seat)",
    "right": "right wall", "floor": "floor", "ceiling": "ceiling",
}


def _surface_value(text):
    """A material name, a number from the library list, or an absorption coefficient."""
    from ..model.materials import get_material, material_names

    names = material_names()
    t = str(text).strip()
    if not t:
        raise ValueError("give a material name, its number from the list, or an absorption coefficient")
    if t.isdigit() and 1 <= int(t) <= len(names) and not t.startswith("0"):
        return names[int(t) - 1]
    try:
        v = float(t)
    except ValueError:
        v = None
    if v is not None:
        if not (np.isfinite(v) and 0.0 <= v < 1.0):
            raise ValueError(f"an absorption coefficient must be 0 to below 1, got {t} "
                             f"(or pick 1-{len(names)} from the list)")
        return v
    try:
        return get_material(t.lower()).name
    except ValueError:
        close = difflib.get_close_matches(t.lower(), names, n=1, cutoff=0.5)
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        raise ValueError(f"unknown material '{t}'{hint}; give a name or number from the list, or an absorption "
                         "coefficient such as 0.1") from None


def _material_list():
    from ..model.materials import get_material, material_names

    lines = ["Surface materials (type the number or the name, or an absorption coefficient 0 to 0.99):"]
    for i, n in enumerate(material_names(), 1):
        m = get_material(n)
        lines.append(f"  {i:2d}. {n:<26} {m.description}")
    return lines


def _surface_text(value):
    return f'"{value}"' if isinstance(value, str) else f"{value!r}"


def _rounded(v):
    """Lengths are kept to the micrometre, so the file shows clean numbers (2.8, not 2.8000000000000003)."""
    return float(round(float(v), 6))


def commented_room_toml(name, size_m, surfaces, speakers=(), seat_m=None, temperature_c=20.0, units="cm",
                        header=None):
    """Text of a commented room file that :func:`roommodes.load_room` reads back to these values.

    Parameters
    ----------
    name : str
    size_m : (float, float, float)
    surfaces : dict
        Surface name -> material name or absorption coefficient, for all six surfaces.
    speakers : sequence of dict
        ``name``, ``position_m`` and optionally ``lowcut_hz``, ``lowcut_order``.
    seat_m : (float, float, float) or None
    temperature_c : float
    units : {"cm", "m", "ft-in"}
        Units of the comments that restate each length.
    header : str, optional
        First comment lines.
    """
    from ..model.materials import get_material
    from ..model.room import Room, Surface

    def num(v):
        return repr(float(v))

    lx, ly, lz = size_m
    probe = Room(name, tuple(size_m), tuple(Surface(w, (0.1,)) for w in _SURFACE_PROMPTS))
    lines = [f"# {line}" if line else "#" for line in (header or "").splitlines()]
    lines += [
        "# Coordinates are metres from the floor corner where the front wall (behind the speakers)",
        "# meets the left wall (as seen from the seat): x toward the back wall, y toward the right",
        "# wall, z up. The format is described in docs/room-file.md.",
        "",
        "[room]",
        f"name = {_toml_string(name)}",
        f"size_m = [{num(lx)}, {num(ly)}, {num(lz)}]   # length {format_length(lx, units)}, "
        f"width {format_length(ly, units)}, height {format_length(lz, units)}",
        f"temperature_c = {num(temperature_c)}",
        "",
        "[surfaces]   # a library material or a random-incidence absorption coefficient",
    ]
    for w in _SURFACE_PROMPTS:
        v = surfaces[w]
        note = get_material(v).description if isinstance(v, str) else "absorption coefficient"
        lines.append(f"{w} = {_surface_text(v)}   # {note}")
    for sp in speakers:
        pos = sp["position_m"]
        lines += ["", f"[speakers.{_toml_key(sp['name'])}]",
                  f"position_m = [{', '.join(num(v) for v in pos)}]   # woofer centre: "
                  f"{walls_text(probe, pos, units)}"]
        if sp.get("lowcut_hz"):
            box = "vented box" if sp.get("lowcut_order", 2) == 4 else "sealed box"
            lines += [f"lowcut_hz = {num(sp['lowcut_hz'])}   # the speaker's own -3 dB point",
                      f"lowcut_order = {int(sp.get('lowcut_order', 2))}   # {box}"]
    if seat_m is not None:
        lines += ["", "[seat]", f"position_m = [{', '.join(num(v) for v in seat_m)}]   # the listener's ears: "
                                f"{walls_text(probe, seat_m, units)}"]
    return "\n".join(lines) + "\n"


def _toml_string(s):
    return '"' + str(s).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _toml_key(s):
    s = str(s)
    return s if s and all(c.isalnum() or c in "-_" for c in s) else _toml_string(s)


def room_sketch(size_m, speakers=(), seat_m=None, surfaces=None, units="cm", width=44):
    """Sketch the room's plan in characters, dimensioned (front wall at the top).

    Parameters
    ----------
    size_m : (float, float, float)
    speakers : sequence of (name, position_m)
    seat_m : (float, float, float) or None
    surfaces : dict, optional
        Surface -> material or coefficient, written around the plan.
    units : {"cm", "m", "ft-in"}
    width : int
        Characters across the room's width.

    Returns
    -------
    list of str
    """
    lx, ly, lz = size_m
    cols = int(width)
    rows = int(min(26, max(5, round(cols * lx / ly * 0.45))))
    grid = [[" "] * cols for _ in range(rows)]
    marks = []
    used = set()
    for i, (name, pos) in enumerate(speakers):
        ch = (name[:1].upper() or "?")
        if ch in used or ch == "S":
            ch = str(i + 1)
        used.add(ch)
        marks.append((ch, f"{name} speaker", pos))
    if seat_m is not None:
        marks.append(("S", "seat (ears)", seat_m))
    for ch, _, pos in marks:
        r = min(rows - 1, max(0, int(round(pos[0] / lx * (rows - 1)))))
        c = min(cols - 1, max(0, int(round(pos[1] / ly * (cols - 1)))))
        grid[r][c] = ch
    s = surfaces or {}

    def lab(w):
        v = s.get(w)
        return "" if v is None else f": {v}"

    length = f"length {format_length(lx, units)}"
    out = [f"  front wall{lab('front')}".center(cols + 4)]
    out.append("  +" + "-" * cols + "+")
    mid = rows // 2
    for i, row in enumerate(grid):
        side = f"  {length}" if i == mid else ("  ^" if i == 0 else ("  v" if i == rows - 1 else "  |"))
        out.append("  |" + "".join(row) + "|" + side)
    out.append("  +" + "-" * cols + "+")
    w_txt = f" width {format_length(ly, units)} "
    arrow = "<" + w_txt.center(cols - 2, "-") + ">"
    out.append("   " + arrow)
    out.append(f"  back wall{lab('back')}".center(cols + 4))
    out.append(f"  left wall{lab('left')};  right wall{lab('right')}")
    out.append(f"  floor{lab('floor')};  ceiling{lab('ceiling')};  height {format_length(lz, units)}")
    probe_size = size_m
    for ch, what, pos in marks:
        d = (pos[0], min(pos[1], probe_size[1] - pos[1]), pos[2])
        side = "left" if pos[1] <= probe_size[1] - pos[1] else "right"
        out.append(f"  {ch} = {what}: {format_length(d[0], units)} from the front wall, "
                   f"{format_length(d[1], units)} from the {side} wall, {format_length(d[2], units)} high")
    return out


class _Answer:
    """A prompt's value processor: parse, check, or explain why not (click asks again)."""

    def __init__(self, func):
        self.func = func

    def __call__(self, text):
        try:
            return self.func(text)
        except ValueError as exc:
            raise click.BadParameter(str(exc)) from None


def _dimension(text, label):
    from ..model.room import MAX_DIMENSION_M, MIN_DIMENSION_M

    v = _rounded(parse_length(text))
    if not MIN_DIMENSION_M <= v <= MAX_DIMENSION_M:
        hint = ""
        if v > MAX_DIMENSION_M and str(text).strip().replace(".", "", 1).isdigit():
            hint = f"; a bare number is in metres: did you mean {str(text).strip()} cm?"
        raise ValueError(f"a room {label} of {v:g} m is not plausible; allowed {MIN_DIMENSION_M:g} to "
                         f"{MAX_DIMENSION_M:g} m{hint}")
    return v


def _coordinate(text, length_m, near, far, what):
    """Read a distance from the ``near`` wall, or from the ``far`` one when the text names it.

    E.g. "60 cm", "60 cm from right", "1.2 m from the back wall".
    """
    from ..model.room import WALL_MARGIN_M

    low = str(text).strip().lower()
    from_far = re.search(rf"\b{far}\b", low) is not None
    cleaned = re.sub(rf"\b(from\s+)?(the\s+)?({far}|{near})(\s+wall)?\b", " ", low).strip()
    v = _rounded(parse_length(cleaned))
    v = _rounded(length_m - v) if from_far else v
    if not WALL_MARGIN_M <= v <= length_m - WALL_MARGIN_M:
        raise ValueError(f"{what} must lie inside the room: {format_length(WALL_MARGIN_M, 'cm')} to "
                         f"{format_length(length_m - WALL_MARGIN_M, 'cm')} from the {near} "
                         f"{'wall' if near not in ('floor', 'ceiling') else ''}".rstrip()
                         + f" (the room measures {length_m:g} m this way), got {v:g} m")
    return v


def _point(text, size_m, what):
    from ..model.room import WALL_MARGIN_M

    try:
        p = tuple(_rounded(v) for v in parse_lengths(text, 3))
    except ValueError as exc:
        raise ValueError(f"{what}: {exc}") from None
    for v, L, axis in zip(p, size_m, "xyz"):
        if not WALL_MARGIN_M <= v <= L - WALL_MARGIN_M:
            raise ValueError(f"{what}: {axis} = {v:g} m lies outside the room (allowed {WALL_MARGIN_M:g} to "
                             f"{L - WALL_MARGIN_M:g} m)")
    return p


def _spacing_problem(speakers, seat):
    pos = [np.asarray(s["position_m"]) for s in speakers]
    for i in range(len(pos)):
        for j in range(i):
            if np.linalg.norm(pos[i] - pos[j]) < 0.05:
                return f"speakers '{speakers[j]['name']}' and '{speakers[i]['name']}' are closer than 5 cm"
    if seat is not None:
        for s, p in zip(speakers, pos):
            if np.linalg.norm(p - np.asarray(seat)) < 0.1:
                return f"the seat is within 10 cm of speaker '{s['name']}'"
    return None


def _ask(label, proc, default=None):
    return click.prompt(label, default=default, value_proc=_Answer(proc), show_default=default not in (None, ""),
                        err=True)


def _ask_position(label, size_m, units, default=None):
    lx, ly, lz = size_m
    d = default or (None, None, None)
    x = _ask(f"{label}: distance from the front wall", lambda t: _coordinate(t, lx, "front", "back", "the distance"),
             None if d[0] is None else format_length(d[0], units))
    y = _ask(f"{label}: distance from the left wall (or e.g. '60 cm from right')",
             lambda t: _coordinate(t, ly, "left", "right", "the distance"),
             None if d[1] is None else format_length(d[1], units))
    z = _ask(f"{label}: height above the floor", lambda t: _coordinate(t, lz, "floor", "ceiling", "the height"),
             None if d[2] is None else format_length(d[2], units))
    return (x, y, z)


def _lowcut(text):
    t = str(text).strip().lower().removesuffix("hz").strip()
    if t in ("", "-", "none", "unknown"):
        return None
    try:
        v = float(t)
    except ValueError:
        raise ValueError(f"give the -3 dB point in Hz (e.g. 45), or press Enter if unknown; got '{text}'") from None
    if not 5.0 <= v <= 500.0:
        raise ValueError(f"a -3 dB point of {v:g} Hz is out of range; allowed 5 to 500 Hz")
    return v


def _box(text):
    t = str(text).strip().lower()
    if t in ("sealed", "closed", "2"):
        return 2
    if t in ("vented", "ported", "reflex", "bass-reflex", "4"):
        return 4
    raise ValueError(f"answer sealed or vented, got '{text}'")


def _speaker_name(text):
    name = str(text).strip()
    if not name or not all(c.isalnum() or c in "-_" for c in name):
        raise ValueError(f"a speaker name is letters, digits, - or _ (e.g. left), got '{text}'")
    return name


def _speaker_option(text, size_m):
    name, sep, where = str(text).partition("=")
    if not sep:
        raise ValueError(f"--speaker must be NAME=X,Y,Z, e.g. left=50cm,62cm,115cm; got '{text}'")
    name = _speaker_name(name)
    return {"name": name, "position_m": _point(where, size_m, f"--speaker {name}")}


@click.command(context_settings=CONTEXT)
@click.argument("out", type=click.Path(path_type=Path), default="room.toml")
@click.option("--name", help="Name of the room [default: from the file name].")
@click.option("--size", metavar="L,W,H", help="Length, width, height, e.g. 4.6,3.4,2.45 or 15ft 1in, 11ft, 8ft.")
@click.option("--temperature", type=float, default=None, help="Air temperature, C [default 20].")
@click.option("--walls", metavar="MATERIAL", help="Material (or absorption coefficient) of all four walls.")
@click.option("--front", metavar="MATERIAL", help="Front wall (behind the speakers).")
@click.option("--back", metavar="MATERIAL", help="Back wall.")
@click.option("--left", metavar="MATERIAL", help="Left wall.")
@click.option("--right", metavar="MATERIAL", help="Right wall.")
@click.option("--floor", metavar="MATERIAL", help="Floor.")
@click.option("--ceiling", metavar="MATERIAL", help="Ceiling.")
@click.option("--speaker", "speaker_opts", multiple=True, metavar="NAME=X,Y,Z",
              help="A speaker's woofer centre from the front wall, the left wall and the floor (repeatable).")
@click.option("--seat", metavar="X,Y,Z", help="The listener's ears from the front wall, the left wall and the floor.")
@click.option("--no-speakers", is_flag=True, help="Write a room without speakers and seat.")
@click.option("--lowcut", "lowcut_hz", type=float, help="The speakers' own -3 dB point, Hz.")
@click.option("--box", type=click.Choice(["sealed", "vented"]), help="The speakers' box type [default sealed].")
@_units_option
@click.option("-y", "--yes", is_flag=True,
              help="Ask nothing: take every value from the options (missing ones are an error).")
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
@_guard
def init(out, name, size, temperature, walls, front, back, left, right, floor, ceiling, speaker_opts, seat,
         no_speakers, lowcut_hz, box, units, yes, force):
    """Write a commented room file, by answering questions or from options.

    \b
    roommodes init my-room.toml
    roommodes init my-room.toml --size "460cm,340cm,245cm" --walls plasterboard-on-studs \\
        --floor wood-floor-on-joists --ceiling plasterboard-on-studs \\
        --speaker left=50cm,62cm,115cm --speaker right=50cm,277cm,115cm --seat 185cm,170cm,120cm -y

    Asks for the room's dimensions, what each surface is made of (from the material
    library, or an absorption coefficient), where the speakers and the seat are, shows a
    dimensioned sketch to check, and writes the file. Lengths may be given in metres
    (3.6 or 3.6 m), centimetres (360 cm) or feet and inches (12 ft 3 in, 12' 3"); a bare
    number is in metres. A wrong answer is explained and asked again. Values given as
    options are not asked; with --yes nothing is asked at all.
    """
    from ..io.roomfile import RoomFileError, parse_room, write_text_atomic

    out = Path(out)
    if out.suffix.lower() != ".toml":
        fail(f"{out}: a room file must be a .toml file")
    _check_folder_writable(out.parent if str(out.parent) else Path("."))
    if out.exists() and not force:
        fail(f"{out} already exists; choose another name or pass --force")
    surf_opts = {"front": front or walls, "back": back or walls, "left": left or walls, "right": right or walls,
                 "floor": floor, "ceiling": ceiling}
    if no_speakers and (speaker_opts or seat):
        fail("--no-speakers cannot go with --speaker or --seat")
    if lowcut_hz is not None and not 5.0 <= lowcut_hz <= 500.0:
        fail(f"--lowcut {lowcut_hz:g} Hz is out of range; allowed 5 to 500 Hz")
    if temperature is not None and not -20.0 <= temperature <= 50.0:
        fail(f"--temperature {temperature:g} C is out of range; allowed -20 to 50 C")
    if yes:
        missing = [o for o, v in (("--size", size),) if v is None]
        missing += [f"--{w} (or --walls)" if w in ("front", "back", "left", "right") else f"--{w}"
                    for w, v in surf_opts.items() if v is None]
        if not no_speakers and bool(speaker_opts) != bool(seat):
            missing.append("--seat" if speaker_opts else "--speaker")
        if missing:
            fail("with --yes every value must come from the options; missing: " + ", ".join(missing))

    def parsed(value, proc, option):
        try:
            return proc(value)
        except ValueError as exc:
            fail(f"{option}: {exc}")

    while True:
        room_name = name if name is not None else (out.stem if yes else
                                                   click.prompt("Name of the room", default=out.stem, err=True))
        if size is not None:
            try:
                dims = tuple(_rounded(v) for v in parse_lengths(size, 3))
            except ValueError as exc:
                fail(f"--size: {exc}")
            for v, label in zip(dims, ("length", "width", "height")):
                parsed(str(v), lambda t, lb=label: _dimension(t, lb), "--size")
        else:
            click.echo("Room dimensions (metres unless you say cm, or ft and in):", err=True)
            dims = (_ask("Length, front wall to back wall", lambda t: _dimension(t, "length")),
                    _ask("Width, left wall to right wall", lambda t: _dimension(t, "width")),
                    _ask("Height, floor to ceiling", lambda t: _dimension(t, "height")))
        temp = 20.0 if temperature is None and yes else temperature
        surfaces = {}
        shown = False
        previous = None
        for w in _SURFACE_PROMPTS:
            if surf_opts[w] is not None:
                surfaces[w] = parsed(surf_opts[w], _surface_value, f"--{w}")
            else:
                if not shown:
                    for line in _material_list():
                        click.echo(line, err=True)
                    shown = True
                default = previous if w in ("back", "left", "right") else (
                    surfaces.get("front") if w == "ceiling" else None)
                surfaces[w] = _ask(f"Surface: {_SURFACE_PROMPTS[w]}", _surface_value,
                                   None if default is None else str(default))
            previous = surfaces[w]
        speakers, seat_m = [], None
        if speaker_opts:
            speakers = [parsed(t, lambda s, d=dims: _speaker_option(s, d), "--speaker") for t in speaker_opts]
            if len({s["name"] for s in speakers}) != len(speakers):
                fail("--speaker: two speakers have the same name")
        if seat is not None:
            seat_m = parsed(seat, lambda t, d=dims: _point(t, d, "--seat"), "--seat")
        if not yes and not no_speakers and not speakers:
            n = click.prompt("How many speakers (0 for none)", default=2, type=click.IntRange(0, 8), err=True)
            for i in range(n):
                default_name = ("left", "right")[i] if n == 2 else ("main" if n == 1 else f"speaker{i + 1}")
                sname = click.prompt(f"Speaker {i + 1} name", default=default_name, err=True,
                                     value_proc=_Answer(_speaker_name))
                while True:
                    pos = _ask_position(f"{sname} speaker (woofer centre)", dims, units)
                    problem = _spacing_problem(speakers + [{"name": sname, "position_m": pos}], None)
                    if problem is None:
                        break
                    click.echo(f"Error: {problem}; give this speaker's position again.", err=True)
                sp = {"name": sname, "position_m": pos}
                lc = lowcut_hz
                if lc is None:
                    prev = speakers[-1].get("lowcut_hz") if speakers else None
                    lc = _ask(f"{sname} speaker's own -3 dB point in Hz (Enter if unknown)", _lowcut,
                              "" if prev is None else f"{prev:g}")
                if lc:
                    sp["lowcut_hz"] = lc
                    order = {"sealed": 2, "vented": 4}.get(box) if box else None
                    if order is None:
                        prev = speakers[-1].get("lowcut_order", 2) if speakers else 2
                        order = _ask(f"{sname} speaker's box: sealed or vented", _box,
                                     "vented" if prev == 4 else "sealed")
                    sp["lowcut_order"] = order
                speakers.append(sp)
        elif lowcut_hz:
            for sp in speakers:
                sp["lowcut_hz"] = lowcut_hz
                sp["lowcut_order"] = 4 if box == "vented" else 2
        if speakers and seat_m is None:
            lx, ly, lz = dims
            while True:
                seat_m = _ask_position("seat (the listener's ears)", dims, units,
                                       (min(lx * 0.4, lx - 0.5), ly / 2, min(1.2, lz - 0.3)))
                problem = _spacing_problem(speakers, seat_m)
                if problem is None:
                    break
                click.echo(f"Error: {problem}; give the seat's position again.", err=True)
        problem = _spacing_problem(speakers, seat_m)
        if problem is not None:
            fail(problem)
        if temp is None:
            temp = click.prompt("Air temperature in C", default=20.0, type=click.FloatRange(-20, 50), err=True)
        header = (f"{room_name}: room file written by roommodes {__version__} init on "
                  f"{datetime.date.today().isoformat()}.")
        text = commented_room_toml(room_name, dims, surfaces, speakers, seat_m, temp, units, header)
        try:
            parse_room(tomllib.loads(text), str(out), out.parent)
        except (RoomFileError, tomllib.TOMLDecodeError) as exc:  # pragma: no cover - the checks above prevent it
            fail(f"the answers do not make a valid room file: {exc}")
        sketch = room_sketch(dims, [(s["name"], s["position_m"]) for s in speakers], seat_m, surfaces, units)
        click.echo("", err=True)
        for line in sketch:
            click.echo(line, err=True)
        click.echo("", err=True)
        if yes or click.confirm(f"Write {out}?", default=True, err=True):
            break
        if not click.confirm("Start again?", default=False, err=True):
            echo_err("Nothing written.")
            raise click.exceptions.Exit(1)
        name = size = temperature = seat = None
        surf_opts = dict.fromkeys(surf_opts)
        speaker_opts = ()
    try:
        write_text_atomic(out, text, overwrite=force)
    except (FileExistsError, OSError) as exc:
        raise UserError(str(exc)) from None
    echo_err(f"wrote {out}")
    click.echo(f"Next: roommodes report {out} -o {out.stem}-report.html")


#: The commands of this module, for ``main.add_command``.
COMMANDS = (report, map_, init)
