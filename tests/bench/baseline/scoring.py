"""The placement search's scoring steps (``_Scorer.features``, the EQ proxy, ``_distinct``,
``_choose_step``) as they were before the scoring work: two smoothing GEMMs, a logarithm of
every area point's 1/3-octave level, a distance loop over every layout, and the coarse
plan of the chosen step built twice (once to count it). tests/bench/bench_scoring.py
swaps them in to time the whole search before and after in the same run. Not part of the
package."""

from __future__ import annotations

import numpy as np

from roommodes.analysis.search import (
    _TINY,
    COARSE_BUDGET_FLOP,
    COARSE_STEPS_M,
    EQ_MAX_BOOST_DB,
    EQ_MAX_CUT_DB,
    _coarse_plan,
    layout_distance_m,
)


def proxy_from_smoothed(level3_db, proj, points3_db=None):
    trend = level3_db - level3_db @ proj
    corr = trend - level3_db
    if points3_db is not None:
        short = trend[..., None, :] - points3_db
        corr = np.where(corr > 0, np.clip(np.min(short, axis=-2), 0.0, None),
                        0.5 * (corr + np.clip(np.max(short, axis=-2), None, 0.0)))
    return np.clip(corr, -EQ_MAX_CUT_DB, EQ_MAX_BOOST_DB)


def features(self, h, channel, correction_db=None, rows=None):
    if rows is not None:  # as the coarse pass did: the complex transfers reordered
        h = h[..., rows, :]
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


def choose_step(room, space, flop_per_pair):
    if space.step_m is not None:
        return space.step_m, _coarse_plan(room, space, space.step_m)
    for step in COARSE_STEPS_M:
        if step == COARSE_STEPS_M[-1] or _coarse_plan(room, space, step, count_only=True) * flop_per_pair \
                <= COARSE_BUDGET_FLOP:
            break
    return step, _coarse_plan(room, space, step)
