"""Bass correction for each channel: from a level curve to EQ settings and headroom.

:func:`correct_curve` works on any level curve (a prediction or a measurement);
:func:`correct_prediction` predicts each channel of a layout at the seat and at the head
positions around it (about 15 cm away), adds the levels at nearby positions (seat and
speaker moved by a few centimetres) that tell a movable cancellation null from a broad
shortfall, and corrects every channel so that the seat and the head positions all gain.
The filter design itself is :mod:`roommodes.analysis.eq`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.response import level_db as _level_db
from ..dsp.response import log_frequencies, smooth_fractional_octave
from ..model.modes import room_modes
from ..model.room import SubSearch
from ..solvers import DEFAULT_METHOD
from . import eq
from .levels import speaker_levels
from .predict import Channel, Prediction, room_schroeder_frequency
from .uncertainty import ensemble_levels

__all__ = ["ChannelCorrection", "correct_curve", "correct_measured", "correct_prediction", "default_band",
           "head_positions", "NEIGHBOUR_STEP_M", "HEAD_OFFSET_M", "MAX_EQ_CHANNELS"]

#: How far the seat and each speaker are moved to judge whether a dip is a movable null (m).
NEIGHBOUR_STEP_M = 0.05

#: How far from the seat the head positions a correction must also improve lie (m).
HEAD_OFFSET_M = 0.15


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
        speaker's amplifier power, sensitivity and maximum SPL are known, or the level a
        full-scale input gives there when the measurement was calibrated (``clean.basis``).
    lowcut_hz, lowcut_order : float or None, int
    cautions : tuple of str
        Cautions about the design as a whole (e.g. a band reaching above the Schroeder
        frequency), to print beside it.
    ensemble_seat_db : ndarray (N, F) or None
        With a design held to drawn rooms (``ensemble_levels_db``), the seat's level in
        each of the N drawn rooms, smoothed as ``parametric.before_db`` is; ``None``
        otherwise. :meth:`seat_band_db` gives its 10-90 % band before and after the
        parametric filters.
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
    cautions: tuple = ()
    ensemble_seat_db: np.ndarray | None = None

    def seat_band_db(self, after=False, percentiles=(10.0, 90.0)):
        """The seat's level over the drawn rooms: percentiles per frequency, or ``None``.

        Parameters
        ----------
        after : bool
            Each drawn room's seat curve with the parametric correction added
            (``parametric.correction_db``, the filters' combined response in dB at the
            design's sample rate), instead of the curve before it.
        percentiles : (float, float)
            Default the 10th and 90th.

        Returns
        -------
        (lower_db, upper_db) : ndarray (F,) each, or None without drawn rooms.
        """
        if self.ensemble_seat_db is None:
            return None
        lv = np.asarray(self.ensemble_seat_db, dtype=float)
        if after:
            lv = lv + np.asarray(self.parametric.correction_db, dtype=float)[None, :]
        lo, hi = np.percentile(lv, percentiles, axis=0)
        return lo, hi

    def to_dict(self):
        """JSON-ready values: one entry of ``eq --json``'s ``channels`` (shared/ARCHITECTURE.md)."""
        d = {"name": self.name}
        d.update(self.parametric.to_dict())
        d["cautions"] = list(self.cautions)
        d["shelf"] = self.shelf.to_dict()
        d["graphic_third_octave"] = self.graphic_third.to_dict()
        d["graphic_octave"] = self.graphic_octave.to_dict()
        h = self.headroom
        d["headroom"] = {"max_boost_db": h.max_boost_db, "max_boost_freq_hz": h.max_boost_freq_hz,
                         "preattenuation_db": h.preattenuation_db, "power_factor": h.power_factor,
                         "excursion_factor": h.excursion_factor}
        if self.clean is not None:
            d["max_clean_spl"] = {"before_db": self.clean.before_db, "after_db": self.clean.after_db,
                                  "preattenuation_db": self.clean.preattenuation_db, "basis": self.clean.basis}
        return d


#: Most channels one command corrects in a run: each costs its own prediction at the seat,
#: the head positions and the moved positions, and a filter design (about 1.5 s on one core
#: for the demo room), so a 50-speaker file would run for over a minute. Sixteen covers the
#: largest home-cinema speaker counts; the command line asks for a choice beyond it.
MAX_EQ_CHANNELS = 16

def _smooth_db(f, level_db, fraction):
    return 10 * np.log10(smooth_fractional_octave(f, 10 ** (level_db / 10), fraction))


def default_band(lowcut_hz=None, top_hz=250.0, lowest_mode_hz=None):
    """Default correction band.

    From the higher of the speaker's own roll-off (its -3 dB point) and the room's lowest
    mode, at least 20 Hz, to ``top_hz`` (:func:`correct_prediction` passes the room's
    Schroeder frequency, above which a rectangular-box prediction is indicative only and
    EQ designed on it does not hold up in the room).
    """
    low = max([20.0] + [float(v) for v in (lowcut_hz, lowest_mode_hz) if v])
    return (low, float(top_hz))


def head_positions(seat_m, offset_m=HEAD_OFFSET_M):
    """Head positions around the seat: ``offset_m`` forward, back, left, right, up and down.

    Returns an (6, 3) array, m. Common practice: a listener's head moves by about a hand's
    width while listening, so a correction must hold there too.
    """
    d = np.vstack([np.eye(3), -np.eye(3)])[[0, 3, 1, 4, 2, 5]] * float(offset_m)
    return np.asarray(seat_m, dtype=float)[None, :] + d


def correct_curve(name, freq_hz, level_db, *, band_hz=None, target="flat", tilt_db_per_octave=1.0,
                  tilt_corner_hz=100.0, target_table=None, neighbour_levels_db=None, lowcut_hz=None,
                  lowcut_order=None, max_filters=6, max_boost_db=6.0, q_range=(0.5, 10.0),
                  speaker=None, sample_rate=48000, smoothing=12, position_levels_db=None,
                  seat_weight=1.0 / 3.0, no_harm_db=0.5, boost_q_max=2.0, modes=None,
                  schroeder_hz=None, lowest_mode_hz=None, max_cut_db=15.0, ensemble_levels_db=None,
                  full_scale_spl_db=None):
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
    position_levels_db : array_like (K, F), optional
        Levels at head positions around the seat (:func:`head_positions`): the design
        works on them together with the seat and must not lift any of them further above
        the target (see :func:`roommodes.analysis.eq.design_parametric`).
    seat_weight, no_harm_db, boost_q_max, modes :
        See :func:`roommodes.analysis.eq.design_parametric`.
    schroeder_hz, lowest_mode_hz : float, optional
        The room's Schroeder frequency and lowest mode: the default band runs from the
        speaker's roll-off (or the lowest mode) to the Schroeder frequency; a band that
        reaches above it earns a caution.
    max_cut_db : float
        Deepest cut of one parametric filter, dB (> 0).
    ensemble_levels_db : array_like (N, 1 + K, F), optional
        The levels at the seat and the K head positions in each of N rooms drawn from the
        room's uncertainty (:func:`roommodes.analysis.uncertainty.ensemble_levels`). The
        parametric design is then held to them: only peaks stable across them are cut,
        and each filter is sized to them (``ensemble_db`` of
        :func:`roommodes.analysis.eq.design_parametric`).
    full_scale_spl_db : float, optional
        ``level_db`` is a measurement in dBFS (an impulse response: dBFS at the microphone
        for a full-scale input) through a chain whose full scale is this SPL
        (:mod:`roommodes.measure.calibration`): the maximum level at the seat is then
        ``level_db + full_scale_spl_db`` before and after the correction
        (:func:`roommodes.analysis.eq.full_scale_level`), instead of the room file's
        amplifier and speaker figures. The design itself runs on ``level_db`` and does not
        depend on the calibration.

    Returns
    -------
    ChannelCorrection
    """
    f = np.asarray(freq_hz, dtype=float)
    lv = np.asarray(level_db, dtype=float)
    pos = None
    if position_levels_db is not None and len(position_levels_db):
        pos = np.atleast_2d(np.asarray(position_levels_db, dtype=float))
    if smoothing:
        lv = _smooth_db(f, lv, smoothing)
        if neighbour_levels_db is not None and len(neighbour_levels_db):
            neighbour_levels_db = _smooth_db(f, np.asarray(neighbour_levels_db, dtype=float), smoothing)
        if pos is not None:
            pos = _smooth_db(f, pos, smoothing)
    cautions = []
    top = 250.0 if schroeder_hz is None else float(schroeder_hz)
    # the default band ends at the Schroeder frequency, but never above the computed range
    # (a nearly rigid room's Schroeder frequency lies in the kHz)
    top = min(top, float(f[-1]))
    if band_hz is None:
        band = default_band(lowcut_hz, top, lowest_mode_hz)
        if band[1] <= band[0] * 1.1:
            band = (band[0], min(band[0] * 2.0, float(f[-1])))
            cautions.append(f"the speaker's roll-off lies near the Schroeder frequency ({top:.0f} Hz); the "
                            f"band was widened to {band[0]:.0f}-{band[1]:.0f} Hz, where the prediction is "
                            "indicative only")
    else:
        band = tuple(float(v) for v in band_hz)
        if schroeder_hz is not None and band[1] > schroeder_hz * 1.02:
            cautions.append(f"the band reaches {band[1]:.0f} Hz, above the room's Schroeder frequency "
                            f"({schroeder_hz:.0f} Hz): there the prediction is indicative only, and filters "
                            "designed on it may not hold up in the room; measure before using them")
    sw = float(seat_weight) if pos is not None else 1.0
    design = lv if pos is None else sw * lv + (1.0 - sw) * np.mean(pos, axis=0)
    ens = None
    if ensemble_levels_db is not None:
        ens = np.asarray(ensemble_levels_db, dtype=float)
        if smoothing:
            ens = _smooth_db(f, ens, smoothing)
        ens = ens[:, :1] if pos is None else ens  # the seat, then the head positions
    tg = eq.make_target(f, design, band, shape=target, db_per_octave=tilt_db_per_octave,
                        corner_hz=tilt_corner_hz, table=target_table)
    cls = eq.classify_regions(f, design, tg, band, neighbour_levels_db, stability_levels_db=pos)
    common = dict(classification=cls, lowcut_hz=lowcut_hz, lowcut_order=lowcut_order,
                  max_boost_db=max_boost_db, sample_rate=sample_rate, position_levels_db=pos,
                  seat_weight=sw, no_harm_db=no_harm_db)
    par = eq.design_parametric(f, lv, tg, band, max_filters=max_filters, q_range=q_range,
                               gain_range=(-float(max_cut_db), 6.0), boost_q_max=boost_q_max, modes=modes,
                               ensemble_db=ens, **common)
    shelf = eq.design_shelf(f, lv, tg, band, **common)
    g3 = eq.design_graphic(f, lv, tg, band, bands="third", **common)
    g1 = eq.design_graphic(f, lv, tg, band, bands="octave", **common)
    head = eq.headroom(par.filters, f, sample_rate)
    clean = None
    if full_scale_spl_db is not None:
        clean = eq.full_scale_level(f, lv + float(full_scale_spl_db), correction_db=par.correction_db,
                                    preattenuation_db=head.preattenuation_db)
    elif speaker is not None and None not in (speaker.amplifier_w, speaker.sensitivity_db, speaker.max_spl_db):
        clean = eq.max_clean_spl(f, lv, speaker.amplifier_w, speaker.sensitivity_db, speaker.max_spl_db,
                                 correction_db=par.correction_db, preattenuation_db=head.preattenuation_db)
    return ChannelCorrection(name, par, shelf, g3, g1, head, clean, lowcut_hz, lowcut_order,
                             tuple(cautions), None if ens is None else ens[:, 0].copy())


def _mode_list(room, fmax_hz):
    """The room's modes as (freq_hz, half-power bandwidth_hz, "(nx,ny,nz)")."""
    ms = room_modes(room, fmax_hz)
    return [(float(fm), float(bw), "({},{},{})".format(*(int(v) for v in idx)))
            for fm, bw, idx in zip(ms.freq_hz, ms.bandwidth_hz, ms.indices)]


def correct_prediction(room, layout=None, freq_hz=None, method=DEFAULT_METHOD, area_m=None, area_points=(3, 3),
                       head_offset_m=HEAD_OFFSET_M, uncertainty=None, **options):
    """Predict every channel at the seat and the head positions around it, and design its correction.

    Each channel's correction is designed against the seat and six head positions
    ``head_offset_m`` forward, back, left, right, up and down (:func:`head_positions`):
    the fit works on a mean of their curves and no filter may lift any of them further
    above the target than it already was, anywhere in the computed range. The levels at
    eight nearby positions (the seat, then the channel's speaker, moved by
    :data:`NEIGHBOUR_STEP_M` forward, back, left and right) go to the dip classification,
    so that a deep dip that moves with position is recognised as a null and not boosted.
    The default band runs from the speaker's roll-off (or the room's lowest mode) to the
    room's Schroeder frequency.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default: the room file's layout.
    freq_hz : array_like, optional
        Default 15-300 Hz at 48 points per octave.
    method : str
        The solver (:data:`roommodes.solvers.METHODS`).
    area_m : (float, float), optional
        Correct the power average over a listening area of this size (length, width, m)
        around the seat, on an ``area_points`` grid at ear height, instead of the seat
        and its head positions; the levels at the grid points then serve as the
        neighbours that tell nulls from broad dips and as the positions the correction
        must not harm (after Welti & Devantier 2006, J. Audio Eng. Soc. 54(5):347, who
        judge bass by its variation over seats).
    head_offset_m : float or None
        Distance of the head positions from the seat, m (default 0.15); ``None`` or 0
        designs for the seat alone.
    uncertainty : dict, optional
        ``{"n_samples": N, "seed": S}`` (either may be left out): also predict the seat and
        head positions in N rooms drawn from the room's ``[uncertainty]``
        (:func:`roommodes.analysis.uncertainty.ensemble_levels`, same solver) and hold
        each channel's parametric design to them (see :func:`correct_curve`). Not with
        ``area_m``.
    **options
        Passed to :func:`correct_curve` (target, band, limits).

    Returns
    -------
    list of ChannelCorrection, and the Prediction
    """
    layout = layout if layout is not None else room.layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; "
                         "add them or choose a layout (corner, wall, mid-room, desk)")
    f = log_frequencies(15.0, 300.0, 48) if freq_hz is None else np.asarray(freq_hz, dtype=float)
    speakers = tuple(layout.speakers)
    seat = np.asarray(layout.seat_m, dtype=float)
    schroeder = room_schroeder_frequency(room)
    modes = _mode_list(room, max(float(f[-1]), 20.0))
    room_info = dict(schroeder_hz=schroeder, lowest_mode_hz=modes[0][0] if modes else None, modes=modes)
    room_info.update(options)
    steps = np.array([(1, 0, 0), (-1, 0, 0), (0, 1, 0), (0, -1, 0)], dtype=float) * NEIGHBOUR_STEP_M
    heads = np.zeros((0, 3))
    if area_m is not None:
        from .search import area_offsets

        heads = seat + area_offsets(area_m, area_points)
        if not np.all(room.contains(heads, 0.02)):
            raise ValueError(f"the listening area {area_m[0]:g} x {area_m[1]:g} m around the seat reaches "
                             "outside the room; choose a smaller area")
    elif head_offset_m:
        heads = head_positions(seat, head_offset_m)
        heads = heads[room.contains(heads, 0.02)]
    near = seat + steps
    near = near[room.contains(near, 0.02)]
    pts = np.vstack([seat[None, :], heads, near])
    lv = speaker_levels(room, speakers, pts, f, method=method)
    moved = []
    for sp in speakers:
        for d in steps:
            q = np.add(sp.position_m, d)
            if room.contains([q], 0.02)[0]:
                moved.append((sp.name, sp.moved(q)))
    lv_moved = None
    if moved:
        lv_moved = speaker_levels(room, [m for _, m in moved], [seat], f, method=method).level_db[:, 0, :]
    nh = len(heads)
    ens = None
    if uncertainty is not None:
        if area_m is not None:
            raise ValueError("a design held to drawn rooms works on the seat and its head positions; "
                             "leave out the listening area")
        ens = ensemble_levels(room, f, layout, np.vstack([seat[None, :], heads]), method=method,
                              **{k: v for k, v in uncertainty.items() if k in ("n_samples", "seed")})
    channels = []
    out = []
    for i, sp in enumerate(speakers):
        levels = lv.level_db[i]
        h = lv.transfer[i, 0]
        channels.append(Channel(sp.name, tuple(sp.position_m), h, _level_db(h)))
        extra = [lv_moved[k] for k, (name, _) in enumerate(moved) if name == sp.name] if moved else []
        neighbours = np.array(list(levels[1 + nh:]) + extra) if (len(levels) > 1 + nh or extra) else None
        kw = dict(lowcut_hz=sp.lowcut_hz, lowcut_order=sp.lowcut_order if sp.lowcut_hz else None, speaker=sp)
        info = dict(room_info)
        if sp.role == "sub" and info.get("band_hz") is None:
            # a subwoofer plays only below its crossover: correct it there, not up to the
            # Schroeder frequency (the top of the crossover range the sub search may choose)
            top = min(schroeder, (room.subs_search or SubSearch()).crossover_hz[1])
            info["band_hz"] = default_band(sp.lowcut_hz, top, room_info["lowest_mode_hz"])
        if area_m is not None:
            mean = 10.0 * np.log10(np.maximum(np.mean(np.abs(lv.transfer[i, 1:1 + nh]) ** 2, axis=0), 1e-30))
            out.append(correct_curve(sp.name, f, mean, neighbour_levels_db=levels[1:1 + nh],
                                     position_levels_db=levels[1:1 + nh], seat_weight=1.0, **kw, **info))
        else:
            out.append(correct_curve(sp.name, f, levels[0], neighbour_levels_db=neighbours,
                                     position_levels_db=levels[1:1 + nh] if nh else None,
                                     ensemble_levels_db=None if ens is None else ens[:, i], **kw, **info))
    pred = Prediction(f, tuple(channels), tuple(layout.seat_m), layout.name, method, schroeder, f <= schroeder)
    return out, pred


def correct_measured(room, curves_by_channel, full_scale_spl_db=None, **options):
    """Corrections of measured curves: each channel's curves (microphone positions) averaged.

    Parameters
    ----------
    room : Room
        Its layout names the speakers (their roll-off and vented tuning are respected).
    curves_by_channel : dict
        Speaker name -> list of measured curves (:class:`roommodes.dsp.response.Response`,
        e.g. from :func:`roommodes.analysis.compare.load_measurement`).
    full_scale_spl_db : float, optional
        The SPL of digital full scale of the chain the (dBFS) curves were measured with
        (``--spl-ref``): each correction then carries the maximum level at the seat before
        and after it (see :func:`correct_curve`).
    **options
        Passed to :func:`correct_curve` (target, band, limits).

    Returns
    -------
    list of ChannelCorrection
        In the layout's speaker order. Several curves of a channel are power-averaged; their
        individual levels go to the dip classification (a dip that moves between microphone
        positions is a null) and to the no-harm check at every position. Without
        ``full_scale_spl_db`` there is no maximum-level figure: a relative measurement has no
        absolute reference.

    Notes
    -----
    Measurement first: where a channel was measured, its correction is designed on what the
    room did, not on the box model.
    """
    from .compare import average_measurements

    schroeder = room_schroeder_frequency(room)
    out = []
    for sp in room.layout.speakers:
        ms = list(curves_by_channel.get(sp.name, ()))
        if not ms:
            continue
        avg = average_measurements(ms)
        f = np.asarray(avg.freq_hz)
        positions = None
        if len(ms) > 1:
            positions = np.array([np.interp(np.log(f), np.log(m.freq_hz), m.level_db) for m in ms])
        out.append(correct_curve(sp.name, f, avg.level_db, neighbour_levels_db=positions,
                                 position_levels_db=positions, lowcut_hz=sp.lowcut_hz,
                                 lowcut_order=sp.lowcut_order if sp.lowcut_hz else None,
                                 schroeder_hz=schroeder, full_scale_spl_db=full_scale_spl_db, **options))
    return out
