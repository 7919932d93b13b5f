"""Figures of the report and the ``map`` command.

The room drawn to scale, the modes that matter at the seat, and the level over the floor at
one frequency.

Same style as :mod:`roommodes.plots` (its Okabe-Ito palette, log-frequency axes and the
shading above the Schroeder frequency); matplotlib is imported only when a figure is
drawn. Plans are drawn as seen from above with the front wall (behind the speakers) at the
top and the left wall on the left, as in :mod:`roommodes.plots_place`.
"""

from __future__ import annotations

import numpy as np

from .plots import PALETTE, new_figure, save_figure, shade_invalid, style_frequency_axis
from .units import FOOT_M, format_length, wall_distances

__all__ = ["plot_room_views", "plot_mode_coupling", "plot_floor_map"]

_WALL_NOTE = {"front": "front wall", "back": "back wall", "left": "left wall", "right": "right wall",
              "floor": "floor", "ceiling": "ceiling"}
_KIND_MARKERS = {"axial": "o", "tangential": "s", "oblique": "^"}
_KEEP_OUT_COLOUR = PALETTE[3]
_LABEL_BOX = {"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75}


def _speaker_colour(i):
    return PALETTE[i % 6]


def _dimension(ax, p0, p1, text, offset=(0.0, 0.0), fontsize=8, color="0.2", rotate=False):
    """A dimension line with arrows at both ends and its text at the middle."""
    a = np.add(p0, offset)
    b = np.add(p1, offset)
    ax.annotate("", xy=tuple(b), xytext=tuple(a),
                arrowprops={"arrowstyle": "<|-|>", "color": color, "lw": 0.8, "shrinkA": 0, "shrinkB": 0,
                            "mutation_scale": 7})
    mid = (a + b) / 2
    ax.text(mid[0], mid[1], text, ha="center", va="center", fontsize=fontsize, color=color,
            rotation=90 if rotate else 0, bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none"})


def _leader(ax, p0, p1, text, color, fontsize=7, rotate=False):
    """A thin dashed line from a wall to a point, labelled with the distance.

    A vertical leader (``rotate``) has its label beside it, level, so that long labels
    (feet and inches) never run past a short line.
    """
    ax.plot([p0[0], p1[0]], [p0[1], p1[1]], color=color, lw=0.7, ls=(0, (3, 2)), zorder=2)
    mid = ((p0[0] + p1[0]) / 2, (p0[1] + p1[1]) / 2)
    box = {"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.85}
    if rotate:
        ax.text(mid[0] + 0.04, mid[1], text, ha="left", va="center", fontsize=fontsize, color=color, zorder=4,
                bbox=box)
    else:
        ax.text(mid[0], mid[1], text, ha="center", va="center", fontsize=fontsize, color=color, zorder=4, bbox=box)


def _surface_label(room, wall):
    s = room.surfaces[["front", "back", "left", "right", "floor", "ceiling"].index(wall)]
    return f"{_WALL_NOTE[wall]}: {s.describe()}"


def _text(ax, u, v, text, **kw):
    kw.setdefault("fontsize", 7)
    kw.setdefault("color", "0.3")
    ax.text(u, v, text, **kw)


def _plan(ax, room, layout, keep_out, units):
    """The plan in drawing coordinates u = y (across), v = x (down the page)."""
    from matplotlib.patches import Rectangle

    lx, ly, _ = room.size_m
    ax.add_patch(Rectangle((0, 0), ly, lx, fill=True, fc="#fbfbf8", ec="0.1", lw=2.2, zorder=1))
    for box in keep_out:
        ax.add_patch(Rectangle((box.min_m[1], box.min_m[0]), box.max_m[1] - box.min_m[1],
                               box.max_m[0] - box.min_m[0], hatch="///", fill=False, ec=_KEEP_OUT_COLOUR, lw=1.0,
                               zorder=1.5))
        _text(ax, 0.5 * (box.min_m[1] + box.max_m[1]), 0.5 * (box.min_m[0] + box.max_m[0]),
              f"keep out:\n{box.name}", ha="center", va="center", fontsize=6.5, color=_KEEP_OUT_COLOUR, zorder=3,
              bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    # the surfaces, written just outside each wall; the overall dimensions beyond them
    _text(ax, ly / 2, -0.07, _surface_label(room, "front"), ha="center", va="bottom")
    _text(ax, ly / 2, lx + 0.07, _surface_label(room, "back"), ha="center", va="top")
    _text(ax, -0.07, lx / 2, _surface_label(room, "left"), ha="right", va="center", rotation=90)
    _text(ax, ly + 0.07, lx / 2, _surface_label(room, "right"), ha="left", va="center", rotation=270)
    _dimension(ax, (0, -0.42), (ly, -0.42), f"width {format_length(ly, units)}")
    _dimension(ax, (-0.42, 0), (-0.42, lx), f"length {format_length(lx, units)}", rotate=True)
    _text(ax, 0, -0.62, "PLAN, seen from above (front wall at the top)", ha="left", va="bottom", fontsize=9,
          color="0.05", fontweight="bold")
    if layout is None:
        return
    seat = layout.seat_m
    for i, sp in enumerate(layout.speakers):
        c = _speaker_colour(i)
        x, y, _ = sp.position_m
        ax.plot([y, seat[1]], [x, seat[0]], color=c, lw=0.8, ls=":", zorder=2)
        d = wall_distances(room, sp.position_m)
        _leader(ax, (y, 0), (y, x), format_length(d["front"], units), c, rotate=True)
        if d["left"] <= d["right"]:
            _leader(ax, (0, x), (y, x), format_length(d["left"], units), c)
        else:
            _leader(ax, (y, x), (ly, x), format_length(d["right"], units), c)
        ax.plot(y, x, "s", color=c, ms=10, mec="white", mew=1.2, zorder=5)
        _text(ax, y, x + 0.13, sp.name, ha="center", va="top", fontsize=8, color=c, fontweight="bold", zorder=5)
    d = wall_distances(room, seat)
    c = "0.05"
    _leader(ax, (seat[1] - 0.12, 0), (seat[1] - 0.12, seat[0]), format_length(d["front"], units), c, rotate=True)
    if abs(seat[1] - ly / 2) > 0.01:
        if d["left"] <= d["right"]:
            _leader(ax, (0, seat[0] + 0.1), (seat[1], seat[0] + 0.1), format_length(d["left"], units), c)
        else:
            _leader(ax, (seat[1], seat[0] + 0.1), (ly, seat[0] + 0.1), format_length(d["right"], units), c)
    else:
        ax.plot([ly / 2, ly / 2], [0.3, lx - 0.3], color="0.6", lw=0.6, ls="-.", zorder=1.2)
        _text(ax, ly / 2 + 0.04, lx - 0.32, "centre line", fontsize=6.5, color="0.45", va="bottom")
    ax.plot(seat[1], seat[0], "*", color=c, ms=15, mec="white", mew=1.0, zorder=5)
    _text(ax, seat[1], seat[0] + 0.16, "seat", ha="center", va="top", fontsize=8, color=c, fontweight="bold",
          zorder=5)


def _section(ax, room, layout, keep_out, units, u0):
    """The section seen from the left wall, in drawing coordinates u = u0 + x, v = Lz - z."""
    from matplotlib.patches import Rectangle

    lx, _, lz = room.size_m
    ax.add_patch(Rectangle((u0, 0), lx, lz, fill=True, fc="#fbfbf8", ec="0.1", lw=2.2, zorder=1))
    for box in keep_out:
        ax.add_patch(Rectangle((u0 + box.min_m[0], lz - box.max_m[2]), box.max_m[0] - box.min_m[0],
                               box.max_m[2] - box.min_m[2], hatch="///", fill=False, ec=_KEEP_OUT_COLOUR, lw=1.0,
                               zorder=1.5))
    _text(ax, u0 + lx / 2, -0.07, _surface_label(room, "ceiling"), ha="center", va="bottom")
    _text(ax, u0 + lx / 2, lz + 0.07, _surface_label(room, "floor"), ha="center", va="top")
    _text(ax, u0 - 0.07, lz / 2, "front wall", ha="right", va="center", rotation=90)
    _text(ax, u0 + lx + 0.07, lz / 2, "back wall", ha="left", va="center", rotation=270)
    _dimension(ax, (u0, lz + 0.42), (u0 + lx, lz + 0.42), f"length {format_length(lx, units)}")
    _dimension(ax, (u0 + lx + 0.42, 0), (u0 + lx + 0.42, lz), f"height {format_length(lz, units)}", rotate=True)
    _text(ax, u0, -0.62, "SECTION, seen from the left wall (front wall on the left)", ha="left", va="bottom",
          fontsize=9, color="0.05", fontweight="bold")
    if layout is None:
        return
    groups = {}
    for i, sp in enumerate(layout.speakers):
        groups.setdefault((round(sp.position_m[0], 2), round(sp.position_m[2], 2)), []).append((i, sp))
    for (x, z), group in groups.items():
        c = _speaker_colour(group[0][0]) if len(group) == 1 else "0.25"
        _leader(ax, (u0 + x, lz), (u0 + x, lz - z), format_length(z, units), c, rotate=True)
        ax.plot(u0 + x, lz - z, "s", color=c, ms=10, mec="white", mew=1.2, zorder=5)
        _text(ax, u0 + x + 0.12, lz - z - 0.1, ", ".join(s.name for _, s in group), ha="left", va="bottom",
              fontsize=8, color=c, fontweight="bold", zorder=5)
    seat = layout.seat_m
    _leader(ax, (u0 + seat[0], lz), (u0 + seat[0], lz - seat[2]), format_length(seat[2], units), "0.05", rotate=True)
    ax.plot(u0 + seat[0], lz - seat[2], "*", color="0.05", ms=15, mec="white", mew=1.0, zorder=5)
    _text(ax, u0 + seat[0] + 0.12, lz - seat[2] - 0.1, "seat (ears)", ha="left", va="bottom", fontsize=8,
          color="0.05", fontweight="bold", zorder=5)


def plot_room_views(room, layout=None, keep_out=(), units="cm", title=None, path=None):
    """Draw the room to scale: a dimensioned plan and section with speakers and seat.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Speakers (squares, in the palette's colours) and the seat (star); default the room
        file's own layout; none drawn when the room has none.
    keep_out : sequence of roommodes.search.KeepOut
        Boxes drawn hatched in both views.
    units : {"cm", "m", "ft-in"}
        Units of the dimension labels (:func:`roommodes.units.format_length`).
    title, path : optional

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Both views are drawn in one set of axes with equal aspect, so they share one scale
    (the scale bar below the plan); the surfaces' materials or absorption values are
    written along the walls.
    """
    layout = room.layout if layout is None else layout
    lx, ly, lz = room.size_m
    gap = 1.3
    u0 = ly + gap
    u_lo, u_hi = -0.75, u0 + lx + 0.75
    v_lo, v_hi = -0.75, max(lx, lz + 0.45) + 0.75
    width_in = 11.0
    height_in = min(11.0, width_in * (v_hi - v_lo) / (u_hi - u_lo) + 0.5)
    fig, ax = new_figure(width_in, height_in)
    _plan(ax, room, layout, keep_out, units)
    _section(ax, room, layout, keep_out, units, u0)
    bar = 3 * FOOT_M if units == "ft-in" else 1.0
    v_bar = lz + 0.85
    ax.plot([u0, u0 + bar], [v_bar, v_bar], color="0.1", lw=3, solid_capstyle="butt")
    _text(ax, u0 + bar + 0.08, v_bar, f"{'3 ft' if units == 'ft-in' else '1 m'} (both views to this scale)",
          ha="left", va="center", fontsize=7.5, color="0.1")
    ax.set_xlim(u_lo, u_hi)
    ax.set_ylim(v_hi, v_lo)
    ax.set_aspect("equal")
    ax.axis("off")
    ax.set_title(title or f"{room.name}: {format_length(lx, units)} x {format_length(ly, units)} x "
                 f"{format_length(lz, units)} (length x width x height), drawn to scale", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig


def plot_mode_coupling(coupling, schroeder_hz=None, title=None, path=None, max_labels=14, ranges=None):
    """Chart the modes that matter at the seat: each mode's coupling to each speaker and the seat.

    Parameters
    ----------
    coupling : roommodes.analysis.maps.ModeCoupling
    schroeder_hz : float, optional
        Frequencies above it are shaded (default the one stored in ``coupling``).
    title, path : optional
    max_labels : int
        At most this many modes (the strongest) are labelled with their indices.
    ranges : (coupling_p10, coupling_p90, n_rooms), optional
        Each coupling's 10-90 % range over drawn rooms
        (:func:`roommodes.analysis.maps.coupling_ranges`), drawn as a wide pale bar behind
        each stem.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Top: for every mode, a stem per speaker of height ``|psi(speaker) psi(seat)|``, the
    factor by which the mode's resonance enters that speaker's response at the seat
    (1: speaker and seat both at pressure maxima, as in two corners; 0: either on a node).
    Bottom: ``|psi|`` at each speaker and at the seat as the dot area; a filled dot is a
    positive value, an open dot a negative one (opposite phase).
    """
    cp = coupling
    fs = cp.schroeder_hz if schroeder_hz is None else schroeder_hz
    f = cp.freq_hz
    fmin = 15.0 if f.size == 0 else min(20.0, float(f.min()) * 0.85)
    fmax = max(cp.fmax_hz, fmin * 2)
    fig, (ax1, ax2) = new_figure(9.0, 6.6, 2, 1, sharex=True, gridspec_kw={"height_ratios": [1.6, 1]})
    n_s = len(cp.names)
    offsets = (np.arange(n_s) - (n_s - 1) / 2) * 0.006
    for s, name in enumerate(cp.names):
        fx = f * 10 ** offsets[s]
        c = _speaker_colour(s)
        if ranges is not None:
            ax1.vlines(fx, ranges[0][s], ranges[1][s], color=c, lw=5.0, alpha=0.3)
        ax1.vlines(fx, 0, cp.coupling[s], color=c, lw=1.6, alpha=0.9)
        for kind, marker in _KIND_MARKERS.items():
            sel = cp.kind == kind
            ax1.plot(fx[sel], cp.coupling[s][sel], marker, color=c, ms=4.5, ls="none")
        ax1.plot([], [], color=c, lw=1.6, label=f"{name} speaker and seat")
    for kind, marker in _KIND_MARKERS.items():
        ax1.plot([], [], marker, color="0.35", ms=4.5, ls="none", label=kind)
    if ranges is not None:
        ax1.plot([], [], color="0.35", lw=5.0, alpha=0.3, label=f"10-90 % of {ranges[2]} drawn rooms")
    ax1.axhline(cp.threshold, color="0.3", lw=0.8, ls="--")
    ax1.text(fmin * 1.02, cp.threshold + 0.015, f"matters (>= {cp.threshold:g})", fontsize=7.5, color="0.3",
             va="bottom")
    if f.size:
        strength = cp.coupling.max(axis=0)
        for i in np.argsort(-strength)[:max_labels]:
            if strength[i] < cp.threshold:
                break
            ax1.text(f[i], strength[i] + 0.03, "".join(str(v) for v in cp.indices[i]), rotation=90, fontsize=7,
                     ha="center", va="bottom", color="0.15")
    ax1.set_ylim(0, 1.22)
    ax1.set_ylabel("|psi(speaker) psi(seat)|")
    shade_invalid(ax1, fs, fmax)
    style_frequency_axis(ax1, fmin, fmax)
    ax1.set_xlabel("")
    ax1.legend(fontsize=7.5, ncol=3, loc="upper left")
    ax1.set_title(title or "Room modes and how strongly each speaker drives them at the seat", fontsize=11)
    rows = [*cp.names, "seat"]
    psi = np.vstack([cp.psi_speakers, cp.psi_seat[None, :]]) if f.size else np.zeros((len(rows), 0))
    for r in range(len(rows)):
        c = _speaker_colour(r) if r < n_s else "0.1"
        y = np.full(f.size, len(rows) - 1 - r)
        size = 6 + 110 * np.abs(psi[r])
        pos = psi[r] >= 0
        ax2.scatter(f[pos], y[pos], s=size[pos], color=c, edgecolor=c, lw=0.8, zorder=3)
        ax2.scatter(f[~pos], y[~pos], s=size[~pos], facecolor="white", edgecolor=c, lw=1.0, zorder=3)
    ax2.vlines(f, -0.5, len(rows) - 0.5, color="0.88", lw=0.6, zorder=1)
    ax2.scatter([], [], s=60, color="0.3", label="psi > 0")
    ax2.scatter([], [], s=60, facecolor="white", edgecolor="0.3", label="psi < 0 (opposite phase)")
    ax2.set_yticks(range(len(rows)))
    ax2.set_yticklabels([f"{n} speaker" if i < n_s else "seat" for i, n in enumerate(rows)][::-1])
    ax2.set_ylim(-0.6, len(rows) - 0.4)
    if fs < fmax:  # the same shading as the top panel, without repeating its label
        ax2.axvspan(fs, fmax, color="0.85", alpha=0.6, lw=0, zorder=0)
    style_frequency_axis(ax2, fmin, fmax)
    ax2.grid(False, axis="y")
    ax2.legend(fontsize=7.5, ncol=2, loc="upper center", bbox_to_anchor=(0.5, -0.32), frameon=False)
    ax2.set_title("Mode shape |psi| at each speaker and at the seat (dot area)", fontsize=9.5)
    if path is not None:
        save_figure(fig, path)
    return fig


def _plan_frame(ax, m, room, units):
    """Room outline, wall labels, ticks and the speakers and seat of a floor map's plan."""
    from matplotlib.patches import Rectangle

    lx, ly, _ = room.size_m
    ax.add_patch(Rectangle((0, 0), ly, lx, fill=False, lw=2.2, color="0.1"))
    for i, (name, pos) in enumerate(zip(m.channels, m.sources_m)):
        ax.plot(pos[1], pos[0], "s", color=_speaker_colour(i), ms=10, mec="white", mew=1.3)
        ax.text(pos[1], pos[0] + 0.13, name, ha="center", va="top", fontsize=8, color=_speaker_colour(i),
                fontweight="bold", bbox=_LABEL_BOX)
    ax.text(ly / 2, 0.05, "front wall", ha="center", va="top", fontsize=8, color="0.1", bbox=_LABEL_BOX)
    ax.text(ly / 2, lx - 0.05, "back wall", ha="center", va="bottom", fontsize=8, color="0.1", bbox=_LABEL_BOX)
    ax.set_xlim(0, ly)
    ax.set_ylim(lx, 0)
    ax.set_aspect("equal")
    tick = FOOT_M if units == "ft-in" else 0.5
    xt = np.arange(0, lx + 1e-9, tick * (2 if lx / tick > 12 else 1))
    yt = np.arange(0, ly + 1e-9, tick * (2 if ly / tick > 12 else 1))
    ax.set_yticks(xt)
    ax.set_yticklabels([format_length(v, units) for v in xt], fontsize=7)
    ax.set_xticks(yt)
    ax.set_xticklabels([format_length(v, units) for v in yt], fontsize=7, rotation=45 if units == "ft-in" else 0)
    ax.set_xlabel("from the left wall")
    ax.set_ylabel("from the front wall")


def _cell_edges(m, room):
    lx, ly, _ = room.size_m
    xe = np.concatenate([[0.0], (m.x_m[1:] + m.x_m[:-1]) / 2, [lx]])
    ye = np.concatenate([[0.0], (m.y_m[1:] + m.y_m[:-1]) / 2, [ly]])
    return xe, ye


def _spread_panel(fig, ax, m, bands, room, units):
    """Each cell's 10-90 % spread over the drawn rooms, relative to the floor's median level in
    each; hatched beyond ``MAP_UNSURE_DB``."""
    from ..analysis.maps import MAP_UNSURE_DB

    xe, ye = _cell_edges(m, room)
    sp = bands.pattern_spread_db
    top = max(2.0 * MAP_UNSURE_DB, float(np.nanpercentile(sp, 99)) if np.isfinite(sp).any() else 0.0)
    mesh = ax.pcolormesh(ye, xe, sp, cmap="magma_r", vmin=0.0, vmax=top, shading="flat", rasterized=True)
    if bands.unsure.any():
        ax.contourf(m.y_m, m.x_m, np.nan_to_num(sp, nan=0.0), levels=[MAP_UNSURE_DB, np.inf], colors="none",
                    hatches=["///"])
        ax.contour(m.y_m, m.x_m, np.nan_to_num(sp, nan=0.0), levels=[MAP_UNSURE_DB], colors="0.1", linewidths=1.0)
    cb = fig.colorbar(mesh, ax=ax, shrink=0.9)
    cb.set_label("10-90 % spread against the floor's median (dB)", fontsize=8.5)
    _plan_frame(ax, m, room, units)
    if m.seat_m is not None:
        ix = int(np.argmin(np.abs(m.x_m - m.seat_m[0])))
        iy = int(np.argmin(np.abs(m.y_m - m.seat_m[1])))
        ax.plot(m.seat_m[1], m.seat_m[0], "*", color="white", ms=16, mec="0.1", mew=1.0,
                label=f"seat: {bands.level_db_p10[ix, iy]:+.1f} to {bands.level_db_p90[ix, iy]:+.1f} dB")
    from matplotlib.patches import Patch

    lo, hi = bands.floor_shift_db
    ax.legend(handles=[Patch(facecolor="white", edgecolor="0.1", hatch="///",
                             label=f"spread over {MAP_UNSURE_DB:g} dB: the pattern is unsure here")]
              + ax.get_legend_handles_labels()[0], fontsize=7.5, loc="upper center", bbox_to_anchor=(0.5, -0.09),
              ncol=1, frameon=False)
    ax.set_title(f"How sure: 10-90 % spread over {bands.n_samples} drawn rooms (seed {bands.seed}),\n"
                 f"the whole floor's shift ({hi - lo:.1f} dB) taken out; light: same pattern in every room",
                 fontsize=9.5)


def plot_floor_map(floor_map, room, layout=None, units="cm", title=None, path=None, range_db=30.0, bands=None):
    """Map the level over the floor plan at ear height at one frequency, speakers and seat drawn.

    Parameters
    ----------
    floor_map : roommodes.analysis.maps.FloorMap
    room : Room
    layout : Layout, optional
        For the seat and speaker markers; default the room file's own.
    units : {"cm", "m", "ft-in"}
    title, path : optional
    range_db : float
        Largest colour range, dB: from the 99th percentile of the levels (the speakers' own
        near field is louder still and gets the top colour) down to the quietest cell or
        ``range_db`` below, whichever is higher.
    bands : roommodes.analysis.maps.FloorMapBands, optional
        The map over drawn rooms: the level panel then marks the quietest cell of each drawn
        room (where the deepest node lands), and a second panel maps each cell's 10-90 %
        spread relative to the floor's median level in each drawn room (the pattern's
        spread), hatched where it exceeds :data:`~roommodes.analysis.maps.MAP_UNSURE_DB`.

    Returns
    -------
    matplotlib.figure.Figure

    Notes
    -----
    Thin contours every 3 dB. When a room mode lies within its half-power bandwidth
    (or 3 %) of the frequency, its nodal lines in the plane (where its shape is zero)
    are drawn dashed.
    """
    m = floor_map
    layout = room.layout if layout is None else layout
    lx, ly, _ = room.size_m
    height = min(9.0, 7.2 * lx / ly * 0.9 + 1.0)
    if bands is None:
        fig, ax = new_figure(7.2, height)
    else:
        fig, (ax, ax2) = new_figure(13.0, min(9.0, 5.9 * lx / ly * 0.9 + 1.6), 1, 2)
    lv = m.level_db
    top = float(np.nanpercentile(lv, 99))  # the speakers' own near field is louder still
    xe, ye = _cell_edges(m, room)
    bottom = max(float(np.nanmin(lv)), top - range_db)
    import matplotlib

    base = matplotlib.colormaps["viridis"]
    cmap = base.with_extremes(bad=base(1.0))  # the cells next to a speaker: its own near field, loud
    mesh = ax.pcolormesh(ye, xe, lv, cmap=cmap, vmin=bottom, vmax=top, shading="flat", rasterized=True)
    levels = np.arange(np.floor(bottom / 3) * 3, top + 3, 3)
    ax.contour(m.y_m, m.x_m, lv, levels=levels, colors="white", linewidths=0.4, alpha=0.55)
    cb = fig.colorbar(mesh, ax=ax, shrink=0.9)
    cb.set_label("Level (dB re free field at 1 m)", fontsize=8.5)
    if m.near_modes:
        mode = m.near_modes[0]
        nx, ny, _ = mode["indices"]
        for k in range(nx):
            xn = (k + 0.5) * lx / nx
            ax.plot([0, ly], [xn, xn], color="white", lw=1.1, ls="--")
        for k in range(ny):
            yn = (k + 0.5) * ly / ny
            ax.plot([yn, yn], [0, lx], color="white", lw=1.1, ls="--")
        if nx or ny:
            ax.plot([], [], color="0.4", lw=1.1, ls="--",
                    label=f"nodal lines of mode ({','.join(str(v) for v in mode['indices'])})")
    if bands is not None:
        q = bands.quietest_m
        ax.plot(q[:, 1], q[:, 0], "x", color=PALETTE[1], ms=6, mew=1.2, alpha=0.85, ls="none",
                label=f"quietest spot in each of {bands.n_samples} drawn rooms")
    _plan_frame(ax, m, room, units)
    if m.seat_m is not None:
        ax.plot(m.seat_m[1], m.seat_m[0], "*", color="white", ms=16, mec="0.1", mew=1.0,
                label=f"seat: {m.seat_level_db:+.1f} dB")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7.5, loc="upper center", bbox_to_anchor=(0.5, -0.09), ncol=1 if bands else 2,
                  frameon=False)
    who = "all speakers in phase" if len(m.channels) > 1 else f"{m.channels[0]} speaker"
    near = ""
    if m.near_modes:
        md = m.near_modes[0]
        near = f"\nnearest mode ({','.join(str(v) for v in md['indices'])}), {md['kind']}, at {md['freq_hz']:.1f} Hz"
    ax.set_title(title or f"Level over the floor at {m.freq_hz:g} Hz, {format_length(m.height_m, units)} high "
                          f"({who}){near}", fontsize=9.5)
    if bands is not None:
        _spread_panel(fig, ax2, m, bands, room, units)
    if path is not None:
        save_figure(fig, path)
    return fig
