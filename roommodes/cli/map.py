"""The ``map`` command: the level over the floor at one frequency, drawn or printed."""

from __future__ import annotations

from pathlib import Path

import click
import numpy as np

from ..analysis.maps import MAP_MAX_POINTS, MAP_SAMPLES, MAP_UNSURE_DB, floor_level_map, floor_map_bands
from ..dsp.checks import check_number
from ..present.plots_report import plot_floor_map
from ..present.units import format_length, parse_length, walls_text
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_plot,
    display_units_option,
    dump_json,
    echo_err,
    fail,
    guard,
    json_option,
    layouts_for,
    load_or_fail,
    method_option,
    room_inputs,
    uncertainty_options,
    uncertainty_text,
)

__all__ = ["map_"]


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


def _echo_bands(fm, bands, room, units):
    """How sure the map is: the spread over the floor, at the seat and where the quietest spot lands."""
    sp, pattern = bands.spread_db, bands.pattern_spread_db
    ok = np.isfinite(sp) & np.isfinite(pattern)
    lo, hi = bands.floor_shift_db
    click.echo("")
    click.echo(f"How sure: {bands.n_samples} rooms drawn (seed {bands.seed}); {uncertainty_text(room)}.")
    click.echo(f"  the whole floor moves together by {lo:+.1f} to {hi:+.1f} dB (10-90 % of its median level); "
               f"each cell's own 10-90 % spread: median {np.median(sp[ok]):.1f} dB")
    click.echo(f"  against the floor's median (the pattern): median {np.median(pattern[ok]):.1f} dB, largest "
               f"{np.max(pattern[ok]):.1f} dB; {100 * np.mean(pattern[ok] > MAP_UNSURE_DB):.0f} % of the floor "
               f"spreads more than {MAP_UNSURE_DB:g} dB (where loud and quiet spots lie is unsure there)")
    if fm.seat_m is not None:
        ix = int(np.argmin(np.abs(fm.x_m - fm.seat_m[0])))
        iy = int(np.argmin(np.abs(fm.y_m - fm.seat_m[1])))
        click.echo(f"  seat: {bands.level_db_p10[ix, iy]:+.1f} to {bands.level_db_p90[ix, iy]:+.1f} dB "
                   f"(median {bands.level_db_p50[ix, iy]:+.1f} dB)")
    qx = np.percentile(bands.quietest_m[:, 0], [10, 90])
    qy = np.percentile(bands.quietest_m[:, 1], [10, 90])
    cell_m = 2.0 * max(fm.x_m[1] - fm.x_m[0], fm.y_m[1] - fm.y_m[0])
    moves = (qx[1] - qx[0] > cell_m) or (qy[1] - qy[0] > cell_m)
    click.echo(f"  quietest spot of the drawn rooms (10-90 %): {format_length(qx[0], units)} to "
               f"{format_length(qx[1], units)} from the front wall, {format_length(qy[0], units)} to "
               f"{format_length(qy[1], units)} from the left wall: "
               + ("it moves; do not rely on exactly where a deep dip lies" if moves else
                  "it stays within two cells"))


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
@click.option("--step", "step", metavar="LENGTH",
              help=f"Grid step (1 cm to 50 cm, at most {MAP_MAX_POINTS} points)  [default: 5 cm, coarser on a large floor].")
@display_units_option
@method_option
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write the map (PNG/SVG/PDF).")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@uncertainty_options(samples=MAP_SAMPLES, samples_note=(
    "Each room is one solver call over the whole grid (about 0.07 s of one core on the demo room's 5 cm map)."))
@json_option
@guard
def map_(room_file, freq_hz, height, channels, layout, step, units, method, plot_path, force, uncertainty, samples,
         seed, as_json):
    """Map the level over the floor plan at one frequency: where a mode is loud and where its nodes are.

    The level is predicted on a grid over the whole floor at ear height (or --height), with
    the speakers playing the same signal in phase (or only --channel). Prints the level at
    the seat, the loudest and quietest spots, the modes near the frequency and a coarse
    character map (front wall at the top, left wall on the left; ' ' quietest to '@'
    loudest); --plot draws it with the speakers, the seat and the nearest mode's nodal lines.

    With --uncertainty, the map is computed again in rooms drawn from the room file's
    [uncertainty] table: the 10th, 50th and 90th percentile of every cell's level, how far
    the whole floor moves together, how much of the floor's pattern is unsure (10-90 %
    spread against the floor's median over 6 dB) and where the quietest spot lands; --plot
    adds a panel of that spread (docs/uncertainty.md).
    """

    freq_hz = check_number("--freq", freq_hz, 5.0, 1000.0, unit=" Hz")
    room = load_or_fail(room_file)
    (lay,) = layouts_for(room, layout)
    h_m = None if height is None else _length_or_fail(height, "--height")
    step_m = None if step is None else check_number("--step", _length_or_fail(step, "--step"), 0.01, 0.5, unit=" m")
    names = None
    if channels is not None:
        names = [c.strip() for c in channels.split(",") if c.strip()]
        if not names:
            fail("--channel needs speaker names separated by commas, e.g. left or left,right")
    check_plot(plot_path, force, *room_inputs(room_file, room))
    try:
        fm = floor_level_map(room, freq_hz, lay, h_m, step_m, names, method)
    except ValueError as exc:
        fail(f"{room_file}: {exc}" if "step" in str(exc) or "floor" in str(exc) else str(exc))
    bands = None
    if uncertainty:
        try:
            bands = floor_map_bands(room, fm, lay, n_samples=samples, seed=seed)
        except ValueError as exc:
            fail(f"--samples: {exc}" if "drawn rooms of a" in str(exc) else str(exc))
    if as_json:
        dump_json({"room": room.name, "layout": lay.name, **fm.to_dict(), **(bands.to_dict() if bands else {})})
    else:
        xm, ym, top = fm.extreme("max")
        xn, yn, low = fm.extreme("min")
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
        if bands is not None:
            _echo_bands(fm, bands, room, units)
    if plot_path:
        plot_floor_map(fm, room, lay, units, path=plot_path, bands=bands)
        echo_err(f"wrote {plot_path}")
    echo_err(MODEL_CAUTION)
