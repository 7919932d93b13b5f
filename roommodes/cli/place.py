"""The ``place`` and ``explain`` commands: placement search and the left/right explanation.

Registered on the main group in :mod:`roommodes.cli`. Same conventions as every command:
``--json`` prints one JSON object on stdout and nothing else there; messages, the progress
bar and cautions go to stderr; bad input gives one line and exit code 2.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..analysis.ensemble import DEFAULT_ENSEMBLE_METHOD, DEFAULT_PLACE_SAMPLES
from ..analysis.explain import EXPLAIN_SAMPLES
from ..solvers import METHODS
from ._progress import Progress
from ._util import (
    CONTEXT,
    MODEL_CAUTION,
    check_output,
    check_plot,
    dump_json,
    echo_err,
    fail,
    json_option,
    load_or_fail,
    method_option,
    parse_range,
    protect_inputs,
    room_inputs,
    subs_json,
    subs_note,
    uncertainty_options,
    uncertainty_text,
    units_option,
    walls_text,
)

__all__ = ["place", "explain"]


def _parse_weights(text):
    if text is None:
        return None
    out = {}
    for item in text.split(","):
        if not item.strip():
            continue
        name, sep, value = item.partition("=")
        try:
            v = float(value)
        except ValueError:
            v = None
        if not sep or v is None:
            fail(f"--weights must be NAME=VALUE pairs separated by commas, e.g. mismatch=2,boost=0; got '{text}'")
        out[name.strip()] = v
    if not out:
        fail("--weights is empty; give NAME=VALUE pairs, e.g. mismatch=2,boost=0")
    return out


#: Printed with every placement: where the speakers go, something has to hold them.

MOUNTING_CAUTION = (
    "Safety: speakers on stands, shelves, desks or walls must be secured as their makers and your local "
    "building codes require; a heavy box on a tall stand or a wall bracket can fall (docs/cautions.md)."
)


def _layout_obj(room, scored, spread=None):
    """The layout's JSON (ScoredLayout.to_dict) with the distances from the walls in the user's units
    (and, with --uncertainty, ``score_median``, ``score_p10``, ``score_p90``)."""
    d = scored.to_dict()
    if spread is not None:
        d.update(spread)
    for sp, s in zip(d["speakers"], scored.layout.speakers):
        sp["walls"] = walls_text(room, s.position_m)
    d["seat_walls"] = walls_text(room, scored.layout.seat_m)
    return d


_EXTRA = (("raw", "flatness_raw", "{:5.2f}"), ("spacing", "spacing_m", "{:5.2f} m"),
          ("distance", "seat_distance_m", "{:5.2f} m"), ("angle", "angle_deg", "{:4.0f} deg"))


def _row(label, s, parts):
    note = "" if s.in_region else "  (outside the [search] region)"
    extra = "  ".join(f"{fmt.format(s.figures[k]):>{max(len(h), 7)}}" for h, k, fmt in _EXTRA)
    return (f"  {label:<10} {s.score:7.2f}  " + "  ".join(f"{s.parts[p]:>{max(len(p), 5)}.2f}" for p in parts)
            + "  " + extra + note)


# ---------------------------------------------------------------------------- place
@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.option("--top", type=click.IntRange(1, 50), default=5, show_default=True, help="How many layouts to list.")
@click.option("--weights", metavar="NAME=W,...",
              help="Weights of the score parts (flatness, mismatch, area, boost, robustness); parts not named keep "
                   "their defaults (1, 1, 1, 0.25, 1).")
@click.option("--band", metavar="LOW,HIGH",
              help="Band scored, Hz. Default: max(20 Hz, the speakers' low cut) to 200 Hz.")
@click.option("--points-per-octave", type=click.IntRange(6, 96), default=24, show_default=True,
              help="Frequency grid of the scores.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path),
              help="Write the figure (curves, floor plan with a seat-score map, score vs front distance).")
@click.option("--write-layout", "layout_path", type=click.Path(path_type=Path), metavar="FILE.toml",
              help="Write the room file again with the best layout (a new file, never the input).")
@click.option("--force", is_flag=True, help="Overwrite an existing output file (never the input).")
@method_option
@uncertainty_options(samples=DEFAULT_PLACE_SAMPLES, samples_note=(
    "Each drawn room re-scores every finalist (about 0.004 s per layout and room with the "
    "batched modal scorer, ten times more with the exact solver; docs/uncertainty.md)."))
@click.option("--uncertainty-method", "ensemble_method", type=click.Choice(list(METHODS)),
              default=DEFAULT_ENSEMBLE_METHOD, show_default=True,
              help="Solver that scores the layouts in the drawn rooms (--method sets the nominal scores). The "
                   "batched modal scorer ranks the finalists' medians as the exact solver does on the bundled "
                   "rooms at a tenth of the cost (docs/uncertainty.md).")
@json_option
@units_option
def place(room_file, top, weights, band, points_per_octave, plot_path, layout_path, force, method, uncertainty,
          samples, seed, ensemble_method, as_json):
    """Search where to put the two speakers and the seat, and rank the layouts.

    The allowed region, symmetry, listening triangle, listening area and keep-out boxes
    come from the room file's [search] table (defaults in docs/placement.md). The score
    (lower is better, in dB) adds weighted parts: flatness of each channel at the seat,
    left/right mismatch, spread over the listening area, EQ boost the deepest broad dip
    would need, and robustness to 5 cm moves. The four standard placements and the file's
    own layout are scored the same way and shown in the same table.

    With --uncertainty, the finalists and the file's layout are scored again in rooms drawn
    from the room file's [uncertainty] table (the same rooms for every layout) and ranked by
    the median of their scores, with the 10-90 % spread beside it (docs/uncertainty.md).
    """
    from ..analysis.search import PARTS, close_call, search_layouts, search_space, why_it_wins

    room = load_or_fail(room_file)
    w = _parse_weights(weights)
    band_hz = parse_range(band, "--band") if band else None
    if layout_path:
        protect_inputs(layout_path, *room_inputs(room_file, room))
        check_output(layout_path, force, what="--write-layout")
    check_plot(plot_path, force, *room_inputs(room_file, room), layout_path)
    if layout_path and Path(layout_path).suffix.lower() != ".toml":
        fail(f"--write-layout needs a .toml file name, got {layout_path}")
    try:
        space = search_space(room)
        t0 = time.perf_counter()
        # the input has passed every check: bad input gives one line on stderr and nothing else
        with Progress("roommodes place") as prog:
            prog.step("searching")
            res = search_layouts(room, space, w, band_hz, top, points_per_octave, progress=prog.fraction,
                                 method=method)
        elapsed = time.perf_counter() - t0
        ranking, current_spread, ens_elapsed = None, None, 0.0
        if uncertainty:
            ranking, current_spread, ens_elapsed = _ensemble(room, space, res, points_per_octave, samples, seed,
                                                                   ensemble_method)
    except ValueError as exc:
        fail(str(exc))
    best = res.ranked[0] if ranking is None else ranking.layouts[0]
    ranked = list(res.ranked) if ranking is None else list(ranking.layouts)
    if as_json:
        dump_json({
            "room": room.name, "size_m": room.size_m, "method": res.method,
            "band_hz": res.band_hz, "weights": res.weights, "parts": list(PARTS),
            "score_definition": "sum of weight x part, each part in dB; lower is better (docs/placement.md)",
            "search": {"coarse_step_m": res.step_m, "candidates": res.n_candidates,
                       "layout_evaluations": res.n_layout_evaluations, "frequencies": res.n_frequencies,
                       "area_points": int(np.prod(space.area_points)), "area_m": space.area_m,
                       "symmetric": space.symmetric, "elapsed_s": elapsed, "distinct_m": space.distinct_m,
                       "seat_fixed": space.seat_fixed_m is not None, "cabinet_assumed": space.cabinet_assumed,
                       "rear_clearance_m": space.rear_clearance_m,
                       "ear_height_tolerance_m": space.ear_height_tolerance_m, "spacing_m": space.spacing_m},
            "close_call": None if res.current is None else close_call(best, res.current, res.weights),
            "why": next((t for t in (why_it_wins(best, o, res.weights) for o in
                                     ([res.current] if res.current is not None else []) + list(res.presets)) if t),
                        None),
            "ranked": [_layout_obj(room, s, None if ranking is None else ranking.spread(k))
                       for k, s in enumerate(ranked)],
            "presets": [_layout_obj(room, s) for s in res.presets],
            "current": _layout_obj(room, res.current, current_spread) if res.current is not None else None,
            **({"uncertainty": {"samples": samples, "seed": seed, "method": ensemble_method,
                                "uncertainty": room.uncertainty.to_dict(), "elapsed_s": ens_elapsed,
                                "ranked_by": "median score over the drawn rooms"}} if ranking is not None else {}),
            **({"subs": subs_json(room, "the stereo-pair search")} if subs_note(room, "") else {}),
        })
    else:
        lx, ly, lz = room.size_m
        click.echo(f"Placement search, '{room.name}' ({lx:g} x {ly:g} x {lz:g} m): {res.band_hz[0]:g}-"
                   f"{res.band_hz[1]:g} Hz, listening area {space.area_m[0]:g} x {space.area_m[1]:g} m "
                   f"({space.area_points[0]} x {space.area_points[1]} points), "
                   f"{'mirror-symmetric pair' if space.symmetric else 'pair placed freely'}")
        click.echo(f"Scored {res.n_candidates} layouts on a {res.step_m * 100:g} cm grid, then refined the best "
                   f"({res.n_layout_evaluations} layouts in all, {elapsed:.1f} s), with the modal sum; the "
                   f"results below, the standard placements and the file's layout are scored with the {res.method} "
                   "solver.")
        click.echo("Score (dB, lower is better) = " + " + ".join(f"{res.weights[p]:g} {p}" for p in PARTS))
        click.echo("Each layout is judged after the EQ it needs (one correction per channel, designed over the "
                   "listening area): flatness and mismatch after EQ, boost = the EQ's largest boost; "
                   "raw = flatness before EQ.")
        cab = space.cabinets[0]
        cab_text = (f"{cab.size_m[0] * 100:.0f} x {cab.size_m[1] * 100:.0f} x {cab.size_m[2] * 100:.0f} cm "
                    "(w x h x d)")
        click.echo(("Boxes: none described in the room file, so a " + cab_text + " box is assumed"
                    if space.cabinet_assumed else "Boxes: " + cab_text)
                   + f", back at least {space.rear_clearance_m * 100:.0f} cm off the front wall"
                   + (", turned to face the seat" if space.toe_in else "")
                   + f"; tweeter within {space.ear_height_tolerance_m * 100:.0f} cm of ear height; spacing "
                   f"{space.spacing_m[0]:g}-{space.spacing_m[1]:g} m"
                   + (f"; listening triangle within {space.triangle_tolerance:.0%}" if space.triangle else "")
                   + ("; seat fixed" if space.seat_fixed_m is not None else "")
                   + f"; results at least {space.distinct_m * 100:.0f} cm apart.")
        note = subs_note(room, "the stereo-pair search")
        if note:
            click.echo(note)
        click.echo("")
        click.echo(f"  {'layout':<10} {'score':>7}  " + "  ".join(f"{p:>{max(len(p), 5)}}" for p in PARTS)
                   + "  " + "  ".join(f"{h:>{max(len(h), 7)}}" for h, _, _ in _EXTRA))
        for s in ranked:
            click.echo(_row(f"#{s.name}", s, PARTS))
        if res.current is not None:
            click.echo(_row("file", res.current, PARTS))
        for s in res.presets:
            click.echo(_row(s.name, s, PARTS))
        if ranking is not None:
            _print_ensemble(room, res, ranking, current_spread, samples, seed, ens_elapsed, ensemble_method)
        others = list(res.presets) + ([res.current] if res.current is not None else [])
        inside = [s for s in others if s.in_region]
        click.echo("")
        if inside:
            ref = min(inside, key=lambda s: s.score)
            gain = ref.score - best.score
            click.echo(f"The best layout scores {best.score:.2f} dB, {abs(gain):.2f} dB "
                       f"{'better' if gain >= 0 else 'worse'} than the best of the file's layout and the standard "
                       "placements that meet the constraints"
                       f" ({'the file' if ref is res.current else ref.name}, {ref.score:.2f} dB).")
        else:
            click.echo(f"The best layout scores {best.score:.2f} dB; neither the file's layout nor any standard "
                       "placement meets the constraints.")
        if res.current is not None and not res.current.in_region:
            click.echo(f"Against the room file's own layout ({res.current.score:.2f} dB, outside the constraints): "
                       f"{res.current.score - best.score:.2f} dB better.")
        lower = [s for s in others if not s.in_region and s.score < best.score]
        if lower:
            s_ = min(lower, key=lambda s: s.score)
            click.echo(f"{'The file' if s_ is res.current else 'The ' + s_.name} layout scores lower ({s_.score:.2f} dB) "
                       "but breaks the [search] constraints (box clearance, ear height, spacing or triangle); "
                       "relax them in [search] if it is what you want.")
        if res.current is not None:
            note = close_call(best, res.current, res.weights)
            if note:
                click.echo(note)
        if len(res.ranked) < top:
            click.echo(f"Only {len(res.ranked)} layouts {space.distinct_m * 100:.0f} cm or more apart fit the region.")
        for other, label in ([(res.current, "the file's layout")] if res.current is not None else []) + \
                [(p, f"the {p.name} placement") for p in res.presets]:
            sentence = why_it_wins(best, other, res.weights, label)
            if sentence:
                click.echo(sentence)
                break
        for s in ranked + ([res.current] if res.current is not None else []) + list(res.presets):
            click.echo("")
            g = s.figures
            click.echo(f"{'#' + s.name if s in ranked else s.name}: spacing {g['spacing_m'] * 100:.0f} cm, "
                       f"seat {g['seat_distance_m'] * 100:.0f} cm from the speakers, listening angle "
                       f"{g['angle_deg']:.0f} degrees; flatness at the seat {g['flatness_raw']:.2f} dB before EQ, "
                       f"{s.parts['flatness']:.2f} dB after, EQ boost {s.parts['boost']:.1f} dB")
            for sp in s.layout.speakers:
                click.echo(f"  {sp.name} speaker (woofer): {walls_text(room, sp.position_m)}")
            click.echo(f"  seat (ears): {walls_text(room, s.layout.seat_m)}")
        click.echo("")
    echo_err(MODEL_CAUTION)
    echo_err(MOUNTING_CAUTION)
    if layout_path:
        from ..io.roomfile import room_to_toml, write_text_atomic

        new_room = room.with_layout(replace(best.layout, name="file"))
        text = room_to_toml(new_room, comment=(
            f"Written by roommodes {__version__} place from {room_file}: the best layout of the search "
            f"(score {best.score:.2f} dB over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz"
            + ("" if ranking is None else f"; median {ranking.median[0]:.2f} dB over {samples} drawn rooms, seed "
               f"{seed}") + ")."),
            original_text=Path(room_file).read_text(encoding="utf-8"), written_to=layout_path)
        try:
            write_text_atomic(layout_path, text, overwrite=force)
        except (FileExistsError, OSError) as exc:
            fail(str(exc))
        echo_err(f"wrote {layout_path}")
    if plot_path:
        spread = None
        if ranking is not None:
            spread = [(f"#{s.name}", s.score, float(ranking.p10[k]), float(ranking.median[k]), float(ranking.p90[k]))
                      for k, s in enumerate(ranking.layouts)]
            if current_spread is not None:
                spread.append(("file", res.current.score, current_spread["score_p10"],
                               current_spread["score_median"], current_spread["score_p90"]))
        _place_plot(room, space, res, plot_path, best.layout, spread, samples,
                    {"n_samples": samples, "seed": seed} if ranking is not None else None)
        echo_err(f"wrote {plot_path}")


def _ensemble(room, space, res, points_per_octave, samples, seed, method):
    """The finalists (and the file's layout) scored in drawn rooms: (ranking, the file's spread, seconds)."""
    from ..analysis.ensemble import ensemble_scores, rank_by_median

    layouts = list(res.ranked) + ([res.current] if res.current is not None else [])
    t0 = time.perf_counter()
    with Progress("roommodes place") as prog:
        prog.step(f"scoring in {samples} drawn rooms")
        scores = ensemble_scores(room, [s.layout for s in layouts], n_samples=samples, seed=seed,
                                 weights=res.weights, band_hz=res.band_hz, area_m=space.area_m,
                                 area_points=space.area_points, points_per_octave=points_per_octave,
                                 method=method, progress=lambda done, n: prog.fraction(done / n))
    k = len(res.ranked)
    ranking = rank_by_median(res.ranked, scores[:, :k])
    current = None
    if res.current is not None:
        c = scores[:, k]
        current = {"score_median": float(np.median(c)), "score_p10": float(np.percentile(c, 10)),
                   "score_p90": float(np.percentile(c, 90))}
    return ranking, current, time.perf_counter() - t0


def _print_ensemble(room, res, ranking, current_spread, samples, seed, elapsed, method):
    click.echo("")
    click.echo(f"Over {samples} rooms drawn from the room file's [uncertainty] (seed {seed}; {uncertainty_text(room)}; "
               f"{elapsed:.1f} s), every layout scored with the {method} solver in the same rooms with the same placement "
               "errors; ranked by the median score:")
    click.echo(f"  {'layout':<10} {'nominal':>7}  {'median':>7}  {'10-90 % of drawn rooms':>22}")
    rows = [(f"#{s.name}", s.score, ranking.median[k], ranking.p10[k], ranking.p90[k])
            for k, s in enumerate(ranking.layouts)]
    if current_spread is not None:
        rows.append(("file", res.current.score, current_spread["score_median"], current_spread["score_p10"],
                     current_spread["score_p90"]))
    for label, nom, med, p10, p90 in rows:
        click.echo(f"  {label:<10} {nom:7.2f}  {med:7.2f}  {p10:11.2f} to {p90:5.2f}")
    if ranking.layouts[0] is not res.ranked[0]:
        click.echo(f"The median ranks #{ranking.layouts[0].name} first, ahead of the nominal best "
                   f"#{res.ranked[0].name}; the lists below and --write-layout follow the median.")
    elif [s.name for s in ranking.layouts] != [s.name for s in res.ranked]:
        click.echo(f"The median keeps #{ranking.layouts[0].name} first but reorders the others; the lists below "
                   "follow the median.")
    else:
        click.echo("The median keeps the nominal order.")
    overlap = ranking.p90[0] > ranking.p10[1] if len(ranking.layouts) > 1 else False
    if overlap:
        click.echo(f"The spreads of #{ranking.layouts[0].name} and #{ranking.layouts[1].name} overlap: within what "
                   "the room file knows, either may turn out better.")


def _place_plot(room, space, res, path, best=None, score_spread=None, n_rooms=None, drawn=None):
    from ..analysis.predict import predict
    from ..analysis.search import layout_curves, layout_sweep, seat_score_map
    from ..present.plots_place import plot_place

    best = res.ranked[0].layout if best is None else best
    preds = [("best", predict(room, best))]
    current = room.layout if room.layout is not None and len(room.layout.speakers) >= 2 else None
    if current is not None:
        preds.append(("current", predict(room, current)))
    bands = None
    if drawn is not None:
        # the curves of (a) over rooms drawn with the same count and seed, with the curves' own solver
        from ..analysis.uncertainty import predict_bands

        bands = [predict_bands(room, lay, p.freq_hz, method=p.method, **drawn)
                 for lay, (_, p) in zip((best, current), preds)]
    kw = {"weights": res.weights, "band_hz": res.band_hz, "area_m": space.area_m, "area_points": space.area_points}
    seat_map = seat_score_map(room, best, **kw)
    profile = layout_sweep(room, best, space, weights=res.weights, band_hz=res.band_hz)
    eq_curves = [("best", layout_curves(room, best, space, res.band_hz))]
    if current is not None:
        eq_curves.append(("current", layout_curves(room, current, space, res.band_hz)))
    plot_place(room, best, current, preds, res.band_hz, preds[0][1].schroeder_hz, seat_map, profile,
               space.keep_out, path=path, eq_curves=eq_curves, space=space, score_spread=score_spread,
               n_rooms=n_rooms, bands=bands,
               sweep_label="speakers' distance from the front wall (cm)"
               + ("" if space.seat_fixed_m is not None else "; the seat moves with them"))


# ---------------------------------------------------------------------------- explain
@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.option("--channels", metavar="FIRST,SECOND", help="The two speakers compared (default the first two).")
@click.option("--threshold", type=float, default=3.0, show_default=True,
              help="Smallest |first - second| (dB, smoothed) that makes a region.")
@click.option("--band", metavar="LOW,HIGH",
              help="Where regions are looked for, Hz. Default: max(20 Hz, the speakers' low cut) to 200 Hz.")
@click.option("--freq-range", default="15,300", show_default=True, metavar="LOW,HIGH",
              help="Frequency range of the curves, Hz.")
@click.option("--points-per-octave", type=click.IntRange(6, 384), default=48, show_default=True,
              help="Frequency-grid density.")
@click.option("--smoothing", type=click.IntRange(0, 48), default=6, show_default=True,
              help="1/N-octave power smoothing of the curves regions are found on (0: none).")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path),
              help="Write the figure: both channels and the mono sum, the difference with its regions.")
@click.option("--force", is_flag=True, help="Overwrite an existing plot file.")
@method_option
@uncertainty_options(samples=EXPLAIN_SAMPLES, samples_note=(
    "Modest because each drawn room is one solver call; raise it for steadier band edges."))
@json_option
@units_option
def explain(room_file, channels, threshold, band, freq_range, points_per_octave, smoothing, plot_path, force,
            method, uncertainty, samples, seed, as_json):
    """Explain why the two channels differ at the seat, and what to move.

    Shows each channel's level at the seat, their difference (first minus second) and the
    mono sum (both driven in phase). For every region where the smoothed |difference|
    reaches the threshold it ranks the causes (room modes with each speaker's and the
    seat's coupling to them; boundaries with their quarter-wave notches c/4d), and
    predicts the effect of the single speaker move that reduces the difference most.
    """
    from ..analysis.explain import explain as run_explain
    from ..analysis.search import search_space
    from ..dsp.response import log_frequencies

    if not math.isfinite(threshold) or threshold <= 0:
        fail(f"--threshold must be a positive number of dB, got {threshold:g}")
    lo, hi = parse_range(freq_range)
    band_hz = parse_range(band, "--band") if band else None
    names = None
    if channels is not None:
        names = tuple(c.strip() for c in channels.split(","))
        if len(names) != 2 or not all(names):
            fail(f"--channels must be two speaker names separated by a comma, e.g. left,right; got '{channels}'")
    room = load_or_fail(room_file)
    if room.layout is None:
        fail(f"{room_file}: the room file has no [speakers] and [seat]; add them to explain the difference")
    check_plot(plot_path, force, *room_inputs(room_file, room))
    try:
        keep = search_space(room).keep_out
        e = run_explain(room, channels=names, freq_hz=log_frequencies(lo, hi, points_per_octave),
                        threshold_db=threshold, band_hz=band_hz, smoothing=smoothing, keep_out=keep,
                        method=method)
    except ValueError as exc:
        fail(str(exc))
    n1, n2 = e.names
    ub = None
    if uncertainty:
        from ..analysis.explain import explain_bands

        try:
            ub = explain_bands(room, e, n_samples=samples, seed=seed)
        except ValueError as exc:
            fail(str(exc))
    if as_json:
        note = subs_json(room, "this explanation")
        extra = {**ub.to_dict(), "uncertainty": {"samples": ub.n_samples, "seed": ub.seed, "method": ub.method}} if ub else {}
        dump_json({"room": room.name, **e.to_dict(), **extra, **({"subs": note} if note else {})})
    else:
        click.echo(f"Why {n1} and {n2} differ at the seat, '{room.name}'")
        click.echo(f"  {n1}: {walls_text(room, e.positions_m[0])}")
        click.echo(f"  {n2}: {walls_text(room, e.positions_m[1])}")
        click.echo(f"  seat: {walls_text(room, e.seat_m)}")
        note = subs_note(room, "this explanation")
        if note:
            click.echo(note)
        sm = f"1/{e.smoothing}-octave smoothed" if e.smoothing else "unsmoothed"
        click.echo("")
        click.echo(f"Level at the seat (dB re free field at 1 m, {sm}); difference = {n1} - {n2}; mono = both in phase")
        if ub is not None:
            click.echo(f"Uncertainty: {ub.n_samples} rooms drawn (seed {ub.seed}); {uncertainty_text(room)}; "
                       "'diff 10-90 %' is the difference's band over them.")
        click.echo(f"  {'Hz':>5}  {n1:>7}  {n2:>7}  {'diff':>6}  {'mono':>6}"
                   + (f"  {'diff 10-90 %':>13}" if ub is not None else ""))
        for fc in (20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250):
            if e.freq_hz[0] <= fc <= e.freq_hz[-1]:
                i = int(np.argmin(np.abs(np.log(e.freq_hz / fc))))
                mark = "  *" if abs(e.difference_smoothed_db[i]) >= e.threshold_db and \
                    e.band_hz[0] <= e.freq_hz[i] <= e.band_hz[1] else ""
                click.echo(f"  {fc:>5g}  {e.smoothed_db[0, i]:7.1f}  {e.smoothed_db[1, i]:7.1f}  "
                           f"{e.difference_smoothed_db[i]:+6.1f}  {e.mono_smoothed_db[i]:6.1f}"
                           + (f"  {ub.difference_db_p10[i]:+5.1f}..{ub.difference_db_p90[i]:+5.1f}"
                              if ub is not None else "") + mark)
        click.echo(f"RMS difference over {e.band_hz[0]:g}-{e.band_hz[1]:g} Hz: {e.band_mismatch_db:.1f} dB")
        click.echo("")
        if not e.regions:
            click.echo(f"No region of {e.band_hz[0]:g}-{e.band_hz[1]:g} Hz where |{n1} - {n2}| reaches "
                       f"{e.threshold_db:g} dB.")
        else:
            click.echo(f"Regions where |{n1} - {n2}| >= {e.threshold_db:g} dB ({e.band_hz[0]:g}-{e.band_hz[1]:g} Hz):")
        for k, r in enumerate(e.regions, 1):
            click.echo(f"{k}. {r.sentence}")
            if r.causes:
                click.echo("   Causes (contribution to the mean |difference| in the region):")
            for c in r.causes[:5]:
                extra = ""
                if c.kind == "mode":
                    p1, p2 = c.data["psi_speakers"]
                    extra = f"; psi {n1} {p1:+.2f}, {n2} {p2:+.2f}, seat {c.data['psi_seat']:+.2f}"
                click.echo(f"     {c.contribution_db:4.1f} dB  {c.text}{extra}")
            for nt in r.notches:
                click.echo(f"     notch: {nt['speaker']} speaker {nt['distance_m'] * 100:.0f} cm from the "
                           f"{nt['wall']}{'' if nt['wall'] in ('floor', 'ceiling') else ' wall'}, "
                           f"c/4d = {nt['notch_hz']:.0f} Hz")
        if e.mono_cancelled:
            click.echo("")
            click.echo("Modes the two speakers drive in opposite phase (they cancel in the mono sum): " + ", ".join(
                f"({','.join(str(v) for v in m['indices'])}) {m['freq_hz']:.1f} Hz" for m in e.mono_cancelled[:8]))
        click.echo("")
        click.echo(f"Schroeder frequency {e.schroeder_hz:.0f} Hz: results above it are indicative only.")
    echo_err(MODEL_CAUTION)
    if plot_path:
        from ..present.plots_place import plot_explain

        plot_explain(e, title=f"{room.name}: {n1} and {n2} at the seat", path=plot_path, bands=ub)
        echo_err(f"wrote {plot_path}")
