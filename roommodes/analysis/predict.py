"""Predicted low-frequency response of each loudspeaker at the seat.

:func:`predict` combines the room transfer (:func:`roommodes.transfer_function`) with
each speaker's own low-frequency response (:mod:`roommodes.speaker`), flags the
frequencies above the Schroeder frequency (where a rectangular-box model is indicative
only), and :func:`response_features` lists the main peaks and dips with the modes or
boundaries responsible.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.response import level_db, log_frequencies, smooth_db
from ..model.criteria import sabine_rt60, schroeder_frequency
from ..model.modes import mode_shapes, room_modes
from ..model.room import WALL_AXIS, WALL_FAR, WALLS, SystemSettings
from ..solvers import DEFAULT_METHOD
from .levels import speaker_levels
from .subs import mean_spatial_variance, mono_sum

__all__ = ["Channel", "Prediction", "predict", "room_schroeder_frequency", "response_features",
           "boundary_notches", "Feature", "usable_band", "band_figures", "system_band", "SeatsPrediction",
           "predict_seats"]

DEFAULT_RANGE_HZ = (15.0, 300.0)
DEFAULT_POINTS_PER_OCTAVE = 48


def usable_band(speakers, top_hz=200.0):
    """The usable band of a set of speakers: from max(20 Hz, their low cut) to ``top_hz``."""
    cuts = [s.lowcut_hz for s in speakers if s.lowcut_hz]
    return (max([20.0] + cuts), float(top_hz))


def system_band(speakers, top_hz=200.0):
    """The band of the mono sum of ``speakers``: from max(20 Hz, the lowest low cut among them)
    to ``top_hz`` (a sub carries the system below the mains' own low cut)."""
    cuts = [s.lowcut_hz for s in speakers if s.lowcut_hz]
    return (max([20.0] + ([min(cuts)] if cuts else [])), float(top_hz))


def band_figures(freq_hz, level_db, band_hz=(20.0, 200.0), smoothing=6):
    """Range, spread and standard deviation (dB) of the 1/``smoothing``-octave power-smoothed
    level inside ``band_hz``: the summary figures the commands print for a curve."""
    f = np.asarray(freq_hz, dtype=float)
    sel = (f >= band_hz[0]) & (f <= band_hz[1])
    seg = smooth_db(f, level_db, smoothing)[sel]
    return {"spread_db": float(seg.max() - seg.min()), "std_db": float(seg.std()),
            "max_db": float(seg.max()), "min_db": float(seg.min())}


@dataclass(frozen=True)
class Channel:
    """One speaker's predicted response at the seat."""

    name: str
    position_m: tuple
    transfer: np.ndarray
    level_db: np.ndarray


@dataclass(frozen=True)
class Prediction:
    """Predicted responses of every speaker of a layout at its seat.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    channels : tuple of Channel
    seat_m : tuple
    layout_name : str
    method : str
    schroeder_hz : float
        Above it, the prediction is indicative only.
    valid : ndarray of bool (F,)
        ``freq_hz <= schroeder_hz``.
    """

    freq_hz: np.ndarray
    channels: tuple
    seat_m: tuple
    layout_name: str
    method: str
    schroeder_hz: float
    valid: np.ndarray

    def to_dict(self):
        """The prediction as JSON-ready values (the keys of ``predict --json``)."""
        return {"method": self.method, "layout": self.layout_name, "seat_m": list(self.seat_m),
                "frequencies_hz": self.freq_hz, "schroeder_hz": self.schroeder_hz, "valid": self.valid,
                "channels": [{"name": c.name, "position_m": list(c.position_m), "level_db": c.level_db}
                             for c in self.channels]}


@dataclass(frozen=True, eq=False)
class SeatsPrediction:
    """Every speaker's level at every seat, and the system's mono bass sum at each seat.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    seats : tuple of Seat
        The main seat first.
    speakers : tuple of Speaker
        Mains first, then subs (the layout's order).
    transfer : ndarray, complex (S, P, F)
        Each speaker's transfer to each seat (room times the speaker's own roll-off).
    level_db : ndarray (S, P, F)
    system : ndarray, complex (P, F)
        The mono sum: the same signal to every speaker, with the settings below.
    system_db : ndarray (P, F)
    sub_settings : tuple of dict
        Each sub's ``name``, ``gain_db``, ``delay_ms``, ``polarity`` used in the sum.
    crossover_hz : float or None
        LR4 crossover of the sum (low-pass on the subs, high-pass on the mains); None: no
        crossover (mains and subs full range).
    band_hz : tuple
        :func:`system_band` of the speakers.
    seat_spread_db : float
        Square root of the seats' weighted mean spatial variance of the mono sum over
        ``band_hz``, dB (0 with one seat).
    method : str
    mains_delay_ms : float
        Delay of the mains in the sum, ms.
    """

    freq_hz: np.ndarray
    seats: tuple
    speakers: tuple
    transfer: np.ndarray
    level_db: np.ndarray
    system: np.ndarray
    system_db: np.ndarray
    sub_settings: tuple
    crossover_hz: float | None
    band_hz: tuple
    seat_spread_db: float
    method: str
    mains_delay_ms: float = 0.0


def _layout_and_grid(room, layout, freq_hz):
    """The layout to predict (default the room file's) and the frequency grid (default 15-300 Hz)."""
    layout = layout if layout is not None else room.layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; "
                         "add them or choose a layout (corner, wall, mid-room, desk)")
    f = log_frequencies(*DEFAULT_RANGE_HZ, DEFAULT_POINTS_PER_OCTAVE) if freq_hz is None else np.asarray(freq_hz, float)
    return layout, f


def predict_seats(room, layout=None, freq_hz=None, method=DEFAULT_METHOD, include_speaker=True, **options):
    """Each speaker's level at every seat, and the mono bass sum of the system at each seat.

    The sum takes the subs as the room file sets them: each sub's ``gain_db``, ``delay_ms``
    and ``polarity`` (0 dB, 0 ms, + when not given) and the ``[system]`` table's
    ``crossover_hz`` (Linkwitz-Riley 4th order: low-pass on the subs, the matching high-pass
    on the mains) and ``mains_delay_ms``. Without a crossover, mains and subs run full range,
    each with only its own roll-off. :func:`roommodes.analysis.subs.optimise_subs` finds
    better settings.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default: the room file's own layout.
    freq_hz : array_like, optional
        Default: 15-300 Hz, 48 points per octave.
    method : str
        The solver (:data:`roommodes.solvers.METHODS`).
    include_speaker : bool
        Apply each speaker's own low-frequency response.

    Returns
    -------
    SeatsPrediction
    """
    layout, f = _layout_and_grid(room, layout, freq_hz)
    seats = layout.all_seats
    seats_m = [s.position_m for s in seats]
    speakers = tuple(layout.mains) + tuple(layout.subs)
    h = speaker_levels(room, speakers, seats_m, f, method=method, include_speaker=include_speaker,
                       **options).transfer
    n_main = len(layout.mains)
    n_sub = len(speakers) - n_main
    subs = layout.subs
    settings = tuple({"name": s.name, "gain_db": s.gain_db, "delay_ms": s.delay_ms, "polarity": s.polarity}
                     for s in subs)
    system = room.system if (room.system is not None and n_sub) else SystemSettings()
    total = mono_sum(f, h[:n_main], h[n_main:], [s.gain_db for s in subs], [s.delay_ms for s in subs],
                     [s.polarity for s in subs], system.crossover_hz, system.mains_delay_ms)
    band = system_band(speakers)
    total_db = level_db(total)
    spread = float(np.sqrt(mean_spatial_variance(total_db, [s.weight for s in seats], f, band)))
    return SeatsPrediction(f, tuple(seats), speakers, h, level_db(h), total, total_db, settings,
                           system.crossover_hz, band, spread, method, system.mains_delay_ms)


def room_schroeder_frequency(room, band_hz=125.0):
    """Schroeder frequency (Hz) from the Sabine reverberation time at ``band_hz``.

    ``f_S = 2000 sqrt(T / V)`` (Schroeder 1996, J. Acoust. Soc. Am. 99(5):3240, eq. 1).
    """
    t = sabine_rt60(room.volume_m3, room.surface_areas_m2, room.absorption([band_hz])[:, 0],
                    speed_of_sound=room.speed_of_sound)
    return float(schroeder_frequency(float(np.atleast_1d(t)[0]), room.volume_m3))


def predict(room, layout=None, freq_hz=None, method=DEFAULT_METHOD, include_speaker=True, **options):
    """Predict each speaker's level at the seat.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default: the room file's own layout.
    freq_hz : array_like, optional
        Default: 15-300 Hz, 48 points per octave.
    method : str
        The solver (:data:`roommodes.solvers.METHODS`).
    include_speaker : bool
        Apply each speaker's own low-frequency response.

    Returns
    -------
    Prediction
    """
    layout, f = _layout_and_grid(room, layout, freq_hz)
    h = speaker_levels(room, layout.speakers, [layout.seat_m], f, method=method, include_speaker=include_speaker,
                       **options).transfer[:, 0, :]
    channels = [Channel(sp.name, tuple(sp.position_m), hs, level_db(hs)) for sp, hs in zip(layout.speakers, h)]
    fs = room_schroeder_frequency(room)
    return Prediction(f, tuple(channels), tuple(layout.seat_m), layout.name, method, fs, f <= fs)


def boundary_notches(room, position_m):
    """First boundary-interference notch ``c / (4 d)`` for each of the six surfaces.

    Returns a list of ``(wall, distance_m, notch_hz)`` sorted by distance. The rule is
    the quarter-wavelength cancellation of a source and its image in a rigid plane
    (common practice).
    """
    p = np.asarray(position_m, dtype=float)
    c = room.speed_of_sound
    out = []
    for w, axis, far in zip(WALLS, WALL_AXIS, WALL_FAR):
        d = room.size_m[axis] - p[axis] if far else p[axis]
        out.append((w, float(d), c / (4.0 * d)))
    return sorted(out, key=lambda t: t[1])


def find_extrema(values, min_prominence):
    """Local maxima of ``values`` with their topographic prominence, as (indices, prominences).

    The prominence of a peak is its height above the higher of the two lowest points
    between it and the nearest higher point on each side (or the end of the data); the
    definition scipy.signal.find_peaks uses, against which tests/test_predict.py checks
    this function. Written here so that predicting does not import scipy.signal.
    """
    y = np.asarray(values, dtype=float)
    n = y.size
    idx, prom = [], []
    i = 1
    while i < n - 1:
        if y[i] > y[i - 1]:
            j = i
            while j + 1 < n and y[j + 1] == y[i]:  # a plateau counts once, at its middle
                j += 1
            if j + 1 < n and y[j + 1] < y[i]:
                peak = (i + j) // 2
                left = i - 1
                left_min = y[i]
                while left >= 0 and y[left] <= y[i]:
                    left_min = min(left_min, y[left])
                    left -= 1
                right = j + 1
                right_min = y[i]
                while right < n and y[right] <= y[i]:
                    right_min = min(right_min, y[right])
                    right += 1
                p = y[i] - max(left_min, right_min)
                if p >= min_prominence:
                    idx.append(peak)
                    prom.append(p)
            i = j + 1
        else:
            i += 1
    return np.array(idx, dtype=int), np.array(prom, dtype=float)


@dataclass(frozen=True)
class Feature:
    """A peak or dip of a predicted curve and what causes it."""

    kind: str  # "peak" or "dip"
    freq_hz: float
    level_db: float
    prominence_db: float
    causes: tuple  # of short strings

    def to_dict(self):
        """JSON-ready values: kind, freq_hz, level_db, prominence_db, causes."""
        return {"kind": self.kind, "freq_hz": self.freq_hz, "level_db": self.level_db,
                "prominence_db": self.prominence_db, "causes": list(self.causes)}


def response_features(room, prediction, channel, max_features=8, smoothing=12, min_prominence_db=3.0):
    """Main peaks and dips of one channel, with the modes or boundary responsible.

    Peaks and dips are found on the 1/``smoothing``-octave power-smoothed curve inside
    the valid band (:func:`find_extrema` with a prominence threshold). A peak is
    attributed to the modes within their half-power bandwidth (or 3 %) of it, strongest
    coupling first (|psi(speaker) psi(seat)|); a dip additionally to the speaker's
    boundary notches ``c / 4d`` within 15 % and to modes with a node at the seat.
    """
    f = prediction.freq_hz
    ch = prediction.channels[channel] if isinstance(channel, int) else next(
        c for c in prediction.channels if c.name == channel)
    smooth = smooth_db(f, ch.level_db, smoothing)
    sel = prediction.valid
    fmax = float(f[sel].max()) if sel.any() else float(f.max())
    modes = room_modes(room, fmax * 1.1)
    psi_s = mode_shapes(modes.indices, room.size_m, [ch.position_m])[0]
    psi_r = mode_shapes(modes.indices, room.size_m, [prediction.seat_m])[0]
    coupling = np.abs(psi_s * psi_r)
    notches = boundary_notches(room, ch.position_m)
    feats = []
    for kind, sign in (("peak", 1.0), ("dip", -1.0)):
        idx, proms = find_extrema(sign * smooth, min_prominence_db)
        for i, prom in zip(idx, proms):
            if not sel[i]:
                continue
            fi = f[i]
            near = np.abs(modes.freq_hz - fi) <= np.maximum(modes.bandwidth_hz, 0.03 * fi)
            causes = []
            order = np.argsort(-coupling * near)
            for j in order[:3]:
                if not near[j]:
                    break
                n = tuple(int(v) for v in modes.indices[j])
                if kind == "peak" and coupling[j] > 0.1:
                    causes.append(f"{modes.kind[j]} mode {n} at {modes.freq_hz[j]:.1f} Hz")
                elif kind == "dip" and abs(psi_r[j]) < 0.3:
                    causes.append(f"seat near a node of mode {n} at {modes.freq_hz[j]:.1f} Hz")
            if kind == "dip":
                for w, d, fn in notches[:3]:
                    if abs(fn - fi) <= 0.15 * fi:
                        causes.append(f"{w}-surface cancellation (speaker {d:.2f} m away, c/4d = {fn:.0f} Hz)")
                if not causes:
                    causes.append("cancellation between modes of opposite phase")
            feats.append(Feature(kind, float(fi), float(ch.level_db[i]), float(prom), tuple(causes)))
    feats.sort(key=lambda t: -t.prominence_db)
    return sorted(feats[:max_features], key=lambda t: t.freq_hz)
