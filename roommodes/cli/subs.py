"""The ``subs`` command: where the subwoofers go and how to set them, for several seats."""

from __future__ import annotations

import time
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..analysis.subs import (
    BEFORE_CROSSOVER_HZ,
    CAUTIONS,
    CROSSOVER_TYPE,
    SCORE_WEIGHTS,
    optimise_subs,
    room_with_config,
)
from ..io.roomfile import room_to_toml, write_text_atomic
from ..present.plots_subs import plot_subs
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_output,
    dump_json,
    echo_err,
    fail,
    json_option,
    load_or_fail,
    method_option,
    protect_inputs,
    room_inputs,
    units_option,
    walls_text,
)


def _polarity(p):
    return "+ (normal)" if p > 0 else "- (inverted)"


@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@method_option
@click.option("--points-per-octave", type=click.IntRange(6, 96), default=24, show_default=True,
              help="Frequency-grid density over the scored band.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path),
              help="Write the level at every seat and a floor plan per configuration (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@click.option("--write-settings", "settings_path", type=click.Path(path_type=Path), metavar="OUT.toml",
              help="Write a copy of the room file with the chosen configuration's sub positions, gains, delays, "
                   "polarities and crossover ([system]); the input is never overwritten.")
@click.option("--rank", type=click.IntRange(1, 20), default=1, show_default=True,
              help="Which configuration of the ranked table --write-settings writes.")
@json_option
@units_option
def subs(room_file, method, points_per_octave, plot_path, force, settings_path, rank, as_json):
    """Find where the subwoofers go, and their gain, delay, polarity and crossover, for every seat.

    Considers 1, 2 and 4 subs (the [subs] table of the room file sets the counts, the allowed
    positions, the crossover range and the largest delay) and scores each configuration by
    the seat-to-seat spread, the flatness at the main seat (the first seat listed) and how
    well subs and mains add through the crossover. The signal is the mono bass sum: the same
    signal to both mains and every sub. Compares with the file's current subs and with one
    sub at the front-wall centre. See docs/subs.md.
    """

    room = load_or_fail(room_file)
    if room.layout is None:
        fail(f"{room_file}: the room file has no speakers and seats; add [speakers.NAME] and [seat] or "
             "[seats.NAME] (docs/room-file.md)")
    if plot_path:
        check_output(plot_path, force)
        protect_inputs(plot_path, room_file)
    if settings_path:
        protect_inputs(settings_path, *room_inputs(room_file, room))
        check_output(settings_path, force, (".toml",), "--write-settings")
    t0 = time.perf_counter()
    try:
        res = optimise_subs(room, method=method, points_per_octave=points_per_octave)
    except ValueError as exc:
        fail(f"{room_file}: {exc}" if not str(exc).startswith(str(room_file)) else str(exc))
    elapsed = time.perf_counter() - t0
    mains_m = np.array([m.position_m for m in room.layout.mains])
    if as_json:
        d = res.to_dict()
        d["elapsed_s"] = elapsed
        dump_json(d)
        for c in CAUTIONS:
            echo_err(f"caution: {c}")
    else:
        _print(room, res, elapsed)
    if plot_path:
        plot_subs(res, room, mains_m, title=f"Subwoofers: {room.name}", path=plot_path)
        echo_err(f"wrote {plot_path}")
    if settings_path:
        _write_settings(room_file, room, res, rank, settings_path, force)


def _write_settings(room_file, room, res, rank, path, force):
    """A copy of the room file with configuration ``rank`` (1 = best) written into it."""
    if rank > len(res.ranked):
        fail(f"--rank {rank}: the table has {len(res.ranked)} configurations; choose 1..{len(res.ranked)}")
    c = res.ranked[rank - 1]
    new_room = room_with_config(room, c)
    text = room_to_toml(new_room, comment=(
        f"Written by roommodes {__version__} subs from {room_file}: configuration #{rank} ({c.label}), "
        f"seat-to-seat spread {c.seat_spread_db:.1f} dB over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz "
        f"({res.before.seat_spread_db:.1f} dB as the file was).\n"
        "Set the subs from quiet: start with the amplifier down and raise the level slowly."),
        original_text=Path(room_file).read_text(encoding="utf-8"), written_to=path)
    try:
        write_text_atomic(path, text, overwrite=force)
    except (FileExistsError, OSError) as exc:
        fail(str(exc))
    echo_err(f"wrote {path}: {len(c.subs)} sub{'s' if len(c.subs) != 1 else ''} with their gain, delay and "
             f"polarity, [system] crossover_hz = {c.crossover_hz:g}, mains_delay_ms = {c.mains_delay_ms:g}")


def _print(room, res, elapsed):
    s = res.search
    lay = room.layout
    seats = ", ".join(f"{st.name} {st.weight:g}" for st in res.seats)
    click.echo(f"Subwoofers for '{room.name}' ({room.size_m[0]:g} x {room.size_m[1]:g} x {room.size_m[2]:g} m): "
               f"{len(lay.mains)} mains, {len(lay.subs)} sub{'s' if len(lay.subs) != 1 else ''} in the file; "
               f"seats (weight): {seats}; the main seat is '{res.seats[0].name}'")
    click.echo("Signal: the mono bass sum, the same signal to both mains and every sub (common practice for low "
               f"frequencies). Crossover: {CROSSOVER_TYPE}, Linkwitz-Riley 4th order, low-pass on the subs and "
               "high-pass on the mains.")
    if res.assumed_sub:
        click.echo("The file has no sub: a vented sub with its -3 dB point at 25 Hz is assumed.")
    click.echo(f"Scored {res.n_candidates} candidate positions over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz with "
               f"the {res.method} solver, crossover {s.crossover_hz[0]:g}-{s.crossover_hz[1]:g} Hz, delays up to "
               f"{s.max_delay_ms:g} ms, boost up to {s.max_gain_db:g} dB ({elapsed:.1f} s).")
    w = SCORE_WEIGHTS
    click.echo(f"Score (dB, lower is better) = {w['spread']:g} spread + {w['flatness']:g} flatness + "
               f"{w['phase']:g} phase. spread: seat-to-seat (sqrt of the weighted mean spatial variance); "
               "flatness: at the main seat against the mains' level; phase: summation loss through the crossover.")
    click.echo("")
    head = (f"  {'rank':<5}{'configuration':<22}{'crossover':>10}{'score':>8}{'spread':>8}{'flatness':>10}"
            f"{'phase':>7}{'spread, room +1 %, absorption x1.3':>37}")
    click.echo(head)
    for i, c in enumerate([*res.ranked, res.before]):
        rank = str(i + 1) if c.kind != "before" else "-"
        xo = f"{c.crossover_hz:g} Hz" if c.crossover_hz else "none"
        label = c.label if c.kind != "before" else f"before: {c.label}"
        click.echo(f"  {rank:<5}{label:<22}{xo:>10}{c.score:8.2f}{c.seat_spread_db:8.2f}{c.parts['flatness']:10.2f}"
                   f"{c.parts['phase']:7.2f}{c.perturbed_seat_spread_db:37.2f}")
    b = res.before
    if lay.subs:
        click.echo(f"  ('before' is the file's layout as it is: subs at 0 dB, 0 ms, + polarity, low-pass at "
                   f"{BEFORE_CROSSOVER_HZ:g} Hz; the mains full range)")
    else:
        click.echo("  ('before' is the mains alone, full range)")
    best = res.ranked[0]
    click.echo("")
    if len(res.seats) == 1:
        click.echo(f"Best: {best.label}. One seat: no seat-to-seat spread; flatness at the seat {b.parts['flatness']:.1f} "
                   f"dB before, {best.parts['flatness']:.1f} dB after. Add [seats.NAME] tables for the other places.")
    else:
        click.echo(f"Best: {best.label}. Seat-to-seat spread {b.seat_spread_db:.1f} dB before, "
                   f"{best.seat_spread_db:.1f} dB after ({best.perturbed_seat_spread_db:.1f} dB in a room 1 % larger "
                   "with 1.3 times the absorption).")
    by_n = {len(c.subs): c for c in res.ranked if c.kind == "search"}
    if 4 in by_n and 2 in by_n and by_n[2].score - by_n[4].score < 0.25:
        click.echo(f"Four subs gain only {by_n[2].score - by_n[4].score:.2f} dB of score over two here; two will do.")
    for i, c in enumerate(res.ranked):
        click.echo("")
        click.echo(f"#{i + 1} {c.label}: crossover {c.crossover_hz:g} Hz ({CROSSOVER_TYPE}: low-pass on the subs, "
                   f"high-pass on the mains); delay the mains by {c.mains_delay_ms:.2f} ms")
        for st in c.subs:
            click.echo(f"  {st.name}: {walls_text(room, st.position_m)}")
            click.echo(f"    gain {st.gain_db:+.1f} dB, delay {st.delay_ms:.2f} ms, polarity {_polarity(st.polarity)}; "
                       f"headroom needed {st.headroom_db:.1f} dB")
        click.echo(f"  {'seat':<14}{'spread before':>15}{'after':>8}{'flatness before':>17}{'after':>8}")
        for p, seat in enumerate(res.seats):
            click.echo(f"  {seat.name:<14}{b.seat_deviation_db[p]:15.1f}{c.seat_deviation_db[p]:8.1f}"
                       f"{b.flatness_db[p]:17.1f}{c.flatness_db[p]:8.1f}")
    click.echo("")
    click.echo("Reading the settings: gain is relative to a sub as loud at 1 m as one main; set the overall sub level "
               "by measurement at the main seat and keep the differences between subs. Delays are the values to "
               "type into each sub's (or the DSP's) delay; 'spread' per seat is its RMS difference from the seats' "
               "weighted mean over the band, 'flatness' its RMS difference from its own mean. A shared correction "
               "EQ (roommodes eq) can then flatten the main seat.")
    for sp in lay.subs:
        if sp.max_spl_db is not None:
            need = max(st.headroom_db for c in res.ranked for st in c.subs) if res.ranked else 0.0
            click.echo(f"Sub '{sp.name}': maximum output {sp.max_spl_db:g} dB SPL at 1 m; the settings above ask up "
                       f"to {need:.1f} dB of boost on top of the level you set.")
    click.echo("")
    for c in CAUTIONS:
        click.echo(f"Caution: {c}")
    click.echo(MODEL_CAUTION)
