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
    IDLE_BELOW_LOUDEST_DB,
    IDLE_NEAR_LIMIT_DB,
    MEASURED_NOTE,
    MIN_GAIN_DB,
    RANKING_RULE,
    SCORE_WEIGHTS,
    SHARED_EQ_MAX_CUT_DB,
    SHARED_EQ_MAX_RAISE_DB,
    optimise_subs,
    room_with_config,
    shared_eq,
    tune_measured,
)
from ..analysis.uncertainty import SUBS_SAMPLES, subs_bands
from ..io.roomfile import room_to_toml, write_text_atomic
from ..present.plots_subs import plot_subs
from ._measured import mic_cal_option, read_mic_cal, read_wav_or_fail, wav_channel_option, window_option
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
    uncertainty_options,
    uncertainty_text,
    units_option,
    walls_text,
)


def _maybe(v):
    """A figure, or "-" when it was not computed (NaN)."""
    return "-" if not np.isfinite(v) else f"{v:.2f}"


def _count(n):
    return f"{n} sub{'s' if n != 1 else ''}"


def _paired_text(below, n_ranked):
    """How often each ranked configuration beats the first in the same drawn rooms."""
    if n_ranked < 2:
        return "(one configuration ranked: nothing to compare in the drawn rooms)"
    parts = [f"#{i + 1} in {100 * below[i]:.0f} %" for i in range(1, n_ranked)]
    return ("in the same drawn rooms, the seat-to-seat spread is below #1's for " + ", ".join(parts)
            + " of them (near 50 %: a tie within what the room file knows; the ranking keeps the nominal scores)")


def _drawn(drawn, i):
    """A configuration's spread in the drawn rooms, "median (p10-p90)"; "-" for one not drawn."""
    if i >= len(drawn):
        return "-"
    p10, p50, p90 = drawn[i]
    return f"{p50:.2f} ({p10:.2f}-{p90:.2f})"


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
@click.option("--measured", "measured", multiple=True, metavar="SPEAKER@SEAT=IR.wav",
              help="A measured impulse response (WAV, its time origin the test signal's) of a speaker of the room "
                   "file at a seat of the room file; repeatable. Replaces the prediction for that pair, and tunes "
                   "the file's subs where they stand.")
@click.option("--eq", "with_eq", is_flag=True,
              help="Also design one shared correction EQ for the summed system (mains and subs alike) for "
                   "configuration --rank, on the seats' weighted average; kept only if no seat gets worse.")
@mic_cal_option
@wav_channel_option
@window_option
@uncertainty_options(samples=SUBS_SAMPLES, samples_note=(
    "Each drawn room is one solver call for every ranked configuration at once (about 3 s of one core for "
    "200 rooms on a three-seat room), so the p10 and p90 rest on about 20 rooms each (docs/subs.md)."))
@json_option
@units_option
def subs(room_file, method, points_per_octave, plot_path, force, settings_path, rank, measured, with_eq, mic_cal,
         wav_channel, window_s, uncertainty, samples, seed, as_json):
    """Find where the subwoofers go, and their gain, delay, polarity and crossover, for every seat.

    Considers 1, 2 and 4 subs (the [subs] table of the room file sets the counts, the allowed
    positions, the crossover range and the largest delay) and scores each configuration by
    the seat-to-seat spread, the flatness at the main seat (the first seat listed) and how
    well subs and mains add through the crossover. The signal is the mono bass sum: the same
    signal to both mains and every sub. Compares with the file's current subs and with one
    sub at the front-wall centre. See docs/subs.md.

    With --uncertainty, each ranked configuration's settings are tried in rooms drawn from
    the room file's [uncertainty] table (the same rooms for every configuration): the
    seat-to-seat spread's median and 10-90 % range, and each seat's 10-90 % band on the plot.
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
    if uncertainty and measured:
        fail("--uncertainty draws predicted rooms and --measured replaces predictions by measurements; "
             "give one of them")
    irs = _read_measured(room_file, room, measured, wav_channel, window_s) if measured else None
    cal = read_mic_cal(mic_cal) if measured else None
    if mic_cal and not measured:
        fail("--mic-cal applies to --measured impulse responses; give them, or leave --mic-cal out")
    t0 = time.perf_counter()
    try:
        if irs is not None:
            res = tune_measured(room, irs, method=method, points_per_octave=points_per_octave, window_s=window_s,
                                mic_cal=cal)
        else:
            res = optimise_subs(room, method=method, points_per_octave=points_per_octave)
    except ValueError as exc:
        fail(f"{room_file}: {exc}" if not str(exc).startswith(str(room_file)) else str(exc))
    if rank > len(res.ranked):
        fail(f"--rank {rank}: the table has {len(res.ranked)} configuration{'s' if len(res.ranked) != 1 else ''}; "
             f"choose 1..{len(res.ranked)}")
    shared = None
    if with_eq:
        c = res.ranked[rank - 1]
        shared = shared_eq(room, c, res.freq_hz, method=method,
                           level_db=c.level_db if res.measured else None)
    elapsed = time.perf_counter() - t0
    bands = None
    if uncertainty:
        t1 = time.perf_counter()
        try:
            # the ranked settings, then the file's own ("before"): the same drawn rooms for each
            bands = subs_bands(room, [*res.ranked, res.before], res.freq_hz, res.band_hz, n_samples=samples, seed=seed,
                               method=method)
        except ValueError as exc:
            fail(f"{room_file}: {exc}")
        ens_elapsed = time.perf_counter() - t1
    mains_m = np.array([m.position_m for m in room.layout.mains])
    if as_json:
        d = res.to_dict()
        if shared is not None:
            d["shared_eq"] = shared.to_dict()
        d["elapsed_s"] = elapsed
        if bands is not None:
            for entry, p10, p50, p90, below in zip([*d["ranked"], d["before"]], *bands.spread_percentiles(),
                                                   bands.share_below(0)):
                entry.update(seat_spread_db_p10=float(p10), seat_spread_db_p50=float(p50),
                             seat_spread_db_p90=float(p90), spread_below_first_share=float(below))
            d["uncertainty"] = {**bands.to_dict(), "elapsed_s": ens_elapsed}
        dump_json(d)
        for c in CAUTIONS:
            echo_err(f"caution: {c}")
    else:
        _print(room, res, elapsed, bands)
        if shared is not None:
            _print_eq(shared, rank)
    if plot_path:
        plot_subs(res, room, mains_m, title=f"Subwoofers: {room.name}", path=plot_path, bands=bands)
        echo_err(f"wrote {plot_path}")
    if settings_path:
        _write_settings(room_file, room, res, rank, settings_path, force)


def _read_measured(room_file, room, specs, wav_channel, window_s):
    """``{(speaker, seat): (ir, fs_hz)}`` from the --measured options; one-line errors."""
    if room.layout is None or not room.layout.subs:
        fail(f"{room_file}: --measured tunes the file's subs where they stand, and the file has no sub; add a "
             "[speakers.NAME] with role = \"sub\" (docs/room-file.md)")
    if not 0.05 <= window_s <= 10.0:
        fail(f"--window {window_s:g}: give 0.05 to 10 s for impulse responses (about 1 s resolves the room's modes)")
    speakers = [s.name for s in room.layout.speakers]
    seats = [s.name for s in room.layout.all_seats]
    out = {}
    for spec in specs:
        pair, eq, path = spec.partition("=")
        spk, at, seat = pair.rpartition("@")
        if not eq or not at or not spk or not seat or not path:
            fail(f"--measured {spec}: expected SPEAKER@SEAT=IR.wav, e.g. sub@{seats[0]}=sub-{seats[0]}.wav")
        if spk not in speakers:
            fail(f"--measured {spec}: no speaker '{spk}' in {room_file}; the speakers are {', '.join(speakers)}")
        if seat not in seats:
            fail(f"--measured {spec}: no seat '{seat}' in {room_file}; the seats are {', '.join(seats)}"
                 + (" (one [seat] is named 'seat')" if seats == ["seat"] else ""))
        if (spk, seat) in out:
            fail(f"--measured {spec}: {spk}@{seat} is given twice; give each speaker and seat once")
        x, fs, _ = read_wav_or_fail(path, wav_channel, "impulse response")
        if not np.any(x):
            fail(f"{path}: is silent (all samples zero); not an impulse response")
        out[(spk, seat)] = (x, float(fs))
    return out


def _print_eq(e, rank):
    """The shared correction EQ and what it does at every seat and head position."""
    click.echo("")
    click.echo(f"Shared correction EQ for #{rank} {e.label}, {e.band_hz[0]:g}-{e.band_hz[1]:g} Hz: one EQ before the "
               "crossover (the DSP's input or the preamplifier), so it acts on mains and subs alike.")
    if e.design is None:
        click.echo(f"  None: {e.reason}.")
        return
    click.echo(f"  {'#':>2} {'freq Hz':>8} {'gain dB':>8} {'Q':>6}  (peaking filters, Q as in the Audio EQ Cookbook; "
               f"cuts at most {SHARED_EQ_MAX_CUT_DB:g} dB deep, boosts broad)")
    for i, flt in enumerate(e.filters, 1):
        click.echo(f"  {i:>2} {flt.freq_hz:8.1f} {flt.gain_db:+8.1f} {flt.q:6.2f}"
                   + (f"  {flt.role}" if flt.role else "") + (f", Q from {flt.basis}" if flt.basis else ""))
        for note in flt.at_limit:
            click.echo(f"     at a limit: {note.replace('--q-range top', 'the Q range top')}")
    boost = max(0.0, float(e.design.max_boost_db))
    click.echo(f"  Largest boost of the combined curve {boost:.1f} dB" + (
        f" at {e.design.max_boost_freq_hz:.0f} Hz: turn the input down by as much first; every main and sub "
        "works that much harder there." if boost > 0.05 else " (cuts only)."))
    perturbed = np.isfinite(e.perturbed_before_db).any()
    click.echo(f"  {'position':<16}{'flatness before':>16}{'after':>8}"
               + (f"{'room +1 %, absorption x1.3: before':>36}{'after':>8}{'lift':>6}" if perturbed else ""))
    raise_db = e.perturbed_raise_db if e.perturbed_raise_db is not None else np.full(len(e.positions), np.nan)
    for n, a, b, x, y, r in zip(e.positions, e.flatness_before_db, e.flatness_after_db, e.perturbed_before_db,
                                e.perturbed_after_db, raise_db):
        click.echo(f"  {n:<16}{a:16.1f}{b:8.1f}" + (f"{x:36.1f}{y:8.1f}{r:6.1f}" if perturbed else ""))
    lo, hi = (e.freq_hz[0], e.freq_hz[-1]) if e.freq_hz is not None else e.band_hz
    click.echo("  (flatness: RMS difference from the position's own mean over the band, dB; each seat and the head "
               "positions 15 cm around it; the EQ is kept only if none gets worse by more than 0.1 dB"
               + (f", and in the perturbed room none is lifted further above the target by more than "
                  f"{SHARED_EQ_MAX_RAISE_DB:g} dB ('lift') anywhere in {lo:g}-{hi:g} Hz" if perturbed else "") + ".)")


def _write_settings(room_file, room, res, rank, path, force):
    """A copy of the room file with configuration ``rank`` (1 = best) written into it."""
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


def _print(room, res, elapsed, bands=None):
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
    if res.measured:
        meas = [f"{k}@{st}" for (k, st), v in res.sources.items() if v == "measured"]
        pred = [f"{k}@{st}" for (k, st), v in res.sources.items() if v != "measured"]
        click.echo(f"Measured (impulse responses): {', '.join(meas)}.")
        click.echo(f"Predicted ({res.method} solver): {', '.join(pred) if pred else 'none'}.")
        click.echo(f"The measurements were brought to the model's scale by one offset of {-res.level_offset_db:+.1f} dB "
                   "(the median difference from the prediction); their time origin is taken as the test signal's.")
        click.echo(MEASURED_NOTE)
        click.echo(f"Tuned over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz, crossover {s.crossover_hz[0]:g}-"
                   f"{s.crossover_hz[1]:g} Hz, delays up to {s.max_delay_ms:g} ms, boost up to {s.max_gain_db:g} dB "
                   f"({elapsed:.1f} s).")
    else:
        click.echo(f"Scored {res.n_candidates} candidate positions over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz "
                   f"with the {res.method} solver, crossover {s.crossover_hz[0]:g}-{s.crossover_hz[1]:g} Hz, delays "
                   f"up to {s.max_delay_ms:g} ms, boost up to {s.max_gain_db:g} dB ({elapsed:.1f} s).")
    w = SCORE_WEIGHTS
    click.echo(f"Score (dB, lower is better) = {w['spread']:g} spread + {w['flatness']:g} flatness + "
               f"{w['phase']:g} phase. spread: seat-to-seat (sqrt of the weighted mean spatial variance); "
               "flatness: at the main seat against the mains' level; phase: summation loss through the crossover.")
    click.echo("")
    head = (f"  {'rank':<5}{'configuration':<22}{'crossover':>10}{'score':>8}{'spread':>8}{'flatness':>10}"
            f"{'phase':>7}{'spread, room +1 %, absorption x1.3':>37}"
            + (f"{'spread, drawn rooms: median (10-90 %)':>40}" if bands is not None else ""))
    click.echo(head)
    drawn = list(zip(*bands.spread_percentiles())) if bands is not None else []
    for i, c in enumerate([*res.ranked, res.before]):
        rank = str(i + 1) if c.kind != "before" else "-"
        xo = f"{c.crossover_hz:g} Hz" if c.crossover_hz else "none"
        label = c.label if c.kind != "before" else f"before: {c.label}"
        click.echo(f"  {rank:<5}{label:<22}{xo:>10}{c.score:8.2f}{c.seat_spread_db:8.2f}{c.parts['flatness']:10.2f}"
                   f"{c.parts['phase']:7.2f}{_maybe(c.perturbed_seat_spread_db):>37}"
                   + (f"{_drawn(drawn, i):>40}" if bands is not None else ""))
    b = res.before
    if bands is not None:
        click.echo(f"  (drawn rooms: the ranked settings and the file's own tried in {bands.n_samples} rooms drawn from the "
                   f"room file's [uncertainty], the same rooms for each, seed {bands.seed}; {uncertainty_text(room)}; "
                   "the settings stay those found in the nominal room)")
        click.echo("  " + _paired_text(bands.share_below(0), len(res.ranked)))
    if lay.subs:
        sy = room.system
        xo = (f"the [system] crossover at {sy.crossover_hz:g} Hz" if sy is not None and sy.crossover_hz else
              f"a low-pass at {BEFORE_CROSSOVER_HZ:g} Hz on the subs and the mains full range")
        click.echo(f"  ('before' is the file's layout as it is: each sub's gain, delay and polarity from the file, "
                   f"0 dB, 0 ms, + when not given; {xo})")
    else:
        click.echo("  ('before' is the mains alone, full range)")
    best = res.ranked[0]
    click.echo("")
    if len(res.seats) == 1:
        click.echo(f"Best: {best.label}. One seat: no seat-to-seat spread; flatness at the seat {b.parts['flatness']:.1f} "
                   f"dB before, {best.parts['flatness']:.1f} dB after. Add [seats.NAME] tables for the other places.")
    else:
        alt = (f" ({best.perturbed_seat_spread_db:.1f} dB in a room 1 % larger with 1.3 times the absorption)"
               if np.isfinite(best.perturbed_seat_spread_db) else "")
        click.echo(f"Best: {best.label}. Seat-to-seat spread {b.seat_spread_db:.1f} dB before, "
                   f"{best.seat_spread_db:.1f} dB after{alt}.")
    click.echo(f"Ranking: {RANKING_RULE} (fewer subs cost less, are simpler to set up and each keeps more "
               "headroom; docs/subs.md).")
    for n in res.ranking_notes:
        more = n["more"] if n["more"] == _count(n["more_subs"]) else f"{_count(n['more_subs'])} ({n['more']})"
        fewer = str(n["fewer_subs"]) if n["fewer"] == _count(n["fewer_subs"]) else f"{n['fewer']}"
        click.echo(f"  {more} {'are' if n['more_subs'] != 1 else 'is'} only {n['score_difference_db']:.2f} dB "
                   f"better than {fewer}; {fewer} ranked first.")
    for i, c in enumerate(res.ranked):
        click.echo("")
        click.echo(f"#{i + 1} {c.label}: crossover {c.crossover_hz:g} Hz ({CROSSOVER_TYPE}: low-pass on the subs, "
                   f"high-pass on the mains); delay the mains by {c.mains_delay_ms:.2f} ms")
        if c.note:
            click.echo(f"  Note: {c.note}.")
        idle = {st.name for st in c.idle_subs}
        for st in c.subs:
            click.echo(f"  {st.name}: {walls_text(room, st.position_m)}")
            click.echo(f"    gain {st.gain_db:+.1f} dB, delay {st.delay_ms:.2f} ms, polarity {_polarity(st.polarity)}; "
                       f"headroom needed {st.headroom_db:.1f} dB" + ("; nearly idle" if st.name in idle else ""))
            normal = (st.phase_to_mains_deg + 360.0) % 360.0 - 180.0
            if st.polarity < 0 and st.name not in idle and abs(normal) - abs(st.phase_to_mains_deg) >= 30.0:
                click.echo(f"    inverted because at the {c.crossover_hz:g} Hz crossover, at the main seat, it would "
                           f"arrive {abs(normal):.0f} deg out of step with the mains at normal polarity, inverted "
                           f"{abs(st.phase_to_mains_deg):.0f} deg (the mains' own roll-off and their high-pass turn "
                           "their phase; the paths and the room add theirs). Confirm by measurement.")
            elif st.polarity < 0 and st.name not in idle:
                click.echo("    inverted because it scored better over the band; at the crossover its phase to the "
                           "mains is near 90 deg either way, so the choice matters less there. Confirm by measurement.")
        if idle:
            fewer = len(c.subs) - len(idle)
            click.echo(f"  {', '.join(sorted(idle))} {'are' if len(idle) > 1 else 'is'} nearly idle (within "
                       f"{IDLE_NEAR_LIMIT_DB:g} dB of the {MIN_GAIN_DB:g} dB limit or {IDLE_BELOW_LOUDEST_DB:g} dB or "
                       "more below the loudest sub): "
                       f"{'they add' if len(idle) > 1 else 'it adds'} little; this works much like {_count(fewer)}, "
                       "and a configuration with fewer subs is simpler.")
        click.echo(f"  {'seat':<14}{'spread before':>15}{'after':>8}{'flatness before':>17}{'after':>8}")
        for p, seat in enumerate(res.seats):
            click.echo(f"  {seat.name:<14}{b.seat_deviation_db[p]:15.1f}{c.seat_deviation_db[p]:8.1f}"
                       f"{b.flatness_db[p]:17.1f}{c.flatness_db[p]:8.1f}")
    click.echo("")
    click.echo("Reading the settings: gain is relative to a sub as loud at 1 m as one main; set the overall sub level "
               "by measurement at the main seat and keep the differences between subs. Delays are the values to "
               "type into each sub's (or the DSP's) delay; 'spread' per seat is its RMS difference from the seats' "
               "weighted mean over the band, 'flatness' its RMS difference from its own mean. --eq designs one "
               "shared correction EQ that helps every seat.")
    for sp in lay.subs:
        if sp.max_spl_db is not None:
            need = max(st.headroom_db for c in res.ranked for st in c.subs) if res.ranked else 0.0
            click.echo(f"Sub '{sp.name}': maximum output {sp.max_spl_db:g} dB SPL at 1 m; the settings above ask up "
                       f"to {need:.1f} dB of boost on top of the level you set.")
    click.echo("")
    for c in CAUTIONS:
        click.echo(f"Caution: {c}")
    click.echo(MODEL_CAUTION)
