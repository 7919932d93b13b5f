"""Advice that respects the uncertainty: layouts scored over drawn rooms, and how solid each
peak and dip of a prediction is.

:func:`ensemble_scores` re-scores given layouts (the placement search's finalists) in rooms
drawn from the room file's ``[uncertainty]`` table (:func:`roommodes.analysis.uncertainty.draw_room`)
with the search's own figure of merit (:func:`roommodes.analysis.search.score_layouts`).
The draws are common random numbers: sample ``i`` is the same room (size, absorption,
temperature) for every layout, and every layout's speakers and seat are displaced by the same
drawn errors, so that differences between layouts are not drowned by differences between
draws. :func:`rank_by_median` orders the layouts by the median of their scores.

:func:`feature_spread` follows each peak and dip of a prediction
(:func:`roommodes.analysis.predict.response_features`) through the drawn rooms and says
whether it is solid or fragile.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.response import smooth_db
from ..model.room import Layout
from .predict import find_extrema
from .search import DEFAULT_POINTS_PER_OCTAVE, score_layouts
from .uncertainty import DEFAULT_SEED, _check_count, draw_room

__all__ = ["DEFAULT_PLACE_SAMPLES", "DEFAULT_ENSEMBLE_METHOD", "EnsembleRanking", "ensemble_scores", "rank_by_median", "FeatureSpread",
           "feature_spread", "feature_bandwidth_hz", "FEATURE_SMOOTHING", "MIN_FOUND_FRACTION"]

#: Drawn rooms ``place --uncertainty`` uses where none is chosen (about 5 s on the demo room;
#: each p10 and p90 then rests on about 20 rooms).
DEFAULT_PLACE_SAMPLES = 200
#: Solver that re-scores layouts in the drawn rooms where none is chosen: the search's batched
#: modal scorer, which scores every layout (and its robustness moves) of one drawn room in one
#: batch, about ten times cheaper than one exact solver call per layout and move; its score
#: differs from the exact solver's by a small fraction of the spread between drawn rooms
#: (docs/uncertainty.md gives the measurement).
DEFAULT_ENSEMBLE_METHOD = "modal"
#: 1/b-octave smoothing the features are found on (that of :func:`response_features`).
FEATURE_SMOOTHING = 12
#: A feature found in fewer of the drawn rooms than this is fragile.
MIN_FOUND_FRACTION = 0.9


def _pair(layout):
    """The scored part of a layout: its first two speakers and its main seat."""
    return Layout(tuple(layout.speakers[:2]), tuple(layout.seat_m), layout.name)


def ensemble_scores(room, layouts, *, n_samples=DEFAULT_PLACE_SAMPLES, seed=DEFAULT_SEED, uncertainty=None,
                    weights=None, band_hz=None, area_m=(0.6, 0.6), area_points=(3, 3),
                    points_per_octave=DEFAULT_POINTS_PER_OCTAVE, method=DEFAULT_ENSEMBLE_METHOD, robustness=True,
                    progress=None):
    """Score of every layout in every drawn room (common random numbers).

    Parameters
    ----------
    room : Room
        The nominal room; its ``uncertainty`` unless ``uncertainty`` is given.
    layouts : sequence of Layout
        Each with at least two speakers (the first two and the main seat are scored).
    n_samples, seed : int
        Drawn rooms and their seed; drawn room ``i`` has the size, absorption and temperature
        of the ``i``-th room :func:`~roommodes.analysis.uncertainty.sample_rooms` draws.
    uncertainty : Uncertainty, optional
    weights, band_hz, area_m, area_points, points_per_octave, robustness
        As in :func:`~roommodes.analysis.search.score_layouts`; ``band_hz`` defaults from the
        first layout's speakers.
    method : str
        The solver; default :data:`DEFAULT_ENSEMBLE_METHOD` (the batched modal scorer: all
        layouts of one drawn room in one batch). Any other runs one solver call per layout and
        robustness move through the one chain.
    progress : callable, optional
        ``progress(done, total)`` after each drawn room.

    Returns
    -------
    ndarray (N, K)
        Score (dB, lower is better) of layout ``k`` in drawn room ``i``.

    Notes
    -----
    Each layout is drawn from the same generator state, so the room's size, absorption and
    temperature, and the displacement of each speaker and of the seat, are the same for all
    layouts in one sample. Listening-area points that a drawn wall cuts off are moved inside
    it (as the search's scan does).
    """
    n = _check_count(n_samples)
    pairs = [_pair(lay) for lay in layouts]
    if not pairs:
        raise ValueError("no layouts to score")
    out = np.empty((n, len(pairs)))
    for i, child in enumerate(np.random.SeedSequence(int(seed)).spawn(n)):
        drawn = [draw_room(room.with_layout(p), np.random.default_rng(child), uncertainty)[0] for p in pairs]
        scored = score_layouts(drawn[0], [d.layout for d in drawn], weights=weights, band_hz=band_hz, area_m=area_m,
                               area_points=area_points, points_per_octave=points_per_octave, robustness=robustness,
                               method=method, check_inside=False)
        out[i] = [s.score for s in scored]
        if progress is not None:
            progress(i + 1, n)
    return out


@dataclass(frozen=True, eq=False)
class EnsembleRanking:
    """Layouts ordered by the median of their scores over the drawn rooms.

    Attributes
    ----------
    layouts : tuple
        The layouts (e.g. :class:`~roommodes.analysis.search.ScoredLayout`), best median first.
    order : ndarray of int (K,)
        Position of each of them in the input.
    scores : ndarray (N, K)
        Their scores in each drawn room, in the new order.
    median, p10, p90 : ndarray (K,)
        Percentiles of each layout's score, dB.
    """

    layouts: tuple
    order: np.ndarray
    scores: np.ndarray
    median: np.ndarray
    p10: np.ndarray
    p90: np.ndarray

    def spread(self, k):
        """JSON-ready ``score_median``, ``score_p10``, ``score_p90`` of the ``k``-th layout."""
        return {"score_median": float(self.median[k]), "score_p10": float(self.p10[k]),
                "score_p90": float(self.p90[k])}


def rank_by_median(layouts, scores):
    """Order ``layouts`` by the median of their columns of ``scores`` (N, K); ties keep the input order."""
    s = np.asarray(scores, dtype=float)
    if s.ndim != 2 or s.shape[1] != len(layouts):
        raise ValueError(f"scores must be (samples, {len(layouts)}), got shape {s.shape}")
    p10, p50, p90 = np.percentile(s, (10.0, 50.0, 90.0), axis=0)
    order = np.argsort(p50, kind="stable")
    return EnsembleRanking(tuple(layouts[k] for k in order), order, s[:, order], p50[order], p10[order], p90[order])


# ------------------------------------------------------------------------------ features
def feature_bandwidth_hz(freq_hz, smoothed_db, index, prominence_db, kind):
    """Width (Hz) of a peak or dip at half its prominence.

    The span around ``index`` over which the smoothed curve stays within half of
    ``prominence_db`` of its value there (above that level for a peak, below it for a dip),
    with the crossings interpolated between grid points; at least half the grid's local step.
    """
    sign = 1.0 if kind == "peak" else -1.0
    return _half_width(np.asarray(freq_hz, dtype=float), np.asarray(smoothed_db, dtype=float), int(index),
                       prominence_db, sign)


def _half_width(f, y, i, prominence_db, sign):
    level = y[i] - sign * 0.5 * prominence_db
    lo = i
    while lo > 0 and sign * (y[lo - 1] - level) > 0:
        lo -= 1
    hi = i
    while hi < y.size - 1 and sign * (y[hi + 1] - level) > 0:
        hi += 1

    def crossing(inside, outside):
        # where the curve crosses the half level between two grid points (linear in log f)
        if outside < 0 or outside >= y.size or y[inside] == y[outside]:
            return f[inside]
        t = (y[inside] - level) / (y[inside] - y[outside])
        return float(np.exp(np.log(f[inside]) + t * (np.log(f[outside]) - np.log(f[inside]))))

    width = crossing(hi, hi + 1) - crossing(lo, lo - 1)
    step = f[min(i + 1, f.size - 1)] - f[max(i - 1, 0)]
    return float(max(width, 0.5 * step))


@dataclass(frozen=True)
class FeatureSpread:
    """How one peak or dip moves over the drawn rooms.

    Attributes
    ----------
    channel : str
    feature : Feature
        The nominal peak or dip.
    bandwidth_hz : float
        Its width at half its prominence on the 1/12-octave smoothed curve.
    found_fraction : float
        Share of the drawn rooms in which a feature of the same kind lies within a third of
        an octave of it.
    freq_p10_hz, freq_p90_hz : float
        10th and 90th percentiles of its frequency over those rooms.
    level_p10_db, level_p90_db : float
        Same for its level (smoothed curve), dB.
    solid : bool
        Found in at least :data:`MIN_FOUND_FRACTION` of the rooms, its frequency spread
        (p90 - p10) smaller than its bandwidth, and its level spread smaller than half its
        prominence.
    """

    channel: str
    feature: object
    bandwidth_hz: float
    found_fraction: float
    freq_p10_hz: float
    freq_p90_hz: float
    level_p10_db: float
    level_p90_db: float
    solid: bool

    @property
    def freq_spread_hz(self):
        """p90 - p10 of the frequency, Hz."""
        return self.freq_p90_hz - self.freq_p10_hz

    @property
    def level_spread_db(self):
        """p90 - p10 of the level, dB."""
        return self.level_p90_db - self.level_p10_db

    def reason(self):
        """Why it is fragile (empty when solid)."""
        why = []
        if self.found_fraction < MIN_FOUND_FRACTION:
            why.append(f"absent in {1 - self.found_fraction:.0%} of the drawn rooms")
        if not self.freq_spread_hz < self.bandwidth_hz:
            why.append(f"its frequency moves over {self.freq_spread_hz:.1f} Hz, more than its "
                       f"{self.bandwidth_hz:.1f} Hz width")
        if not self.level_spread_db < 0.5 * self.feature.prominence_db:
            why.append(f"its level moves over {self.level_spread_db:.1f} dB, more than half its "
                       f"{self.feature.prominence_db:.1f} dB prominence")
        return "; ".join(why)

    def to_dict(self):
        """JSON-ready values."""
        return {"channel": self.channel, **self.feature.to_dict(), "bandwidth_hz": self.bandwidth_hz,
                "found_fraction": self.found_fraction, "freq_p10_hz": self.freq_p10_hz,
                "freq_p90_hz": self.freq_p90_hz, "level_p10_db": self.level_p10_db,
                "level_p90_db": self.level_p90_db, "solid": self.solid}


def feature_spread(freq_hz, level_db, features, samples_db, channel="", smoothing=FEATURE_SMOOTHING):
    """Follow each feature of one channel through the drawn rooms.

    Parameters
    ----------
    freq_hz : ndarray (F,)
    level_db : ndarray (F,)
        The nominal level (unsmoothed) the features were found on.
    features : sequence of Feature
        From :func:`~roommodes.analysis.predict.response_features` (same ``smoothing``).
    samples_db : ndarray (N, F)
        The channel's level in each drawn room (``Bands.samples_db[:, s]``).
    channel : str

    Returns
    -------
    list of FeatureSpread

    Notes
    -----
    In each drawn room, the curve is smoothed alike and its extremes of the same kind with at
    least a third of the feature's prominence (and 1 dB) are found (the topographic
    prominence of :func:`~roommodes.analysis.predict.find_extrema`); the one nearest in log
    frequency, within a third of an octave, is the feature in that room.
    """
    f = np.asarray(freq_hz, dtype=float)
    nominal = smooth_db(f, np.asarray(level_db, dtype=float), smoothing)
    smoothed = np.array([smooth_db(f, s, smoothing) for s in np.asarray(samples_db, dtype=float)])
    logf = np.log2(f)
    out = []
    for ft in features:
        sign = 1.0 if ft.kind == "peak" else -1.0
        i0 = int(np.argmin(np.abs(logf - np.log2(ft.freq_hz))))
        bw = feature_bandwidth_hz(f, nominal, i0, ft.prominence_db, ft.kind)
        thr = max(1.0, ft.prominence_db / 3.0)
        freqs, levels = [], []
        for y in smoothed:
            idx, _ = find_extrema(sign * y, thr)
            if idx.size == 0:
                continue
            d = np.abs(logf[idx] - logf[i0])
            j = int(np.argmin(d))
            if d[j] <= 1.0 / 3.0:
                freqs.append(f[idx[j]])
                levels.append(y[idx[j]])
        found = len(freqs) / max(len(smoothed), 1)
        if freqs:
            fp10, fp90 = np.percentile(freqs, (10.0, 90.0))
            lp10, lp90 = np.percentile(levels, (10.0, 90.0))
        else:
            fp10 = fp90 = lp10 = lp90 = float("nan")
        solid = bool(found >= MIN_FOUND_FRACTION and (fp90 - fp10) < bw and (lp90 - lp10) < 0.5 * ft.prominence_db)
        out.append(FeatureSpread(channel, ft, bw, float(found), float(fp10), float(fp90), float(lp10), float(lp90),
                                 solid))
    return out
