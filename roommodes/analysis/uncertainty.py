"""How sure a prediction is: a seeded Monte Carlo over what the room file does not know.

A room file is a tape-measure survey and a guess at the walls. Its ``[uncertainty]`` table
(:class:`roommodes.model.room.Uncertainty`) states standard deviations for the measured
positions, the room's dimensions, each surface's absorption and the air temperature.
:func:`sample_rooms` draws rooms from those distributions; :func:`ensemble_levels` computes
the level of every speaker at every point in each drawn room through the one chain
(:func:`roommodes.analysis.levels.speaker_levels`); :func:`predict_bands` reduces the
ensemble at the seat to the 10th, 50th and 90th percentiles per channel.

Distributions (all independent):

* each coordinate of each speaker, seat and extra point: normal, sd ``position_m``, kept at
  least :data:`~roommodes.model.room.WALL_MARGIN_M` inside the drawn room;
* each room dimension: normal, sd ``size_m``;
* each surface's absorption: all its band values times one log-normal factor of mean 1 and
  relative sd ``absorption_rel`` (``sigma_ln^2 = ln(1 + rel^2)``), kept below
  :data:`MAX_ABSORPTION`; a surface with a range of its own (its library material's or the
  room file's, :attr:`~roommodes.model.room.Surface.absorption_rel`) uses that instead;
* the air temperature: normal, sd ``temperature_c``.

Sample ``i`` comes from its own generator, spawned from ``seed`` (NumPy ``SeedSequence``), so
it is the same room whatever the number of samples and whichever process draws it.

The 10-90 % band of the ensemble is calibrated in the sense of percentile coverage: a room
drawn from the same distributions falls inside it about 80 % of the time
(tests/analysis/test_uncertainty.py measures it on random rooms).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..dsp.response import level_db, log_frequencies
from ..model.modes import mode_frequencies
from ..model.room import WALL_MARGIN_M, Seat, Uncertainty
from ..solvers import DEFAULT_METHOD
from .levels import speaker_levels
from .predict import DEFAULT_POINTS_PER_OCTAVE, DEFAULT_RANGE_HZ, predict_seats

__all__ = ["DEFAULT_SAMPLES", "DEFAULT_SEED", "SUBS_SAMPLES", "MAX_ABSORPTION", "PERCENTILES", "Bands", "draw_room",
           "sample_rooms", "ensemble_levels", "predict_bands", "lognormal_sigma", "SubsBands",
           "draw_subs_rooms", "subs_bands", "system_levels"]

#: Monte Carlo samples used where none is chosen. Chosen by measurement on the demo room with
#: the library's absorption ranges (20-200 Hz, 24 points per octave, seeds 1 and 2): each
#: percentile of two seeds agrees within 0.3 dB at 79-97 % of the frequencies with 200 samples,
#: 93-99 % with 400 and 97.5-100 % with 800 (the p10, below deep dips, converges last). 800 exact
#: solver calls of the demo room take about 8 s of one core (docs/uncertainty.md).
DEFAULT_SAMPLES = 800
#: Seed used where none is chosen (results are reproducible run to run).
DEFAULT_SEED = 20240915
#: Rooms drawn by default for the subwoofer system's bands (``subs --uncertainty``, the report's
#: subs figure): each costs one solver call holding the mains and every configuration's subs
#: (about 0.015 s of one core on a three-seat room), and 200 leave about 20 rooms beyond each of
#: the 10 % and 90 % points.
SUBS_SAMPLES = 200
#: Largest absorption coefficient a drawn surface is given (the coefficient stays below 1).
MAX_ABSORPTION = 0.99
#: The percentiles reported, %.
PERCENTILES = (10.0, 50.0, 90.0)
#: Most samples accepted (each costs one solver call).
MAX_SAMPLES = 5000


def lognormal_sigma(relative_sd):
    """Log-space sd of a log-normal factor whose relative sd is ``relative_sd``: ``sqrt(ln(1 + rel^2))``."""
    return float(np.sqrt(np.log1p(float(relative_sd) ** 2)))


def _check_count(n_samples):
    n = int(n_samples)
    if n != n_samples or not 2 <= n <= MAX_SAMPLES:
        raise ValueError(f"samples must be a whole number from 2 to {MAX_SAMPLES}, got {n_samples!r}")
    return n


def _clip_inside(points, size):
    return np.clip(points, WALL_MARGIN_M, np.asarray(size) - WALL_MARGIN_M)


def draw_room(room, rng, uncertainty=None, points_m=None):
    """One room drawn from ``room``'s uncertainty.

    Parameters
    ----------
    room : Room
        The nominal room, with or without a layout.
    rng : numpy.random.Generator
        Source of the draws (consumed in a fixed order: size, absorption, temperature,
        speakers, seats, points).
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.
    points_m : array_like (P, 3), optional
        Extra receiver positions, each drawn like a measured position.

    Returns
    -------
    (Room, ndarray (P, 3) or None)
        The drawn room (its layout moved) and the drawn extra points.
    """
    u = room.uncertainty if uncertainty is None else uncertainty
    size = np.asarray(room.size_m, dtype=float) + rng.normal(0.0, u.size_m, 3)
    sig = np.array([lognormal_sigma(u.surface_rel(s)) for s in room.surfaces])
    factors = np.exp(rng.normal(-0.5 * sig**2, sig))
    surfaces = tuple(replace(s, absorption=tuple(float(min(a * k, MAX_ABSORPTION)) for a in s.absorption))
                     for s, k in zip(room.surfaces, factors))
    temperature = float(room.temperature_c + rng.normal(0.0, u.temperature_c))
    layout = room.layout
    if layout is not None:
        spk = _clip_inside(layout.source_positions_m + rng.normal(0.0, u.position_m, (len(layout.speakers), 3)), size)
        seats = layout.all_seats
        seat_pos = _clip_inside(np.array([s.position_m for s in seats]) + rng.normal(0.0, u.position_m, (len(seats), 3)),
                                size)
        speakers = tuple(s.moved(p) for s, p in zip(layout.speakers, spk))
        new_seats = tuple(Seat(s.name, tuple(float(v) for v in p), s.weight) for s, p in zip(seats, seat_pos))
        layout = replace(layout, speakers=speakers, seat_m=new_seats[0].position_m,
                         seats=new_seats if layout.seats else ())
    pts = None
    if points_m is not None:
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        pts = _clip_inside(p + rng.normal(0.0, u.position_m, p.shape), size)
    drawn = replace(room, size_m=tuple(float(v) for v in size), surfaces=surfaces, temperature_c=temperature,
                    layout=layout)
    return drawn, pts


def _generators(seed, n):
    return [np.random.default_rng(s) for s in np.random.SeedSequence(int(seed)).spawn(n)]


def sample_rooms(room, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED, uncertainty=None):
    """``n_samples`` rooms drawn from ``room``'s uncertainty (:func:`draw_room`), reproducibly.

    Sample ``i`` depends only on ``seed`` and ``i``.
    """
    n = _check_count(n_samples)
    return tuple(draw_room(room, g, uncertainty)[0] for g in _generators(seed, n))


def mode_frequency_ranges(room, indices, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED):
    """10th and 90th percentile of each mode's frequency over rooms drawn from ``room``.

    Only the size and the air temperature of a drawn room move a mode's frequency.

    Parameters
    ----------
    room : Room
    indices : array (N, 3)
        The modes' index triples, kept the same in every drawn room.
    n_samples, seed : int
        As :func:`sample_rooms`.

    Returns
    -------
    (freq_hz_p10, freq_hz_p90) : two arrays (N,)
    """
    drawn = sample_rooms(room, n_samples, seed)
    f = np.array([mode_frequencies(indices, d.size_m, d.speed_of_sound) for d in drawn]).reshape(len(drawn), -1)
    return np.percentile(f, 10, axis=0), np.percentile(f, 90, axis=0)


def ensemble_levels(room, freq_hz, layout=None, points_m=None, *, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED,
                    uncertainty=None, method=DEFAULT_METHOD, include_speaker=True, **options):
    """Level (dB) of every speaker at every point in each drawn room.

    Parameters
    ----------
    room : Room
    freq_hz : array_like (F,)
    layout : Layout, optional
        Default ``room.layout``.
    points_m : array_like (P, 3), optional
        Receivers; default the layout's seats (main seat first).
    n_samples, seed : int
        Size of the ensemble and its seed.
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.
    method : str
        The solver, passed to :func:`~roommodes.analysis.levels.speaker_levels`.

    Returns
    -------
    ndarray (N, S, P, F)
        ``20 log10 |H|`` per sample, speaker, point and frequency.

    Notes
    -----
    Each drawn room has its own size, so each sample is one solver call holding all its
    speakers and points (the solvers take one room per call).
    """
    n = _check_count(n_samples)
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; add them or "
                         "choose a layout (corner, wall, mid-room, desk)")
    base = room.with_layout(layout)
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    out = None
    for i, g in enumerate(_generators(seed, n)):
        drawn, pts = draw_room(base, g, uncertainty, points_m)
        if pts is None:
            pts = np.array([s.position_m for s in drawn.layout.all_seats])
        lv = speaker_levels(drawn, drawn.layout.speakers, pts, f, method=method, include_speaker=include_speaker,
                            **options).level_db
        if out is None:
            out = np.empty((n,) + lv.shape)
        out[i] = lv
    return out


@dataclass(frozen=True, eq=False)
class Bands:
    """Percentile bands of each channel's level at the seat over the drawn rooms.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    names : tuple of str
        The channels (speakers), in layout order.
    level_db_p10, level_db_p50, level_db_p90 : ndarray (S, F)
        10th, 50th and 90th percentiles of the level, dB.
    samples_db : ndarray (N, S, F)
        The level in every drawn room (for advice that needs the whole ensemble).
    seed : int
    method : str
    uncertainty : Uncertainty
    """

    freq_hz: np.ndarray
    names: tuple
    level_db_p10: np.ndarray
    level_db_p50: np.ndarray
    level_db_p90: np.ndarray
    samples_db: np.ndarray
    seed: int
    method: str
    uncertainty: Uncertainty

    @property
    def n_samples(self):
        """Number of drawn rooms."""
        return int(self.samples_db.shape[0])

    @property
    def width_db(self):
        """Width of the 10-90 % band (S, F), dB."""
        return self.level_db_p90 - self.level_db_p10

    def channel(self, name):
        """(p10, p50, p90) of one channel, by name."""
        i = self.names.index(name)
        return self.level_db_p10[i], self.level_db_p50[i], self.level_db_p90[i]

    def to_dict(self):
        """JSON-ready values: the ensemble's settings and, per channel, ``level_db_p10/p50/p90``."""
        return {"samples": self.n_samples, "seed": self.seed, "method": self.method,
                "uncertainty": self.uncertainty.to_dict(), "frequencies_hz": self.freq_hz,
                "channels": [{"name": n, "level_db_p10": self.level_db_p10[i], "level_db_p50": self.level_db_p50[i],
                              "level_db_p90": self.level_db_p90[i]} for i, n in enumerate(self.names)]}


def predict_bands(room, layout=None, freq_hz=None, *, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED, uncertainty=None,
                  method=DEFAULT_METHOD, include_speaker=True, **options):
    """10-50-90 % percentile bands of each speaker's level at the (main) seat.

    Parameters are those of :func:`ensemble_levels`; ``freq_hz`` defaults to the grid of
    :func:`roommodes.analysis.predict.predict`.

    Returns
    -------
    Bands
    """
    layout = room.layout if layout is None else layout
    f = log_frequencies(*DEFAULT_RANGE_HZ, DEFAULT_POINTS_PER_OCTAVE) if freq_hz is None else np.asarray(freq_hz, float)
    lv = ensemble_levels(room, f, layout, n_samples=n_samples, seed=seed, uncertainty=uncertainty, method=method,
                         include_speaker=include_speaker, **options)[:, :, 0, :]
    p10, p50, p90 = np.percentile(lv, PERCENTILES, axis=0)
    u = room.uncertainty if uncertainty is None else uncertainty
    return Bands(f, tuple(s.name for s in layout.speakers), p10, p50, p90, lv, int(seed), method, u)


def system_levels(room, layout=None, freq_hz=None, *, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED,
                  uncertainty=None, method=DEFAULT_METHOD, include_speaker=True, **options):
    """The system's mono sum at every seat, with the room file's settings, in each drawn room.

    Drawn room *i* is the one :func:`predict_bands` draws as its *i*-th with the same seed
    (:func:`draw_room`); in it the sum is :func:`roommodes.analysis.predict.predict_seats`.

    Parameters are those of :func:`predict_bands`.

    Returns
    -------
    ndarray (N, P, F)
        Level of the mono sum per drawn room, seat (main seat first) and frequency, dB.
    """
    n = _check_count(n_samples)
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; add them or "
                         "choose a layout (corner, wall, mid-room, desk)")
    base = room.with_layout(layout)
    f = log_frequencies(*DEFAULT_RANGE_HZ, DEFAULT_POINTS_PER_OCTAVE) if freq_hz is None else np.asarray(freq_hz, float)
    u = room.uncertainty if uncertainty is None else uncertainty
    out = None
    for i, g in enumerate(_generators(seed, n)):
        drawn, _ = draw_room(base, g, u)
        lv = predict_seats(drawn, drawn.layout, f, method=method, include_speaker=include_speaker,
                           **options).system_db
        if out is None:
            out = np.empty((n,) + lv.shape)
        out[i] = lv
    return out


def draw_subs_rooms(room, configs, rng, uncertainty=None):
    """One drawn room with each configuration's subs and settings in it (common random numbers).

    The room, its mains and its seats are drawn once from ``rng`` (:func:`draw_room` of
    ``room`` as the file has it, so drawn room *i* is the one :func:`predict_bands` draws as its
    *i*-th with the same seed); then one position error per sub slot (normal, sd
    ``position_m``): the *k*-th sub of every configuration lands off its plan by the same error.

    Parameters
    ----------
    room : Room
        The nominal room, with a layout.
    configs : sequence of SubConfig
        Each applied with :func:`roommodes.analysis.subs.room_with_config`.
    rng : numpy.random.Generator
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.

    Returns
    -------
    tuple of Room
        One per configuration: the drawn room, mains and seats, with that configuration's subs
        (moved by the drawn errors, kept inside the drawn room) and its ``[system]`` settings.
    """
    from .subs import room_with_config

    u = room.uncertainty if uncertainty is None else uncertainty
    drawn, _ = draw_room(room, rng, u)
    n_max = max((len(c.subs) for c in configs), default=0)
    err = rng.normal(0.0, u.position_m, (n_max, 3))
    out = []
    for c in configs:
        set_room = room_with_config(room, c)
        subs = tuple(s.moved(tuple(float(v) for v in _clip_inside(np.asarray(s.position_m) + e, drawn.size_m)))
                     for s, e in zip(set_room.layout.subs, err))
        lay = replace(drawn.layout, speakers=tuple(drawn.layout.mains) + subs)
        out.append(replace(drawn, layout=lay, system=set_room.system))
    return tuple(out)


@dataclass(frozen=True, eq=False)
class SubsBands:
    """Each sub configuration's system level at every seat over the drawn rooms.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    labels : tuple of str
        The configurations, in the order given.
    level_db : ndarray (N, C, P, F)
        The mono sum's level per drawn room, configuration, seat and frequency.
    seat_spread_db : ndarray (N, C)
        The seat-to-seat spread (sqrt of the weighted mean spatial variance over ``band_hz``)
        per drawn room and configuration, dB.
    band_hz : tuple
    seed : int
    method : str
    uncertainty : Uncertainty
    """

    freq_hz: np.ndarray
    labels: tuple
    level_db: np.ndarray
    seat_spread_db: np.ndarray
    band_hz: tuple
    seed: int
    method: str
    uncertainty: Uncertainty

    @property
    def n_samples(self):
        """Number of drawn rooms."""
        return int(self.level_db.shape[0])

    @property
    def level_db_p10(self):
        """10th percentile of the level (C, P, F), dB."""
        return np.percentile(self.level_db, 10.0, axis=0)

    @property
    def level_db_p90(self):
        """90th percentile of the level (C, P, F), dB."""
        return np.percentile(self.level_db, 90.0, axis=0)

    def spread_percentiles(self):
        """(p10, p50, p90) of each configuration's seat-to-seat spread, each (C,), dB."""
        return tuple(np.percentile(self.seat_spread_db, PERCENTILES, axis=0))

    def share_below(self, ref=0):
        """Share of the drawn rooms in which each configuration's seat-to-seat spread is
        below that of configuration ``ref`` (C,), 0-1.

        The rooms are the same for every configuration, so this is a paired comparison:
        near 0.5 the two are a tie within what the room file knows, however far apart their
        nominal scores; near 0 or 1 one is better in almost every room that could be.
        """
        return np.mean(self.seat_spread_db < self.seat_spread_db[:, [ref]], axis=0)

    def to_dict(self):
        """JSON-ready settings of the ensemble (the per-configuration figures go beside each configuration)."""
        return {"samples": self.n_samples, "seed": self.seed, "method": self.method,
                "uncertainty": self.uncertainty.to_dict(), "band_hz": list(self.band_hz)}


def subs_bands(room, configs, freq_hz, band_hz, *, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED, uncertainty=None,
               method=DEFAULT_METHOD):
    """Every seat's system level and the seat-to-seat spread of each configuration in drawn rooms.

    Each drawn room is one solver call holding its mains and every configuration's subs
    (:func:`draw_subs_rooms`, :func:`~roommodes.analysis.levels.speaker_levels`); each
    configuration's mono sum is then :func:`roommodes.analysis.subs.mono_sum` with its settings,
    as :func:`roommodes.analysis.predict.predict_seats` forms it.

    Parameters
    ----------
    room : Room
        With a layout (mains and seats).
    configs : sequence of SubConfig
    freq_hz : array_like (F,)
    band_hz : (low, high)
        Band of the spread, Hz.
    n_samples, seed, uncertainty, method
        As :func:`ensemble_levels`.

    Returns
    -------
    SubsBands
    """
    from .subs import mean_spatial_variance, mono_sum

    if room.layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; add them")
    n = _check_count(n_samples)
    u = room.uncertainty if uncertainty is None else uncertainty
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    weights = [s.weight for s in room.layout.all_seats]
    n_main = len(room.layout.mains)
    levels = spreads = None
    for i, g in enumerate(_generators(seed, n)):
        rooms = draw_subs_rooms(room, configs, g, u)
        speakers = list(rooms[0].layout.mains) if rooms else []
        index = []
        for r in rooms:
            subs = r.layout.subs
            index.append(range(len(speakers), len(speakers) + len(subs)))
            speakers.extend(subs)
        seats_m = [s.position_m for s in rooms[0].layout.all_seats]
        h = speaker_levels(rooms[0], speakers, seats_m, f, method=method).transfer
        if levels is None:
            levels = np.empty((n, len(configs), len(seats_m), len(f)))
            spreads = np.empty((n, len(configs)))
        for k, (r, idx) in enumerate(zip(rooms, index)):
            subs = r.layout.subs
            total = mono_sum(f, h[:n_main], h[list(idx)], [s.gain_db for s in subs], [s.delay_ms for s in subs],
                             [s.polarity for s in subs], r.system.crossover_hz, r.system.mains_delay_ms)
            lv = level_db(total)
            levels[i, k] = lv
            spreads[i, k] = np.sqrt(mean_spatial_variance(lv, weights, f, band_hz))
    return SubsBands(f, tuple(c.label for c in configs), levels, spreads, tuple(band_hz), int(seed), method, u)
