"""The placement search's scoring steps (``_Scorer.features``, the EQ proxy, ``_distinct``)
as they were before the scoring work: two smoothing GEMMs, a logarithm of every area
point's 1/3-octave level, and a distance loop over every layout. tests/bench/bench_scoring.py
swaps them in to time the whole search before and after in the same run. Not part of the
package."""

from __future__ import annotations

import numpy as np

from roommodes.analysis.search import _TINY, EQ_MAX_BOOST_DB, EQ_MAX_CUT_DB, layout_distance_m


def proxy_from_smoothed(level3_db, proj, points3_db=None):
    trend = level3_db - level3_db @ proj
    corr = trend - level3_db
    if points3_db is not None:
        short = trend[..., None, :] - points3_db
        corr = np.where(corr > 0, np.clip(np.min(short, axis=-2), 0.0, None),
                        0.5 * (corr + np.clip(np.max(short, axis=-2), None, 0.0)))
    return np.clip(corr, -EQ_MAX_CUT_DB, EQ_MAX_BOOST_DB)


def features(self, h, channel, correction_db=None):
    power = (h.real**2 + h.imag**2) * self.speaker_power[channel]
    ls = 10 * np.log10(np.maximum(power @ self.smooth6, _TINY))
    seat = ls[..., self.seat_row, :]
    if correction_db is None:
        p3 = power @ self.smooth3
        mean3 = 10 * np.log10(np.maximum(p3.mean(axis=-2), _TINY))
        correction_db = proxy_from_smoothed(mean3, self.proj, 10 * np.log10(np.maximum(p3, _TINY)))
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


def distinct(vecs, scores, min_m, limit=None):
    v = np.asarray(vecs, dtype=float)
    kept = []
    for i in np.argsort(scores, kind="stable"):
        if not kept or np.min(layout_distance_m(v[kept], v[i])) >= min_m - 1e-9:
            kept.append(int(i))
            if limit is not None and len(kept) >= limit:
                break
    return kept
