"""The ``eq`` command: bass correction for each channel and the headroom it costs."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..analysis.compare import load_measurement
from ..analysis.correction import MAX_EQ_CHANNELS, correct_measured, correct_prediction
from ..analysis.eq import (
    CAUTIONS,
    EXPORT_SAMPLE_RATES,
    HELD_SAMPLES,
    STABLE_SHARE,
    channel_headroom_warnings,
    held_rule_text,
    q_at_3db_below_peak,
    render_text,
)
from ..dsp.checks import check_number, check_range
from ..dsp.response import log_frequencies
from ..dsp.text import boost_text
from ..io.importers import read_response_text
from ..io.roomfile import write_text_atomic
from ..present.plots import plot_correction
from ._measured import mic_cal_option, read_mic_cal, read_spl_ref, spl_ref_input, spl_ref_option
from ._progress import Progress
from ._util import (
    CONTEXT,
    check_output,
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
    protect_inputs,
    room_inputs,
    uncertainty_options,
    uncertainty_text,
)

_SPL_TABLE_HZ = (31.5, 40.0, 50.0, 63.0, 80.0, 100.0, 125.0, 160.0, 200.0)


def _read_target(path):

    curve = read_response_text(path)
    if any("reversed" in note for note in curve.notes):
        fail(f"{path}: the target's frequencies do not rise from row to row; list them in rising order "
             "(a target is a curve, and a row out of place is more likely a typing error than intended)")
    return (np.asarray(curve.freq_hz), np.asarray(curve.level_db))


def _parse_pair(text, name):
    try:
        a, b = (float(v) for v in text.split(","))
    except ValueError:
        fail(f"{name} must be two numbers LOW,HIGH, e.g. 0.5,10; got '{text}'")
    return a, b


def _print_channel(corr, room_layout_speaker):

    p = corr.parametric
    npos = len(p.positions_error_before)
    design_for = f"seat and {npos} head positions around it" if npos else "the seat"
    click.echo(f"Channel {corr.name}  (band {p.band_hz[0]:.0f}-{p.band_hz[1]:.0f} Hz, designed for {design_for}, "
               "curves smoothed 1/12 octave)")
    for c in corr.cautions:
        click.echo(f"  caution: {c}")
    click.echo("  What the curve does, and what EQ may do about it:")
    for r in p.classification.regions:
        if r.kind == "ok":
            continue
        action = {"peak": "cut", "broad dip": "may be boosted", "narrow null": "NOT boosted",
                  "narrow dip": "not boosted"}.get(r.kind, "")
        click.echo(f"    {r.kind:<11} {r.freq_lo_hz:6.1f}-{r.freq_hi_hz:6.1f} Hz  {r.deviation_db:+6.1f} dB: "
                   f"{action} ({'; '.join(r.reasons)})")
    click.echo("  Parametric EQ (peaking filters in rising frequency, the order of --export and the report; "
               "Q as in the Audio EQ Cookbook, bandwidth between the half-gain points):")
    click.echo(f"    {'#':>2} {'freq Hz':>8} {'gain dB':>8} {'Q':>6} {'BW oct':>7} {'Q at -3 dB':>10}  Q from")
    for i, flt in enumerate(p.filters, 1):
        q3 = q_at_3db_below_peak(flt.q, flt.gain_db) if abs(flt.gain_db) > 3.0 else float("nan")
        q3s = f"{q3:10.2f}" if np.isfinite(q3) else f"{'-':>10}"
        click.echo(f"    {i:>2} {flt.freq_hz:8.1f} {flt.gain_db:+8.1f} {flt.q:6.2f} {flt.bandwidth_octaves:7.2f} {q3s}"
                   f"  {flt.basis}")
        for note in flt.at_limit:
            click.echo(f"       ^ at a limit: {note}")
        if flt.stability:
            st = dict(flt.stability)
            held = f"; {st['depth_share']:.0%} of the single model's {st['design_gain_db']:+.1f} dB" \
                if "depth_share" in st else ""
            if "present_share" in st:
                click.echo(f"       ^ drawn rooms: peak in {st['present_share']:.0%} of {st['samples']:.0f}, its top "
                           f"moves {st['freq_spread_octaves']:.2f} oct (10-90 %; the cut is "
                           f"{st['bandwidth_octaves']:.2f} oct wide){held}")
            elif held:
                click.echo(f"       ^ drawn rooms ({st['samples']:.0f}): sized to them{held}")
    left = [w for w in p.warnings if w.code in ("peak_left_uncertain", "boost_left_uncertain")]
    if left:
        click.echo("  Left alone as uncertain (the single model asks for them; the drawn rooms do not agree):")
        for w in left:
            click.echo(f"    {w.message}")
    if not p.filters:
        click.echo("    (no filter: nothing within the limits would help without lifting part of the curve above "
                   "the target)")
    eb, ea = p.error_before, p.error_after
    click.echo(f"    deviation from target where EQ may act, at the seat: rms {eb.rms_db:.1f} -> {ea.rms_db:.1f} dB, "
               f"max {eb.max_abs_db:.1f} -> {ea.max_abs_db:.1f} dB, within +-3 dB {eb.within_3db:.0%} -> {ea.within_3db:.0%}")
    if npos:
        pairs = ", ".join(f"{b.rms_db:.1f}->{a.rms_db:.1f}"
                          for b, a in zip(p.positions_error_before, p.positions_error_after))
        click.echo(f"    at the head positions around the seat (rms dB): {pairs}")
    s = corr.shelf
    if s.filters:
        sf = s.filters[0]
        click.echo(f"  Bass (tone) control only: low shelf at {sf.freq_hz:.0f} Hz, {sf.gain_db:+.1f} dB (slope S "
                   f"{s.slope:.2f}); leaves rms {s.error_after.rms_db:.1f} dB, max {s.error_after.max_abs_db:.1f} dB")
    else:
        click.echo("  Bass (tone) control only: no shelf (the curve needs none)")
    for g, label in ((corr.graphic_third, "31-band 1/3-octave"), (corr.graphic_octave, "10-band octave")):
        sliders = ", ".join(f"{lab} {v:+.1f}" for lab, v in zip(g.bands.labels, g.gains_db) if abs(v) >= 0.05)
        click.echo(f"  {label} graphic EQ (band Q {g.band_q:.2f}): {sliders or 'all sliders at 0'}")
        click.echo(f"    leaves rms {g.error_after.rms_db:.1f} dB (setting each slider to minus the curve would "
                   f"leave {g.naive_error.rms_db:.1f} dB)")
    h = corr.headroom
    pf = 10 ** (max(h.max_boost_db, 0) / 10)
    xf = 10 ** (max(h.max_boost_db, 0) / 20)
    if h.max_boost_db < 0.05:
        click.echo("  Headroom: the correction only cuts; no pre-attenuation and no extra amplifier power are needed")
    else:
        click.echo(f"  Headroom: the combined curve peaks at {h.max_boost_db:+.1f} dB at {h.max_boost_freq_hz:.0f} Hz: "
                   f"pre-attenuate digital input by {h.preattenuation_db:.1f} dB; there the amplifier needs "
                   f"x{pf:.1f} the power and the cone x{xf:.1f} the excursion")
    if corr.clean is not None:
        f = p.freq_hz
        cols = [fr for fr in _SPL_TABLE_HZ if p.band_hz[0] * 0.9 <= fr <= p.band_hz[1]]
        idx = [int(np.argmin(np.abs(f - fr))) for fr in cols]
        if corr.clean.basis == "measured":
            click.echo("  Maximum level at the seat (dB SPL) for a full-scale input at the volume used for the "
                       "measurement (--spl-ref); the amplifier's and speaker's own limits apply on top:")
        else:
            click.echo("  Maximum clean level at the seat (dB SPL; amplifier power, sensitivity and maximum SPL "
                       "from the room file):")
        click.echo("    " + " ".join(f"{fr:>6g}" for fr in cols) + "  Hz")
        click.echo("    " + " ".join(f"{corr.clean.before_db[i]:6.0f}" for i in idx) + "  before EQ")
        click.echo("    " + " ".join(f"{corr.clean.after_db[i]:6.0f}" for i in idx) + "  after EQ")
    for w in p.warnings:
        if w.code in ("filter_at_limit", "peak_left_uncertain", "boost_left_uncertain"):
            continue  # shown under the filter it concerns, or in the list above
        click.echo(f"  warning: {w.message}")
        if w.recommended is not None:
            r = w.recommended
            click.echo(f"    recommended instead: {r.type} at {r.freq_hz:.0f} Hz, Q {r.q:.2f}")
    click.echo("")


def _correct_measured(room, layout, measured, freq_hz, window_s, room_file, options, mic_cal=None, spl_ref=None):
    """Corrections of measured curves: CHANNEL=FILE items, several files of a channel averaged."""
    files = {}
    for item in measured:
        name, sep, path = item.partition("=")
        if not sep or not name or not path:
            fail(f"--measured takes CHANNEL=FILE (e.g. left=left-seat.txt), got '{item}'")
        if name not in [s.name for s in layout.speakers]:
            fail(f"--measured {item}: no speaker '{name}' in {room_file}; the speakers are "
                 + ", ".join(s.name for s in layout.speakers))
        files.setdefault(name, []).append(path)
    curves = {name: [load_measurement(path, window_s=window_s, freq_hz=freq_hz, mic_cal=mic_cal) for path in paths]
              for name, paths in files.items()}
    # the design runs on the chain's own levels; the calibration adds the SPL of full scale to the
    # maximum-level figures only, so it cannot change a filter
    return correct_measured(room.with_layout(layout), curves,
                            full_scale_spl_db=None if spl_ref is None else spl_ref.full_scale_spl_db, **options)


#: Default count of drawn rooms for ``eq --uncertainty`` (docs/eq.md; the report's EQ uses at
#: most as many).
EQ_SAMPLES = HELD_SAMPLES


@click.command(context_settings=CONTEXT)
@click.argument("room_file", type=click.Path(path_type=Path))
@click.option("--layout", type=click.Choice(["file", "corner", "wall", "mid-room", "desk"]), default="file",
              show_default=True, help="Speaker and seat positions to correct.")
@click.option("--target", default="flat", show_default=True, metavar="flat|tilt|FILE",
              help="Target curve: flat, a gentle low-frequency rise (tilt), or a text file of frequency and dB.")
@click.option("--tilt", "tilt_db", type=float, default=1.0, show_default=True,
              help="With --target tilt: rise in dB per octave below the corner.")
@click.option("--tilt-corner", type=float, default=100.0, show_default=True, help="With --target tilt: corner, Hz.")
@click.option("--band", "band_text", metavar="LOW,HIGH",
              help="Correction band in Hz [default: from the speaker's roll-off (or the room's lowest mode) to the "
                   "room's Schroeder frequency]. A band above the Schroeder frequency prints a caution.")
@click.option("--channel", "channels", multiple=True, metavar="NAME",
              help=f"Correct only this speaker (repeatable); needed when the layout has more than "
                   f"{MAX_EQ_CHANNELS} speakers.")
@click.option("--max-filters", type=click.IntRange(1, 20), default=6, show_default=True, help="Peaking filters per channel.")
@click.option("--max-boost", type=float, default=6.0, show_default=True,
              help="Largest boost of the combined curve at any frequency, dB.")
@click.option("--q-range", default="0.5,10", show_default=True, metavar="LOW,HIGH", help="Allowed filter Q.")
@freq_range_option
@ppo_option
@method_option
@click.option("--measured", "measured", multiple=True, metavar="CHANNEL=FILE",
              help="Correct a measured curve instead of the prediction: an impulse-response WAV or a "
                   "frequency-response text file for the named speaker. Repeat for more channels or "
                   "more microphone positions of one channel (they are averaged, and their spread tells "
                   "nulls from broad dips).")
@click.option("--window", "window_s", type=float, default=0.5, show_default=True,
              help="With --measured impulse responses: analysis window, s (resolution about 1/window).")
@click.option("--area", "area_text", metavar="LENGTH,WIDTH",
              help="Correct the average over a listening area of this size around the seat (m, e.g. 0.6,0.6) "
                   "instead of the seat alone.")
@click.option("--export", "export_path", type=click.Path(path_type=Path),
              help="Write the filters and second-order sections (44.1, 48, 96 kHz) to a text file.")
@click.option("--plot", "plot_path", type=click.Path(path_type=Path), help="Write before/after curves and filters (PNG/SVG).")
@click.option("--force", is_flag=True, help="Overwrite existing output files.")
@mic_cal_option
@uncertainty_options(samples=EQ_SAMPLES, samples_note=(
    "Each room predicts the seat and six head positions; whether a peak is present and the median room "
    "settle with fewer rooms than the tails of the 10-90 % band do."))
@spl_ref_option
@json_option
def eq(room_file, layout, channels, target, tilt_db, tilt_corner, band_text, max_filters, max_boost, q_range, freq_range,
       points_per_octave, method, measured, window_s, area_text, export_path, plot_path, force, as_json, mic_cal,
       uncertainty, samples, seed, spl_ref):
    """Design bass-correction EQ for each channel and show the headroom it costs.

    Every dip is classified before it is touched: a deep narrow dip that moves when the
    seat or speaker moves 5 cm is a cancellation null, and boosting it only wastes
    amplifier power and cone excursion, so it is left alone; broad shortfalls may be
    boosted up to --max-boost; peaks are cut. Offered: parametric filters, a single low
    shelf (for a bass tone control), and 31-band and 10-band graphic-EQ slider settings.

    With --uncertainty the parametric filters are held to rooms drawn from the room
    file's [uncertainty]: only peaks stable across them are cut, and each filter is sized
    to them, never deeper or higher than the single model asks (docs/eq.md).
    """

    lo, hi = parse_range(freq_range)
    qlo, qhi = _parse_pair(q_range, "--q-range")
    try:
        # the limits are the library's own (analysis.eq), named here as the options
        max_boost = check_number("--max-boost", max_boost, 0.0, 24.0, unit=" dB")
        qlo, qhi = check_range("--q-range", (qlo, qhi), lo=0.0, hi=100.0)
        tilt_db = check_number("--tilt", tilt_db, -6.0, 6.0, unit=" dB/octave")
        tilt_corner = check_number("--tilt-corner", tilt_corner, 0.0, 2000.0, unit=" Hz", lo_open=True)
        window_s = check_number("--window", window_s, 0.01, 60.0, unit=" s")
    except ValueError as exc:
        fail(str(exc))
    band = parse_range(band_text, "--band") if band_text else None
    room = load_or_fail(room_file)
    (lay,) = layouts_for(room, layout)
    names = [s.name for s in lay.speakers]
    if channels:
        unknown = [c for c in channels if c not in names]
        if unknown:
            fail(f"--channel {unknown[0]}: no such speaker in layout {lay.name} of {room_file}; the speakers are "
                 + ", ".join(names[:20]) + (" ..." if len(names) > 20 else ""))
        lay = replace(lay, speakers=tuple(s for s in lay.speakers if s.name in channels))
    if not measured and len(lay.speakers) > MAX_EQ_CHANNELS:  # with --measured only the measured ones
        chosen = " chosen" if channels else ""
        fail(f"{room_file}: layout {lay.name} has {len(lay.speakers)} speakers{chosen}; eq designs at most "
             f"{MAX_EQ_CHANNELS} channels in one run (each takes about a second and a half and its own prediction); choose them with "
             f"--channel NAME (repeatable)")
    if band is not None and (band[0] < lo or band[1] > hi):
        fail(f"--band {band[0]:g},{band[1]:g} Hz lies outside the computed range {lo:g}-{hi:g} Hz; "
             "widen --freq-range or narrow --band")
    options = dict(max_filters=max_filters, max_boost_db=max_boost, q_range=(qlo, qhi), band_hz=band)
    if target in ("flat", "tilt"):
        options.update(target=target, tilt_db_per_octave=tilt_db, tilt_corner_hz=tilt_corner)
    else:
        options.update(target="table", target_table=_read_target(target))
    inputs = room_inputs(room_file, room) + [Path(m.partition("=")[2]) for m in measured]
    if mic_cal:
        inputs.append(Path(mic_cal))
    if spl_ref and not measured:
        fail("--spl-ref calibrates measurements; give them with --measured CHANNEL=FILE (the prediction's maximum "
             "level comes from the room file's amplifier_w, sensitivity_db and max_spl_db)")
    inputs += spl_ref_input(spl_ref)
    if target not in ("flat", "tilt"):
        inputs.append(Path(target))
    if export_path:
        protect_inputs(export_path, *inputs)
        check_output(export_path, force, what="--export")
    check_plot(plot_path, force, *inputs, export_path)
    f = log_frequencies(lo, hi, points_per_octave)
    if uncertainty and (measured or area_text):
        fail("--uncertainty works on the predicted seat and its head positions; leave out "
             + ("--measured (a measurement is what the room did)" if measured else "--area"))
    ref = None
    if measured:
        ref = read_spl_ref(spl_ref)
        cal = read_mic_cal(mic_cal)
        with Progress("roommodes eq") as prog:
            prog.step("designing the correction from the measurement")
            corrections = _correct_measured(room, lay, measured, f, window_s, room_file, options, cal, ref)
        source = "measured"
    else:
        area = None
        if area_text:
            try:
                area = tuple(float(v) for v in area_text.split(","))
            except ValueError:
                area = ()
            if len(area) != 2 or not all(0 < v <= 3 for v in area):
                fail(f"--area must be LENGTH,WIDTH in metres, each above 0 and at most 3, e.g. 0.6,0.6; got '{area_text}'")
        held = {"n_samples": samples, "seed": seed} if uncertainty else None
        try:
            with Progress("roommodes eq") as prog:
                prog.step("predicting and designing the correction"
                          + (f", held to {samples} drawn rooms" if uncertainty else ""))
                corrections, _pred = correct_prediction(room, lay, f, method=method, area_m=area, uncertainty=held,
                                                        **options)
        except ValueError as exc:
            fail(str(exc))
        source = f"predicted, {method} solver" + (f", average over {area[0]:g} x {area[1]:g} m" if area else "")
        if uncertainty:
            source += f", held to {samples} drawn rooms (seed {seed})"
    head_warn = channel_headroom_warnings({c.name: c.headroom.max_boost_db for c in corrections})
    if as_json:
        extra = {}
        if uncertainty:
            extra["uncertainty"] = {"samples": samples, "seed": seed, "method": method,
                                    "stable_share": STABLE_SHARE, "uncertainty": room.uncertainty.to_dict()}
        dump_json({"room": room.name, "layout": lay.name, "source": source,
                   "spl_reference": ref.to_dict() if measured and ref else None,
                   "frequencies_hz": corrections[0].parametric.freq_hz, **extra,
                   "channels": [c.to_dict() for c in corrections],
                   "warnings": [w.to_dict() for w in head_warn], "cautions": list(CAUTIONS)})
    else:
        click.echo(f"Bass correction for '{room.name}', layout {lay.name} ({source})")
        if uncertainty:
            click.echo(f"Held to {samples} rooms drawn from the room file's [uncertainty] ({uncertainty_text(room)}): "
                       + held_rule_text())
        if ref is not None:
            click.echo(f"Levels: {ref.describe()}")
        elif measured:
            click.echo("Levels: relative (no --spl-ref): no maximum level at the seat is known")
        click.echo("")
        for c in corrections:
            _print_channel(c, None)
        click.echo("Side by side: " + ", ".join(
            f"{c.name} {boost_text(c.headroom.max_boost_db)}" for c in corrections))
        for w in head_warn:
            click.echo(f"warning: {w.message}")
    for c in corrections:
        for text in c.cautions:
            echo_err(f"caution ({c.name}): {text}")
    if export_path:

        text = "\n".join(
            render_text(c.parametric.filters, __version__, sample_rates=EXPORT_SAMPLE_RATES,
                        title=f"{room.name}: channel {c.name} (layout {lay.name})",
                        preattenuation_db=c.headroom.preattenuation_db,
                        notes=list(c.cautions) + [w.message for w in c.parametric.warnings])
            for c in corrections)
        write_text_atomic(export_path, text, overwrite=force)
        echo_err(f"wrote {export_path}")
    if plot_path:

        plot_correction(corrections, title=f"{room.name}: bass correction", path=plot_path)
        echo_err(f"wrote {plot_path}")
    echo_err("Cautions:")
    for c in CAUTIONS:
        echo_err(f"  - {c}")
