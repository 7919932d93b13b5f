"""The ``demo`` command: the whole job on the bundled demo room."""

from __future__ import annotations

import time
from pathlib import Path

import click

from .. import __version__
from ..analysis.eq import CAUTIONS
from ..analysis.predict import band_figures, response_features, usable_band
from ..analysis.predict import predict as run_predict
from ..analysis.summary import room_summary
from ..io.roomfile import demo_room_path, load_room
from ..model.modes import room_modes
from ..model.placement import PRESETS, preset_layout
from ..present.plots import plot_modes, plot_prediction
from ..present.report import build_report
from ._util import CONTEXT, MODEL_CAUTION, dump_json, echo_err, json_option
from .predict import print_summary
from .report import write_report

__all__ = ["demo"]


@click.command(context_settings=CONTEXT)
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path), default="roommodes-demo",
              show_default=True, help="Folder for the demo's figures and tables (created if needed).")
@json_option
def demo(out_dir, as_json):
    """Run the whole tool on the bundled demo room and write its figures.

    The demo room is an invented edit suite (rooms/demo-studio.toml). The command prints
    the room's modes and summary, predicts the file's layout and the four standard
    placements, searches for a better placement, explains the left/right differences,
    designs the bass correction, and writes the figures and a full HTML report into OUT.
    With --json the running commentary goes to stderr and stdout gets one JSON object
    saying what was written.
    """

    say = echo_err if as_json else click.echo

    path = demo_room_path()
    room = load_room(path)
    out_dir.mkdir(parents=True, exist_ok=True)
    say(f"roommodes {__version__} demo: '{room.name}' from {path}")
    say(f"Writing figures to {out_dir.resolve()}")
    say("")
    summ = room_summary(room)
    print_summary(summ, say)
    ms = room_modes(room, 300.0)
    say("")
    say("Lowest modes: " + ", ".join(
        f"{ms.freq_hz[i]:.1f} Hz {tuple(int(v) for v in ms.indices[i])} {ms.kind[i]}" for i in range(6)))
    plot_modes(ms, 300.0, title=f"Room modes: {room.name}", path=out_dir / "modes.png")
    t0 = time.perf_counter()
    file_pred = run_predict(room)
    say("")
    say(f"Predicted level at the seat for the file's layout ({time.perf_counter() - t0:.2f} s):")
    for ch in file_pred.channels:
        band = usable_band(room.layout.speakers)
        fig = band_figures(file_pred.freq_hz, ch.level_db, band)
        say(f"  {ch.name}: spread {fig['spread_db']:.1f} dB over {band[0]:g}-{band[1]:g} Hz (1/6 octave)")
        for ft in response_features(room, file_pred, ch.name, max_features=4):
            say(f"    {ft.kind:<4} {ft.freq_hz:6.1f} Hz {ft.level_db:+6.1f} dB: {'; '.join(ft.causes)}")
    plot_prediction(file_pred, ms, title=f"{room.name}: predicted level at the seat",
                    path=out_dir / "predict-file-layout.png")
    preds = [file_pred] + [run_predict(room, preset_layout(room, n)) for n in PRESETS]
    say("")
    band = usable_band(room.layout.speakers)
    say(f"Standard placements compared ({band[0]:g}-{band[1]:g} Hz, 1/6-octave smoothed spread, left / right):")
    for p in preds:
        spreads = " / ".join(f"{band_figures(p.freq_hz, c.level_db, band)['spread_db']:4.1f}" for c in p.channels)
        say(f"  {p.layout_name:<9} {spreads} dB")
    plot_prediction(preds, ms, title=f"{room.name}: layouts compared", path=out_dir / "predict-layouts.png")
    say("")
    say("Placement search, left/right explanation and bass correction (the full report):")

    t0 = time.perf_counter()
    rep = build_report(room, room_text=path.read_text(encoding="utf-8"), command="roommodes demo",
                       files_folder="report_files")
    for line in rep.glance:
        say(f"  - {line}")
    written = write_report(out_dir / "report.html", rep, force=True)
    say(f"  ({time.perf_counter() - t0:.1f} s)")
    say("")
    say(f"Wrote to {out_dir}: report.html (open it in a browser) with its figures and tables in "
               f"report_files/, and {', '.join(sorted(p.name for p in out_dir.glob('*.png')))}")
    say(f"Next: copy {path.name} from rooms/, edit it for your room (docs/room-file.md), and run "
               "`roommodes predict YOUR-ROOM.toml --plot curves.png`, `roommodes place`, `roommodes eq`.")

    if as_json:
        dump_json({"output": str(out_dir / "report.html"), "folder": str(written), "room": room.name,
                   "room_file": str(path), "figures": sorted(p.name for p in out_dir.glob("*.png")),
                   "report_figures": [f.name for f in rep.figures], "report_tables": [t.name for t in rep.tables],
                   "values": rep.values})
    echo_err("Before applying any bass correction:")
    for caution in CAUTIONS:
        echo_err(f"  - {caution}")
    echo_err(MODEL_CAUTION)
