"""Command-line interface: parse, call one API function, print or write.

Every command that computes takes ``--json`` and then prints one JSON object on stdout
and nothing else there; messages and cautions go to stderr. Bad input gives one line on
stderr and exit code 2.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..analysis.predict import band_figures, usable_band
from ..io.roomfile import demo_room_path, load_room
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    UserError,
    check_output,
    dump_json,
    echo_err,
    fail,
    freq_range_option,
    json_option,
    layouts_for,
    load_or_fail,
    method_option,
    parse_range,
    ppo_option,
    protect_inputs,
    units_option,
    walls_text,
)


class _Group(click.Group):
    """Turns input problems raised below the CLI into one line and exit code 2."""

    def invoke(self, ctx):
        import warnings

        def show(message, category, filename, lineno, file=None, line=None):
            click.echo(f"roommodes: warning: {message}", err=True)

        warnings.showwarning = show
        try:
            return super().invoke(ctx)
        except (ValueError, FileExistsError) as exc:  # RoomFileError is a ValueError
            raise UserError(str(exc)) from None
        except BrokenPipeError:
            # the reader of stdout went away (e.g. `| head`): stop quietly, as shell tools do
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, sys.stdout.fileno())
            sys.exit(1)
        except OSError as exc:
            name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
            raise UserError(f"cannot read or write{name}: {exc.strerror or exc}") from None


@click.group(cls=_Group, context_settings=CONTEXT)
@click.version_option(__version__, prog_name="roommodes")
def main():
    """Room modes and loudspeaker placement for small rectangular rooms.

    Start with `roommodes demo`, then copy rooms/demo-studio.toml and edit it for your
    room. Every command reads a room file (TOML); see docs/room-file.md.
    """


# ---------------------------------------------------------------------------- modes
@main.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(dir_okay=True, path_type=Path))
@click.option("--freq-range", default="0,300", show_default=True, metavar="LOW,HIGH",
              help="List the modes in this range, Hz.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write a chart of the modes (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@json_option
def modes(room_file, freq_range, plot_path, force, as_json):
    """List the room's modes with decay times, and the room's summary figures.

    Modes: indices (nx, ny, nz) along length, width and height, frequency, kind
    (axial, tangential, oblique), nearest musical note, modal decay time T60 and
    half-power bandwidth from the surfaces' absorption. Summary: volume, area, Sabine and
    Eyring RT60 at 63/125/250 Hz, Schroeder frequency, and room-proportion checks.
    """
    from ..analysis.summary import room_summary
    from ..model.criteria import note_name
    from ..model.modes import room_modes

    lo, hi = parse_range(freq_range, allow_zero=True)
    room = load_or_fail(room_file)
    ms = room_modes(room, hi)
    sel = ms.freq_hz >= lo
    summ = room_summary(room)
    if plot_path:
        check_output(plot_path, force)
    if as_json:
        dump_json({
            "room": room.name, "size_m": room.size_m,
            "modes": [
                {"indices": ms.indices[i], "freq_hz": ms.freq_hz[i], "kind": ms.kind[i],
                 "note": note_name(ms.freq_hz[i]), "t60_s": ms.t60_s[i],
                 "decay_constant_per_s": ms.decay_constant[i], "bandwidth_hz": ms.bandwidth_hz[i]}
                for i in np.flatnonzero(sel)],
            "summary": _summary_dict(summ),
        })
    else:
        click.echo(f"Room modes of '{room.name}' ({room.size_m[0]:g} x {room.size_m[1]:g} x "
                   f"{room.size_m[2]:g} m, c = {room.speed_of_sound:.1f} m/s), {lo:g}-{hi:g} Hz")
        click.echo(f"{'n (L,W,H)':>11}  {'freq Hz':>8}  {'kind':<10}  {'note':<10}  {'T60 s':>6}  {'B Hz':>5}")
        for i in np.flatnonzero(sel):
            n = "(" + ",".join(str(v) for v in ms.indices[i]) + ")"
            click.echo(f"{n:>11}  {ms.freq_hz[i]:8.1f}  {ms.kind[i]:<10}  {note_name(ms.freq_hz[i]):<10}  "
                       f"{ms.t60_s[i]:6.2f}  {ms.bandwidth_hz[i]:5.1f}")
        click.echo(f"{int(sel.sum())} modes: {int(np.sum(sel & (ms.order == 1)))} axial, "
                   f"{int(np.sum(sel & (ms.order == 2)))} tangential, {int(np.sum(sel & (ms.order == 3)))} oblique")
        click.echo("")
        _print_summary(summ)
    if plot_path:
        from ..present.plots import plot_modes

        plot_modes(ms, hi, title=f"Room modes: {room.name}", path=plot_path)
        echo_err(f"wrote {plot_path}")


def _summary_dict(s):
    return {
        "volume_m3": s.volume_m3, "surface_area_m2": s.total_area_m2, "speed_of_sound_m_s": s.speed_of_sound,
        "bands_hz": s.bands_hz, "sabine_rt60_s": s.sabine_rt60_s, "eyring_rt60_s": s.eyring_rt60_s,
        "schroeder_hz": s.schroeder_hz,
        "checks": [{"name": c.name, "passed": c.passed, "reason": c.reason} for c in s.checks],
        "extrapolated_absorption": [{"surface": n, "bands_hz": b} for n, b in s.extrapolated],
    }


def _print_summary(s):
    click.echo(f"Volume {s.volume_m3:.1f} m3, surface area {s.total_area_m2:.1f} m2")
    click.echo("Reverberation time (s)   " + "  ".join(f"{b:>6g} Hz" for b in s.bands_hz))
    click.echo("  Sabine                 " + "  ".join(f"{t:9.2f}" for t in s.sabine_rt60_s))
    click.echo("  Eyring                 " + "  ".join(f"{t:9.2f}" for t in s.eyring_rt60_s))
    click.echo(f"Schroeder frequency {s.schroeder_hz:.0f} Hz (from the Sabine time at 125 Hz): "
               "above it the room behaves statistically and the modal picture is indicative only")
    click.echo("Room proportions:")
    for c in s.checks:
        click.echo(f"  [{'pass' if c.passed else 'FAIL'}] {c.name}: {c.reason}")
    if s.extrapolated:
        names = ", ".join(n for n, _ in s.extrapolated)
        click.echo(f"Note: absorption below 125 Hz is extrapolated for {names} (handbook tables stop at 125 Hz).")


# ---------------------------------------------------------------------------- predict
@main.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.option("--layout", type=click.Choice(["file", "corner", "wall", "mid-room", "desk", "all"]),
              default="file", show_default=True,
              help="Use the file's speaker and seat positions, a named standard placement, or compare all.")
@freq_range_option
@ppo_option
@method_option
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write the curves to a PNG/SVG file.")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@click.option("--no-speaker", is_flag=True, help="Leave out the speakers' own low-frequency roll-off.")
@json_option
@units_option
def predict(room_file, layout, freq_range, points_per_octave, method, plot_path, force, no_speaker, as_json):
    """Predict each speaker's level at the seat, with its main peaks and dips.

    Levels are in dB relative to the free-field level the same speaker gives at 1 m, so
    0 dB means "as loud as at 1 m outdoors"; room gain shows as positive values.
    """
    from ..analysis.predict import predict as run_predict
    from ..analysis.predict import response_features
    from ..dsp.response import log_frequencies
    from ..model.modes import room_modes

    lo, hi = parse_range(freq_range)
    room = load_or_fail(room_file)
    layouts = layouts_for(room, layout)
    if plot_path:
        check_output(plot_path, force)
        protect_inputs(plot_path, room_file)
    f = log_frequencies(lo, hi, points_per_octave)
    t0 = time.perf_counter()
    try:
        preds = [run_predict(room, lay, f, method=method, include_speaker=not no_speaker) for lay in layouts]
    except ValueError as exc:
        fail(str(exc))
    elapsed = time.perf_counter() - t0
    fs = preds[0].schroeder_hz
    if as_json:
        lay_objs = []
        for lay, p in zip(layouts, preds):
            lay_objs.append({
                "name": lay.name, "seat_m": lay.seat_m,
                "channels": [{"name": c.name, "position_m": c.position_m, "level_db": c.level_db,
                              "band_figures": band_figures(f, c.level_db, usable_band(lay.speakers))} for c in p.channels],
                "band_hz": usable_band(lay.speakers),
            })
        dump_json({
            "room": room.name, "method": method,
            "frequencies_hz": f, "schroeder_hz": fs, "valid": preds[0].valid,
            "level_reference": "dB re free-field pressure of the same source at 1 m",
            "channels": lay_objs[0]["channels"], "layout": lay_objs[0]["name"], "seat_m": lay_objs[0]["seat_m"],
            "layouts": lay_objs,
        })
    else:
        click.echo(f"Predicted level at the seat, '{room.name}', {lo:g}-{hi:g} Hz, {method} solver "
                   f"({elapsed:.2f} s)")
        click.echo("Level: dB relative to the same speaker's free-field level at 1 m.")
        for lay, p in zip(layouts, preds):
            click.echo("")
            click.echo(f"Layout: {lay.name}.  Seat: {walls_text(room, lay.seat_m)}")
            for ch in p.channels:
                band = usable_band(lay.speakers)
                fig = band_figures(f, ch.level_db, band)
                click.echo(f"  {ch.name}: {walls_text(room, ch.position_m)}")
                click.echo(f"    {band[0]:g}-{band[1]:g} Hz (1/6-octave smoothed): {fig['min_db']:+.1f} to {fig['max_db']:+.1f} dB, "
                           f"spread {fig['spread_db']:.1f} dB, std {fig['std_db']:.1f} dB")
                if layout != "all":
                    for ft in response_features(room, p, ch.name):
                        click.echo(f"    {ft.kind:<4} {ft.freq_hz:6.1f} Hz {ft.level_db:+6.1f} dB "
                                   f"({ft.prominence_db:4.1f} dB): {'; '.join(ft.causes)}")
        click.echo("")
        click.echo(f"Schroeder frequency {fs:.0f} Hz: results above it are indicative only.")
        click.echo("")
    echo_err(MODEL_CAUTION)
    if plot_path:
        from ..present.plots import plot_prediction

        ms = room_modes(room, hi)
        plot_prediction(preds, ms, title=f"{room.name}: predicted level at the seat", path=plot_path)
        echo_err(f"wrote {plot_path}")


# ---------------------------------------------------------------------------- demo
@main.command(context_settings=CONTEXT)
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path), default="roommodes-demo",
              show_default=True, help="Folder for the demo's figures and tables (created if needed).")
def demo(out_dir):
    """Run the whole tool on the bundled demo room and write its figures.

    The demo room is an invented edit suite (rooms/demo-studio.toml). The command prints
    the room's modes and summary, predicts the file's layout and the four standard
    placements, searches for a better placement, explains the left/right differences,
    designs the bass correction, and writes the figures and a full HTML report into OUT.
    """
    from ..analysis.predict import predict as run_predict
    from ..analysis.predict import response_features
    from ..analysis.summary import room_summary
    from ..model.modes import room_modes
    from ..model.placement import PRESETS, preset_layout
    from ..present.plots import plot_modes, plot_prediction

    path = demo_room_path()
    room = load_room(path)
    out_dir.mkdir(parents=True, exist_ok=True)
    click.echo(f"roommodes {__version__} demo: '{room.name}' from {path}")
    click.echo(f"Writing figures to {out_dir.resolve()}")
    click.echo("")
    summ = room_summary(room)
    _print_summary(summ)
    ms = room_modes(room, 300.0)
    click.echo("")
    click.echo("Lowest modes: " + ", ".join(
        f"{ms.freq_hz[i]:.1f} Hz {tuple(int(v) for v in ms.indices[i])} {ms.kind[i]}" for i in range(6)))
    plot_modes(ms, 300.0, title=f"Room modes: {room.name}", path=out_dir / "modes.png")
    t0 = time.perf_counter()
    file_pred = run_predict(room)
    click.echo("")
    click.echo(f"Predicted level at the seat for the file's layout ({time.perf_counter() - t0:.2f} s):")
    for ch in file_pred.channels:
        band = usable_band(room.layout.speakers)
        fig = band_figures(file_pred.freq_hz, ch.level_db, band)
        click.echo(f"  {ch.name}: spread {fig['spread_db']:.1f} dB over {band[0]:g}-{band[1]:g} Hz (1/6 octave)")
        for ft in response_features(room, file_pred, ch.name, max_features=4):
            click.echo(f"    {ft.kind:<4} {ft.freq_hz:6.1f} Hz {ft.level_db:+6.1f} dB: {'; '.join(ft.causes)}")
    plot_prediction(file_pred, ms, title=f"{room.name}: predicted level at the seat",
                    path=out_dir / "predict-file-layout.png")
    preds = [file_pred] + [run_predict(room, preset_layout(room, n)) for n in PRESETS]
    click.echo("")
    band = usable_band(room.layout.speakers)
    click.echo(f"Standard placements compared ({band[0]:g}-{band[1]:g} Hz, 1/6-octave smoothed spread, left / right):")
    for p in preds:
        spreads = " / ".join(f"{band_figures(p.freq_hz, c.level_db, band)['spread_db']:4.1f}" for c in p.channels)
        click.echo(f"  {p.layout_name:<9} {spreads} dB")
    plot_prediction(preds, ms, title=f"{room.name}: layouts compared", path=out_dir / "predict-layouts.png")
    click.echo("")
    click.echo("Placement search, left/right explanation and bass correction (the full report):")
    from ..present.report import build_report
    from .report import write_report

    t0 = time.perf_counter()
    rep = build_report(room, room_text=path.read_text(encoding="utf-8"), command="roommodes demo",
                       files_folder="report_files")
    for line in rep.glance:
        click.echo(f"  - {line}")
    write_report(out_dir / "report.html", rep, force=True)
    click.echo(f"  ({time.perf_counter() - t0:.1f} s)")
    click.echo("")
    click.echo(f"Wrote to {out_dir}: report.html (open it in a browser) with its figures and tables in "
               f"report_files/, and {', '.join(sorted(p.name for p in out_dir.glob('*.png')))}")
    click.echo(f"Next: copy {path.name} from rooms/, edit it for your room (docs/room-file.md), and run "
               "`roommodes predict YOUR-ROOM.toml --plot curves.png`, `roommodes place`, `roommodes eq`.")
    from ..analysis.eq import CAUTIONS

    echo_err("Before applying any bass correction:")
    for caution in CAUTIONS:
        echo_err(f"  - {caution}")
    echo_err(MODEL_CAUTION)


# Commands of later features live in their own modules and are registered here.
from .eq import eq  # noqa: E402
from .measure import COMMANDS as _MEASURE_COMMANDS  # noqa: E402
from .place import explain, place  # noqa: E402
from .report import COMMANDS as _REPORT_COMMANDS  # noqa: E402

main.add_command(place)
main.add_command(explain)
main.add_command(eq)
for _cmd in _MEASURE_COMMANDS:  # sweep, ir, noise, bands, decay, compare, fit
    main.add_command(_cmd)
for _cmd in _REPORT_COMMANDS:  # report, map, init
    main.add_command(_cmd)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
