"""The ``modes`` and ``predict`` commands: the room's modes and the level at the seat."""

from __future__ import annotations

import time
from pathlib import Path

import click
import numpy as np

from ..analysis.predict import band_figures, predict_seats, response_features, usable_band
from ..analysis.predict import predict as run_predict
from ..analysis.summary import room_summary
from ..analysis.uncertainty import mode_frequency_ranges, predict_bands, system_levels
from ..dsp.response import log_frequencies
from ..model.criteria import note_name
from ..model.modes import room_modes
from ..present.plots import plot_modes, plot_prediction
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_plot,
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
    room_inputs,
    uncertainty_options,
    uncertainty_text,
    units_option,
    walls_text,
)


# ---------------------------------------------------------------------------- modes
@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(dir_okay=True, path_type=Path))
@click.option("--freq-range", default="0,300", show_default=True, metavar="LOW,HIGH",
              help="List the modes in this range, Hz.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write a chart of the modes (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@uncertainty_options
@json_option
def modes(room_file, freq_range, plot_path, force, uncertainty, samples, seed, as_json):
    """List the room's modes with decay times, and the room's summary figures.

    Modes: indices (nx, ny, nz) along length, width and height, frequency, kind
    (axial, tangential, oblique), nearest musical note, modal decay time T60 and
    half-power bandwidth from the surfaces' absorption. Summary: volume, area, Sabine and
    Eyring RT60 at 63/125/250 Hz, Schroeder frequency, and room-proportion checks.
    With --uncertainty, each mode's 10-90 % frequency range over the drawn rooms.
    """

    lo, hi = parse_range(freq_range, allow_zero=True)
    room = load_or_fail(room_file)
    check_plot(plot_path, force, *room_inputs(room_file, room))
    ms = room_modes(room, hi)
    sel = ms.freq_hz >= lo
    summ = room_summary(room)
    p10 = p90 = None
    if uncertainty:
        p10, p90 = mode_frequency_ranges(room, ms.indices, samples, seed)
    if as_json:
        rows = [
            {"indices": ms.indices[i], "freq_hz": ms.freq_hz[i], "kind": ms.kind[i],
             "note": note_name(ms.freq_hz[i]), "t60_s": ms.t60_s[i],
             "decay_constant_per_s": ms.decay_constant[i], "bandwidth_hz": ms.bandwidth_hz[i]}
            | ({"freq_hz_p10": p10[i], "freq_hz_p90": p90[i]} if uncertainty else {})
            for i in np.flatnonzero(sel)]
        dump_json({
            "room": room.name, "size_m": room.size_m,
            "modes": rows,
            "summary": _summary_dict(summ),
        } | ({"uncertainty": {"samples": samples, "seed": seed}} if uncertainty else {}))
    else:
        click.echo(f"Room modes of '{room.name}' ({room.size_m[0]:g} x {room.size_m[1]:g} x "
                   f"{room.size_m[2]:g} m, c = {room.speed_of_sound:.1f} m/s), {lo:g}-{hi:g} Hz")
        if uncertainty:
            click.echo(f"Frequency range: 10-90 % of {samples} drawn rooms (seed {seed}; {uncertainty_text(room)})")
        click.echo(f"{'n (L,W,H)':>11}  {'freq Hz':>8}  {'kind':<10}  {'note':<10}  {'T60 s':>6}  {'B Hz':>5}"
                   + (f"  {'10-90 % Hz':>13}" if uncertainty else ""))
        for i in np.flatnonzero(sel):
            n = "(" + ",".join(str(v) for v in ms.indices[i]) + ")"
            click.echo(f"{n:>11}  {ms.freq_hz[i]:8.1f}  {ms.kind[i]:<10}  {note_name(ms.freq_hz[i]):<10}  "
                       f"{ms.t60_s[i]:6.2f}  {ms.bandwidth_hz[i]:5.1f}"
                       + (f"  {p10[i]:6.1f}-{p90[i]:.1f}" if uncertainty else ""))
        click.echo(f"{int(sel.sum())} modes: {int(np.sum(sel & (ms.order == 1)))} axial, "
                   f"{int(np.sum(sel & (ms.order == 2)))} tangential, {int(np.sum(sel & (ms.order == 3)))} oblique")
        click.echo("")
        print_summary(summ)
    if plot_path:

        ranges = (p10, p90, samples) if uncertainty else None
        plot_modes(ms, hi, title=f"Room modes: {room.name}", path=plot_path, freq_ranges=ranges)
        echo_err(f"wrote {plot_path}")


def _summary_dict(s):
    return {
        "volume_m3": s.volume_m3, "surface_area_m2": s.total_area_m2, "speed_of_sound_m_s": s.speed_of_sound,
        "bands_hz": s.bands_hz, "sabine_rt60_s": s.sabine_rt60_s, "eyring_rt60_s": s.eyring_rt60_s,
        "schroeder_hz": s.schroeder_hz,
        "checks": [{"name": c.name, "passed": c.passed, "reason": c.reason} for c in s.checks],
        "extrapolated_absorption": [{"surface": n, "bands_hz": b} for n, b in s.extrapolated],
    }


def print_summary(s, say=click.echo):
    say(f"Volume {s.volume_m3:.1f} m3, surface area {s.total_area_m2:.1f} m2")
    say("Reverberation time (s)   " + "  ".join(f"{b:>6g} Hz" for b in s.bands_hz))
    say("  Sabine                 " + "  ".join(f"{t:9.2f}" for t in s.sabine_rt60_s))
    say("  Eyring                 " + "  ".join(f"{t:9.2f}" for t in s.eyring_rt60_s))
    say(f"Schroeder frequency {s.schroeder_hz:.0f} Hz (from the Sabine time at 125 Hz): "
               "above it the room behaves statistically and the modal picture is indicative only")
    say("Room proportions:")
    for c in s.checks:
        say(f"  [{'pass' if c.passed else 'FAIL'}] {c.name}: {c.reason}")
    if s.extrapolated:
        names = ", ".join(n for n, _ in s.extrapolated)
        say(f"Note: absorption below 125 Hz is extrapolated for {names} (handbook tables stop at 125 Hz).")


# ---------------------------------------------------------------------------- predict
@click.command(context_settings=CONTEXT)
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
@uncertainty_options
@json_option
@units_option
def predict(room_file, layout, freq_range, points_per_octave, method, plot_path, force, no_speaker, uncertainty,
            samples, seed, as_json):
    """Predict each speaker's level at the seat, with its main peaks and dips.

    Levels are in dB relative to the free-field level the same speaker gives at 1 m, so
    0 dB means "as loud as at 1 m outdoors"; room gain shows as positive values. With
    --uncertainty, each channel gets the 10th, 50th and 90th percentiles of its level over
    rooms drawn from the room file's [uncertainty] table (docs/uncertainty.md).
    """

    lo, hi = parse_range(freq_range)
    room = load_or_fail(room_file)
    layouts = layouts_for(room, layout)
    check_plot(plot_path, force, *room_inputs(room_file, room))
    f = log_frequencies(lo, hi, points_per_octave)
    t0 = time.perf_counter()
    try:
        preds = [run_predict(room, lay, f, method=method, include_speaker=not no_speaker) for lay in layouts]
        seat_preds = [predict_seats(room, lay, f, method=method, include_speaker=not no_speaker)
                      if _has_system(lay) else None for lay in layouts]
        bands = [predict_bands(room, lay, f, n_samples=samples, seed=seed, method=method,
                               include_speaker=not no_speaker) if uncertainty else None for lay in layouts]
        sys_drawn = (system_levels(room, layouts[0], f, n_samples=samples, seed=seed, method=method,
                                   include_speaker=not no_speaker)
                     if uncertainty and plot_path and seat_preds[0] is not None else None)
    except ValueError as exc:
        fail(str(exc))
    elapsed = time.perf_counter() - t0
    fs = preds[0].schroeder_hz
    if as_json:
        lay_objs = []
        for lay, p, bd in zip(layouts, preds, bands):
            d = p.to_dict()
            band = usable_band(lay.speakers)
            for c, ch in zip(p.channels, d["channels"]):
                ch["band_figures"] = band_figures(f, c.level_db, _channel_band(lay, c.name))
                ch["features"] = [ft.to_dict() for ft in response_features(room, p, c.name)]
            if bd is not None:
                for ch, bch in zip(d["channels"], bd.to_dict()["channels"]):
                    ch.update({k: v for k, v in bch.items() if k != "name"})
            lay_objs.append({"name": lay.name, "seat_m": d["seat_m"], "channels": d["channels"], "band_hz": band})
        extra = {}
        if seat_preds[0] is not None:
            extra.update(_system_json(lay_objs[0], layouts[0], seat_preds[0]))
            for obj, lay, sp in zip(lay_objs[1:], layouts[1:], seat_preds[1:]):
                if sp is not None:
                    obj.update(_system_json(obj, lay, sp))
        if uncertainty:
            extra["uncertainty"] = {k: v for k, v in bands[0].to_dict().items() if k not in ("channels", "frequencies_hz")}
        dump_json({
            "room": room.name, "method": method, **extra,
            "frequencies_hz": f, "schroeder_hz": fs, "valid": preds[0].valid,
            "level_reference": "dB re free-field pressure of the same source at 1 m",
            "channels": lay_objs[0]["channels"], "layout": lay_objs[0]["name"], "seat_m": lay_objs[0]["seat_m"],
            "layouts": lay_objs,
        })
    else:
        click.echo(f"Predicted level at the seat, '{room.name}', {lo:g}-{hi:g} Hz, {method} solver "
                   f"({elapsed:.2f} s)")
        click.echo("Level: dB relative to the same speaker's free-field level at 1 m.")
        if uncertainty:
            click.echo(f"Uncertainty: {samples} rooms drawn (seed {seed}); {uncertainty_text(room)}.")
        for lay, p, bd, sp in zip(layouts, preds, bands, seat_preds):
            click.echo("")
            click.echo(f"Layout: {lay.name}.  Seat: {walls_text(room, lay.seat_m)}"
                       + (f" (the main seat, '{lay.all_seats[0].name}')" if len(lay.all_seats) > 1 else ""))
            subs = {s.name for s in lay.subs}
            for ci, ch in enumerate(p.channels):
                band = _channel_band(lay, ch.name)
                fig = band_figures(f, ch.level_db, band)
                role = " (subwoofer)" if ch.name in subs else ""
                click.echo(f"  {ch.name}{role}: {walls_text(room, ch.position_m)}")
                click.echo(f"    {band[0]:g}-{band[1]:g} Hz (1/6-octave smoothed): {fig['min_db']:+.1f} to {fig['max_db']:+.1f} dB, "
                           f"spread {fig['spread_db']:.1f} dB, std {fig['std_db']:.1f} dB")
                if bd is not None:
                    sel = (f >= band[0]) & (f <= band[1])
                    w = bd.width_db[ci][sel]
                    i = int(np.argmax(w))
                    click.echo(f"    10-90 % band over the drawn rooms: median width {np.median(w):.1f} dB, "
                               f"widest {w[i]:.1f} dB at {f[sel][i]:.0f} Hz")
                if layout != "all":
                    for ft in response_features(room, p, ch.name):
                        side = "above" if ft.kind == "peak" else "below"
                        click.echo(f"    {ft.kind:<4} {ft.freq_hz:6.1f} Hz {ft.level_db:+6.1f} dB "
                                   f"(stands {ft.prominence_db:4.1f} dB {side} its surroundings): {'; '.join(ft.causes)}")
            if sp is not None:
                _print_system(room, lay, sp)
        click.echo("")
        click.echo(f"Schroeder frequency {fs:.0f} Hz: results above it are indicative only.")
        click.echo("")
    echo_err(MODEL_CAUTION)
    if plot_path:
        ms = room_modes(room, hi)
        plot_prediction(preds, ms, title=f"{room.name}: predicted level at the seat", path=plot_path,
                        bands=bands if uncertainty else None, system=seat_preds[0], system_levels=sys_drawn)
        echo_err(f"wrote {plot_path}")



# ---------------------------------------------------------------------------- subs and seats
def system_settings_text(sp):
    """How the system sum treats the subs: the room file's settings, in words."""
    if not sp.sub_settings:
        return "no subs: the mains alone"
    subs = "; ".join(f"{s['name']} {s['gain_db']:+.1f} dB, {s['delay_ms']:.2f} ms, "
                     f"polarity {'+' if s['polarity'] > 0 else '-'}" for s in sp.sub_settings)
    if sp.crossover_hz is None:
        xo = ("no crossover ([system] crossover_hz not set): mains and subs run full range, each with only its "
              "own roll-off")
    else:
        xo = (f"crossover {sp.crossover_hz:g} Hz (LR4: low-pass on the subs, high-pass on the mains), mains delay "
              f"{sp.mains_delay_ms:.2f} ms")
    return f"from the room file: {subs}; {xo}"


SYSTEM_SIGNAL_TEXT = "mono bass sum: the same signal to every main and every sub"
SUBS_POINTER = "`roommodes subs ROOM.toml` finds where the subs go and their gain, delay, polarity and crossover"


def _has_system(lay):
    """True for a layout with subs or several seats: predict then shows every seat and the sum."""
    return bool(lay.subs) or len(lay.all_seats) > 1


def _channel_band(lay, name):
    """The band of one channel's figures: a sub's own low cut, or the mains' as before."""
    sub = next((s for s in lay.subs if s.name == name), None)
    if sub is not None:
        return usable_band([sub])
    return usable_band(lay.mains if lay.subs else lay.speakers)


def _system_json(obj, lay, sp):
    """The ``seats`` and ``system`` keys of ``predict --json`` for a layout with subs or seats."""
    subs = {s.name for s in lay.subs}
    seats = []
    for j, seat in enumerate(sp.seats):
        chans = []
        for k, spk in enumerate(sp.speakers):
            chans.append({"name": spk.name, "role": "sub" if spk.name in subs else "main",
                          "level_db": sp.level_db[k, j],
                          "band_figures": band_figures(sp.freq_hz, sp.level_db[k, j], _channel_band(lay, spk.name))})
        seats.append({"name": seat.name, "position_m": list(seat.position_m), "weight": seat.weight,
                      "main": j == 0, "channels": chans})
    system = {
        "signal": SYSTEM_SIGNAL_TEXT, "settings": system_settings_text(sp),
        "crossover_hz": sp.crossover_hz, "mains_delay_ms": sp.mains_delay_ms, "subs": [dict(s) for s in sp.sub_settings],
        "band_hz": list(sp.band_hz), "seat_spread_db": sp.seat_spread_db,
        "seats": [{"name": seat.name, "level_db": sp.system_db[j],
                   "band_figures": band_figures(sp.freq_hz, sp.system_db[j], sp.band_hz)}
                  for j, seat in enumerate(sp.seats)],
        "see": SUBS_POINTER,
    }
    return {"seats": seats, "system": system}


def _print_system(room, lay, sp):
    """Every seat's figures (the main seat first) and the system's mono sum at each seat."""
    f = sp.freq_hz
    subs = {s.name for s in lay.subs}
    if lay.subs:
        click.echo(f"  Subwoofers: {', '.join(s.name for s in lay.subs)}; mains: "
                   f"{', '.join(s.name for s in lay.mains) or 'none'}.")
    if len(sp.seats) > 1:
        click.echo("  Every seat (the main seat first; 1/6-octave smoothed):")
        for j, seat in enumerate(sp.seats):
            click.echo(f"    {seat.name}{' (main)' if j == 0 else ''}, weight {seat.weight:g}: "
                       f"{walls_text(room, seat.position_m)}")
            for k, spk in enumerate(sp.speakers):
                band = _channel_band(lay, spk.name)
                fig = band_figures(f, sp.level_db[k, j], band)
                click.echo(f"      {spk.name}{' (subwoofer)' if spk.name in subs else ''}: {band[0]:g}-{band[1]:g} Hz "
                           f"{fig['min_db']:+.1f} to {fig['max_db']:+.1f} dB, spread {fig['spread_db']:.1f} dB, "
                           f"std {fig['std_db']:.1f} dB")
    b = sp.band_hz
    click.echo(f"  System ({SYSTEM_SIGNAL_TEXT}), {b[0]:g}-{b[1]:g} Hz, 1/6-octave smoothed:")
    click.echo(f"    As set: {system_settings_text(sp)}.")
    for j, seat in enumerate(sp.seats):
        fig = band_figures(f, sp.system_db[j], b)
        click.echo(f"    {seat.name}{' (main)' if j == 0 and len(sp.seats) > 1 else ''}: {fig['min_db']:+.1f} to "
                   f"{fig['max_db']:+.1f} dB, spread {fig['spread_db']:.1f} dB, std {fig['std_db']:.1f} dB")
    if len(sp.seats) > 1:
        click.echo(f"    Seat-to-seat spread (square root of the weighted mean spatial variance): "
                   f"{sp.seat_spread_db:.1f} dB")
    click.echo(f"    Next: {SUBS_POINTER} (docs/subs.md).")
