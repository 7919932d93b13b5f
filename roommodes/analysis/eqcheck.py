"""Judging a correction in the room rather than in the model it was designed from.

A correction designed on a prediction is only as good as the prediction. These functions
apply a finished correction to the levels of an independent reference (another solver,
or the same room with its dimensions and absorption changed by amounts a tape measure
and a materials table can easily be off by) at the seat and the head positions around
it, and report what it does there:

* the rms deviation from the target before and after, with deep dips left out, per
  position (:func:`judge_levels`);
* the largest amount by which the correction lifts the curve further above the target
  than it already was, anywhere in the computed range (not only the design band).

The target at each position is the design's target shape aligned to that position's
own curve (mean in dB over the band): a listener sets the volume, so a level offset
between positions is not an error.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..dsp.response import smooth_fractional_octave
from . import eq
from .correction import head_positions
from .levels import speaker_levels

__all__ = ["PositionJudgement", "judge_levels", "judge_in_room", "perturbed_room"]


@dataclass(frozen=True)
class PositionJudgement:
    """What a correction does at one position.

    Attributes
    ----------
    rms_before_db, rms_after_db : float
        Root-mean-square deviation from the target over the band, uniform weight per
        octave, deep dips (narrow nulls by :func:`roommodes.analysis.eq.classify_regions`
        without neighbours) left out, dB.
    worst_raise_db : float
        ``max_f [(after - target)+ - (before - target)+]`` over the whole grid, dB: how
        much further above the target the correction lifts any part of the curve.
    worst_raise_freq_hz : float
        Where.
    """

    rms_before_db: float
    rms_after_db: float
    worst_raise_db: float
    worst_raise_freq_hz: float

    @property
    def reduction(self):
        """Fractional fall of the rms deviation (0.4 = 40 % lower)."""
        return 1.0 - self.rms_after_db / self.rms_before_db if self.rms_before_db > 0 else 0.0


def _smooth_db(f, level_db, fraction):
    return 10 * np.log10(smooth_fractional_octave(f, 10 ** (np.asarray(level_db) / 10), fraction))


def judge_levels(freq_hz, levels_db, correction_db, target_shape_db, band_hz, smoothing=12):
    """Judge a correction curve on levels at several positions.

    Parameters
    ----------
    freq_hz : array_like (F,)
    levels_db : array_like (P, F)
        Levels before correction (unsmoothed), dB.
    correction_db : array_like (F,)
        The combined filter curve, dB.
    target_shape_db : array_like (F,)
        The target's shape (any offset), dB; aligned to each position's own curve.
    band_hz : (float, float)
        Where the rms counts.
    smoothing : float or None
        Fractional-octave power smoothing of the levels first (default 1/12, as the design).

    Returns
    -------
    list of PositionJudgement
    """
    f = np.asarray(freq_hz, dtype=float)
    lv = np.atleast_2d(np.asarray(levels_db, dtype=float))
    if smoothing:
        lv = _smooth_db(f, lv, smoothing)
    corr = np.asarray(correction_db, dtype=float)
    shape = np.asarray(target_shape_db, dtype=float)
    ok = np.isfinite(shape)
    shape = np.where(ok, shape, np.interp(f, f[ok], shape[ok]))
    sel = (f >= band_hz[0] * (1 - 1e-9)) & (f <= band_hz[1] * (1 + 1e-9))
    w = np.zeros_like(f)
    w[sel] = eq._eqfit.log_weights(f[sel])
    out = []
    for before in lv:
        tg = eq.align_target(f, before, shape, band_hz)
        cls = eq.classify_regions(f, before, tg, band_hz)
        keep = sel & ~cls.mask("narrow null")
        after = before + corr
        wk = w * keep

        def rms(x, wk=wk):
            return float(np.sqrt(np.sum(wk * x**2) / np.sum(wk)))

        raise_db = np.maximum(after - tg, 0.0) - np.maximum(before - tg, 0.0)
        k = int(np.argmax(raise_db))
        out.append(PositionJudgement(rms(before - tg), rms(after - tg), float(raise_db[k]), float(f[k])))
    return out


def perturbed_room(room, size_factors=(1.01, 0.99, 1.01), absorption_factor=1.3):
    """The room with its dimensions scaled and every surface's absorption multiplied.

    Defaults: length +1 %, width -1 %, height +1 %, absorption x1.3 (kept below 0.95):
    what a tape measure and a materials table can easily be off by. Speakers and seat
    keep their coordinates (measured from the front-left floor corner).
    """
    size = tuple(float(s * k) for s, k in zip(room.size_m, size_factors))
    surfaces = tuple(replace(s, absorption=tuple(float(min(a * absorption_factor, 0.95)) for a in s.absorption))
                     for s in room.surfaces)
    return replace(room, size_m=size, surfaces=surfaces)


def judge_in_room(room, layout, corrections, freq_hz, *, method="modal", head_offset_m=0.15, smoothing=12,
                  **options):
    """Apply each channel's parametric correction to ``room`` (the reference) and judge it.

    Parameters
    ----------
    room : Room
        The reference room (e.g. :func:`perturbed_room` of the design room).
    layout : Layout
    corrections : sequence of ChannelCorrection
        From :func:`roommodes.analysis.correction.correct_prediction` on the design room.
    freq_hz : array_like (F,)
        The grid of the corrections.
    method : str
        The reference solver (:data:`roommodes.solvers.METHODS`).
    head_offset_m : float
        Head positions at this distance around the seat (:func:`head_positions`).

    Returns
    -------
    dict
        Channel name -> list of PositionJudgement, the seat first, then the head
        positions inside the room.
    """
    f = np.asarray(freq_hz, dtype=float)
    seat = np.asarray(layout.seat_m, dtype=float)
    heads = head_positions(seat, head_offset_m)
    pts = np.vstack([seat[None, :], heads[room.contains(heads, 0.02)]])
    lv = speaker_levels(room, layout.speakers, pts, f, method=method, **options)
    out = {}
    for sp, levels in zip(layout.speakers, lv.level_db):
        c = next(c for c in corrections if c.name == sp.name)
        p = c.parametric
        corr = eq.correction_db(p.filters, f, p.sample_rate)
        out[sp.name] = judge_levels(f, levels, corr, p.target_db, p.band_hz, smoothing)
    return out
