"""Figures of the subwoofer search: the level at every seat and a floor plan, per configuration.

Same style as :mod:`roommodes.present.plots` (its palette and log-frequency axes); matplotlib
is imported only when a figure is drawn.
"""

from __future__ import annotations

import numpy as np

from .plots import PALETTE, new_figure, save_figure, style_frequency_axis

__all__ = ["plot_subs"]


def _levels(ax, result, config, ylim, band=None):
    f = result.freq_hz
    if band is not None:  # (p10, p90) each (P, F), and the number of drawn rooms
        (lo, hi), n = band
        for p in range(len(result.seats)):
            ax.fill_between(f, lo[p], hi[p], color=PALETTE[p % len(PALETTE)], alpha=0.18, lw=0, gid=f"seat-band-{p}",
                            label=f"10-90 % of {n} drawn rooms" if p == 0 else None)
    for p, seat in enumerate(result.seats):
        ax.plot(f, config.level_db[p], color=PALETTE[p % len(PALETTE)], lw=1.8 if p == 0 else 1.2,
                label=f"{seat.name}{' (main)' if p == 0 else ''}, weight {seat.weight:g}")
    if config.crossover_hz:
        ax.axvline(config.crossover_hz, color="0.35", ls=":", lw=1.0)
        ax.text(config.crossover_hz * 1.02, 0.04, f"crossover {config.crossover_hz:g} Hz", fontsize=7,
                color="0.3", transform=ax.get_xaxis_transform())
    style_frequency_axis(ax, f[0], f[-1])
    ax.set_ylim(*ylim)
    ax.set_ylabel("Level (dB re 1 m free field)", fontsize=8)
    ax.legend(fontsize=7, loc="lower right", framealpha=0.85)
    ax.set_title(f"{config.label}: seat-to-seat spread {config.seat_spread_db:.1f} dB, "
                 f"flatness at the main seat {config.flatness_db[0]:.1f} dB", fontsize=9)


def _plan(ax, room, result, config, mains_m, legend):
    from matplotlib.patches import Rectangle

    lx, ly, _ = room.size_m
    # the view from above with the front wall at the top: y across, x downwards
    ax.add_patch(Rectangle((0, 0), ly, lx, fill=False, lw=2.0, color="0.15"))
    for box in result.search.keep_out:
        ax.add_patch(Rectangle((box.min_m[1], box.min_m[0]), box.max_m[1] - box.min_m[1],
                               box.max_m[0] - box.min_m[0], hatch="///", fill=False, color="0.6", lw=0.8))
        ax.text(0.5 * (box.min_m[1] + box.max_m[1]), 0.5 * (box.min_m[0] + box.max_m[0]), box.name, ha="center",
                va="center", fontsize=6.5, color="0.4")
    c = result.candidates_m
    if len(c):  # none with --measured: the subs stay where they stand
        ax.plot(c[:, 1], c[:, 0], ".", color="0.8", ms=2.5, label="candidate sub positions" if legend else None)
    ax.plot(mains_m[:, 1], mains_m[:, 0], "s", color=PALETTE[0], ms=7, mec="white", label="mains" if legend else None)
    for p, seat in enumerate(result.seats):
        ax.plot(seat.position_m[1], seat.position_m[0], "o", color=PALETTE[p % len(PALETTE)], ms=8, mec="0.2",
                label="seats" if p == 0 and legend else None)
    # each sub numbered on the plan; its name and settings in the legend beside it (no labels to
    # collide on the plan however close the subs stand)
    idle = {s.name for s in getattr(config, "idle_subs", ())}
    for k, s in enumerate(config.subs, 1):
        quiet = s.name in idle
        ax.plot(s.position_m[1], s.position_m[0], "D", color=PALETTE[1], ms=11, mec="0.1",
                mfc="white" if quiet else PALETTE[1],
                label=(f"{k}: {s.name}, {s.gain_db:+.1f} dB, {s.delay_ms:.2f} ms, "
                       f"{'+' if s.polarity > 0 else '-'}{' (nearly idle)' if quiet else ''}"))
        ax.text(s.position_m[1], s.position_m[0], str(k), ha="center", va="center", fontsize=6.5,
                fontweight="bold", color="0.1" if quiet else "white", gid="sub-number")
    ax.set_xlim(-0.1, ly + 0.1)
    ax.set_ylim(lx + 0.1, -0.45)
    ax.set_aspect("equal")
    ax.text(ly / 2, -0.08, "front wall", ha="center", va="bottom", fontsize=7, color="0.2")
    ax.tick_params(labelsize=7)
    ax.set_xlabel("from the left wall (m)", fontsize=7.5)
    ax.set_ylabel("from the front wall (m)", fontsize=7.5)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=6.5, loc="upper left", bbox_to_anchor=(1.03, 1.0), framealpha=0.85,
                  title="subs: gain, delay, polarity" if config.subs else None, title_fontsize=6.5)


def plot_subs(result, room, mains_m, title=None, path=None, bands=None):
    """One row per configuration (the ranked ones, then the file's layout as it is): the level
    of the mono sum at every seat, and a floor plan with the subs (numbered; each one's gain,
    delay and polarity in the legend beside the plan, a nearly idle sub drawn hollow), the mains
    and the seats.

    Parameters
    ----------
    result : SubsResult
    room : Room
    mains_m : array_like (M, 3)
        The main speakers' positions.
    title : str, optional
    path : path, optional
        Where to write the figure (atomically); the figure is returned either way.
    bands : SubsBands, optional
        The configurations' levels in drawn rooms
        (:func:`roommodes.analysis.uncertainty.subs_bands`, in ``result.ranked`` order, then
        optionally ``result.before``): each seat's 10-90 % band is shaded in its colour on the
        level panel of each configuration it holds.
    """
    configs = [*result.ranked, result.before]
    lx, ly, _ = room.size_m
    plan_w = 2.6 * ly / lx
    fig, axes = new_figure(10.4 + plan_w, 2.7 * len(configs), nrows=len(configs), ncols=2,
                           gridspec_kw={"width_ratios": [7.0, plan_w]}, squeeze=False)
    lv = np.concatenate([c.level_db.ravel() for c in configs])
    ylim = (np.floor(np.percentile(lv, 1) / 5) * 5 - 5, np.ceil(lv.max() / 5) * 5 + 3)
    lo = hi = None
    if bands is not None:
        lo, hi = bands.level_db_p10, bands.level_db_p90
        ylim = (min(ylim[0], np.floor(np.percentile(lo, 1) / 5) * 5 - 5), max(ylim[1], np.ceil(hi.max() / 5) * 5 + 3))
    for i, (row, config) in enumerate(zip(axes, configs)):
        band = ((lo[i], hi[i]), bands.n_samples) if bands is not None and i < lo.shape[0] else None
        _levels(row[0], result, config, ylim, band)
        _plan(row[1], room, result, config, np.atleast_2d(mains_m), legend=i == 0)
    fig.suptitle(title or "Subwoofers: level at every seat, and where the subs go", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig
