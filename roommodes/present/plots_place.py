"""Figures of the placement search and of the left/right explanation.

Same style as :mod:`roommodes.plots` (its palette, log-frequency axes and the shading
above the Schroeder frequency); matplotlib is imported only when a figure is drawn.
"""

from __future__ import annotations

import numpy as np

from ..dsp.response import smooth_db
from .plots import PALETTE, new_figure, save_figure, shade_invalid, style_frequency_axis

__all__ = ["plot_place", "plot_explain", "eq_band_db"]

_EQ_SMOOTHING = 6  # panel (b)'s curves are 1/6-octave smoothed (analysis.search.layout_curves)


def eq_band_db(band, freq_hz, correction_db):
    """10-90 % band of a layout's seat level before and after its EQ over the drawn rooms.

    Each drawn room's level (``band.samples_db``, first two channels) is 1/6-octave smoothed
    on its own grid, interpolated (in log frequency) onto ``freq_hz`` and, after EQ, has the
    layout's designed correction added (the same filters in every drawn room).

    Parameters
    ----------
    band : Bands
        From :func:`roommodes.analysis.uncertainty.predict_bands` for the layout.
    freq_hz : ndarray (Fb,)
        The grid of panel (b).
    correction_db : ndarray (2, Fb)
        The layout's EQ response, dB (from :func:`roommodes.analysis.search.layout_curves`).

    Returns
    -------
    before_p10, before_p90, after_p10, after_p90 : ndarray (2, Fb)
    """
    f = np.asarray(freq_hz, dtype=float)
    sm = smooth_db(band.freq_hz, band.samples_db[:, :2], _EQ_SMOOTHING)  # (N, 2, F)
    x, xp = np.log(f), np.log(band.freq_hz)
    before = np.stack([[np.interp(x, xp, sm[n, c]) for c in range(sm.shape[1])] for n in range(sm.shape[0])])
    after = before + np.asarray(correction_db, dtype=float)[None, :, :]
    b10, b90 = np.percentile(before, (10, 90), axis=0)
    a10, a90 = np.percentile(after, (10, 90), axis=0)
    return b10, b90, a10, a90


def _curves(ax, predictions, band_hz, schroeder_hz, bands=None):
    styles = ("-", "--")
    colors = (PALETTE[1], "0.45")  # best, current: as on the floor plan
    for i, (label, pred) in enumerate(predictions):
        band = bands[i] if bands is not None and i < len(bands) else None
        for j, ch in enumerate(pred.channels[:2]):
            if band is not None and ch.name in band.names:
                lo, _, hi = band.channel(ch.name)
                ax.fill_between(band.freq_hz, lo, hi, color=colors[i % 2], alpha=0.16, lw=0,
                                label=f"{label}: 10-90 % of {band.n_samples} drawn rooms"
                                if j == 0 else None)
            ax.plot(pred.freq_hz, ch.level_db, color=colors[i % 2], ls=styles[j % 2], lw=1.4,
                    label=f"{label}: {ch.name}")
    f = predictions[0][1].freq_hz
    if band_hz[0] > f[0]:
        ax.axvspan(f[0], band_hz[0], color="0.95", lw=0, zorder=0)
        ax.text(np.sqrt(f[0] * band_hz[0]), 0.97, "below the scored band", transform=ax.get_xaxis_transform(),
                fontsize=7.5, color="0.35", ha="center", va="top")
    shade_invalid(ax, schroeder_hz, f[-1])
    style_frequency_axis(ax, f[0], f[-1])
    lv = np.concatenate([c.level_db for _, p in predictions for c in p.channels[:2]])
    ax.set_ylim(np.floor(np.percentile(lv, 1) / 5) * 5 - 5, np.ceil(lv.max() / 5) * 5 + 5)
    ax.set_ylabel("Level at seat (dB re free field at 1 m)")
    ax.legend(fontsize=7.5 if bands is None else 7, ncol=2, loc="lower center")
    ax.set_title(f"(a) Predicted level at the seat; score band {band_hz[0]:g}-{band_hz[1]:g} Hz", fontsize=10)


def _eq_curves(ax, eq_curves, band_hz, bands=None):
    """Each layout's level at the seat before (thin) and after (thick) the EQ it needs; with
    drawn rooms (``bands``, one per layout or None), their 10-90 % band before and after."""
    if not eq_curves:
        ax.set_axis_off()
        return
    colors = (PALETTE[1], "0.45")
    lv = []
    for i, (label, (f, before, corr, after)) in enumerate(eq_curves):
        band = bands[i] if bands is not None and i < len(bands) else None
        if band is not None:
            b10, b90, a10, a90 = eq_band_db(band, f, corr)
            for c in range(min(2, b10.shape[0])):
                ax.fill_between(f, b10[c], b90[c], color=colors[i % 2], alpha=0.08, lw=0,
                                label=f"{label} before EQ: 10-90 % of {band.n_samples} drawn rooms"
                                if c == 0 else None)
                ax.fill_between(f, a10[c], a90[c], color=colors[i % 2], alpha=0.2, lw=0,
                                label=f"{label} after EQ: 10-90 % of {band.n_samples} drawn rooms"
                                if c == 0 else None)
                lv += [b10[c], b90[c], a10[c], a90[c]]
        for c, (ls, name) in enumerate((("-", "left"), ("--", "right"))):
            ax.plot(f, before[c], color=colors[i % 2], ls=ls, lw=0.9, alpha=0.55,
                    label=f"{label}, {name}: before EQ")
            ax.plot(f, after[c], color=colors[i % 2], ls=ls, lw=2.0, label=f"{label}, {name}: after EQ")
            lv += [before[c], after[c]]
    style_frequency_axis(ax, band_hz[0], band_hz[1])
    v = np.concatenate(lv)
    ax.set_ylim(np.floor(v.min() / 5) * 5 - 2, np.ceil(v.max() / 5) * 5 + 6)
    ax.set_ylabel("Level at seat, 1/6 octave (dB)")
    ax.legend(fontsize=6.5, ncol=2, loc="upper center")
    ax.set_title("(b) Before and after each layout's EQ (the score judges 'after')", fontsize=10)


def _draw_boxes(ax, lay, space, color):
    from matplotlib.patches import Polygon

    from ..model.placement import cabinet_corners

    for k, sp in enumerate(lay.speakers[:2]):
        cab = sp.cabinet or space.cabinets[k]
        c = cabinet_corners(sp.position_m, cab, lay.seat_m, space.toe_in)
        foot = c[[0, 2, 6, 4], :2]  # front-left, front-right, back-right, back-left (bottom corners)
        ax.add_patch(Polygon(foot[:, ::-1], closed=True, fill=True, fc=color, ec="white", alpha=0.55, lw=0.8))


def _floor_plan(ax, room, best, current, keep_out, seat_map, space=None, position_sd_m=None):
    from matplotlib.patches import Circle, Rectangle

    lx, ly, _ = room.size_m
    x, y, score = seat_map
    if np.isfinite(score).any():
        step = x[1] - x[0] if x.size > 1 else lx
        # drawn with y (left to right) across and x (front to back) downwards: the view
        # from above with the front wall at the top
        finite = score[np.isfinite(score)]
        mesh = ax.pcolormesh(np.append(y - step / 2, y[-1] + step / 2), np.append(x - step / 2, x[-1] + step / 2),
                             score, cmap="viridis_r", shading="flat", vmin=finite.min(),
                             vmax=np.percentile(finite, 90))
        cb = ax.figure.colorbar(mesh, ax=ax, shrink=0.85)
        cb.set_label("score with the seat here (dB, lower is better;\nrobustness left out; top 10 % clipped)",
                     fontsize=7.5)
    ax.add_patch(Rectangle((0, 0), ly, lx, fill=False, lw=2.0, color="0.15"))
    for box in keep_out:
        ax.add_patch(Rectangle((box.min_m[1], box.min_m[0]), box.max_m[1] - box.min_m[1], box.max_m[0] - box.min_m[0],
                               hatch="///", fill=False, color=PALETTE[3], lw=1.2))
        ax.text(0.5 * (box.min_m[1] + box.max_m[1]), 0.5 * (box.min_m[0] + box.max_m[0]), box.name, ha="center",
                va="center", fontsize=7, color=PALETTE[3])
    for lay, color, label, marker in ((current, "0.45", "current", "s"), (best, PALETTE[1], "best", "o")):
        if lay is None:
            continue
        if space is not None:
            _draw_boxes(ax, lay, space, color)
        sp = np.array([s.position_m for s in lay.speakers])
        ax.plot(sp[:, 1], sp[:, 0], marker, color=color, ms=9, mec="white", label=f"{label}: speakers")
        ax.plot(lay.seat_m[1], lay.seat_m[0], "*", color=color, ms=13, mec="white", label=f"{label}: seat")
        for p in sp:
            ax.plot([p[1], lay.seat_m[1]], [p[0], lay.seat_m[0]], color=color, lw=0.8, ls=":")
        if position_sd_m:
            # 80 % of a plan position drawn with sd s on each axis lands within s sqrt(-2 ln 0.2)
            # = 1.79 s of the stated one (the Rayleigh distribution of the distance)
            for p in [*sp[:, :2], lay.seat_m[:2]]:
                ax.add_patch(Circle((p[1], p[0]), _R80 * position_sd_m, fill=False, ec="0.05", lw=1.0, zorder=6))
    if position_sd_m:
        ax.plot([], [], "o", mfc="none", mec="0.05", ms=4,
                label=f"circles, to scale: 80 % of drawn positions (radius {_R80 * position_sd_m * 100:.1f} cm)")
    ax.set_xlim(-0.1, ly + 0.1)
    ax.set_ylim(lx + 0.1, -0.1)
    ax.set_aspect("equal")
    ax.set_xlabel("from the left wall (m)")
    ax.set_ylabel("from the front wall (m)")
    ax.text(ly / 2, 0.04, "front wall", ha="center", va="top", fontsize=7.5, color="0.2")
    ax.legend(fontsize=7, loc="lower left", framealpha=0.85)
    ax.set_title("(c) Floor plan (boxes drawn) and the score as the seat moves", fontsize=10)


#: Radius, in position sds, holding 80 % of a position drawn on a plan: sqrt(-2 ln 0.2).
_R80 = float(np.sqrt(-2.0 * np.log(0.2)))


def _profile(ax, profile, chosen_m, xlabel=None, band=None):
    d, score, parts, allowed = profile
    if band is not None:
        bd, lo, hi, n_rooms = band
        ax.fill_between(bd * 100, lo, hi, color="0.1", alpha=0.15, lw=0,
                        label=f"score: 10-90 % of {n_rooms} drawn rooms")
    ax.plot(d * 100, score, color="0.1", lw=1.8, label="score")
    k = int(np.argmin(np.abs(d - chosen_m)))
    ax.plot([d[k] * 100], [score[k]], "o", color=PALETTE[1], ms=7, zorder=5, label="best layout")
    for i, name in enumerate(("flatness", "mismatch", "area", "boost", "robustness")):
        ax.plot(d * 100, parts[name], color=PALETTE[i % len(PALETTE)], lw=1.0, ls="--", label=name)
    if allowed is not None and allowed.any():
        step = (d[1] - d[0]) / 2 if d.size > 1 else 0.01
        edges = np.flatnonzero(np.diff(np.concatenate([[0], allowed.astype(int), [0]])))
        for k, (i, j) in enumerate(zip(edges[::2], edges[1::2])):
            ax.axvspan((d[i] - step) * 100, (d[j - 1] + step) * 100, color="0.92", lw=0, zorder=0,
                       label="meets every constraint" if k == 0 else None)
    ax.set_xlim(d[0] * 100, d[-1] * 100)
    ax.axvline(chosen_m * 100, color=PALETTE[1], lw=1.0)
    ax.set_xlabel(xlabel or "speakers' distance from the front wall (cm)", fontsize=8.5)
    ax.set_ylabel("dB (lower is better)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, ncol=2)
    ax.set_title("(d) Score along one variable through the best layout", fontsize=10)


def _score_spread(ax, spread, n_rooms):
    """Each layout's nominal score beside the 10-90 % range (and median) of its scores over the drawn rooms."""
    x = np.arange(len(spread), dtype=float)
    nominal = np.array([s[1] for s in spread], dtype=float)
    p10 = np.array([s[2] for s in spread], dtype=float)
    median = np.array([s[3] for s in spread], dtype=float)
    p90 = np.array([s[4] for s in spread], dtype=float)
    # the file's layout in grey, as on the floor plan; the finalists in the palette's first colour
    colours = ["0.45" if s[0] == "file" else PALETTE[0] for s in spread]
    ax.vlines(x + 0.08, p10, p90, colors=colours, lw=5, alpha=0.45,
              label=f"10-90 % of {n_rooms} drawn rooms")
    ax.scatter(x + 0.08, median, marker="_", s=260, c=colours, linewidths=2.2, zorder=4,
               label=f"median of {n_rooms} drawn rooms")
    ax.scatter(x - 0.12, nominal, marker="o", s=30, facecolors="white", edgecolors=colours, linewidths=1.4,
               zorder=4, label="nominal (the room file as stated)")
    ax.set_xticks(x, [s[0] for s in spread])
    ax.set_xlim(-0.6, len(spread) - 0.4)
    ax.set_xlabel("layout, best median first (#: rank of the nominal search)", fontsize=8.5)
    ax.set_ylabel("score (dB, lower is better)")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(fontsize=7, ncol=3, loc="upper left")
    lo, hi = float(min(p10.min(), nominal.min())), float(max(p90.max(), nominal.max()))
    pad = max(0.3, 0.15 * (hi - lo))
    ax.set_ylim(lo - pad, hi + 2.5 * pad)  # room for the legend above the bars
    ax.set_title("(e) How sure each layout's score is: nominal, and over rooms drawn from [uncertainty]",
                 fontsize=10)


def plot_place(room, best, current, predictions, band_hz, schroeder_hz, seat_map, profile, keep_out=(),
               title=None, path=None, eq_curves=None, space=None, sweep_label=None, score_spread=None,
               n_rooms=None, bands=None, position_sd_m=None, profile_band=None):
    """The placement figure: (a) predicted levels, (b) before/after EQ, (c) floor plan with
    the seat-score map and the boxes, (d) the score along one variable through the best layout,
    and, with scores over drawn rooms, (e) each layout's 10-90 % range beside its nominal score.

    Parameters
    ----------
    room : Room
    best, current : Layout (current may be None)
    predictions : list of (label, Prediction)
        Curves drawn in (a), e.g. the best layout and the current one.
    band_hz : (float, float)
        The scored band.
    schroeder_hz : float
    seat_map : (x_m, y_m, score)
        From :func:`roommodes.search.seat_score_map`.
    profile : (distance_m, score, parts, allowed)
        From :func:`roommodes.analysis.search.layout_sweep` (or ``front_distance_profile``);
        the distances where every constraint holds (``allowed``, may be None) are shaded.
    keep_out : sequence of KeepOut
    eq_curves : list of (label, (freq_hz, before_db, correction_db, after_db)), optional
        From :func:`roommodes.analysis.search.layout_curves`, drawn in (b).
    space : SearchSpace, optional
        When given, the boxes are drawn on the floor plan.
    sweep_label : str, optional
        The x label of (d).
    score_spread : list of (label, nominal_db, p10_db, median_db, p90_db), optional
        With rooms drawn from ``[uncertainty]``: each layout's nominal score and the 10th
        percentile, median and 90th percentile of its scores over the ``n_rooms`` drawn
        rooms, best median first (the file's layout labelled ``"file"``). Adds a panel (e)
        that shows each range beside the nominal score.
    n_rooms : int, optional
        How many rooms were drawn (for the legend of (e)).
    bands : list of Bands or None, optional
        One per prediction (:func:`roommodes.analysis.uncertainty.predict_bands`): each
        channel's 10-90 % band over the drawn rooms is shaded in (a) in its layout's colour,
        and in (b) (with ``eq_curves`` in the same order) the band of the 1/6-octave level
        before and after the layout's EQ (:func:`eq_band_db`).
    position_sd_m : float, optional
        The positions' stated sd (``[uncertainty] position_m``): (c) circles each speaker and
        seat with the radius that holds 80 % of positions drawn with it.
    profile_band : (distance_m, score_p10, score_p90, n_rooms), optional
        The score's 10-90 % range over drawn rooms along (d)'s variable, shaded.
    """
    if score_spread:
        fig, axes = new_figure(12.0, 13.2, 3, 2, gridspec_kw={"height_ratios": (1.0, 1.0, 0.55)})
        gs = axes[2, 0].get_gridspec()
        for a in axes[2]:
            a.remove()
        _score_spread(fig.add_subplot(gs[2, :]), score_spread, n_rooms)
    else:
        fig, axes = new_figure(12.0, 10.0, 2, 2)
    _curves(axes[0, 0], predictions, band_hz, schroeder_hz, bands)
    _eq_curves(axes[0, 1], eq_curves, band_hz, bands)
    _floor_plan(axes[1, 0], room, best, current, keep_out, seat_map, space, position_sd_m)
    _profile(axes[1, 1], profile, best.speakers[0].position_m[0], sweep_label, profile_band)
    fig.suptitle(title or f"Placement search: {room.name}", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig


def plot_explain(explanation, title=None, path=None, bands=None):
    """Both channels and the mono sum (top); their difference with the regions (bottom).

    ``bands`` (an :class:`~roommodes.analysis.explain.ExplainBands`) shades the 10-90 % band
    of each channel and of the difference over the drawn rooms.
    """
    e = explanation
    fig, (ax1, ax2) = new_figure(9.0, 7.0, 2, 1, sharex=True)
    f = e.freq_hz
    for i, name in enumerate(e.names):
        ax1.plot(f, e.level_db[i], color=PALETTE[i], lw=0.8, alpha=0.45)
        ax1.plot(f, e.smoothed_db[i], color=PALETTE[i], lw=1.6, label=f"{name} (1/{e.smoothing}-octave)"
                 if e.smoothing else name)
        if bands is not None:
            ax1.fill_between(bands.freq_hz, bands.level_db_p10[i], bands.level_db_p90[i], color=PALETTE[i],
                             alpha=0.18, lw=0, label=f"{name}: 10-90 % of {bands.n_samples} drawn rooms")
    ax1.plot(f, e.mono_smoothed_db, color="0.1", lw=1.4, ls="--", label="mono sum (both in phase)")
    shade_invalid(ax1, e.schroeder_hz, f[-1])
    style_frequency_axis(ax1, f[0], f[-1])
    lv = np.concatenate([e.smoothed_db.ravel(), e.mono_smoothed_db])
    if bands is not None:
        lv = np.concatenate([lv, bands.level_db_p90.ravel()])
    ax1.set_ylim(np.floor(np.percentile(lv, 1) / 5) * 5 - 5, np.ceil(lv.max() / 5) * 5 + 5)
    ax1.set_ylabel("Level at seat (dB re free field at 1 m)")
    ax1.legend(fontsize=8, loc="lower center", ncol=3)
    ax1.set_title(title or f"{e.names[0]} and {e.names[1]} at the seat", fontsize=11)
    ax2.plot(f, e.difference_db, color="0.6", lw=0.8, label="difference (unsmoothed)")
    ax2.plot(f, e.difference_smoothed_db, color=PALETTE[2], lw=1.6, label=f"{e.names[0]} - {e.names[1]}")
    if bands is not None:
        ax2.fill_between(bands.freq_hz, bands.difference_db_p10, bands.difference_db_p90, color=PALETTE[2],
                         alpha=0.2, lw=0, label=f"10-90 % of {bands.n_samples} drawn rooms")
    for sign in (1, -1):
        ax2.axhline(sign * e.threshold_db, color="0.4", lw=0.8, ls=":")
    for k, r in enumerate(e.regions, 1):
        ax2.axvspan(r.freq_hz[0] / 1.01, r.freq_hz[1] * 1.01, color=PALETTE[4], alpha=0.25, lw=0)
        ax2.text(r.peak_hz, r.difference_db, f" {k}", fontsize=8, va="bottom" if r.difference_db > 0 else "top")
    for a, b in ((f[0], e.band_hz[0]), (e.band_hz[1], f[-1])):
        if b > a:
            ax2.axvspan(a, b, color="0.95", lw=0, zorder=0)
            ax2.text(np.sqrt(a * b), 0.97, "outside the band", transform=ax2.get_xaxis_transform(), fontsize=7.5,
                     color="0.35", ha="center", va="top")
    style_frequency_axis(ax2, f[0], f[-1])
    d = e.difference_smoothed_db
    if bands is not None:
        d = np.concatenate([d, bands.difference_db_p10, bands.difference_db_p90])
    lim = max(6.0, np.ceil(np.max(np.abs(d)) / 3) * 3 + 1)
    ax2.set_ylim(-lim, lim)
    ax2.set_ylabel("Difference (dB)")
    ax2.legend(fontsize=8, loc="lower left")
    ax2.set_title(f"Regions where |difference| >= {e.threshold_db:g} dB (numbered as in the text)", fontsize=10)
    if path is not None:
        save_figure(fig, path)
    return fig
