"""Figures, drawn with matplotlib's object-oriented API (no pyplot global state).

matplotlib is imported only when a figure is made, so ``import roommodes`` stays light.
Every figure shares one style: a colour-blind-safe palette (Okabe & Ito, 2008, "Color
Universal Design"), labelled axes with units, log-frequency axes ticked at
20/50/100/200 Hz, and the region above the Schroeder frequency shaded as "indicative
only".
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from ..dsp.response import smooth_db
from ..dsp.text import boost_text

__all__ = ["PALETTE", "new_figure", "save_figure", "figure_bytes", "plot_prediction", "plot_modes"]

#: Okabe-Ito colour-blind-safe palette (black first for references).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")
_FREQ_TICKS = (20, 30, 50, 70, 100, 150, 200, 300, 500)


def new_figure(width_in=8.0, height_in=4.5, nrows=1, ncols=1, **kw):
    """A figure and its axes, headless (Agg canvas)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(nrows, ncols, **kw)
    return fig, axes


def save_figure(fig, path, overwrite=True):
    """Save ``fig`` to ``path`` atomically (format from the extension: png, svg, pdf)."""
    p = Path(path)
    fmt = p.suffix.lstrip(".").lower() or "png"
    tmp = p.with_name(f".{p.name}.tmp-{os.getpid()}")
    try:
        fig.savefig(tmp, format=fmt, dpi=130)
        os.replace(tmp, p)
    finally:
        if tmp.exists():
            tmp.unlink()
    return p


def figure_bytes(fig, png_dpi=130, svg_metadata=None, svg_rc=None):
    """PNG and SVG bytes of one figure, laid out once.

    The figure's layout (constrained layout) is solved once, by the one Agg drawing at
    ``png_dpi`` that is also the PNG; the layout is then frozen and the SVG is drawn with
    the same positions: one layout solve and two drawings, where ``fig.savefig`` once per
    format costs two layout solves and four drawings (each ``savefig`` draws the figure
    once without output to place it, then again).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    png_dpi : float
        Resolution of the PNG, dots per inch.
    svg_metadata : dict, optional
        ``metadata`` of the SVG (``savefig``'s keyword).
    svg_rc : dict, optional
        matplotlib settings in force while the SVG is written (``svg.hashsalt``, ...).

    Returns
    -------
    png, svg : bytes

    Notes
    -----
    The figure is left without a layout engine: later drawings keep these positions.
    """
    import io

    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.image import imsave

    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    dpi = fig.get_dpi()
    fig.set_dpi(png_dpi)
    try:
        canvas.draw()  # the layout is solved here, once, and the PNG drawn
        buf = io.BytesIO()
        imsave(buf, canvas.buffer_rgba(), format="png", origin="upper", dpi=png_dpi)
        png = buf.getvalue()
    finally:
        fig.set_dpi(dpi)
    with matplotlib.rc_context({"figure.autolayout": False, "figure.constrained_layout.use": False}):
        fig.set_layout_engine(None)  # keep the positions just solved: no second layout, no extra drawing
    with matplotlib.rc_context(svg_rc or {}):
        buf = io.BytesIO()
        fig.savefig(buf, format="svg", metadata=svg_metadata)
    return png, buf.getvalue()


def style_frequency_axis(ax, fmin, fmax):
    """Log-frequency x axis with readable ticks in Hz."""
    from matplotlib.ticker import FixedLocator, NullFormatter

    ax.set_xscale("log")
    ax.set_xlim(fmin, fmax)
    ticks = [t for t in _FREQ_TICKS if fmin <= t <= fmax]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.set_xticklabels([f"{t:g}" for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("Frequency (Hz)")
    ax.grid(True, which="major", alpha=0.35)
    ax.grid(True, which="minor", alpha=0.12)


def shade_invalid(ax, schroeder_hz, fmax):
    """Shade the band above the Schroeder frequency."""
    if schroeder_hz < fmax:
        ax.axvspan(schroeder_hz, fmax, color="0.85", alpha=0.6, lw=0, zorder=0)
        ax.text(schroeder_hz * 1.02, 0.90, f"above the Schroeder\nfrequency ({schroeder_hz:.0f} Hz):\nindicative only",
                transform=ax.get_xaxis_transform(), fontsize=7.5, color="0.3", va="top",
                bbox={"facecolor": "white", "alpha": 0.75, "edgecolor": "none", "pad": 1.5})


def mark_modes(ax, modes, fmin, fmax, max_order=2):
    """Short ticks along the top edge at mode frequencies (axial long, tangential short)."""
    trans = ax.get_xaxis_transform()
    for f, order in zip(modes.freq_hz, modes.order):
        if fmin <= f <= fmax and 1 <= order <= max_order:
            top = 1.0
            ax.plot([f, f], [top - (0.06 if order == 1 else 0.03), top], color="0.25", lw=0.8,
                    transform=trans, clip_on=False)


#: Fractional-octave smoothing of the curves drawn in bold (the one the commands' figures use).
_SHOWN_SMOOTHING = 6


def _identical_groups(channels, atol_db=0.01):
    """Indices of ``channels`` grouped by identical level (within ``atol_db``), first-seen order:
    a curve drawn over its twin would hide it, so twins share one curve and one label."""
    groups = []
    for k, ch in enumerate(channels):
        for g in groups:
            if np.allclose(ch.level_db, channels[g[0]].level_db, atol=atol_db):
                g.append(k)
                break
        else:
            groups.append([k])
    return groups


def plot_prediction(predictions, modes=None, title=None, path=None, bands=None, system=None, system_levels=None):
    """Predicted level at the seat for one or more predictions (layouts).

    Parameters
    ----------
    predictions : Prediction or list of Prediction
        All channels of each are drawn; several predictions are told apart by colour
        (layout) and line style (channel).
    modes : ModeSet, optional
        Drawn as ticks along the top (long: axial, short: tangential).
    bands : list of Bands or None, optional
        One per prediction (:func:`roommodes.analysis.uncertainty.predict_bands`): each
        channel's 10-90 % band over the drawn rooms is shaded in the channel's colour.
    system : SeatsPrediction, optional
        The system's mono sum at every seat with the room file's settings
        (:func:`roommodes.analysis.predict.predict_seats`): drawn in a second panel below.
    system_levels : ndarray (N, P, F), optional
        The same sum in each drawn room (:func:`roommodes.analysis.uncertainty.system_levels`):
        each seat's 10-90 % band over them is shaded in the seat's colour in the second panel.
    """
    preds = predictions if isinstance(predictions, (list, tuple)) else [predictions]
    if system is not None:
        fig, (ax, ax_sys) = new_figure(8.0, 8.6, nrows=2)
    else:
        fig, ax = new_figure()
    f = preds[0].freq_hz
    styles = ("-", "--", ":", "-.")
    for i, p in enumerate(preds):
        groups = _identical_groups(p.channels)
        same = len(groups) == 1 and len(p.channels) > 1
        for j, ch in enumerate(p.channels[g[0]] for g in groups):
            if len(preds) == 1:
                color, ls = PALETTE[j % len(PALETTE)], "-"
                names = [p.channels[k].name for k in groups[j]]
                label = " = ".join(names) + " (identical)" if len(names) > 1 else ch.name
            elif same:
                color, ls, label = PALETTE[i % len(PALETTE)], "-", f"{p.layout_name} (all channels alike)"
            else:
                color, ls, label = PALETTE[i % len(PALETTE)], styles[j % 4], f"{p.layout_name}: {ch.name}"
            # the curve the printed figures come from (1/6-octave power smoothing), over the
            # unsmoothed one, drawn thin
            if len(preds) == 1:
                ax.plot(p.freq_hz, ch.level_db, color=color, ls=ls, lw=0.6, alpha=0.45)
            ax.plot(p.freq_hz, smooth_db(p.freq_hz, ch.level_db, _SHOWN_SMOOTHING), color=color, ls=ls, lw=1.6,
                    label=f"{label}, 1/{_SHOWN_SMOOTHING}-octave smoothed")
            band = bands[i] if bands is not None else None
            if band is not None and ch.name in band.names:
                lo, _, hi = band.channel(ch.name)
                ax.fill_between(band.freq_hz, lo, hi, color=color, alpha=0.18, lw=0,
                                label=f"{ch.name}: 10-90 % of drawn rooms" if len(preds) == 1 else None)
    shade_invalid(ax, preds[0].schroeder_hz, f[-1])
    if modes is not None:
        mark_modes(ax, modes, f[0], f[-1])
    style_frequency_axis(ax, f[0], f[-1])
    ax.set_ylabel("Level at seat (dB re free field at 1 m)")
    lv = np.concatenate([c.level_db for p in preds for c in p.channels])
    lo, hi = np.percentile(lv, 1), lv.max()
    ax.set_ylim(np.floor(lo / 5) * 5 - 5, np.ceil(hi / 5) * 5 + 5)
    if len(preds) == 1:
        ax.plot([], [], color="0.4", lw=0.6, alpha=0.6, label="thin: unsmoothed")
    if modes is not None:
        ax.plot([], [], color="0.25", lw=0.8, label="| room mode (tick at top;\n  long axial, short tangential)")
    if len(preds) > 1:
        fig.set_size_inches(10.0, 4.8)
        ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    else:
        ax.legend(fontsize=8, loc="lower center")
    ax.set_title(title or "Predicted level at the seat", fontsize=11, pad=10)
    if system is not None:
        _system_panel(ax_sys, system, preds[0].schroeder_hz, system_levels)
        if len(preds) > 1:
            fig.set_size_inches(10.0, 8.6)
    if path is not None:
        save_figure(fig, path)
    return fig


def _system_panel(ax, sp, schroeder_hz, drawn_db=None):
    """The mono sum of mains and subs at every seat, with the room file's settings (and, given
    the sum in drawn rooms ``drawn_db`` (N, P, F), each seat's 10-90 % band over them)."""
    f = sp.freq_hz
    if drawn_db is not None:
        p10, p90 = np.percentile(drawn_db, [10.0, 90.0], axis=0)
        for j in range(len(sp.seats)):
            ax.fill_between(f, p10[j], p90[j], color=PALETTE[j % len(PALETTE)], alpha=0.18, lw=0,
                            gid=f"system-band-{j}")
        ax.fill_between([], [], [], color="0.5", alpha=0.25, lw=0,
                        label=f"10-90 % of {drawn_db.shape[0]} drawn rooms (shaded in each seat's colour)")
    for j, seat in enumerate(sp.seats):
        ax.plot(f, smooth_db(f, sp.system_db[j], _SHOWN_SMOOTHING), color=PALETTE[j % len(PALETTE)],
                lw=2.0 if j == 0 else 1.3, label=f"{seat.name}{' (main seat)' if j == 0 and len(sp.seats) > 1 else ''}"
                f"{f', weight {seat.weight:g}' if len(sp.seats) > 1 else ''}")
    if sp.crossover_hz:
        ax.axvline(sp.crossover_hz, color="0.35", ls=":", lw=1.0)
        ax.text(sp.crossover_hz * 1.02, 0.97, f"crossover {sp.crossover_hz:g} Hz", fontsize=7, color="0.3",
                va="top", transform=ax.get_xaxis_transform())
    b = sp.band_hz
    for lo, hi in ((f[0], b[0]), (b[1], f[-1])):
        if hi > lo:
            ax.axvspan(lo, hi, color="0.93", lw=0, zorder=0)
    shade_invalid(ax, schroeder_hz, f[-1])
    style_frequency_axis(ax, f[0], f[-1])
    lv = sp.system_db[:, (f >= b[0]) & (f <= b[1])]
    ax.set_ylim(np.floor(np.percentile(lv, 1) / 5) * 5 - 5, np.ceil(lv.max() / 5) * 5 + 5)
    ax.set_ylabel("System level (dB re free field at 1 m)")
    n_subs = len(sp.sub_settings)
    how = (f"{n_subs} sub{'s' if n_subs != 1 else ''} as set in the file, "
           + (f"LR4 crossover {sp.crossover_hz:g} Hz" if sp.crossover_hz else "no crossover") if n_subs
           else "mains only")
    spread = (f"\nseat-to-seat spread {sp.seat_spread_db:.1f} dB over {b[0]:g}-{b[1]:g} Hz (square root of the "
              "weighted mean spatial variance)" if len(sp.seats) > 1 else "")
    ax.set_title(f"Mono sum of mains and subs at every seat, 1/{_SHOWN_SMOOTHING}-octave smoothed ({how}){spread}",
                 fontsize=9)
    ax.plot([], [], color="0.93", lw=6, label="outside the system's band")
    ax.legend(fontsize=8, loc="lower center", ncols=2)


def plot_modes(modes, fmax, title=None, path=None, freq_ranges=None):
    """Mode frequencies as a stem chart by kind, with each mode's T60.

    ``freq_ranges``: optional ``(freq_hz_p10, freq_hz_p90, n_rooms)``, each mode's 10-90 %
    frequency range over drawn rooms, drawn as a horizontal bar across the top of its stem.
    """
    fig, ax = new_figure(8.0, 3.6)
    names = ("axial", "tangential", "oblique")
    for order, name in zip((1, 2, 3), names):
        sel = (modes.order == order) & (modes.freq_hz <= fmax)
        if sel.any():
            ax.vlines(modes.freq_hz[sel], 0, modes.t60_s[sel], color=PALETTE[order - 1], lw=1.6, label=name)
            if freq_ranges is not None:
                ends = np.concatenate([freq_ranges[0][sel], freq_ranges[1][sel]])
                ax.hlines(modes.t60_s[sel], freq_ranges[0][sel], freq_ranges[1][sel], color=PALETTE[order - 1],
                          lw=3.0, alpha=0.6)
                ax.plot(ends, np.tile(modes.t60_s[sel], 2), ls="none", marker="|", ms=7, mew=1.2,
                        color=PALETTE[order - 1])
    if freq_ranges is not None:
        ax.plot([], [], color="0.4", lw=3.0, alpha=0.6, marker="|", ms=7, mew=1.2,
                label=f"10-90 % of {freq_ranges[2]} drawn rooms")
    style_frequency_axis(ax, max(15.0, modes.freq_hz.min() * 0.8), fmax)
    ax.set_ylabel("Modal decay time T60 (s)")
    ax.set_ylim(bottom=0)
    ax.legend(fontsize=8)
    ax.set_title(title or "Room modes", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig


_REGION_COLOURS = {"narrow null": "#CC79A7", "broad dip": "#56B4E9", "peak": "#E69F00", "narrow dip": "#999999"}


def plot_correction(corrections, title=None, path=None):
    """Before, target, after and the individual filters of each channel's parametric EQ.

    One row of two panels per channel: left, the levels at the seat (and, faint, at the
    head positions around it) with the classified regions shaded (nulls and narrow dips
    are not boosted) and the design band between dotted lines; right, the combined
    correction curve and each filter. A correction held to drawn rooms
    (``ChannelCorrection.ensemble_seat_db``) also shades the seat's 10-90 % band over
    those rooms before and after the parametric filters.
    """
    # imported here, not at the top: the EQ pulls in scipy.optimize, which `predict` never needs
    from ..analysis.eq import correction_db

    n = len(corrections)
    fig, axes = new_figure(11.0, 3.6 * n, n, 2, squeeze=False)
    for row, corr in enumerate(corrections):
        d = corr.parametric
        f = d.freq_hz
        ax = axes[row, 0]
        for reg in d.classification.regions:
            if reg.kind in _REGION_COLOURS:
                ax.axvspan(reg.freq_lo_hz, reg.freq_hi_hz, color=_REGION_COLOURS[reg.kind], alpha=0.18, lw=0)
        for k, (pb, pa) in enumerate(zip(d.positions_before_db, d.positions_after_db)):
            # the head positions the design also answers to, faint
            ax.plot(f, pb, color=PALETTE[0], lw=0.5, alpha=0.35, label="head positions, before" if k == 0 else None)
            ax.plot(f, pa, color=PALETTE[1], lw=0.5, alpha=0.35, label="head positions, after" if k == 0 else None)
        ax.axvline(d.band_hz[0], color="0.6", lw=0.7, ls=":")
        ax.axvline(d.band_hz[1], color="0.6", lw=0.7, ls=":")
        if corr.ensemble_seat_db is not None:
            n_rooms = len(corr.ensemble_seat_db)
            for after, colour, when in ((False, PALETTE[0], "before"), (True, PALETTE[1], "after")):
                lo, hi = corr.seat_band_db(after=after)
                ax.fill_between(f, lo, hi, color=colour, alpha=0.2, lw=0,
                                label=f"seat {when}: 10-90 % of {n_rooms} drawn rooms")
        ax.plot(f, d.before_db, color=PALETTE[0], lw=1.3, label="before (seat)")
        ax.plot(f, d.after_db, color=PALETTE[1], lw=1.6, label="after (parametric)")
        ax.plot(f, d.target_db, color="0.2", lw=1.0, ls="--", label="target")
        for kind, colour in _REGION_COLOURS.items():
            ax.axvspan(0, 0, color=colour, alpha=0.3, label=kind)
        style_frequency_axis(ax, f[0], f[-1])
        ax.set_ylabel("Level at seat (dB)")
        ax.set_title(f"{corr.name}: before and after", fontsize=10)
        ax.legend(fontsize=7, ncol=2, loc="lower center")
        ax2 = axes[row, 1]
        for i, flt in enumerate(d.filters):
            ax2.plot(f, correction_db([flt], f), color=PALETTE[(i + 2) % len(PALETTE)], lw=0.9, alpha=0.8,
                     label=f"{flt.freq_hz:.0f} Hz {flt.gain_db:+.1f} dB Q {flt.q:.1f}")
        ax2.plot(f, d.correction_db, color="0.1", lw=1.8, label="combined")
        ax2.axhline(0, color="0.5", lw=0.7)
        ax2.axhline(d.max_boost_db, color=PALETTE[1], lw=0.8, ls=":")
        style_frequency_axis(ax2, f[0], f[-1])
        ax2.set_ylabel("Correction (dB)")
        ax2.set_title(f"{corr.name}: filters ({boost_text(d.max_boost_db)})", fontsize=10)
        ax2.legend(fontsize=7, ncol=2, loc="lower center")
    if title:
        fig.suptitle(title, fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig
