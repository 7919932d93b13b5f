"""Placement search: where to put a stereo pair and the seat, ranked by a documented score.

The score (lower is better) is a weighted sum of named parts, each in dB, computed on the
levels at the seat and over a listening area around it, the speakers' own low-frequency
response included (:func:`roommodes.speaker.speaker_response`):

``flatness``
    RMS deviation of each channel's 1/6-octave power-smoothed level at the seat from its
    least-squares straight line in log frequency over the band (the figure of merit of
    Cox, D'Antonio & Avis 2004, J. Audio Eng. Soc. 52(6):640, taken as an RMS so it reads
    in dB), root-mean-square over the two channels.
``mismatch``
    RMS over the band of the left-minus-right difference of those smoothed levels.
``area``
    Square root of the mean over frequency of the variance across the listening-area
    points of the smoothed level (the "mean spatial variance" of Welti & Devantier 2006,
    J. Audio Eng. Soc. 54(5):347), root-mean-square over the two channels.
``boost``
    The boost an equaliser would need to lift the deepest broad dip (1/3-octave
    power-smoothed) up to the channel's straight-line trend; the larger of the two
    channels. A headroom proxy: +6 dB of boost asks for four times the power.
``robustness``
    Mean worsening of the sum of the four parts above when every object (both speakers and
    the seat) moves by 5 cm, over eight fixed joint moves (each object along the cube
    diagonals, in different combinations); moves that improve count as zero.

Search: a coarse global pass scores every layout of a grid over the allowed region
(batched: all source positions x all listening points x all frequencies, grouped by seat
position, the modal sum taken one axis at a time over the grid's planes,
:mod:`roommodes.solvers.separable`), the best are scored with the robustness part, the
best distinct ones refined by a pattern search (coordinate moves with halving steps, down
to 1 cm), and the result ranked. The four presets and the file's own layout are scored
the same way. The modal sum is the one of :mod:`roommodes.solvers.modal` (same modes,
damping, cutoff and static tail), so every score equals the one computed from
:func:`roommodes.transfer_function` to round-off.

Constraints come from the room file's ``[search]`` table (docs/placement.md lists the keys,
defaults and units); :func:`search_space` reads them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..dsp.response import log_frequencies, smooth_fractional_octave
from ..model.placement import (
    PRESETS,
    KeepOut,
    SearchSpace,
    _where,
    cabinet_corners,
    preset_layout,
    search_space,
)
from ..model.room import WALL_MARGIN_M, Layout, Speaker
from ..model.speaker import speaker_response
from ..solvers import DEFAULT_METHOD
from ..solvers.modal import (
    grouped_pair_sum,
    modal_sum_block,
    modal_weights,
    mode_shape_block,
    resonant_count,
    static_green_block,
    static_green_pairs,
)
from ..solvers.separable import SeparableModalSum
from ..solvers.threads import blas_threads, small_products
from .levels import speaker_levels
from .predict import usable_band

__all__ = [
    "PARTS", "DEFAULT_WEIGHTS", "KeepOut", "SearchSpace", "ScoredLayout", "SearchResult",
    "search_space", "check_weights", "default_band", "flatness_db", "mismatch_db", "area_spread_db",
    "eq_boost_db", "score_parts", "score_layouts", "search_layouts", "seat_score_map",
    "front_distance_profile", "perturbations", "area_offsets", "eq_proxy_db", "layout_sweep", "layout_curves",
    "layout_geometry", "layout_distance_m", "sweep_direction", "why_it_wins", "close_call", "EQ_MAX_BOOST_DB", "EQ_MAX_CUT_DB",
]

#: Names of the score parts, in display order.
PARTS = ("flatness", "mismatch", "area", "boost", "robustness")
#: Default weights (our choice): the boost is a peak value while the others are RMS
#: figures, so it counts a quarter.
DEFAULT_WEIGHTS = {"flatness": 1.0, "mismatch": 1.0, "area": 1.0, "boost": 0.25, "robustness": 1.0}
#: How far every object moves for the robustness part, m.
PERTURBATION_M = 0.05
#: Frequency grid of the search, points per octave.
DEFAULT_POINTS_PER_OCTAVE = 24
#: Coarse steps tried, finest first; the finest whose coarse pass fits the budget is used.
COARSE_STEPS_M = (0.05, 0.075, 0.1, 0.125, 0.15, 0.2, 0.25, 0.3, 0.4, 0.5)
#: Budget of the coarse pass in floating-point operations of its matrix products
#: (4 per mode, frequency and source-listening-point pair); about 2 s at 30 GFLOP/s.
COARSE_BUDGET_FLOP = 6e10
#: A layout batch is summed by sum factorisation (:mod:`roommodes.solvers.separable`) when
#: its multiply-adds times this are fewer than the blocked product's (which runs in BLAS,
#: mostly in float32). Measured on the demo room, overheads and static tails included, a
#: multiply-add of the factorised sum took 7 to 20 times as long; the two took the same
#: time for one layout's eight moved copies, at a ratio of about 11.
SEPARABLE_FMA_RATIO = 10.0
#: Refinement stops when the step falls below this, m.
MIN_STEP_M = 0.01
_SMOOTH_FRACTION = 6  # 1/6 octave for the level curves
_BROAD_FRACTION = 3  # 1/3 octave for "broad" dips
_TINY = 1e-30

def check_weights(weights):
    """Full weights (defaults for the parts not given), validated.

    Parameters
    ----------
    weights : dict or None
        Part name -> weight >= 0; see :data:`PARTS`.

    Returns
    -------
    dict

    Raises
    ------
    ValueError
        For an unknown part, a negative or non-finite weight, or all weights zero.
    """
    out = dict(DEFAULT_WEIGHTS)
    for k, v in (weights or {}).items():
        if k not in PARTS:
            raise ValueError(f"unknown score part '{k}' in the weights; allowed: {', '.join(PARTS)}")
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise ValueError(f"weight of '{k}' must be a number, got {v!r}")
        if v < 0:
            raise ValueError(f"weight of '{k}' must be >= 0, got {v:g}")
        out[k] = float(v)
    if not any(out[k] > 0 for k in PARTS[:4]):
        raise ValueError("the weights of flatness, mismatch, area and boost are all zero; give at least one "
                         "a positive weight (robustness alone measures nothing)")
    return out


def default_band(speakers, top_hz=200.0):
    """The usable band: from max(20 Hz, the speakers' low cut) to ``top_hz``."""
    return usable_band(speakers, top_hz)


def _check_band(band_hz):
    lo, hi = (float(v) for v in band_hz)
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi <= 1000.0):
        raise ValueError(f"band must satisfy 0 < low < high <= 1000 Hz, got {lo:g}-{hi:g} Hz")
    if hi / lo < 2 ** (1 / 3):
        raise ValueError(f"band {lo:g}-{hi:g} Hz is narrower than 1/3 octave; the flatness line needs a wider band")
    return lo, hi


def area_offsets(area_m, area_points):
    """(A, 3) offsets of the listening-area grid from the seat; row A // 2 is the seat."""
    gx = np.linspace(-area_m[0] / 2, area_m[0] / 2, area_points[0]) if area_points[0] > 1 else np.zeros(1)
    gy = np.linspace(-area_m[1] / 2, area_m[1] / 2, area_points[1]) if area_points[1] > 1 else np.zeros(1)
    xx, yy = np.meshgrid(gx, gy, indexing="ij")
    return np.stack([xx.ravel(), yy.ravel(), np.zeros(xx.size)], axis=1)


# ------------------------------------------------------------------------------ score parts
def _band_mask(freq_hz, band_hz):
    f = np.asarray(freq_hz, dtype=float)
    sel = (f >= band_hz[0] * (1 - 1e-9)) & (f <= band_hz[1] * (1 + 1e-9))
    if sel.sum() < 3:
        raise ValueError(f"band {band_hz[0]:g}-{band_hz[1]:g} Hz holds fewer than 3 grid frequencies")
    return sel


def _line_projection(freq_band_hz):
    """Residual projector ``I - X (X^T X)^-1 X^T`` for the line ``a + b ln f``."""
    x = np.stack([np.ones(len(freq_band_hz)), np.log(freq_band_hz)], axis=1)
    return np.eye(len(freq_band_hz)) - x @ np.linalg.solve(x.T @ x, x.T)


def _smoothed_db(freq_hz, level_db, fraction):
    p = smooth_fractional_octave(freq_hz, 10 ** (np.asarray(level_db, dtype=float) / 10), fraction)
    return 10 * np.log10(np.maximum(p, _TINY))


def flatness_db(freq_hz, level_db, band_hz):
    """RMS deviation (dB) of the 1/6-octave power-smoothed level from its least-squares line.

    Parameters
    ----------
    freq_hz : array_like (F,)
        Log-spaced grid, Hz; it should reach 1/12 octave beyond the band so the smoothing
        windows are whole.
    level_db : array_like (..., F)
        Unsmoothed level, dB.
    band_hz : (float, float)
        Band judged, Hz; at least three grid frequencies.

    Returns
    -------
    ndarray (...)

    Notes
    -----
    With ``L_s`` the smoothed level at the band's grid frequencies and ``a + b ln f`` its
    least-squares line, ``flatness = sqrt(mean (L_s - a - b ln f)^2)``.

    References
    ----------
    T. J. Cox, P. D'Antonio, M. R. Avis, "Room sizing and optimization at low frequencies",
    J. Audio Eng. Soc. 52(6):640, 2004 (the deviation of the modal response from a
    least-squares straight line as the figure of merit).
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    ls = _smoothed_db(f, level_db, _SMOOTH_FRACTION)[..., sel]
    resid = ls @ _line_projection(f[sel])
    return np.sqrt(np.mean(resid**2, axis=-1))


def mismatch_db(freq_hz, level_a_db, level_b_db, band_hz):
    """RMS (dB) over the band of the difference of two 1/6-octave power-smoothed levels."""
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    d = _smoothed_db(f, level_a_db, _SMOOTH_FRACTION) - _smoothed_db(f, level_b_db, _SMOOTH_FRACTION)
    return np.sqrt(np.mean(d[..., sel] ** 2, axis=-1))


def area_spread_db(freq_hz, levels_db, band_hz):
    """Spread of the level over a listening area: ``sqrt(mean_f var_points L_s)`` (dB).

    Parameters
    ----------
    freq_hz : array_like (F,)
        Log-spaced grid, Hz (see :func:`flatness_db`).
    levels_db : array_like (..., A, F)
        Unsmoothed levels at the A points of the area, dB.
    band_hz : (float, float)
        Band judged, Hz.

    Notes
    -----
    ``var`` is the population variance across the points of the 1/6-octave
    power-smoothed level at each frequency; its mean over the band's grid frequencies is
    the mean spatial variance (MSV) of Welti & Devantier; the part is its square root,
    in dB. One point gives 0.

    References
    ----------
    T. Welti, A. Devantier, "Low-frequency optimization using multiple subwoofers",
    J. Audio Eng. Soc. 54(5):347, 2006.
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    ls = _smoothed_db(f, levels_db, _SMOOTH_FRACTION)[..., sel]
    return np.sqrt(np.mean(np.var(ls, axis=-2), axis=-1))


def eq_boost_db(freq_hz, level_db, band_hz):
    """Boost (dB) an equaliser needs to lift the deepest broad dip up to the level's trend.

    The trend is the least-squares line (in log frequency) of the 1/6-octave smoothed
    level over the band; a dip is broad when it survives 1/3-octave power smoothing.
    ``boost = max(0, max_band(trend - L_1/3))``. Narrow nulls are not counted: boosting
    into them wastes headroom (common practice).
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    ls = _smoothed_db(f, level_db, _SMOOTH_FRACTION)[..., sel]
    trend = ls - ls @ _line_projection(f[sel])
    broad = _smoothed_db(f, level_db, _BROAD_FRACTION)[..., sel]
    return np.maximum(0.0, np.max(trend - broad, axis=-1))


#: Largest boost and cut of the EQ proxy, dB: the correction's default boost limit
#: (:func:`roommodes.analysis.correction.correct_curve`, 6 dB) and a cut limit of our choice.
EQ_MAX_BOOST_DB = 6.0
EQ_MAX_CUT_DB = 15.0


def _proxy_from_smoothed(level3_db, proj, points3_db=None):
    """Correction toward the line of ``level3_db`` (..., Fb): cuts follow the mean; a boost
    is only as large as the shortfall every point (..., A, Fb) shares."""
    if points3_db is None:
        return _proxy_from_extremes(level3_db, proj)
    return _proxy_from_extremes(level3_db, proj, np.min(points3_db, axis=-2), np.max(points3_db, axis=-2))


def _proxy_from_extremes(level3_db, proj, low3_db=None, high3_db=None):
    """:func:`_proxy_from_smoothed` from the lowest and highest level over the points
    (..., Fb) instead of all of them: the shortfalls ``trend - L_a`` are smallest at the
    highest ``L_a`` and largest at the lowest (rounded subtraction is monotone, so this
    is the same result to the bit)."""
    trend = level3_db - level3_db @ proj
    corr = trend - level3_db
    if low3_db is not None:
        corr = np.where(corr > 0, np.clip(trend - high3_db, 0.0, None),
                        0.5 * (corr + np.clip(trend - low3_db, None, 0.0)))
    return np.clip(corr, -EQ_MAX_CUT_DB, EQ_MAX_BOOST_DB)


def eq_proxy_db(freq_hz, levels_db, band_hz):
    """The correction the search assumes a layout gets: a fast stand-in for the EQ design.

    Parameters
    ----------
    freq_hz : array_like (F,)
        Log-spaced grid, Hz, reaching 1/6 octave beyond the band.
    levels_db : array_like (..., A, F)
        Unsmoothed levels of one channel at the A points of the listening area, dB.
    band_hz : (float, float)
        Band corrected, Hz.

    Returns
    -------
    ndarray (..., Fb)
        Correction at the band's grid frequencies, dB (positive: boost).

    Notes
    -----
    The EQ is designed, as :func:`roommodes.analysis.correction.correct_prediction` does
    with a listening area, on the power average over the area; it follows that average
    smoothed over 1/3 octave (what a handful of broad filters can follow; narrow nulls are
    filled in by the smoothing and so are not boosted, common practice) toward its
    least-squares line in log frequency, cutting at most :data:`EQ_MAX_CUT_DB` and
    boosting only where every point of the area falls short of the line, by the smallest
    of those shortfalls and at most :data:`EQ_MAX_BOOST_DB` (a boost must help at every
    head position, not only on average). One correction per channel applies at every
    point of the area. tests/analysis/test_search_eq.py holds it to the real parametric
    design for several layouts.
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    p3 = smooth_fractional_octave(f, 10 ** (np.asarray(levels_db, dtype=float) / 10), _BROAD_FRACTION)[..., sel]
    m3 = 10 * np.log10(np.maximum(np.mean(p3, axis=-2), _TINY))
    return _proxy_from_smoothed(m3, _line_projection(f[sel]), 10 * np.log10(np.maximum(p3, _TINY)))


def score_parts(freq_hz, left_db, right_db, band_hz, seat_index=None):
    """The first four score parts from the two channels' levels over the listening area.

    Written plainly (one channel, one layout at a time) from the part functions above; the
    batched scorer of the search is held to it.

    Parameters
    ----------
    freq_hz : array_like (F,)
        Log-spaced grid, Hz (see :func:`flatness_db`).
    left_db, right_db : array_like (A, F)
        Unsmoothed levels (speaker response included) at the A listening points, dB.
    band_hz : (float, float)
        Band judged, Hz.
    seat_index : int, optional
        Row of the seat; default ``A // 2`` (the centre of :func:`area_offsets`).

    Returns
    -------
    dict
        ``flatness`` (after each channel's EQ, :func:`eq_proxy_db`), ``mismatch`` (after
        EQ), ``area``, ``boost`` (the EQ's largest boost) and the unweighted
        ``flatness_raw`` (before EQ), in dB.
    """
    left = np.atleast_2d(left_db)
    right = np.atleast_2d(right_db)
    i = left.shape[0] // 2 if seat_index is None else seat_index
    f = np.asarray(freq_hz, dtype=float)
    sel = _band_mask(f, band_hz)
    after, boost = [], []
    for lv in (left, right):
        corr = eq_proxy_db(f, lv, band_hz)
        after.append(_smoothed_db(f, lv[i], _SMOOTH_FRACTION)[sel] + corr)
        boost.append(max(0.0, float(np.max(corr))))
    resid = np.stack(after) @ _line_projection(f[sel])
    raw = flatness_db(f, np.stack([left[i], right[i]]), band_hz)
    ar = area_spread_db(f, np.stack([left, right]), band_hz)
    return {
        "flatness": float(np.sqrt(np.mean(resid**2))),
        "mismatch": float(np.sqrt(np.mean((after[0] - after[1]) ** 2))),
        "area": float(np.sqrt(np.mean(ar**2))),
        "boost": max(boost),
        "flatness_raw": float(np.sqrt(np.mean(raw**2))),
    }


def perturbations(step_m=PERTURBATION_M):
    """(8, 3, 3) joint moves of (left, right, seat) used by the robustness part, m.

    Move k takes the left speaker along cube diagonal k, the right speaker along diagonal
    (k + 3) mod 8 and the seat along diagonal (k + 5) mod 8 (diagonals numbered by the
    bits of k as signs of x, y, z), each by ``step_m``: every object visits all eight
    diagonal directions, in different combinations.
    """
    diag = np.array([[1 - 2 * ((k >> b) & 1) for b in range(3)] for k in range(8)], float) / np.sqrt(3)
    return step_m * np.stack([np.stack([diag[k], diag[(k + 3) % 8], diag[(k + 5) % 8]]) for k in range(8)])


# ------------------------------------------------------------------------------ evaluation
class _Scorer:
    """Batched evaluation of layouts in one room, band and frequency grid.

    A layout is a 9-vector (left xyz, right xyz, seat xyz), metres.
    """

    def __init__(self, room, speakers, band_hz, weights, area_m, area_points, points_per_octave):
        self.room = room
        self.size = np.asarray(room.size_m, dtype=float)
        self.band = _check_band(band_hz)
        self.weights = weights
        half = 2 ** (1 / (2 * _BROAD_FRACTION))
        self.freq_hz = log_frequencies(self.band[0] / half, self.band[1] * half, points_per_octave)
        f = self.freq_hz
        self.sel = _band_mask(f, self.band)
        self.idx, self.weight, self.static_weight = modal_weights(self.size, room.impedance(f), f,
                                                                  room.speed_of_sound)
        self.speaker_power = np.stack([np.abs(speaker_response(s, f)) ** 2 for s in speakers])  # (2, F)
        eye = np.eye(f.size)
        self.smooth6 = np.ascontiguousarray(smooth_fractional_octave(f, eye, _SMOOTH_FRACTION)[:, self.sel])
        self.smooth3 = np.ascontiguousarray(smooth_fractional_octave(f, eye, _BROAD_FRACTION)[:, self.sel])
        #: both smoothings side by side: one GEMM of twice the width costs less than two
        self.smooth63 = np.ascontiguousarray(np.concatenate([self.smooth6, self.smooth3], axis=1))
        self.proj = _line_projection(f[self.sel])
        self.offsets = area_offsets(area_m, area_points)
        self.seat_row = self.offsets.shape[0] // 2
        self.nmax = self.idx.max(axis=0)
        # the modal products run in single precision but for these leading (resonant) modes
        self.n_double = resonant_count(self.idx, self.size, room.speed_of_sound, f.max())
        #: real floating-point operations of the modal sum per (source, receiver) pair
        self.flop_per_pair = 4 * self.idx.shape[0] * f.size
        self.pair_evaluations = 0  # (source, listening point) pairs evaluated, for the benchmark
        self.layout_evaluations = 0  # layouts scored (perturbed copies included)

    def mirror_rows(self):
        """Row permutation taking the area grid to its mirror image about the seat's y, or None."""
        mirrored = self.offsets * [1.0, -1.0, 1.0]
        d = np.abs(mirrored[:, None, :] - self.offsets[None, :, :]).max(axis=-1)
        rows = np.argmin(d, axis=1)
        return rows if np.all(d[np.arange(rows.size), rows] < 1e-12) else None

    # -- modal pieces
    def shapes(self, points):
        """Mode shapes (P, N); equal to :func:`roommodes.modes.mode_shapes`, computed from
        per-axis cosine tables (the shapes are products of one cosine per axis)."""
        return mode_shape_block(self.idx, self.size, points)

    def transfer_block(self, src, rec, psi_src=None):
        """(S, R, F) complex transfers, every source to every receiver (``psi_src``: the
        sources' mode shapes, when already known)."""
        psi_s = self.shapes(src) if psi_src is None else psi_src
        psi_r = self.shapes(rec)
        with blas_threads(4.0 * psi_s.shape[0] * psi_r.shape[0] * self.weight.size):
            h = modal_sum_block(psi_s, psi_r, self.weight, precision="auto", n_double=self.n_double)
            tail = 4 * np.pi * static_green_block(self.size, src, rec) - psi_s @ (self.static_weight[:, None] * psi_r.T)
        h += tail[:, :, None]
        self.pair_evaluations += src.shape[0] * rec.shape[0]
        return h

    def separable(self, last_axis):
        """The :class:`~roommodes.solvers.separable.SeparableModalSum` of this scorer's modes
        summed last along ``last_axis`` (built once per axis)."""
        cache = self.__dict__.setdefault("_separable", {})
        if last_axis not in cache:
            cache[last_axis] = SeparableModalSum(self.idx, self.size, self.weight, self.static_weight, last_axis)
        return cache[last_axis]

    def plane_transfer(self, src, rec, src_values, last_axis, psi_src=None):
        """:meth:`transfer_block` by sum factorisation for sources on few planes
        (:mod:`roommodes.solvers.separable`; float64, the same sum in another order), or
        :meth:`transfer_block` itself (``psi_src``: a callable giving the sources' mode
        shapes) when its table would be too large.

        ``src_values``: the values on the two other axes (sorted) that hold every source's
        coordinates; calls with the same values and receiver planes share one table.
        """
        out = self.separable(last_axis).transfer(src, rec, src_values)
        if out is None:
            return self.transfer_block(src, rec, None if psi_src is None else psi_src(src))
        h, low = out
        h += (4 * np.pi * static_green_block(self.size, src, rec) - low)[:, :, None]
        self.pair_evaluations += src.shape[0] * rec.shape[0]
        return h

    def transfer_layouts(self, vecs, chunk=256):
        """(K, 2, A, F) complex transfers of both speakers to the area points of K layouts.

        For each layout the products ``psi_n(speaker) psi_n(point)`` (2 A x N) are formed in
        one compiled pass and multiply the weights in one real GEMM
        (:func:`~roommodes.solvers.modal.grouped_pair_sum`); the same pass gives the
        low-mode part of the static tail.
        """
        v = np.atleast_2d(vecs)
        k = v.shape[0]
        a = self.offsets.shape[0]
        out = self._separable_layouts(v)
        if out is not None:
            self.pair_evaluations += 2 * a * k
            self.layout_evaluations += k
            return out
        out = np.empty((k, 2, a, self.freq_hz.size), dtype=complex)
        for i0 in range(0, k, chunk):
            vi = v[i0:i0 + chunk]
            n = vi.shape[0]
            src = vi[:, :6].reshape(n, 2, 3)
            rec = np.clip(vi[:, None, 6:9] + self.offsets[None], WALL_MARGIN_M, self.size - WALL_MARGIN_M)
            psi_s = self.shapes(src.reshape(-1, 3)).reshape(n, 2, -1)
            psi_r = self.shapes(rec.reshape(-1, 3)).reshape(n, a, -1)
            h, low = grouped_pair_sum(psi_s, psi_r, self.weight, self.static_weight, n_double=self.n_double)
            ss = np.broadcast_to(src[:, :, None, :], (n, 2, a, 3)).reshape(-1, 3)
            rr = np.broadcast_to(rec[:, None, :, :], (n, 2, a, 3)).reshape(-1, 3)
            h += (4 * np.pi * static_green_pairs(self.size, ss, rr).reshape(n, 2, a) - low)[..., None]
            out[i0:i0 + n] = h.reshape(n, 2, a, -1)
        self.pair_evaluations += 2 * a * k
        self.layout_evaluations += k
        return out

    def _separable_layouts(self, v):
        """:meth:`transfer_layouts` by sum factorisation when that is the cheaper way (the
        layouts' points lie on few planes: a line search, one layout's moved copies), else
        None."""
        k, a = v.shape[0], self.offsets.shape[0]
        src = v[:, :6].reshape(k, 2, 3)
        rec = np.clip(v[:, None, 6:9] + self.offsets[None], WALL_MARGIN_M, self.size - WALL_MARGIN_M)
        pts_s, pts_r = src.reshape(-1, 3), rec.reshape(-1, 3)
        counts = [np.unique(p[:, i]).size for p in (pts_s, pts_r) for i in range(3)]
        n_pairs = 2 * a * k
        cost = []
        for last in range(3):
            b, c = [i for i in range(3) if i != last]
            cost.append(self.separable(last).fma(counts[b], counts[c], counts[3 + b], counts[3 + c], n_pairs))
        last = int(np.argmin(cost))
        if cost[last] * SEPARABLE_FMA_RATIO > n_pairs * self.weight.size * 2:
            return None
        out = self.separable(last).grouped_transfer(src, rec)
        if out is None:
            return None
        h, low = out
        ss = np.broadcast_to(src[:, :, None, :], (k, 2, a, 3)).reshape(-1, 3)
        rr = np.broadcast_to(rec[:, None, :, :], (k, 2, a, 3)).reshape(-1, 3)
        h += (4 * np.pi * static_green_pairs(self.size, ss, rr).reshape(k, 2, a) - low)[..., None]
        return h.reshape(k, 2, a, -1)

    # -- score parts from transfers
    def features(self, h, channel, correction_db=None, rows=None):
        """Per-source features from transfers ``h`` (..., A, F) of one channel.

        The channel's correction (:func:`eq_proxy_db`) is designed on the power average
        over the listening area, unless ``correction_db`` (..., Fb) is given: the EQ of the
        nominal layout, kept when the objects are moved (robustness). ``rows`` (A,): the
        area points taken in this order, the same as passing ``h[..., rows, :]`` without
        copying the complex transfers.
        """
        power = np.square(h.real)  # (h.real**2 + h.imag**2) * speaker power, in place
        power += np.square(h.imag)
        if rows is not None:
            power = power[..., rows, :]
        power *= self.speaker_power[channel]
        fb = self.smooth6.shape[1]
        if correction_db is None:
            p63 = power @ self.smooth63
            p6, p3 = p63[..., :fb], p63[..., fb:]
        else:
            p6 = power @ self.smooth6
        ls = 10 * np.log10(np.maximum(p6, _TINY))  # (..., A, Fb), dB
        seat = ls[..., self.seat_row, :]
        if correction_db is None:
            mean3 = 10 * np.log10(np.maximum(p3.mean(axis=-2), _TINY))
            # only the lowest and highest point enter the boost limit: two logarithms per
            # frequency instead of A (log10 is monotone)
            low3 = 10 * np.log10(np.maximum(np.min(p3, axis=-2), _TINY))
            high3 = 10 * np.log10(np.maximum(np.max(p3, axis=-2), _TINY))
            correction_db = _proxy_from_extremes(mean3, self.proj, low3, high3)
        after = seat + correction_db
        resid = after @ self.proj
        return {
            "seat": after,
            "correction": correction_db,
            "flat_ms": np.mean(resid**2, axis=-1),
            "flat_raw_ms": np.mean((seat @ self.proj) ** 2, axis=-1),
            "area_var": np.mean(np.var(ls, axis=-2), axis=-1),
            "boost": np.maximum(0.0, np.max(correction_db, axis=-1)),
        }

    def parts(self, fl, fr, mismatch_ms=None):
        mm = np.mean((fl["seat"] - fr["seat"]) ** 2, axis=-1) if mismatch_ms is None else mismatch_ms
        return {
            "flatness": np.sqrt(0.5 * (fl["flat_ms"] + fr["flat_ms"])),
            "mismatch": np.sqrt(np.maximum(mm, 0.0)),
            "area": np.sqrt(0.5 * (fl["area_var"] + fr["area_var"])),
            "boost": np.maximum(fl["boost"], fr["boost"]),
            "flatness_raw": np.sqrt(0.5 * (fl["flat_raw_ms"] + fr["flat_raw_ms"])),
        }

    def base_score(self, parts):
        return sum(self.weights[k] * parts[k] for k in PARTS[:4])

    def score_vecs(self, vecs, robustness=True):
        """Parts (dict of (K,) arrays, with ``robustness`` and the unweighted
        ``flatness_raw``) and scores (K,) of K layouts."""
        v = np.atleast_2d(np.asarray(vecs, dtype=float))
        nominal = self.nominal(v)
        parts = nominal.parts
        if robustness and self.weights["robustness"] > 0:
            parts["robustness"] = self.robustness(v, nominal)
        else:
            parts["robustness"] = np.zeros(v.shape[0])
        return parts, nominal.s4 + self.weights["robustness"] * parts["robustness"]

    def nominal(self, vecs):
        """The first four parts of K layouts as planned: a :class:`_Nominal` (its
        corrections are the EQ that :meth:`robustness` keeps)."""
        v = np.atleast_2d(np.asarray(vecs, dtype=float))
        h = self.transfer_layouts(v)
        fl, fr = self.features(h[:, 0], 0), self.features(h[:, 1], 1)
        parts = self.parts(fl, fr)
        return _Nominal(parts, self.base_score(parts), fl["correction"], fr["correction"])

    def robustness(self, vecs, nominal):
        """The robustness part (K,) of K layouts whose :meth:`nominal` figures are given."""
        v = np.atleast_2d(np.asarray(vecs, dtype=float))
        moves = perturbations().reshape(8, 9)
        pv = self.clip_inside(v[:, None, :] + moves[None]).reshape(-1, 9)
        hp = self.transfer_layouts(pv)
        # the EQ set up for the planned layout stays when the objects land 5 cm off
        cl, cr = (np.repeat(c, 8, axis=0) for c in (nominal.correction_left, nominal.correction_right))
        sp = self.base_score(self.parts(self.features(hp[:, 0], 0, cl), self.features(hp[:, 1], 1, cr)))
        return np.mean(np.maximum(0.0, sp.reshape(-1, 8) - nominal.s4[:, None]), axis=1)

    def best_full(self, vecs, nominal, rows, batch=4):
        """The row of ``rows`` with the lowest full score, and that score, computing the
        robustness part only where it can still decide.

        The full score is ``s4 + w r`` with ``r >= 0``: the rows are taken in order of
        ``s4`` (``batch`` at a time) until the next ``s4`` exceeds the best full score
        found, which no later row can then reach. Ties go to the first of ``rows``, as
        ``rows[np.argmin(full[rows])]`` with every full score computed.

        Parameters
        ----------
        vecs : ndarray (K, 9)
        nominal : _Nominal
            Of ``vecs``.
        rows : ndarray of int
            Candidate rows; ties go to the one named first.
        """
        rows = np.asarray(rows, dtype=int)
        s4 = nominal.s4[rows]
        w = self.weights["robustness"]
        if w <= 0:
            full = s4 + 0.0
            i = int(np.argmin(full))
            return int(rows[i]), float(full[i])
        order = np.argsort(s4, kind="stable")  # positions in rows
        done, full = [], []
        best = np.inf
        b0 = 0
        while b0 < order.size:
            take = order[b0:b0 + batch]
            b0 += batch
            # the margin covers round-off between the s4 of a batch and of the whole
            take = take[s4[take] <= best + 1e-9]
            if take.size == 0:
                break
            f = s4[take] + w * self.robustness(vecs[rows[take]], nominal.take(rows[take]))
            done.extend(take.tolist())
            full.extend(f.tolist())
            best = min(best, float(np.min(f)))
            batch *= 2
        i = int(np.lexsort((done, full))[0])
        return int(rows[done[i]]), float(full[i])

    def curves(self, vec):
        """Seat levels of one layout on the band's grid: (freq_hz (Fb,), before (2, Fb),
        correction (2, Fb), after (2, Fb)), 1/6-octave smoothed, dB."""
        h = self.transfer_layouts(np.asarray(vec, dtype=float)[None])[0]
        out = []
        for c in range(2):
            power = (h[c].real**2 + h[c].imag**2) * self.speaker_power[c]
            seat = 10 * np.log10(np.maximum(power[self.seat_row] @ self.smooth6, _TINY))
            p3 = power @ self.smooth3
            mean3 = 10 * np.log10(np.maximum(p3.mean(axis=0), _TINY))
            corr = _proxy_from_smoothed(mean3, self.proj, 10 * np.log10(np.maximum(p3, _TINY)))
            out.append((seat, corr, seat + corr))
        b, c_, a = (np.stack([o[i] for o in out]) for i in range(3))
        return self.freq_hz[self.sel], b, c_, a

    def clip_inside(self, vecs):
        size3 = np.tile(self.size, 3)
        return np.clip(vecs, WALL_MARGIN_M, size3 - WALL_MARGIN_M)


@dataclass(frozen=True)
class _Nominal:
    """The first four parts of K layouts (dict of (K,)), their weighted sum ``s4`` (K,) and
    each channel's correction (K, Fb), dB."""

    parts: dict
    s4: np.ndarray
    correction_left: np.ndarray
    correction_right: np.ndarray

    def take(self, rows):
        """The same figures of the layouts ``rows``."""
        return _Nominal({k: v[rows] for k, v in self.parts.items()}, self.s4[rows], self.correction_left[rows],
                        self.correction_right[rows])


class _ChainScorer(_Scorer):
    """The same scorer, its transfers taken from the one chain with a chosen solver.

    The coarse pass and the refinement score tens of thousands of layouts with the batched
    modal sum; the finalists, the presets and the file's layout are scored again this way,
    so that the ranking the user sees rests on the default (exact) solver.
    """

    def __init__(self, base, method):
        self.__dict__.update(base.__dict__)
        self.method = method

    def transfer_layouts(self, vecs, chunk=None):
        v = np.atleast_2d(vecs)
        a = self.offsets.shape[0]
        out = np.empty((v.shape[0], 2, a, self.freq_hz.size), dtype=complex)
        for i, vi in enumerate(v):
            rec = np.clip(vi[6:9] + self.offsets, WALL_MARGIN_M, self.size - WALL_MARGIN_M)
            pair = [Speaker("left", tuple(vi[:3])), Speaker("right", tuple(vi[3:6]))]
            out[i] = speaker_levels(self.room, pair, rec, self.freq_hz, method=self.method,
                                    include_speaker=False).transfer
        self.pair_evaluations += 2 * a * v.shape[0]
        self.layout_evaluations += v.shape[0]
        return out


@dataclass(frozen=True)
class ScoredLayout:
    """A layout with its score (lower is better) and the score's parts (dB).

    Attributes
    ----------
    name : str
        "1", "2", ... for ranked results, a preset name, or "file".
    layout : Layout
    score : float
    parts : dict
        One value per name of :data:`PARTS`.
    in_region : bool
        Whether the layout satisfies the ``[search]`` constraints.
    figures : dict
        Unweighted figures beside the score: ``flatness_raw`` (the flatness part before
        EQ, dB) and :func:`layout_geometry`'s ``spacing_m``, ``seat_distance_m`` and
        ``angle_deg``.
    """

    name: str
    layout: Layout
    score: float
    parts: dict
    in_region: bool = True
    figures: dict = field(default_factory=dict)

    def to_dict(self):
        """JSON-ready values: one layout of ``place --json`` (shared/ARCHITECTURE.md)."""
        lay, fig = self.layout, self.figures
        return {
            "name": self.name,
            "speakers": [{"name": s.name, "position_m": s.position_m} for s in lay.speakers],
            "seat_m": lay.seat_m, "score": self.score, "parts": self.parts, "in_region": self.in_region,
            "spacing_m": fig.get("spacing_m"), "seat_distance_m": fig.get("seat_distance_m"),
            "angle_deg": fig.get("angle_deg"), "flatness_before_eq_db": fig.get("flatness_raw"),
            "flatness_after_eq_db": self.parts["flatness"], "eq_boost_db": self.parts["boost"],
        }


@dataclass(frozen=True)
class SearchResult:
    """What :func:`search_layouts` found.

    Attributes
    ----------
    ranked : tuple of ScoredLayout
        Best first.
    presets : tuple of ScoredLayout
        The four presets (:data:`roommodes.placement.PRESETS`) that fit the room.
    current : ScoredLayout or None
        The room file's own layout.
    band_hz : (float, float)
    weights : dict
    space : SearchSpace
    step_m : float
        Coarse grid step used.
    n_candidates : int
        Layouts scored in the coarse pass.
    n_layout_evaluations : int
        Every layout evaluated, perturbed copies for the robustness part included.
    n_pair_evaluations : int
        (source position, listening point) pairs evaluated, each at every frequency.
    n_frequencies : int
    method : str
        The solver that scored ``ranked``, ``presets`` and ``current``.
        Frequencies of the search grid.
    """

    ranked: tuple
    presets: tuple
    current: ScoredLayout | None
    band_hz: tuple
    weights: dict
    space: SearchSpace
    step_m: float
    n_candidates: int
    n_layout_evaluations: int
    n_pair_evaluations: int
    n_frequencies: int
    method: str = "modal"


# ------------------------------------------------------------------------------ layouts <-> vectors
def _pair_speakers(room):
    # the stereo pair is made of mains; subs are left to the subwoofer search
    speakers = () if room.layout is None else (room.layout.mains or room.layout.speakers)
    if len(speakers) >= 2:
        return tuple(speakers[:2])
    if len(speakers) == 1:
        s = speakers[0]
        return (replace(s, name="left"), replace(s, name="right"))
    return (Speaker("left", (0.0, 0.0, 0.0)), Speaker("right", (0.0, 0.0, 0.0)))


def _vec(layout):
    return np.concatenate([np.asarray(layout.speakers[0].position_m, float),
                           np.asarray(layout.speakers[1].position_m, float), np.asarray(layout.seat_m, float)])


def _layout(vec, speakers, name):
    v = [round(float(x), 9) for x in vec]
    return Layout((speakers[0].moved(v[0:3]), speakers[1].moved(v[3:6])), tuple(v[6:9]), name)


def _grid(lo, hi, step):
    n = max(1, int(round((hi - lo) / step))) + 1 if hi > lo else 1
    return np.linspace(lo, hi, n)


class _Constraints:
    """Vectorised checks of the [search] constraints on layout 9-vectors."""

    def __init__(self, room, space):
        self.room, self.space = room, space
        self.size = np.asarray(room.size_m, dtype=float)

    def height_range(self, side):
        """Woofer heights of speaker ``side`` (0 left, 1 right): speaker_height_m and the
        tweeter (or acoustic centre) within ear_height_tolerance_m of the ear."""
        sp = self.space
        c = sp.seat_height_m - sp.cabinets[side].centre_above_woofer_m
        return max(sp.speaker_height_m[0], c - sp.ear_height_tolerance_m), \
            min(sp.speaker_height_m[1], c + sp.ear_height_tolerance_m)

    def speaker_ok(self, p, side):
        """Region, ear-height and keep-out test of woofer positions (..., 3); side 0 left, 1 right."""
        sp, ly = self.space, self.size[1]
        y_wall = p[..., 1] if side == 0 else ly - p[..., 1]
        zlo, zhi = self.height_range(side)
        ok = ((p[..., 0] >= sp.speaker_front_m[0] - 1e-9) & (p[..., 0] <= sp.speaker_front_m[1] + 1e-9)
              & (y_wall >= sp.speaker_side_m[0] - 1e-9) & (y_wall <= sp.speaker_side_m[1] + 1e-9)
              & (p[..., 2] >= zlo - 1e-9) & (p[..., 2] <= zhi + 1e-9))
        return ok & ~self.in_keep_out(p)

    def in_keep_out(self, p):
        bad = np.zeros(p.shape[:-1], dtype=bool)
        for box in self.space.keep_out:
            bad |= box.contains(p)
        return bad

    def seat_ok(self, p):
        sp, ly = self.space, self.size[1]
        if sp.seat_fixed_m is not None:
            return np.all(np.abs(p - np.asarray(sp.seat_fixed_m)) < 1e-6, axis=-1)
        ok = (p[..., 0] >= sp.seat_front_m[0] - 1e-9) & (p[..., 0] <= sp.seat_front_m[1] + 1e-9)
        if sp.seat_on_centre_line:
            ok &= np.abs(p[..., 1] - ly / 2) < 1e-6
        else:
            ok &= (p[..., 1] >= sp.seat_side_m - 1e-9) & (p[..., 1] <= ly - sp.seat_side_m + 1e-9)
        ok &= np.abs(p[..., 2] - sp.seat_height_m) < 1e-6
        return ok & ~self.in_keep_out(p)

    def cabinet_ok(self, p, seat, side):
        """The box of speaker ``side`` at woofer ``p`` facing ``seat``: its back clears the
        front wall by rear_clearance_m, it stays inside the room and out of the keep-out boxes."""
        sp = self.space
        c = cabinet_corners(p, sp.cabinets[side], seat, sp.toe_in)  # (..., 8, 3)
        # corner by corner: a reduction over the short middle axis is many times slower
        lo, hi = c[..., 0, :].copy(), c[..., 0, :].copy()
        for k in range(1, c.shape[-2]):
            np.minimum(lo, c[..., k, :], out=lo)
            np.maximum(hi, c[..., k, :], out=hi)
        ok = (lo[..., 0] >= sp.rear_clearance_m - 1e-9) & np.all(lo >= -1e-9, axis=-1) \
            & np.all(hi <= self.size + 1e-9, axis=-1)
        for box in sp.keep_out:
            ok &= ~box.overlaps(lo, hi)
        return ok, lo, hi

    def pair_ok(self, left, right, seat):
        """Spacing, listening-triangle, symmetry and cabinet tests of arrays of positions (..., 3)."""
        sp = self.space
        spacing = np.linalg.norm(left - right, axis=-1)
        ok = (spacing >= sp.spacing_m[0] - 1e-9) & (spacing <= sp.spacing_m[1] + 1e-9)
        dl = np.linalg.norm(left - seat, axis=-1)
        dr = np.linalg.norm(right - seat, axis=-1)
        if sp.triangle:
            tol = sp.triangle_tolerance * spacing + 1e-9
            ok &= (np.abs(dl - spacing) <= tol) & (np.abs(dr - spacing) <= tol)
        else:
            ok &= (dl >= 0.5) & (dr >= 0.5)
        ok &= (seat[..., 0] > left[..., 0]) & (seat[..., 0] > right[..., 0])
        if sp.symmetric:  # mirror images about the seat's axis
            ok &= (np.abs(left[..., 0] - right[..., 0]) < 1e-6) & (np.abs(left[..., 2] - right[..., 2]) < 1e-6) & (
                np.abs(left[..., 1] + right[..., 1] - 2 * seat[..., 1]) < 1e-6)
        okl, lol, hil = self.cabinet_ok(left, seat, 0)
        okr, lor, hir = self.cabinet_ok(right, seat, 1)
        apart = np.any((hil < lor) | (hir < lol), axis=-1)
        return ok & okl & okr & apart

    def valid(self, vecs):
        v = np.atleast_2d(vecs)
        left, right, seat = v[:, 0:3], v[:, 3:6], v[:, 6:9]
        return (self.speaker_ok(left, 0) & self.speaker_ok(right, 1) & self.seat_ok(seat)
                & self.pair_ok(left, right, seat) & (left[:, 1] < right[:, 1]))


# ------------------------------------------------------------------------------ coarse pass
def _seat_grid(space, size, step):
    if space.seat_fixed_m is not None:
        return np.array([space.seat_fixed_m], dtype=float)
    sx = _grid(*space.seat_front_m, step)
    if space.seat_on_centre_line:
        sy = np.array([size[1] / 2])
    else:
        sy = _grid(space.seat_side_m, size[1] - space.seat_side_m, step)
    xx, yy = np.meshgrid(sx, sy, indexing="ij")
    return np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, space.seat_height_m)], axis=1)


def _z_grid(cons, step):
    lo = max(cons.height_range(0)[0], cons.height_range(1)[0])
    hi = min(cons.height_range(0)[1], cons.height_range(1)[1])
    if hi < lo:
        lo, hi = cons.height_range(0)
    return _grid(lo, hi, step) if hi >= lo else np.zeros(0)


def _speaker_grid(cons, step, side):
    """Woofer positions of one side for a free (not mirrored) pair."""
    space, size = cons.space, cons.size
    x = _grid(*space.speaker_front_m, step)
    lo, hi = space.speaker_side_m
    hi = min(hi, size[1] / 2)
    if hi < lo:
        return np.zeros((0, 3))
    w = _grid(lo, hi, step)
    y = w if side == 0 else size[1] - w
    zlo, zhi = cons.height_range(side)
    if zhi < zlo:
        return np.zeros((0, 3))
    xx, yy, zz = np.meshgrid(x, y, _grid(zlo, zhi, step), indexing="ij")
    return np.stack([xx.ravel(), yy.ravel(), zz.ravel()], axis=1)


def _pair_grid(cons, step, seat):
    """Left woofer positions of a pair mirrored about the seat's axis (the right is the mirror)."""
    space = cons.space
    x = _grid(*space.speaker_front_m, step)
    half = _grid(space.spacing_m[0] / 2, space.spacing_m[1] / 2, step)
    z = _z_grid(cons, step)
    xx, hh, zz = np.meshgrid(x, half, z, indexing="ij")
    return np.stack([xx.ravel(), seat[1] - hh.ravel(), zz.ravel()], axis=1)


def _mirror(p, y_axis):
    q = np.array(p, dtype=float, copy=True)
    q[..., 1] = 2 * y_axis - q[..., 1]
    return q


def _coarse_plan(room, space, step, count_only=False):
    """Seat positions and, for each, the compatible left (and right) speaker positions.

    With ``count_only``, only the number of (speaker position, seat) pairs to evaluate.
    """
    plan, count = _counted_plan(room, space, step)
    return count if count_only else plan


def _counted_plan(room, space, step):
    """:func:`_coarse_plan` and the number of (speaker position, seat) pairs it holds."""
    cons = _Constraints(room, space)
    size = cons.size
    seats = _seat_grid(space, size, step)
    seats = seats[cons.seat_ok(seats)]
    if seats.size == 0:
        raise ValueError(f"{_where(room)} no seat position is allowed: seat_front_m {space.seat_front_m[0]:g}-"
                         f"{space.seat_front_m[1]:g} m, seat height {space.seat_height_m:g} m"
                         + (" (the keep-out boxes cover them)" if space.keep_out else ""))
    if _z_grid(cons, step).size == 0:
        raise ValueError(f"{_where(room)} ear_height_tolerance_m: the two speakers' boxes put their tweeters at "
                         "different heights and no woofer height suits both; widen ear_height_tolerance_m")
    free_l = free_r = None
    if not space.symmetric:
        free_l = _speaker_grid(cons, step, 0)
        free_r = _speaker_grid(cons, step, 1)
        n_region = free_l.shape[0]
        free_l, free_r = free_l[cons.speaker_ok(free_l, 0)], free_r[cons.speaker_ok(free_r, 1)]
    plan, count, n_region, n_ok = [], 0, 0, 0
    if space.symmetric:
        # every seat's candidates checked in one pass (the checks are row by row)
        lefts = [_pair_grid(cons, step, seat) for seat in seats]
        sizes = np.array([g.shape[0] for g in lefts])
        left_all = np.concatenate(lefts)
        seat_all = np.repeat(seats, sizes, axis=0)
        right_all = _mirror(left_all, seat_all[:, 1])
        keep_all = cons.speaker_ok(left_all, 0) & cons.speaker_ok(right_all, 1)
        ok_all = np.zeros(keep_all.shape, dtype=bool)
        ok_all[keep_all] = cons.pair_ok(left_all[keep_all], right_all[keep_all], seat_all[keep_all])
        n_region = int(sizes.sum())
        n_ok = int(keep_all.sum())
        bounds = np.r_[0, np.cumsum(sizes)]
    for i_seat, seat in enumerate(seats):
        if space.symmetric:
            rows = slice(bounds[i_seat], bounds[i_seat + 1])
            ok = ok_all[rows]
            if ok.any():
                per = 1 if abs(seat[1] - size[1] / 2) < 1e-9 else 2
                count += per * int(ok.sum())
                plan.append((seat, left_all[rows][ok], right_all[rows][ok], None))
        else:
            n_ok += free_l.shape[0]
            li = np.flatnonzero(_distance_possible(free_l, seat, space))
            ri = np.flatnonzero(_distance_possible(free_r, seat, space))
            if li.size and ri.size:
                mask = cons.pair_ok(free_l[li][:, None, :], free_r[ri][None, :, :], seat[None, None, :])
                if mask.any():
                    keep_l, keep_r = mask.any(axis=1), mask.any(axis=0)
                    count += int(keep_l.sum() + keep_r.sum())
                    plan.append((seat, free_l[li][keep_l], free_r[ri][keep_r], mask[np.ix_(keep_l, keep_r)]))
    if n_ok == 0:
        if space.keep_out and n_region:
            names = ", ".join(b.name for b in space.keep_out)
            raise ValueError(f"{_where(room)} the keep-out boxes ({names}) cover every allowed speaker position "
                             f"({n_region} grid positions); shrink or move them, or widen the speaker ranges")
        raise ValueError(f"{_where(room)} no speaker position fits: spacing_m {space.spacing_m[0]:g}-"
                         f"{space.spacing_m[1]:g} m, speaker_side_m {space.speaker_side_m[0]:g}-"
                         f"{space.speaker_side_m[1]:g} m and a room {size[1]:g} m wide leave no place for the pair; "
                         "narrow the spacing or the side distances")
    if not plan:
        what = (f"the listening triangle (speaker-seat distances within {space.triangle_tolerance:.0%} of the "
                f"spacing {space.spacing_m[0]:g}-{space.spacing_m[1]:g} m)" if space.triangle
                else f"the spacing range {space.spacing_m[0]:g}-{space.spacing_m[1]:g} m")
        raise ValueError(f"{_where(room)} no layout satisfies every constraint: with the woofers "
                         f"{space.speaker_front_m[0]:g}-{space.speaker_front_m[1]:g} m from the front wall, each box "
                         f"{space.rear_clearance_m * 100:g} cm or more off it and the seat "
                         f"{space.seat_front_m[0]:g}-{space.seat_front_m[1]:g} m from it, {what} cannot be "
                         "met; widen the ranges")
    return plan, count


def _distance_possible(points, seat, space):
    d = np.linalg.norm(points - seat, axis=-1)
    if space.triangle:
        lo = space.spacing_m[0] * (1 - space.triangle_tolerance)
        hi = space.spacing_m[1] * (1 + space.triangle_tolerance)
        return (d >= lo - 1e-9) & (d <= hi + 1e-9) & (points[:, 0] < seat[0])
    return (d >= 0.5) & (points[:, 0] < seat[0])


def _choose_step(room, space, flop_per_pair):
    """The coarse step (the room file's, or the finest of :data:`COARSE_STEPS_M` whose pass
    fits :data:`COARSE_BUDGET_FLOP`) and its plan."""
    if space.step_m is not None:
        return space.step_m, _coarse_plan(room, space, space.step_m)
    for step in COARSE_STEPS_M:  # the plan of the step chosen is built once
        plan, count = _counted_plan(room, space, step)
        if step == COARSE_STEPS_M[-1] or count * flop_per_pair <= COARSE_BUDGET_FLOP:
            return step, plan


def _coarse_pass(scorer, plan, keep_per_seat, progress, distinct_m=0.0):
    """Score every candidate of the plan by the first four parts; keep the best per seat."""
    vecs, s4s, n_cand = [], [], 0
    mirror = scorer.mirror_rows()
    # the speaker positions repeat from seat to seat: they lie on few values of each axis,
    # and the modal sum is taken by sum factorisation (Scorer.plane_transfer) with the
    # axis of most values summed last and one table over the other two for every seat
    # whose listening points lie on the same planes
    speakers = np.concatenate([np.concatenate([l_, r_]) for _, l_, r_, _ in plan])
    last = _last_axis(speakers, plan[0][0][None, :] + scorer.offsets, lambda a: scorer.separable(a).table_bytes)
    others = [a for a in range(3) if a != last]
    src_values = tuple(np.unique(speakers[:, a]) for a in others)
    psi_grid = {}

    def shapes_of(points):
        # the fallback's mode shapes, computed once for the whole grid
        if not psi_grid:
            psi_grid["grid"] = np.unique(np.round(speakers, 9), axis=0)
            psi_grid["psi"] = scorer.shapes(psi_grid["grid"])
        rows = np.searchsorted(_row_keys(psi_grid["grid"]), _row_keys(np.round(points, 9)))
        return psi_grid["psi"][rows]

    for i, (seat, left, right, mask) in enumerate(plan):
        rec = seat[None, :] + scorer.offsets
        nl = left.shape[0]
        if mask is None and mirror is not None and abs(seat[1] - scorer.size[1] / 2) < 1e-9:
            # the model is symmetric about y = Ly/2 (the damping weighs the left and right
            # walls alike): the mirrored speaker's transfer to a point is the speaker's
            # transfer to the mirrored point, so the right channel costs nothing
            h = scorer.plane_transfer(left, rec, src_values, last, shapes_of)
            fl, fr = scorer.features(h, 0), scorer.features(h, 1, rows=mirror)
        else:
            both = np.concatenate([left, right])
            h = scorer.plane_transfer(both, rec, src_values, last, shapes_of)
            fl, fr = scorer.features(h[:nl], 0), scorer.features(h[nl:], 1)
        if mask is None:  # mirrored pairs: left i goes with right i
            li = ri = np.arange(nl)
            parts = scorer.parts(fl, fr)
        else:
            li, ri = np.nonzero(mask)
            sl, sr = fl["seat"], fr["seat"]
            fb = sl.shape[1]
            mm = ((sl**2).sum(1)[:, None] + (sr**2).sum(1)[None, :] - 2 * sl @ sr.T) / fb  # GEMM
            parts = scorer.parts({k: v[li] for k, v in fl.items()}, {k: v[ri] for k, v in fr.items()},
                                 mismatch_ms=mm[li, ri])
        s4 = scorer.base_score(parts)
        n_cand += s4.size
        v = np.concatenate([left[li], right[ri], np.repeat(seat[None], li.size, axis=0)], axis=1)
        # the best of this seat, and the best of those that differ from them (so that a
        # fixed seat still yields distinct layouts)
        order = np.argsort(s4)
        top = order[:keep_per_seat]
        if distinct_m > 0:
            head = order[:1000]
            spread = head[np.array(_distinct(v[head], s4[head], distinct_m, limit=keep_per_seat), dtype=int)]
            top = np.union1d(top, spread)
        v = v[top]
        vecs.append(v)
        s4s.append(s4[top])
        if progress:
            progress(i + 1, len(plan))
    scorer.layout_evaluations += n_cand
    return np.concatenate(vecs), np.concatenate(s4s), n_cand


def _last_axis(sources, receivers, table_bytes):
    """The axis to sum last in the coarse pass's sum factorisation: the one whose table over
    the other two axes (every source value, one seat's receivers) is smallest
    (``table_bytes(axis)``: that axis's :meth:`SeparableModalSum.table_bytes`)."""
    sizes = []
    for a in range(3):
        b, c = [i for i in range(3) if i != a]
        n = [np.unique(p[:, i]).size for p in (sources, receivers) for i in (b, c)]
        sizes.append(table_bytes(a)(n[0] * n[1], n[2] * n[3]))
    return int(np.argmin(sizes))


def _row_keys(points):
    """Sortable keys of rows (lexicographic, as np.unique(axis=0) orders them)."""
    p = np.ascontiguousarray(points, dtype=float)
    return np.rec.fromarrays(p.T, names="x,y,z")


def _directions(space):
    """Coordinate moves of the pattern search (rows of 9-vectors: left, right, seat xyz)."""
    dirs = []
    seat_free = space.seat_fixed_m is None
    if space.symmetric:
        dirs += [[1, 0, 0, 1, 0, 0, 0, 0, 0], [0, -1, 0, 0, 1, 0, 0, 0, 0], [0, 0, 1, 0, 0, 1, 0, 0, 0]]
        if seat_free and not space.seat_on_centre_line:  # the pair follows the seat's axis
            dirs.append([0, 1, 0, 0, 1, 0, 0, 1, 0])
    else:
        for i in range(6):
            e = [0] * 9
            e[i] = 1
            dirs.append(e)
        if seat_free and not space.seat_on_centre_line:
            dirs.append([0] * 7 + [1, 0])
    if seat_free:
        dirs.append([0] * 6 + [1, 0, 0])
        dirs.append(list(sweep_direction(space)))
    return np.array(dirs, dtype=float)


def sweep_direction(space):
    """The one-variable move of the figure's sweep and of the final line search (9-vector).

    With a free seat the whole layout moves along x (speakers and seat together, so the
    listening triangle is kept); with a fixed seat both speakers move along x.
    """
    d = np.zeros(9)
    d[[0, 3]] = 1.0
    if space.seat_fixed_m is None:
        d[6] = 1.0
    return d


def _refine(scorer, cons, seeds, seed_scores, step0, progress=None, max_iter=80, per_seed=2):
    """Pattern search from each seed: best of the +-step coordinate moves, halving the step
    when no move improves, until it falls below :data:`MIN_STEP_M`."""
    dirs = _directions(cons.space)
    cur = np.array(seeds, dtype=float)
    score = np.array(seed_scores, dtype=float)
    step = np.full(cur.shape[0], step0)
    for it in range(max_iter):
        active = np.flatnonzero(step >= MIN_STEP_M)
        if active.size == 0:
            break
        moves = np.concatenate([dirs, -dirs])
        nb = cur[active][:, None, :] + step[active][:, None, None] * moves[None]  # (a, m, 9)
        ok = cons.valid(nb.reshape(-1, 9)).reshape(nb.shape[:2])
        owner, which = np.nonzero(ok)
        improved = np.zeros(active.size, dtype=bool)
        if owner.size:
            cand = nb[owner, which]
            nominal = scorer.nominal(cand)
            s4 = nominal.s4
            # robustness only for the best few moves of each seed whose base score can
            # still win, and of those only where it can change the choice (best_full)
            for a in np.unique(owner):
                rows = np.flatnonzero(owner == a)
                rows = rows[s4[rows] < score[active[a]]]
                rows = rows[np.argsort(s4[rows])[:per_seed]]
                if rows.size == 0:
                    continue
                best, full = scorer.best_full(cand, nominal, rows, batch=1)
                if full < score[active[a]] - 1e-9:
                    cur[active[a]] = cand[best]
                    score[active[a]] = full
                    improved[a] = True
        step[active[~improved]] /= 2
        if progress:
            progress(it + 1, max_iter)
    return cur, score


def _line(cons, vec, direction, step_m=MIN_STEP_M, reach_m=3.0):
    """Layouts ``vec + k step direction`` (k integer, ``|k step| <= reach``) and which are allowed."""
    k = np.arange(-int(round(reach_m / step_m)), int(round(reach_m / step_m)) + 1)
    v = vec[None, :] + (k * step_m)[:, None] * direction[None, :]
    inside = np.all((v > WALL_MARGIN_M) & (v < np.tile(cons.size, 3) - WALL_MARGIN_M), axis=1)
    v, k = v[inside], k[inside]
    return v, k * step_m, cons.valid(v)


def _polish(scorer, cons, vecs, scores):
    """Line search along :func:`sweep_direction` at 1 cm over every allowed position: each
    layout moves to the best point of its own line, so the figure's sweep through it has
    its minimum there."""
    d = sweep_direction(cons.space)
    out, out_s = np.array(vecs, dtype=float), np.array(scores, dtype=float)
    for i in range(out.shape[0]):
        v, _, ok = _line(cons, out[i], d)
        if ok.sum() < 2:
            continue
        v = v[ok]
        # robustness is never negative: only points whose other parts already beat the
        # current score can beat it in full, and best_full stops once none can
        nominal = scorer.nominal(v)
        rows = np.flatnonzero(nominal.s4 < out_s[i] - 1e-12)
        if rows.size == 0:
            continue
        j, full = scorer.best_full(v, nominal, rows)
        if full < out_s[i] - 1e-12:
            out[i], out_s[i] = v[j], full
    return out, out_s


def layout_distance_m(a, b):
    """How far apart two layouts are: the largest move of one object (a speaker or the
    seat) between them, m. ``a``, ``b``: 9-vectors (..., 9)."""
    d = np.asarray(a, dtype=float) - np.asarray(b, dtype=float)
    return np.max(np.linalg.norm(d.reshape(*d.shape[:-1], 3, 3), axis=-1), axis=-1)


def _distinct(vecs, scores, min_m, limit=None, chunk=64):
    """Indices of layouts, best first, each at least ``min_m`` (:func:`layout_distance_m`)
    from every better one kept.

    Greedy in score order, ``chunk`` layouts at a time: one array pass drops those too close
    to a layout already kept, and the greedy choice among the rest uses their distances to
    one another (the same distances as pairwise :func:`layout_distance_m`, bit for bit).
    """
    v = np.asarray(vecs, dtype=float)
    order = np.argsort(scores, kind="stable")
    vo = v[order].reshape(order.size, 3, 3)
    threshold_m = min_m - 1e-9
    kept = []  # positions in ``order``
    for c0 in range(0, order.size, chunk):
        block = vo[c0:c0 + chunk]
        if kept:
            alive = np.flatnonzero(_object_distance_m(vo[kept][:, None], block[None]).min(axis=0) >= threshold_m)
        else:
            alive = np.arange(block.shape[0])
        if alive.size == 0:
            continue
        among = _object_distance_m(block[alive][:, None], block[alive][None]) >= threshold_m  # (a, a)
        chosen = []
        for j in range(alive.size):
            if not chosen or among[chosen, j].all():
                chosen.append(j)
                kept.append(c0 + int(alive[j]))
                if limit is not None and len(kept) >= limit:
                    return [int(order[p]) for p in kept]
    return [int(order[p]) for p in kept]


def _object_distance_m(a, b):
    """:func:`layout_distance_m` of layouts (..., 3, 3) broadcast against each other."""
    return np.sqrt(np.max(np.sum((a - b) ** 2, axis=-1), axis=-1))


def layout_geometry(layout):
    """Spacing, seat distance and listening angle of a stereo layout.

    Parameters
    ----------
    layout : Layout
        The first two speakers are the pair.

    Returns
    -------
    dict
        ``spacing_m`` (woofer to woofer), ``seat_distance_m`` (mean of the two
        woofer-to-ear distances), ``angle_deg`` (angle at the ear between the two speakers;
        60 degrees in an equilateral listening triangle, common practice).
    """
    p = np.asarray([s.position_m for s in layout.speakers[:2]], dtype=float)
    seat = np.asarray(layout.seat_m, dtype=float)
    a, b = p[0] - seat, p[1] - seat
    cosang = float(np.dot(a, b) / (np.linalg.norm(a) * np.linalg.norm(b)))
    return {"spacing_m": float(np.linalg.norm(p[0] - p[1])),
            "seat_distance_m": float(0.5 * (np.linalg.norm(a) + np.linalg.norm(b))),
            "angle_deg": float(np.degrees(np.arccos(np.clip(cosang, -1.0, 1.0))))}


def _scored(name, layout, score, parts, i, in_region=True):
    figs = {"flatness_raw": float(parts["flatness_raw"][i]), **layout_geometry(layout)}
    return ScoredLayout(name, layout, float(score), {k: float(parts[k][i]) for k in PARTS}, in_region, figs)


@small_products
def search_layouts(room, space=None, weights=None, band_hz=None, top=5, points_per_octave=DEFAULT_POINTS_PER_OCTAVE,
                   progress=None, n_seeds=6, refine=True, method=DEFAULT_METHOD):
    """Search the allowed region for the best stereo-pair-and-seat layouts.

    Parameters
    ----------
    room : Room
        Its own layout's first two speakers (low cut, response) are the pair placed; its
        ``[search]`` table gives the constraints unless ``space`` is given.
    space : SearchSpace, optional
        Default :func:`search_space(room) <search_space>`.
    weights : dict, optional
        Part name -> weight >= 0 (:data:`DEFAULT_WEIGHTS` for the parts not given).
    band_hz : (float, float), optional
        Default :func:`default_band`: max(20 Hz, the speakers' low cut) to 200 Hz.
    top : int
        How many layouts to return, 1..50.
    points_per_octave : int
        Frequency grid of the scores (the band plus 1/6 octave each side).
    progress : callable, optional
        ``progress(fraction)`` with a fraction 0..1 as the search advances.
    n_seeds : int
        Distinct starting points of the refinement.
    refine : bool
        Run the local refinement and the final line search (off: the coarse grid's best,
        scored in full).
    method : str
        The solver that scores the finalists, the presets and the file's layout
        (:data:`roommodes.solvers.METHODS`); the search itself scans with the batched modal
        sum.

    Returns
    -------
    SearchResult
        ``ranked`` holds up to ``top`` layouts, each at least ``space.distinct_m`` from
        every better one (:func:`layout_distance_m`); fewer when the region holds fewer.

    Raises
    ------
    ValueError
        For an empty or impossible region, keep-out boxes covering it, bad weights or band.

    Notes
    -----
    The coarse pass ranks by the first four parts; the best distinct layouts among them
    (``max(3 top, 12)``) get the robustness part, the best ``n_seeds`` start the pattern
    search, which scores every accepted move in full, and each refined layout finishes
    with a line search along :func:`sweep_direction` at 1 cm.
    """
    space = search_space(room) if space is None else space
    w = check_weights(weights)
    if not 1 <= int(top) <= 50:
        raise ValueError(f"top must be 1 to 50, got {top}")
    speakers = _pair_speakers(room)
    band = _check_band(default_band(speakers) if band_hz is None else band_hz)
    scorer = _Scorer(room, speakers, band, w, space.area_m, space.area_points, points_per_octave)
    cons = _Constraints(room, space)
    step, plan = _choose_step(room, space, scorer.flop_per_pair * scorer.offsets.shape[0])

    def report(lo, hi):
        return (lambda i, n: progress(lo + (hi - lo) * i / max(n, 1))) if progress else None

    vecs, s4, n_cand = _coarse_pass(scorer, plan, max(32, 4 * top), report(0.0, 0.6), space.distinct_m)
    pool = np.array(_distinct(vecs, s4, max(space.distinct_m, step), limit=max(3 * top, 12)))
    _, full_pool = scorer.score_vecs(vecs[pool])
    if progress:
        progress(0.65)
    seeds = np.argsort(full_pool)[:n_seeds]
    final_vecs, final_scores = vecs[pool], full_pool
    if refine and seeds.size:
        rv, rs = _refine(scorer, cons, vecs[pool[seeds]], full_pool[seeds], step / 2, report(0.65, 0.9))
        rv, rs = _polish(scorer, cons, rv, rs)
        final_vecs = np.concatenate([rv, final_vecs])
        final_scores = np.concatenate([rs, final_scores])
    keep = _distinct(final_vecs, final_scores, space.distinct_m, limit=top)
    final = scorer if method == "modal" else _ChainScorer(scorer, method)
    parts, scores = final.score_vecs(final_vecs[keep])
    order = np.argsort(scores, kind="stable")
    ranked = tuple(_scored(str(r + 1), _layout(final_vecs[keep[i]], speakers, f"search {r + 1}"), scores[i], parts, i)
                   for r, i in enumerate(order))
    presets, current = _reference_layouts(room, final, cons)
    if progress:
        progress(1.0)
    return SearchResult(ranked, presets, current, band, w, space, float(step), int(n_cand),
                        int(scorer.layout_evaluations), int(scorer.pair_evaluations), int(scorer.freq_hz.size),
                        method)


def _reference_layouts(room, scorer, cons):
    layouts = []
    for name in PRESETS:
        try:
            layouts.append(preset_layout(room, name))
        except ValueError:
            continue
    current = None
    if room.layout is not None and len(room.layout.speakers) >= 2:
        current = room.layout
    all_l = layouts + ([current] if current is not None else [])
    vecs = np.array([_vec(lay) for lay in all_l])
    parts, scores = scorer.score_vecs(vecs)
    inside = cons.valid(vecs)
    out = [_scored(lay.name, Layout(tuple(lay.speakers[:2]), lay.seat_m, lay.name), scores[i], parts, i,
                   bool(inside[i])) for i, lay in enumerate(all_l)]
    return tuple(out[:len(layouts)]), (out[-1] if current is not None else None)


def why_it_wins(best, other, weights, other_label="the file's layout"):
    """One sentence on why ``best`` ranks above ``other`` although its raw curve is spikier.

    Parameters
    ----------
    best, other : ScoredLayout
    weights : dict
        The score's weights.
    other_label : str
        How the sentence names ``other``.

    Returns
    -------
    str or None
        None when ``best``'s raw (before-EQ) flatness at the seat is not worse than
        ``other``'s, or ``best`` does not score better.
    """
    raw_b, raw_o = best.figures.get("flatness_raw"), other.figures.get("flatness_raw")
    if raw_b is None or raw_o is None or raw_b <= raw_o or best.score >= other.score:
        return None
    words = {"flatness": "after its EQ it is flatter at the seat", "mismatch": "the two channels agree better",
             "area": "it varies less over the listening area", "boost": "its EQ needs less boost",
             "robustness": "it holds up better when things land 5 cm off"}
    gains = sorted(((weights[k] * (other.parts[k] - best.parts[k]), k) for k in PARTS), reverse=True)
    reasons = [f"{words[k]} ({best.parts[k]:.2f} against {other.parts[k]:.2f} dB)" for g, k in gains if g > 0.05]
    if not reasons:
        return None
    text = reasons[0] if len(reasons) == 1 else ", ".join(reasons[:-1]) + " and " + reasons[-1]
    return (f"The raw curve of the best layout looks spikier at the seat than {other_label}'s (flatness "
            f"{raw_b:.2f} against {raw_o:.2f} dB before EQ), but it ranks higher because {text}.")


def close_call(best, other, weights, other_label="the file's layout"):
    """One sentence when ``best`` beats ``other`` by less than the score's own measure of
    placement error can tell apart, else None.

    The robustness part is the mean worsening of a layout's score when every object lands
    5 cm off; a lead smaller than the smaller of the two layouts' weighted robustness parts
    is within what a tape measure changes, so the model cannot say that moving helps.

    Parameters
    ----------
    best, other : ScoredLayout
    weights : dict
        The score's weights.
    other_label : str
        How the sentence names ``other``.

    Returns
    -------
    str or None
    """
    lead = other.score - best.score
    spread = weights["robustness"] * min(best.parts["robustness"], other.parts["robustness"])
    if lead < 0 or spread <= 0 or lead >= spread:
        return None
    return (f"The best layout beats {other_label} by only {lead:.2f} dB, less than landing 5 cm off changes "
            f"either score ({spread:.2f} dB): as far as the model can tell they are as good, so moving "
            f"from {other_label} buys nothing certain.")


@small_products
def score_layouts(room, layouts, weights=None, band_hz=None, area_m=(0.6, 0.6), area_points=(3, 3),
                  points_per_octave=DEFAULT_POINTS_PER_OCTAVE, robustness=True, method="modal", check_inside=True):
    """Score given layouts with the search's figure of merit (batched).

    Parameters
    ----------
    room : Room
        The room (size, surfaces, air).
    layouts : sequence of Layout
        Each with at least two speakers (the first two are scored, as left and right).
    weights, band_hz, points_per_octave
        As in :func:`search_layouts`; ``band_hz`` defaults from the first layout's speakers.
    area_m, area_points
        The listening area (see :class:`SearchSpace`).
    robustness : bool
        Compute the robustness part (else it is 0).
    method : str
        The solver (default the batched modal sum, as the search's scan; the search's
        finalists are scored with :data:`roommodes.solvers.DEFAULT_METHOD`).
    check_inside : bool
        Refuse listening-area points outside the room (else they are moved inside it).

    Returns
    -------
    list of ScoredLayout
        ``in_region`` is True (no constraints are checked here).
    """
    layouts = list(layouts)
    if not layouts:
        raise ValueError("no layouts to score")
    scorer = _scorer_for(room, layouts[0], weights, band_hz, area_m, area_points, points_per_octave)
    if method != "modal":
        scorer = _ChainScorer(scorer, method)
    vecs = np.array([_vec(lay) for lay in layouts])
    if check_inside:
        _check_inside(room, scorer, vecs)
    parts, scores = scorer.score_vecs(vecs, robustness=robustness)
    return [_scored(lay.name, lay, scores[i], parts, i) for i, lay in enumerate(layouts)]


def _scorer_for(room, layout, weights, band_hz, area_m, area_points, points_per_octave):
    """A scorer for the first two speakers of ``layout`` (band by default from them)."""
    speakers = tuple(layout.speakers[:2])
    if len(speakers) < 2:
        raise ValueError("a layout needs two speakers to be scored")
    band = _check_band(default_band(speakers) if band_hz is None else band_hz)
    return _Scorer(room, speakers, band, check_weights(weights), area_m, area_points, points_per_octave)


def _check_inside(room, scorer, vecs):
    pts = np.concatenate([vecs[:, :6].reshape(-1, 3), (vecs[:, None, 6:9] + scorer.offsets[None]).reshape(-1, 3)])
    bad = ~room.contains(pts)
    if bad.any():
        p = pts[np.argmax(bad)]
        raise ValueError(f"point ({p[0]:.2f}, {p[1]:.2f}, {p[2]:.2f}) m of a layout or its listening area lies "
                         f"outside the room {room.size_m}")


# ------------------------------------------------------------------------------ figures' data
@small_products
def seat_score_map(room, layout, weights=None, band_hz=None, area_m=(0.6, 0.6), area_points=(3, 3), step_m=0.1,
                   points_per_octave=DEFAULT_POINTS_PER_OCTAVE, min_distance_m=0.5):
    """The score (without robustness) as the seat moves over the floor, speakers fixed.

    Parameters
    ----------
    room : Room
        The room (size, surfaces, air).
    layout : Layout
        Its speakers stay; its seat height is used.
    weights, band_hz, area_m, area_points, points_per_octave
        As in :func:`score_layouts`.
    step_m : float
        Grid step, m (0.02..1).
    min_distance_m : float
        Seats closer than this to a speaker, or whose listening area would leave the room,
        are NaN.

    Returns
    -------
    x_m : ndarray (X,)
    y_m : ndarray (Y,)
    score : ndarray (X, Y)
    """
    if not 0.02 <= step_m <= 1.0:
        raise ValueError(f"step_m must be 0.02 to 1 m, got {step_m:g}")
    scorer = _scorer_for(room, layout, weights, band_hz, area_m, area_points, points_per_octave)
    lx, ly, _ = room.size_m
    x = np.arange(step_m / 2, lx, step_m)
    y = np.arange(step_m / 2, ly, step_m)
    xx, yy = np.meshgrid(x, y, indexing="ij")
    seats = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, layout.seat_m[2])], axis=1)
    src = np.array([s.position_m for s in layout.speakers[:2]], dtype=float)
    pts = seats[:, None, :] + scorer.offsets[None]
    ok = np.all(room.contains(pts.reshape(-1, 3), WALL_MARGIN_M).reshape(pts.shape[:2]), axis=1)
    ok &= np.min(np.linalg.norm(seats[:, None, :] - src[None], axis=-1), axis=1) >= min_distance_m
    score = np.full(seats.shape[0], np.nan)
    if ok.any():
        rec = pts[ok].reshape(-1, 3)
        uniq, inv = np.unique(np.round(rec, 9), axis=0, return_inverse=True)
        h = scorer.transfer_block(src, uniq)[:, inv.ravel()]  # (2, G*A, F)
        h = h.reshape(2, int(ok.sum()), scorer.offsets.shape[0], -1)
        score[ok] = scorer.base_score(scorer.parts(scorer.features(h[0], 0), scorer.features(h[1], 1)))
    return x, y, score.reshape(xx.shape)


@small_products
def front_distance_profile(room, layout, weights=None, band_hz=None, area_m=(0.6, 0.6), area_points=(3, 3),
                           distances_m=None, points_per_octave=DEFAULT_POINTS_PER_OCTAVE, space=None):
    """Score and parts as both speakers' distance from the front wall varies (rest fixed).

    Parameters
    ----------
    room : Room
        The room (size, surfaces, air).
    layout : Layout
        Its speakers' y and z and its seat stay.
    weights, band_hz, area_m, area_points, points_per_octave
        As in :func:`score_layouts`.
    distances_m : array_like, optional
        Distances tried, m; default 0.10 m to 0.6 m in front of the seat in 2 cm steps.
    space : SearchSpace, optional
        When given, ``allowed`` says which distances satisfy every constraint.

    Returns
    -------
    distance_m : ndarray (D,)
    score : ndarray (D,)
    parts : dict of ndarray (D,)
    allowed : ndarray of bool (D,) or None
    """
    scorer = _scorer_for(room, layout, weights, band_hz, area_m, area_points, points_per_octave)
    seat_x = layout.seat_m[0]
    if distances_m is None:
        distances_m = np.arange(0.1, max(0.12, seat_x - 0.6), 0.02)
    d = np.asarray(distances_m, dtype=float)
    v = np.repeat(_vec(layout)[None], d.size, axis=0)
    v[:, 0] = d
    v[:, 3] = d
    _check_inside(room, scorer, v)
    parts, scores = scorer.score_vecs(v)
    allowed = None if space is None else _Constraints(room, space).valid(v)
    return d, scores, parts, allowed


@small_products
def layout_sweep(room, layout, space, weights=None, band_hz=None, points_per_octave=DEFAULT_POINTS_PER_OCTAVE,
                 step_m=0.02, reach_m=1.5):
    """Score and parts along :func:`sweep_direction` through a layout, with the allowed stretch.

    With a free seat the whole layout moves along x (the listening triangle kept); with a
    fixed seat both speakers move along x. The points are ``layout + k step`` (k integer),
    so the layout itself is one of them; the search's final line search (1 cm) makes a
    ranked layout the lowest allowed point of its own line.

    Parameters
    ----------
    room : Room
    layout : Layout
    space : SearchSpace
        The constraints (``allowed``) and the listening area.
    weights, band_hz, points_per_octave
        As in :func:`search_layouts`.
    step_m, reach_m : float
        Step of the sweep and how far it reaches each way, m.

    Returns
    -------
    distance_m : ndarray (D,)
        The speakers' (woofers') distance from the front wall at each point, m.
    score : ndarray (D,)
    parts : dict of ndarray (D,)
    allowed : ndarray of bool (D,)
        Points that meet every constraint.
    """
    scorer = _scorer_for(room, layout, weights, band_hz, space.area_m, space.area_points, points_per_octave)
    cons = _Constraints(room, space)
    vec = _vec(layout)
    v, _, ok = _line(cons, vec, sweep_direction(space), step_m, reach_m)
    # points whose listening area would leave the room are not scored
    pts = v[:, None, 6:9] + scorer.offsets[None]
    inside = np.all(room.contains(pts.reshape(-1, 3), WALL_MARGIN_M).reshape(pts.shape[:2]), axis=1)
    inside &= np.all(room.contains(v[:, :6].reshape(-1, 3), WALL_MARGIN_M).reshape(-1, 2), axis=1)
    v, ok = v[inside], ok[inside]
    parts, scores = scorer.score_vecs(v)
    return v[:, 0].copy(), scores, parts, ok


def layout_curves(room, layout, space, band_hz=None, points_per_octave=DEFAULT_POINTS_PER_OCTAVE):
    """A layout's level at the seat before and after the EQ the search assumes.

    Returns
    -------
    freq_hz : ndarray (Fb,)
        The band's grid, Hz.
    before_db, correction_db, after_db : ndarray (2, Fb)
        Left and right at the seat, 1/6-octave smoothed, dB; the correction is
        :func:`eq_proxy_db` designed over the listening area of ``space``.
    """
    scorer = _scorer_for(room, layout, None, band_hz, space.area_m, space.area_points, points_per_octave)
    return scorer.curves(_vec(layout))
