"""Figures of the measurement commands: comparison, fit, impulse response, waterfall.

Same style as :mod:`roommodes.plots` (object-oriented matplotlib, Okabe-Ito colours,
log-frequency axes); matplotlib is imported only when a figure is drawn.
"""

from __future__ import annotations

import numpy as np

from ..dsp.response import log_frequencies
from ..measure.deconvolve import frequency_response
from .plots import PALETTE, new_figure, save_figure, style_frequency_axis

__all__ = ["plot_comparison", "plot_fit", "plot_impulse_response", "plot_waterfall"]


def plot_comparison(report, spread_db=None, title=None, path=None, model_band=None):
    """Overlay of the two curves (top) and their difference (bottom).

    Parameters
    ----------
    report : roommodes.compare.ComparisonReport
    spread_db : ndarray, optional
        Standard deviation across averaged measurements on the comparison grid; drawn as
        a band around the first curve.
    title : str, optional
    path : str or Path, optional
        Where to save the figure (PNG/SVG/PDF by extension).
    model_band : roommodes.analysis.compare.ModelBand, optional
        The predicted curve's 10-90 % band over drawn rooms, shaded around the second curve.

    Returns
    -------
    matplotlib.figure.Figure
    """
    c = report.comparison
    f = c.freq_hz
    a_name, b_name = report.names
    fig, (ax, ax2) = new_figure(8.0, 6.0, 2, 1, sharex=True, gridspec_kw={"height_ratios": [2.2, 1]})
    if spread_db is not None:
        ax.fill_between(f, c.measured_db - spread_db, c.measured_db + spread_db, color=PALETTE[0], alpha=0.18,
                        lw=0, label="spread across positions (+-1 SD)")
    if model_band is not None:
        ax.fill_between(f, model_band.level_db_p10, model_band.level_db_p90, color=PALETTE[1], alpha=0.18, lw=0,
                        label=f"model: 10-90 % of {model_band.n_samples} drawn rooms")
    ax.plot(f, c.measured_db, color=PALETTE[0], lw=1.6, label=a_name)
    ax.plot(f, c.reference_db, color=PALETTE[1], lw=1.4, ls="--", label=b_name)
    for m in report.matches:
        for feat, colour, fill in ((m.measured, PALETTE[0], True), (m.reference, PALETTE[1], False)):
            if feat is not None:
                ax.plot([feat.freq_hz], [feat.level_db + (1.2 if feat.kind == "peak" else -1.2)],
                        marker="v" if feat.kind == "peak" else "^", ms=5, color=colour,
                        mfc=colour if fill else "none", ls="none")
    for axx in (ax, ax2):
        axx.axvspan(f[0], c.band_hz[0], color="0.9", lw=0, zorder=0)
        axx.axvspan(c.band_hz[1], f[-1], color="0.9", lw=0, zorder=0)
    style_frequency_axis(ax, f[0], f[-1])
    ax.set_xlabel("")
    ax.set_ylabel("Level (dB)" + ("" if c.align_band_hz is None else ", aligned"))
    ax.legend(fontsize=8, loc="lower center")
    smooth = f"1/{c.smoothing:g}-octave smoothing" if c.smoothing else "no smoothing"
    ax.set_title(title or f"{a_name} against {b_name}", fontsize=11)
    ax2.plot(f, c.difference_db, color="0.15", lw=1.3)
    ax2.axhline(0, color="0.5", lw=0.8)
    style_frequency_axis(ax2, f[0], f[-1])
    ax2.set_ylabel("Difference (dB)")
    ax2.text(0.01, 0.95, f"{smooth}; in {c.band_hz[0]:g}-{c.band_hz[1]:g} Hz: median |d| "
             f"{c.median_abs_diff_db:.1f} dB, 90th pct {c.p90_abs_diff_db:.1f} dB, r = {c.correlation:.2f}",
             transform=ax2.transAxes, fontsize=8, va="top")
    lim = max(6.0, float(np.ceil(np.max(np.abs(c.difference_db[c.in_band])) / 3) * 3))
    ax2.set_ylim(-lim, lim)
    if path is not None:
        save_figure(fig, path)
    return fig


def plot_fit(result, title=None, path=None, max_panels=6, before_band_db=None, n_rooms=None, after_band_db=None):
    """Measured, predicted before and predicted after the fit, one panel per measurement.

    Parameters
    ----------
    result : roommodes.fit.FitResult
    title : str, optional
    path : str or Path, optional
    max_panels : int
        At most this many measurements are drawn (the first ones).
    before_band_db : ndarray (3, T, F), optional
        10th, 50th and 90th percentiles of the 'before' curve over drawn rooms
        (:func:`roommodes.analysis.fit.before_band`); the 10-90 % range is shaded.
    n_rooms : int, optional
        How many rooms were drawn, for the legend.
    after_band_db : ndarray (3, T, F), optional
        The same for the 'after' curve, over rooms drawn around the calibrated room
        (:func:`roommodes.analysis.fit.after_band`), over the same count ``n_rooms``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    n = min(len(result.measured_db), int(max_panels))
    cols = 1 if n == 1 else 2
    rows = int(np.ceil(n / cols))
    fig, axes = new_figure(5.0 * cols, 3.0 * rows, rows, cols, squeeze=False)
    f = result.freq_hz
    for k in range(rows * cols):
        ax = axes[k // cols, k % cols]
        if k >= n:
            ax.set_visible(False)
            continue
        if before_band_db is not None:
            ax.fill_between(f, before_band_db[0][k], before_band_db[2][k], color=PALETTE[1], alpha=0.18, lw=0,
                            label=f"model before: 10-90 % of {n_rooms} drawn rooms")
        if after_band_db is not None:
            ax.fill_between(f, after_band_db[0][k], after_band_db[2][k], color=PALETTE[0], alpha=0.22, lw=0,
                            label=f"model after: 10-90 % of {n_rooms} drawn rooms")
        ax.plot(f, result.measured_db[k], color="0.1", lw=1.6, label="measured")
        ax.plot(f, result.before_db[k], color=PALETTE[1], lw=1.1, ls="--", label="model before")
        ax.plot(f, result.after_db[k], color=PALETTE[0], lw=1.3, label="model after")
        style_frequency_axis(ax, f[0], f[-1])
        ax.set_ylabel("Level (dB)")
        ax.set_title(result.labels[k] if k < len(result.labels) else f"measurement {k + 1}", fontsize=9)
        if k == 0:
            ax.legend(fontsize=7, loc="lower center")
    fig.suptitle(title or "Fit to measurements", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig


def plot_impulse_response(ir, fs_hz, title=None, path=None, freq_range_hz=(15.0, 300.0)):
    """Envelope of an impulse response in dB (left) and its low-frequency response (right).

    Parameters
    ----------
    ir : array_like (n,)
    fs_hz : float
    title : str, optional
    path : str or Path, optional
    freq_range_hz : (float, float)
        Range of the frequency panel, Hz.

    Returns
    -------
    matplotlib.figure.Figure
    """
    h = np.asarray(ir, dtype=float)
    t = np.arange(h.size) / fs_hz
    fig, (ax, ax2) = new_figure(10.0, 3.8, 1, 2)
    env = 20 * np.log10(np.maximum(np.abs(h), 1e-12) / max(np.max(np.abs(h)), 1e-30))
    ax.plot(t * 1000, env, color=PALETTE[0], lw=0.6)
    ax.set_ylim(-100, 5)
    ax.set_xlabel("Time (ms)")
    ax.set_ylabel("|h| re peak (dB)")
    ax.grid(True, alpha=0.3)
    f = log_frequencies(freq_range_hz[0], min(freq_range_hz[1], 0.45 * fs_hz), 48)
    lv = 20 * np.log10(np.maximum(np.abs(frequency_response(h, fs_hz, f)), 1e-15))
    ax2.plot(f, lv, color=PALETTE[1], lw=1.2)
    style_frequency_axis(ax2, f[0], f[-1])
    ax2.set_ylabel("Level (dB, whole response)")
    fig.suptitle(title or "Impulse response", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig


def plot_waterfall(decay, title=None, path=None, floor_db=-60.0):
    """Cumulative spectral decay as a map: frequency across, time up, level in colour.

    Parameters
    ----------
    decay : roommodes.measure.decay.SpectralDecay
    title : str, optional
    path : str or Path, optional
    floor_db : float
        Levels below this (dB re the first slice's maximum) share the lowest colour.

    Returns
    -------
    matplotlib.figure.Figure
    """
    f, t, lv = decay.freq_hz, decay.time_s, np.maximum(decay.level_db, floor_db)
    fig, ax = new_figure(8.0, 4.8)
    mesh = ax.pcolormesh(f, t * 1000, lv, shading="nearest", cmap="viridis", vmin=floor_db, vmax=0.0)
    cb = fig.colorbar(mesh, ax=ax)
    cb.set_label("Level (dB re the first slice's peak)")
    ax.contour(f, t * 1000, lv, levels=np.arange(floor_db, 0.1, 10.0), colors="white", linewidths=0.4, alpha=0.6)
    style_frequency_axis(ax, f[0], f[-1])
    ax.grid(False, which="both")
    ax.set_ylabel(f"Slice start after the onset (ms); slice {decay.window_s * 1000:.0f} ms")
    ax.set_title(title or "Cumulative spectral decay", fontsize=11)
    if path is not None:
        save_figure(fig, path)
    return fig
