"""Bass correction for each channel: from a level curve to EQ settings and headroom.

:func:`correct_curve` works on any level curve (a prediction or a measurement);
:func:`correct_prediction` predicts each channel of a layout at the seat, adds the levels
at nearby positions (seat and speaker moved by a few centimetres) that tell a movable
cancellation null from a broad shortfall, and corrects every channel. The filter design
itself is :mod:`roommodes.eq`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.response import log_frequencies, smooth_fractional_octave
from ..model.room import Layout
from ..solvers import DEFAULT_METHOD
from . import eq
from .levels import speaker_levels
from .predict import predict

__all__ = ["ChannelCorrection", "correct_curve", "correct_prediction", "default_band",
           "NEIGHBOUR_STEP_M"]

#: How far the seat and each speaker are moved to judge whether a dip is a movable null (m).
NEIGHBOUR_STEP_M = 0.05


@dataclass(frozen=True)
class ChannelCorrection:
    """Every correction offered for one channel.

    Attributes
    ----------
    name : str
    parametric : EqDesign
    shelf : ShelfDesign
    graphic_third, graphic_octave : GraphicDesign
    headroom : Headroom
        Of the parametric design.
    clean : CleanLevel or None
        Maximum clean SPL at the seat before and after the parametric design, when the
        speaker's amplifier power, sensitivity and maximum SPL are known.
    lowcut_hz, lowcut_order : float or None, int
    """

    name: str
    parametric: object
    shelf: object
    graphic_third: object
    graphic_octave: object
    headroom: object
    clean: object
    lowcut_hz: float | None
    lowcut_order: int | None


def _smooth_db(f, level_db, fraction):
    return 10 * np.log10(smooth_fractional_octave(f, 10 ** (level_db / 10), fraction))


def default_band(lowcut_hz=None, top_hz=250.0):
    """Default correction band: max(speaker low cut, 20 Hz) to 250 Hz."""
    return (max(20.0, float(lowcut_hz or 0.0)), float(top_hz))


def correct_curve(name, freq_hz, level_db, *, band_hz=None, target="flat", tilt_db_per_octave=1.0,
                  tilt_corner_hz=100.0, target_table=None, neighbour_levels_db=None, lowcut_hz=None,
                  lowcut_order=None, max_filters=6, max_boost_db=6.0, q_range=(0.5, 10.0),
                  speaker=None, sample_rate=48000, smoothing=12):
    """Design the corrections for one level curve.

    Parameters
    ----------
    name : str
        Channel name.
    freq_hz, level_db : array_like (F,)
        The level before correction, dB, on a rising grid (Hz).
    band_hz : (float, float), optional
        Correction band; default :func:`default_band`.
    target : {"flat", "tilt", "table"}
        Target shape, aligned to the curve's power mean over the band
        (:func:`roommodes.eq.make_target`).
    tilt_db_per_octave, tilt_corner_hz : float
        Gentle low-frequency rise below the corner (common practice).
    target_table : (freq_hz, level_db), optional
        For ``target="table"``.
    neighbour_levels_db : array_like (K, F), optional
        Levels at nearby positions (see :func:`correct_prediction`).
    lowcut_hz, lowcut_order : optional
        The speaker's -3 dB point and alignment (4 = vented: no boost below it).
    max_filters, max_boost_db, q_range :
        Limits of the parametric design.
    smoothing : float or None
        The curve (and the neighbours) are power-smoothed over 1/``smoothing`` octave
        before the design (default 1/12: EQ corrects what the ear hears as the room's
        balance, not every fine ripple; common practice). ``None`` uses them as given.
    speaker : Speaker, optional
        When it has ``amplifier_w``, ``sensitivity_db`` and ``max_spl_db``, the clean
        level at the seat is computed.

    Returns
    -------
    ChannelCorrection
    """
    f = np.asarray(freq_hz, dtype=float)
    lv = np.asarray(level_db, dtype=float)
    if smoothing:
        lv = _smooth_db(f, lv, smoothing)
        if neighbour_levels_db is not None and len(neighbour_levels_db):
            neighbour_levels_db = _smooth_db(f, np.asarray(neighbour_levels_db, dtype=float), smoothing)
    band = default_band(lowcut_hz) if band_hz is None else tuple(float(v) for v in band_hz)
    tg = eq.make_target(f, lv, band, shape=target, db_per_octave=tilt_db_per_octave,
                        corner_hz=tilt_corner_hz, table=target_table)
    cls = eq.classify_regions(f, lv, tg, band, neighbour_levels_db)
    common = dict(classification=cls, lowcut_hz=lowcut_hz, lowcut_order=lowcut_order,
                  max_boost_db=max_boost_db, sample_rate=sample_rate)
    par = eq.design_parametric(f, lv, tg, band, max_filters=max_filters, q_range=q_range, **common)
    shelf = eq.design_shelf(f, lv, tg, band, **common)
    g3 = eq.design_graphic(f, lv, tg, band, bands="third", **common)
    g1 = eq.design_graphic(f, lv, tg, band, bands="octave", **common)
    head = eq.headroom(par.filters, f, sample_rate)
    clean = None
    if speaker is not None and None not in (speaker.amplifier_w, speaker.sensitivity_db, speaker.max_spl_db):
        clean = eq.max_clean_spl(f, lv, speaker.amplifier_w, speaker.sensitivity_db, speaker.max_spl_db,
                                 correction_db=par.correction_db, preattenuation_db=head.preattenuation_db)
    return ChannelCorrection(name, par, shelf, g3, g1, head, clean, lowcut_hz, lowcut_order)


def _neighbour_layouts(layout, index, step_m):
    """The layout with the seat, then the speaker ``index``, moved by +-step along x and y."""
    out = []
    moves = [np.array(v) * step_m for v in ((1, 0, 0), (-1, 0, 0), (0, 1, 0), (0, -1, 0))]
    for d in moves:
        out.append(Layout(layout.speakers, tuple(np.add(layout.seat_m, d)), layout.name))
    for d in moves:
        sp = list(layout.speakers)
        sp[index] = sp[index].moved(np.add(sp[index].position_m, d))
        out.append(Layout(tuple(sp), layout.seat_m, layout.name))
    return out


def correct_prediction(room, layout=None, freq_hz=None, method=DEFAULT_METHOD, area_m=None, area_points=(3, 3),
                       **options):
    """Predict every channel at the seat and design its correction.

    The levels at eight nearby positions (the seat, then the channel's speaker, moved by
    :data:`NEIGHBOUR_STEP_M` forward, back, left and right) go to the dip classification,
    so that a deep dip that moves with position is recognised as a null and not boosted.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default: the room file's layout.
    freq_hz : array_like, optional
        Default 15-300 Hz at 48 points per octave.
    method : {"modal", "image"}
    area_m : (float, float), optional
        Correct the power average over a listening area of this size (length, width, m)
        around the seat, on an ``area_points`` grid at ear height, instead of the seat
        alone; the levels at the grid points then serve as the neighbours that tell nulls
        from broad dips. A correction for an area is less exact at the seat and more
        useful everywhere else (after Welti & Devantier 2006, J. Audio Eng. Soc.
        54(5):347, who judge bass by its variation over seats).
    **options
        Passed to :func:`correct_curve` (target, band, limits).

    Returns
    -------
    list of ChannelCorrection, and the Prediction
    """
    layout = layout if layout is not None else room.layout
    f = log_frequencies(15.0, 300.0, 48) if freq_hz is None else np.asarray(freq_hz, dtype=float)
    pred = predict(room, layout, f, method=method)
    out = []
    if area_m is not None:
        from .search import area_offsets

        pts = np.asarray(layout.seat_m) + area_offsets(area_m, area_points)
        if not np.all(room.contains(pts, 0.02)):
            raise ValueError(f"the listening area {area_m[0]:g} x {area_m[1]:g} m around the seat reaches "
                             "outside the room; choose a smaller area")
        lv = speaker_levels(room, layout.speakers, pts, f, method=method)
        for sp, levels, mean in zip(layout.speakers, lv.level_db, lv.power_mean_db()):
            out.append(correct_curve(sp.name, f, mean, neighbour_levels_db=levels, lowcut_hz=sp.lowcut_hz,
                                     lowcut_order=sp.lowcut_order if sp.lowcut_hz else None, speaker=sp,
                                     **options))
        return out, pred
    for i, (sp, ch) in enumerate(zip(layout.speakers, pred.channels)):
        neighbours = []
        for lay in _neighbour_layouts(layout, i, NEIGHBOUR_STEP_M):
            if not (room.contains([lay.seat_m], 0.02)[0] and room.contains([lay.speakers[i].position_m], 0.02)[0]):
                continue
            p = predict(room, Layout((lay.speakers[i],), lay.seat_m, lay.name), f, method=method)
            neighbours.append(p.channels[0].level_db)
        out.append(correct_curve(sp.name, f, ch.level_db, neighbour_levels_db=np.array(neighbours),
                                 lowcut_hz=sp.lowcut_hz, lowcut_order=sp.lowcut_order if sp.lowcut_hz else None,
                                 speaker=sp, **options))
    return out, pred
