"""Subwoofers with several seats: where the subs go, and their gain, delay, polarity and crossover.

The evaluated signal is the mono bass sum: below the crossover the same signal feeds both
mains and every sub (common practice for low frequencies, where the two channels' content is
nearly the same). At each seat the level is::

    T(f) = HP(f) D(f, t_mains) sum_mains H_m(f)
         + LP(f) sum_subs g_k s_k D(f, t_k) H_k(f)

with ``H`` the room transfer times the speaker's own roll-off (:func:`speaker_levels`), ``HP``
and ``LP`` the Linkwitz-Riley 4th-order high-pass and low-pass at the crossover frequency,
``D(f, t) = exp(-j 2 pi f t)`` a delay, ``g_k`` a gain and ``s_k`` = +1 or -1 the polarity.

The score (dB, lower is better) adds three parts over the scored band:

* ``spread``: the square root of the weighted mean spatial variance, the variance across the
  seats of the dB level at each frequency averaged over the band (Welti & Devantier, "Low-
  frequency optimization using multiple subwoofers", J. Audio Eng. Soc. 54(5), 2006), with the
  seats' weights;
* ``flatness``: the RMS deviation of the level at the main seat from a flat target
  (deviations clipped at 15 dB so that one null does not rule the score). The target is the
  level of the mains alone, full range, over the top half-octave of the band, averaged over the
  seats with their weights: the subs are matched to the mains' level, as a person does by ear
  or with a meter;
* ``phase``: the summation loss of mains and subs through the crossover region (one octave
  around the crossover), ``-20 log10(|A + B| / (|A| + |B|))`` averaged over the seats with their
  weights, which is 0 when the two add in phase.

Pure functions over arrays; the search takes each candidate position's transfer to the seats,
computed once, and tunes gain, delay and polarity on those arrays.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..dsp.response import log_frequencies
from ..model.room import Seat, Speaker, SubSearch, SystemSettings
from ..solvers import DEFAULT_METHOD
from .levels import speaker_levels

__all__ = [
    "CROSSOVER_TYPE", "SCORE_WEIGHTS", "BEFORE_CROSSOVER_HZ", "DEFAULT_SUB", "CAUTIONS",
    "lr4_lowpass", "lr4_highpass", "delay_response", "sub_chain", "mono_sum", "seat_weights",
    "spatial_variance", "mean_spatial_variance", "score_parts", "tune_settings", "candidate_positions",
    "perturbed_room", "SubSetting", "SubConfig", "SubsResult", "optimise_subs", "sub_names", "room_with_config",
    "measured_transfer", "tune_measured", "MEASURED_NOTE", "SharedEq", "shared_eq",
    "FEWER_SUBS_MARGIN_DB", "IDLE_BELOW_LOUDEST_DB", "IDLE_NEAR_LIMIT_DB", "rank_configs", "RANKING_RULE",
]

#: The crossover alignment: Linkwitz-Riley 4th order (two cascaded 2nd-order Butterworth
#: sections, -6 dB at the crossover, low-pass and high-pass in phase at every frequency;
#: Linkwitz, "Active crossover networks for noncoincident drivers", J. Audio Eng. Soc. 24(1), 1976).
CROSSOVER_TYPE = "LR4"
#: Weights of the parts of the score.
SCORE_WEIGHTS = {"spread": 1.0, "flatness": 0.5, "phase": 0.5}
#: The crossover assumed for the file's subs "as they are" (a common default of sub amplifiers).
BEFORE_CROSSOVER_HZ = 80.0
#: The sub assumed when the file has none: a vented box with its -3 dB point at 25 Hz.
DEFAULT_SUB = Speaker("sub", (0.0, 0.0, 0.0), lowcut_hz=25.0, lowcut_order=4, role="sub")
#: Subs keep this far apart, from the seats and from the mains (horizontal distance, m).
MIN_SUB_SPACING_M = 0.5
MIN_SEAT_DISTANCE_M = 0.6
MIN_MAIN_DISTANCE_M = 0.4
#: Lowest gain the search gives a sub, dB.
MIN_GAIN_DB = -12.0
#: Each sub's delay is searched within this much of the delay that aligns its arrival at the
#: seats with the mains' (their distances over the speed of sound), ms: the physically sensible
#: settings, not a whole period of the crossover frequency away.
DELAY_WINDOW_MS = 5.0
#: The ranking prefers fewer subs: a configuration with more subs ranks above one with fewer only
#: when its score is lower by more than this, dB. Our choice: every further sub costs money,
#: wiring, floor space and setting up, and fewer subs each need less of their amplifier (common
#: practice is to add subs only when they clearly help); 0.5 dB of score is about as much as the
#: perturbed room (1 % larger, 1.3 times the absorption) moves the spread, so a smaller
#: difference is not one the room can be relied on to keep.
FEWER_SUBS_MARGIN_DB = 0.5
#: A sub within :data:`IDLE_NEAR_LIMIT_DB` of the lowest gain the search allows, or this far or more
#: below the loudest sub of its configuration, adds little (at -8 dB 40 % of the loudest sub's
#: pressure, 16 % of its power): "nearly idle", dB. Our choice.
IDLE_BELOW_LOUDEST_DB = 8.0
IDLE_NEAR_LIMIT_DB = 2.0
RANKING_RULE = (f"best score first, but a configuration with more subs ranks above one with fewer only when its "
                f"score is lower by more than {FEWER_SUBS_MARGIN_DB:g} dB")
#: Deviations from the flat target beyond this are clipped in the flatness part, dB.
FLATNESS_CLIP_DB = 15.0

CAUTIONS = (
    "Start quietly: set the sub level by ear or with a meter from low volume up; a sub's output rises fast "
    "and bass at high level harms hearing before it sounds loud.",
    "Each sub's boost (gain above 0 dB) asks for that much more amplifier and driver excursion; excursion "
    "rises 12 dB per octave downward for the same level. Stop if a sub distorts, chuffs or its cone "
    "bottoms out, and keep its own protection (high-pass, limiter) on.",
    "Subs are heavy: stand them on the floor, away from edges and walkways, secure tall or heavy "
    "cabinets as the maker and local codes require, and route cables so nobody trips.",
    "Delays are set in the DSP or the sub's own control; a 'phase' knob is not a delay. The polarity and delay "
    "come from the model: an inverted sub is often chosen because the mains' own roll-off (a vented box most) and "
    "the crossover's high-pass turn their phase near the crossover. Confirm both by measurement at the seats: "
    "with mains and subs playing, the sum through the crossover should rise, not dip, with the chosen setting.",
)


# ------------------------------------------------------------------------------ filters
def _lr4_den(freq_hz, crossover_hz):
    s = 1j * np.asarray(freq_hz, dtype=float) / float(crossover_hz)
    return s, (s * s + np.sqrt(2.0) * s + 1.0) ** 2


def lr4_lowpass(freq_hz, crossover_hz):
    """Linkwitz-Riley 4th-order low-pass: a 2nd-order Butterworth section squared.

    ``H(s) = 1 / (s^2 + sqrt(2) s + 1)^2`` with ``s = j f / fc``: -6.02 dB at the crossover.

    Parameters
    ----------
    freq_hz : array_like
    crossover_hz : float

    Returns
    -------
    ndarray, complex
    """
    _, den = _lr4_den(freq_hz, crossover_hz)
    return 1.0 / den


def lr4_highpass(freq_hz, crossover_hz):
    """Linkwitz-Riley 4th-order high-pass ``s^4 / (s^2 + sqrt(2) s + 1)^2``; in phase with
    :func:`lr4_lowpass` at every frequency, and their sum is an all-pass."""
    s, den = _lr4_den(freq_hz, crossover_hz)
    return s**4 / den


def delay_response(freq_hz, delay_ms):
    """A pure delay ``exp(-j 2 pi f t)`` (time factor ``e^{+jwt}``); ``delay_ms`` broadcasts
    against ``freq_hz`` (give it a trailing axis for several delays)."""
    return np.exp(-2j * np.pi * np.asarray(freq_hz, dtype=float) * np.asarray(delay_ms, dtype=float) * 1e-3)


def sub_chain(freq_hz, gain_db, delay_ms, polarity, crossover_hz):
    """What a sub's DSP does: gain, delay, polarity and the LR4 low-pass (F,), complex."""
    return (10.0 ** (gain_db / 20.0) * float(polarity) * delay_response(freq_hz, delay_ms)
            * lr4_lowpass(freq_hz, crossover_hz))


def _mains(mains_h):
    h = np.asarray(mains_h)
    return h.sum(axis=0) if h.ndim == 3 else h


def mono_sum(freq_hz, mains_h, subs_h, gains_db, delays_ms, polarities, crossover_hz, mains_delay_ms=0.0):
    """The mono bass sum at every seat.

    Parameters
    ----------
    freq_hz : array_like (F,)
    mains_h : array_like, complex (M, P, F) or (P, F)
        Each main's transfer to the seats (summed: the same signal feeds every main).
    subs_h : array_like, complex (S, P, F)
        Each sub's transfer to the seats.
    gains_db, delays_ms, polarities : array_like (S,)
    crossover_hz : float or None
        None: no crossover (mains and subs full range, each with only its own roll-off).
    mains_delay_ms : float

    Returns
    -------
    ndarray, complex (P, F)
    """
    f = np.asarray(freq_hz, dtype=float)
    hp = 1.0 if crossover_hz is None else lr4_highpass(f, crossover_hz)
    total = hp * delay_response(f, mains_delay_ms) * _mains(mains_h)
    for h, g, d, s in zip(np.asarray(subs_h), np.atleast_1d(gains_db), np.atleast_1d(delays_ms),
                          np.atleast_1d(polarities)):
        chain = (10.0 ** (g / 20.0) * float(s) * delay_response(f, d) if crossover_hz is None
                 else sub_chain(f, g, d, s, crossover_hz))
        total = total + chain * h
    return total


# ------------------------------------------------------------------------------ measures
def seat_weights(weights):
    """Seat weights normalised to sum 1; negative weights or all zero are errors."""
    w = np.asarray(weights, dtype=float).ravel()
    if w.size == 0 or not np.all(np.isfinite(w)) or np.any(w < 0):
        raise ValueError(f"seat weights must be finite numbers >= 0, got {w.tolist()}")
    if w.sum() <= 0:
        raise ValueError("seat weights are all zero; give at least one seat a weight above 0")
    return w / w.sum()


def spatial_variance(level_db, weights):
    """Weighted variance across the seats of the dB level at each frequency, dB^2.

    Parameters
    ----------
    level_db : array_like (..., P, F)
    weights : array_like (P,)

    Returns
    -------
    ndarray (..., F)
    """
    L = np.asarray(level_db, dtype=float)
    w = seat_weights(weights)
    if L.shape[-2] != w.size:
        raise ValueError(f"level_db has {L.shape[-2]} seats but weights has {w.size}")
    mean = np.einsum("...pf,p->...f", L, w)
    return np.einsum("...pf,p->...f", (L - mean[..., None, :]) ** 2, w)


def mean_spatial_variance(level_db, weights, freq_hz=None, band_hz=None):
    """Mean spatial variance (Welti & Devantier 2006): :func:`spatial_variance` averaged over
    the frequencies (inside ``band_hz`` when given), dB^2."""
    v = spatial_variance(level_db, weights)
    if band_hz is not None:
        f = np.asarray(freq_hz, dtype=float)
        v = v[..., (f >= band_hz[0]) & (f <= band_hz[1])]
    return v.mean(axis=-1)


def _level(h):
    return 20.0 * np.log10(np.maximum(np.abs(h), 1e-15))


def score_parts(freq_hz, mains_part, subs_part, weights, band_hz, crossover_hz, target_db=None):
    """The parts of the score and the score itself.

    Parameters
    ----------
    freq_hz : array_like (F,)
    mains_part : array_like, complex (..., P, F)
        The mains after their high-pass and delay.
    subs_part : array_like, complex (..., P, F)
        The subs after their chains.
    weights : array_like (P,)
        Seat weights; the first seat is the main seat.
    band_hz : (low, high)
    crossover_hz : float
    target_db : float, optional
        The flat target at the main seat; default the curve's own mean in dB over the band.

    Returns
    -------
    dict of ndarray (...)
        ``spread``, ``flatness``, ``phase`` and ``score``, in dB.
    """
    f = np.asarray(freq_hz, dtype=float)
    w = seat_weights(weights)
    band = (f >= band_hz[0]) & (f <= band_hz[1])
    a, b = np.asarray(mains_part)[..., band], np.asarray(subs_part)[..., band]
    t = a + b
    L = _level(t)
    spread = np.sqrt(mean_spatial_variance(L, w))
    main = L[..., 0, :]
    ref = main.mean(axis=-1, keepdims=True) if target_db is None else target_db
    dev = np.clip(main - ref, -FLATNESS_CLIP_DB, FLATNESS_CLIP_DB)
    flat = np.sqrt(np.mean(dev**2, axis=-1))
    fb = f[band]
    xo = (fb >= crossover_hz / np.sqrt(2.0)) & (fb <= crossover_hz * np.sqrt(2.0))
    loss = -_level(np.abs(t[..., xo]) / np.maximum(np.abs(a[..., xo]) + np.abs(b[..., xo]), 1e-15))
    phase = np.einsum("...pf,p->...", loss, w) / max(int(xo.sum()), 1)
    score = SCORE_WEIGHTS["spread"] * spread + SCORE_WEIGHTS["flatness"] * flat + SCORE_WEIGHTS["phase"] * phase
    return {"spread": spread, "flatness": flat, "phase": phase, "score": score}


# ------------------------------------------------------------------------------ tuning
def _realise(delays_ms):
    """Relative delays (sub minus mains) as settings: all >= 0, the mains delayed when a sub
    must come earlier than them."""
    d = np.asarray(delays_ms, dtype=float)
    mains = max(0.0, -float(d.min())) if d.size else 0.0
    return d + mains, mains


def alignment_delay_ms(sub_m, mains_m, seats_m, weights, speed_of_sound):
    """Delay (sub minus mains, ms) that makes a sub's direct sound arrive with the mains' at
    the seats: the weighted mean over the seats of (mean distance to the mains - distance to
    the sub) / c. Positive: the sub is nearer and is delayed; negative: the mains are.

    Parameters
    ----------
    sub_m : array_like (..., 3)
    mains_m : array_like (M, 3)
    seats_m : array_like (P, 3)
    weights : array_like (P,)
    speed_of_sound : float

    Returns
    -------
    ndarray (...)
    """
    w = seat_weights(weights)
    seats = np.atleast_2d(np.asarray(seats_m, dtype=float))
    r_sub = np.linalg.norm(np.asarray(sub_m, dtype=float)[..., None, :] - seats, axis=-1) @ w
    r_main = np.mean(np.linalg.norm(np.asarray(mains_m, dtype=float)[:, None, :] - seats[None], axis=-1), axis=0) @ w
    return (r_main - r_sub) / speed_of_sound * 1e3


def _delay_grid(centre_ms, window_ms, step_ms, lo_ms, hi_ms):
    d = centre_ms + np.arange(-window_ms, window_ms + 1e-9, step_ms)
    d = d[(d >= lo_ms - 1e-9) & (d <= hi_ms + 1e-9)]
    return np.round(d, 6) if d.size else np.array([float(np.clip(centre_ms, lo_ms, hi_ms))])


def _span(others_ms, max_delay_ms):
    """Range a sub's relative delay may take so that all delays (mains at 0) span at most
    ``max_delay_ms``."""
    d = np.append(np.asarray(others_ms, dtype=float), 0.0)
    return d.max() - max_delay_ms, d.min() + max_delay_ms


def tune_settings(freq_hz, mains_h, subs_h, weights, crossover_hz, *, band_hz, max_delay_ms=20.0,
                  max_gain_db=6.0, delay_centre_ms=None, window_ms=None, target_db=None, start=None, passes=4,
                  fine=True):
    """Gain, delay and polarity of each sub for fixed positions and crossover.

    Coordinate descent: each sub in turn gets the best of a grid of gains (2 dB steps), delays
    (0.5 ms steps) and both polarities with the others held, until nothing changes; then a finer
    grid around the result (0.5 dB, 0.1 ms).

    Parameters
    ----------
    freq_hz : array_like (F,)
    mains_h : array_like, complex (M, P, F) or (P, F)
    subs_h : array_like, complex (S, P, F)
    weights : array_like (P,)
    crossover_hz : float
    band_hz : (low, high)
    max_delay_ms : float
        Largest spread of the delays (subs and mains together), ms.
    max_gain_db : float
        Largest boost, dB.
    delay_centre_ms : array_like (S,), optional
        Centre of each sub's delay search (relative to the mains); default 0.
    window_ms : float, optional
        Half-width of the delay search around the centre; default ``max_delay_ms``.
    target_db : float, optional
        See :func:`score_parts`.
    start : tuple of arrays, optional
        ``(gains_db, delays_ms, polarities)`` to start from; relative delays (sub minus mains).

    Returns
    -------
    gains_db, rel_delays_ms, polarities : ndarray (S,)
        Delays are relative to the mains (negative: the mains are to be delayed).
    parts : dict
        :func:`score_parts` of the result.
    """
    f = np.asarray(freq_hz, dtype=float)
    hs = np.asarray(subs_h)
    n = hs.shape[0]
    a = lr4_highpass(f, crossover_hz) * _mains(mains_h)
    x = lr4_lowpass(f, crossover_hz) * hs  # (S, P, F)
    centre = np.zeros(n) if delay_centre_ms is None else np.asarray(delay_centre_ms, dtype=float)
    window = max_delay_ms if window_ms is None else window_ms
    if start is None:
        g, d, s = np.zeros(n), np.clip(centre, -max_delay_ms, max_delay_ms), np.ones(n)
    else:
        g, d, s = (np.array(v, dtype=float) for v in start)
    g = np.clip(g, MIN_GAIN_DB, max_gain_db)

    def contrib(k):
        return 10 ** (g[k] / 20) * s[k] * delay_response(f, d[k]) * x[k]

    def sweep(k, gains, delays):
        rest = sum((contrib(j) for j in range(n) if j != k), np.zeros_like(a))
        gains = np.unique(np.clip(gains, MIN_GAIN_DB, max_gain_db))
        amp = (10 ** (gains / 20))[:, None] * np.array([1.0, -1.0])[None, :]  # (G, 2)
        ph = delay_response(f, delays[:, None])  # (D, F)
        b = rest + amp[:, :, None, None, None] * ph[None, None, :, None, :] * x[k]  # (G, 2, D, P, F)
        sc = score_parts(f, a, b, weights, band_hz, crossover_hz, target_db)["score"]
        i, j, m = np.unravel_index(int(np.argmin(sc)), sc.shape)
        return gains[i], (1.0 if j == 0 else -1.0), delays[m], float(sc[i, j, m])

    coarse_g = np.arange(MIN_GAIN_DB, max_gain_db + 1e-9, 2.0)
    best = np.inf
    for _ in range(passes):
        changed = False
        for k in range(n):
            lo, hi = _span(np.delete(d, k), max_delay_ms)
            gk, sk, dk, sc = sweep(k, coarse_g, _delay_grid(centre[k], window, 0.5, lo, hi))
            if sc < best - 1e-9:
                changed = changed or (gk, sk, dk) != (g[k], s[k], d[k])
                g[k], s[k], d[k], best = gk, sk, dk, sc
        if not changed:
            break
    if fine:
        for _ in range(2):
            for k in range(n):
                lo, hi = _span(np.delete(d, k), max_delay_ms)
                lo, hi = max(lo, centre[k] - window), min(hi, centre[k] + window)
                gk, sk, dk, sc = sweep(k, g[k] + np.arange(-1.5, 1.51, 0.5), _delay_grid(d[k], 1.0, 0.1, lo, hi))
                if sc < best - 1e-9:
                    g[k], s[k], d[k], best = gk, sk, dk, sc
    b = sum((contrib(k) for k in range(n)), np.zeros_like(a))
    parts = {k: float(v) for k, v in score_parts(f, a, b, weights, band_hz, crossover_hz, target_db).items()}
    return g, np.round(d, 6), s, parts


# ------------------------------------------------------------------------------ candidates
def candidate_positions(room, search, seats_m, mains_m, extra_m=()):
    """Candidate sub positions from ``[subs]``: the regions' grid (by default the band along
    the walls) and the listed positions, minus keep-outs and spots too near a seat or a main.

    Returns
    -------
    ndarray (N, 3)
    """
    lx, ly, lz = room.size_m
    gap, step, h = search.wall_gap_m, search.step_m, search.height_m
    xs = np.arange(gap, lx - gap + 1e-9, step)
    ys = np.arange(gap, ly - gap + 1e-9, step)
    # put the last row and column on the far walls' gap too, so the grid is symmetric
    xs = np.unique(np.round(np.append(xs, lx - gap), 6))
    ys = np.unique(np.round(np.append(ys, ly - gap), 6))
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    grid = np.column_stack([X.ravel(), Y.ravel(), np.full(X.size, h)])
    if search.regions:
        keep = np.zeros(len(grid), bool)
        for box in search.regions:
            keep |= box.contains(grid)
    else:
        edge = np.minimum.reduce([grid[:, 0], lx - grid[:, 0], grid[:, 1], ly - grid[:, 1]])
        keep = edge <= search.wall_band_m + 1e-9
    pts = grid[keep]
    extra = [np.asarray(p, dtype=float) for p in (*search.candidates_m, *extra_m)]
    if extra:
        pts = np.vstack([pts, np.array(extra)])
    ok = room.contains(pts, 0.02)
    for box in search.keep_out:
        ok &= ~box.contains(pts)
    horiz = pts[:, :2]
    for s in np.atleast_2d(seats_m):
        ok &= np.hypot(*(horiz - s[:2]).T) >= MIN_SEAT_DISTANCE_M
    for m in np.atleast_2d(mains_m):
        ok &= np.linalg.norm(pts - m, axis=1) >= MIN_MAIN_DISTANCE_M
    pts = pts[ok]
    if len(pts) == 0:
        raise ValueError("[subs]: no candidate sub position is left after the keep-outs and the distances from "
                         f"the seats ({MIN_SEAT_DISTANCE_M:g} m) and the mains ({MIN_MAIN_DISTANCE_M:g} m); "
                         "widen the regions or shrink the keep-outs")
    _, first = np.unique(np.round(pts, 4), axis=0, return_index=True)
    return pts[np.sort(first)]


def perturbed_room(room, size_factor=1.01, absorption_factor=1.3):
    """The same room 1 % larger with 1.3 times the absorption: an independent reference for
    advice designed on the nominal room (every coefficient stays below 0.99)."""
    surfaces = tuple(replace(s, absorption=tuple(min(0.99, a * absorption_factor) for a in s.absorption),
                             material=None) for s in room.surfaces)
    return replace(room, size_m=tuple(v * size_factor for v in room.size_m), surfaces=surfaces)


# ------------------------------------------------------------------------------ results
@dataclass(frozen=True)
class SubSetting:
    """One sub's position and the settings a person types into its controls."""

    name: str
    position_m: tuple
    gain_db: float
    delay_ms: float
    polarity: int
    headroom_db: float
    #: Phase of this sub's part (with its polarity) relative to the mains' part at the crossover
    #: at the main seat, degrees in (-180, 180]; NaN when not computed.
    phase_to_mains_deg: float = float("nan")

    def to_dict(self):
        return {"name": self.name, "position_m": list(self.position_m), "gain_db": self.gain_db,
                "delay_ms": self.delay_ms, "polarity": int(self.polarity), "headroom_db": self.headroom_db,
                "phase_to_mains_deg": self.phase_to_mains_deg}


@dataclass(frozen=True, eq=False)
class SubConfig:
    """One configuration of subs with its settings and what it gives at the seats.

    Attributes
    ----------
    label : str
        What it is ("2 subs", "current positions", "front-wall centre", "as it is").
    kind : str
        "search", "current", "reference" or "before".
    subs : tuple of SubSetting
    crossover_hz : float or None
        None when the mains run full range (no subs).
    mains_delay_ms : float
        Delay for the mains (when a sub must come earlier than them), ms.
    parts : dict
        The score's parts, dB.
    level_db : ndarray (P, F)
        Level of the mono sum at each seat.
    seat_deviation_db : ndarray (P,)
        RMS over the band of each seat's level minus the weighted seat mean, dB.
    flatness_db : ndarray (P,)
        RMS deviation of each seat's level from its own mean over the band, dB.
    perturbed_seat_spread_db : float
        The spread with the same settings in :func:`perturbed_room`.
    full_range : bool
        The mains run full range (no high-pass): the file's layout as it is.
    """

    label: str
    kind: str
    subs: tuple
    crossover_hz: float | None
    mains_delay_ms: float
    parts: dict
    level_db: np.ndarray
    seat_deviation_db: np.ndarray
    flatness_db: np.ndarray
    perturbed_seat_spread_db: float = float("nan")
    full_range: bool = False
    note: str = ""

    @property
    def score(self):
        return self.parts["score"]

    @property
    def idle_subs(self):
        """The subs that add little: within :data:`IDLE_NEAR_LIMIT_DB` of the lowest gain the search
        allows (:data:`MIN_GAIN_DB`) or :data:`IDLE_BELOW_LOUDEST_DB` or more below the loudest sub
        of the configuration."""
        if not self.subs:
            return ()
        top = max(s.gain_db for s in self.subs)
        return tuple(s for s in self.subs if s.gain_db <= MIN_GAIN_DB + IDLE_NEAR_LIMIT_DB + 1e-9
                     or s.gain_db <= top - IDLE_BELOW_LOUDEST_DB + 1e-9)

    @property
    def seat_spread_db(self):
        """sqrt of the weighted mean spatial variance over the band, dB."""
        return self.parts["spread"]

    def to_dict(self):
        idle = {s.name for s in self.idle_subs}
        return {"label": self.label, "kind": self.kind, "note": self.note,
                "subs": [{**s.to_dict(), "nearly_idle": s.name in idle} for s in self.subs],
                "crossover_hz": self.crossover_hz, "mains_delay_ms": self.mains_delay_ms,
                "mains_high_pass": not self.full_range, "score": self.score,
                "parts": dict(self.parts), "seat_spread_db": self.seat_spread_db,
                "mean_spatial_variance_db2": self.seat_spread_db**2,
                "perturbed_seat_spread_db": self.perturbed_seat_spread_db,
                "seat_deviation_db": self.seat_deviation_db, "flatness_db": self.flatness_db,
                "level_db": self.level_db}


@dataclass(frozen=True, eq=False)
class SubsResult:
    """The outcome of :func:`optimise_subs`."""

    freq_hz: np.ndarray
    seats: tuple
    band_hz: tuple
    ranked: tuple
    before: SubConfig
    method: str
    n_candidates: int
    candidates_m: np.ndarray
    assumed_sub: bool
    search: SubSearch = field(default_factory=SubSearch)
    sources: dict = field(default_factory=dict)
    level_offset_db: float = 0.0
    #: Where the ranking put a configuration with fewer subs above a better-scoring one with
    #: more (:func:`rank_configs`).
    ranking_notes: tuple = ()

    def to_dict(self):
        best = self.ranked[0]
        return {
            "frequencies_hz": self.freq_hz,
            "seats": [{"name": s.name, "position_m": list(s.position_m), "weight": s.weight} for s in self.seats],
            "crossover": {"type": CROSSOVER_TYPE, "freq_hz": best.crossover_hz},
            "band_hz": list(self.band_hz), "method": self.method, "score_weights": dict(SCORE_WEIGHTS),
            "signal": "mono bass sum: the same signal to both mains and every sub",
            "candidates": self.n_candidates, "assumed_sub": self.assumed_sub,
            "ranked": [c.to_dict() for c in self.ranked],
            "ranking": {"rule": RANKING_RULE, "fewer_subs_margin_db": FEWER_SUBS_MARGIN_DB,
                        "preferred_fewer": [dict(n) for n in self.ranking_notes]},
            "before": self.before.to_dict(),
            "cautions": list(CAUTIONS),
            **({"measured": self.measured_dict()} if self.measured else {}),
        }

    @property
    def measured(self):
        """True when some speaker-seat pairs come from measurements (:func:`tune_measured`)."""
        return any(v == "measured" for v in self.sources.values())

    def measured_dict(self):
        """JSON-ready: which pairs were measured and which predicted, and the level offset."""
        return {"pairs": [{"speaker": k, "seat": st, "source": v} for (k, st), v in self.sources.items()],
                "level_offset_db": self.level_offset_db, "note": MEASURED_NOTE}


def _seat_figures(freq_hz, level_db, weights, band_hz):
    f = np.asarray(freq_hz)
    band = (f >= band_hz[0]) & (f <= band_hz[1])
    L = level_db[:, band]
    w = seat_weights(weights)
    mean = w @ L
    dev = np.sqrt(np.mean((L - mean) ** 2, axis=1))
    flat = np.sqrt(np.mean((L - L.mean(axis=1, keepdims=True)) ** 2, axis=1))
    return dev, flat


@dataclass(frozen=True, eq=False)
class _Problem:
    """What every step of the search shares."""

    f: np.ndarray
    mains_h: np.ndarray  # (M, P, F)
    mains_m: np.ndarray  # (M, 3)
    seats_m: np.ndarray  # (P, 3)
    weights: np.ndarray  # (P,)
    band: tuple
    target_db: float
    search: SubSearch
    c: float

    def centre(self, pos_m):
        return alignment_delay_ms(pos_m, self.mains_m, self.seats_m, self.weights, self.c)

    def tune(self, h, pos_m, fc, start=None, fine=False):
        return tune_settings(self.f, self.mains_h, h, self.weights, fc, band_hz=self.band,
                             max_delay_ms=self.search.max_delay_ms, max_gain_db=self.search.max_gain_db,
                             delay_centre_ms=self.centre(np.asarray(pos_m, dtype=float)), window_ms=DELAY_WINDOW_MS,
                             target_db=self.target_db, start=start, fine=fine)


def target_level_db(freq_hz, mains_h, weights, band_hz):
    """The flat target: the level of the mains alone (full range, mono) over the top
    half-octave of the band, in dB, averaged over the seats with their weights, dB."""
    f = np.asarray(freq_hz)
    top = (f >= band_hz[1] / np.sqrt(2.0)) & (f <= band_hz[1])
    return float(seat_weights(weights) @ _level(_mains(mains_h)[:, top]).mean(axis=1))


def _make_config(pr, label, kind, names, positions, g, rel_d, s, fc, subs_h, *, mains_h=None, full_range=False):
    """A :class:`SubConfig` from settings; ``full_range``: the mains get no high-pass (the
    file's layout as it is), the subs only their low-pass at ``fc``."""
    f = pr.f
    mains_h = pr.mains_h if mains_h is None else mains_h
    delays, mains_delay = _realise(rel_d) if len(names) else (np.zeros(0), 0.0)
    # the settings as a person types them (0.1 dB, 0.01 ms); the levels are computed from these
    g = np.round(np.asarray(g, dtype=float), 1)
    delays, mains_delay = np.round(delays, 2), round(float(mains_delay), 2)
    if full_range:
        a = delay_response(f, mains_delay) * _mains(mains_h)
        b = sum((sub_chain(f, gi, di, si, fc) * h for gi, di, si, h in zip(g, delays, s, subs_h)),
                np.zeros_like(a))
        parts = score_parts(f, a, b, pr.weights, pr.band, fc or BEFORE_CROSSOVER_HZ, pr.target_db)
        t = a + b
    else:
        t = mono_sum(f, mains_h, subs_h, g, delays, s, fc, mains_delay)
        a = lr4_highpass(f, fc) * delay_response(f, mains_delay) * _mains(mains_h)
        parts = score_parts(f, a, t - a, pr.weights, pr.band, fc, pr.target_db)
    level = _level(t)
    dev, flat = _seat_figures(f, level, pr.weights, pr.band)
    # each sub's phase against the mains at the crossover, at the main seat: why a polarity
    i = int(np.argmin(np.abs(np.log(f / (fc or BEFORE_CROSSOVER_HZ)))))
    phases = [float(np.degrees(np.angle(sub_chain(f[i:i + 1], gi, di, si, fc or BEFORE_CROSSOVER_HZ)[0] * h[0, i]
                                        / (a[0, i] if abs(a[0, i]) > 0 else 1.0))))
              for gi, di, si, h in zip(g, delays, s, subs_h)]
    subs = tuple(SubSetting(n, tuple(float(v) for v in p), float(gi), float(di), int(si), float(max(0.0, gi)),
                            round(ph, 1))
                 for n, p, gi, di, si, ph in zip(names, positions, g, delays, s, phases))
    return SubConfig(label, kind, subs, None if fc is None else float(fc), float(mains_delay),
                     {k: float(v) for k, v in parts.items()}, level, dev, flat, full_range=full_range)


def _allowed_reference(point_m, cands, search):
    """The reference position, or, when a keep-out holds it, the nearest candidate position
    (horizontal distance) and a note saying so."""
    point_m = tuple(float(v) for v in point_m)
    inside = [b.name for b in search.keep_out if b.contains(np.array([point_m]))[0]]
    if not inside:
        return point_m, ""
    d = np.linalg.norm(cands[:, :2] - np.asarray(point_m)[:2], axis=1)
    i = int(np.argmin(d))
    names = ", ".join(f"'{n}'" if n else "a" for n in inside)
    return tuple(float(v) for v in cands[i]), (
        f"the front-wall centre lies in the {names} keep-out; moved {100 * d[i]:.0f} cm to the nearest allowed "
        "candidate position")


def _nearest(cands, point, within_m=0.6):
    d = np.linalg.norm(cands[:, :2] - np.asarray(point)[:2], axis=1)
    i = int(np.argmin(d))
    return i if d[i] <= within_m else None


def _allowed(cands, taken):
    ok = np.ones(len(cands), bool)
    for i in taken:
        ok &= np.linalg.norm(cands[:, :2] - cands[i, :2], axis=1) >= MIN_SUB_SPACING_M
    return ok


def _position_sweep(pr, a, x_all, centres, fixed, g0, others_d, fc, allowed):
    """Best candidate (and its gain, polarity, delay) for one sub, the others fixed.

    ``a``: the mains part (P, F); ``fixed``: the other subs' summed part (P, F); ``x_all``: every
    candidate's transfer times the low-pass (N, P, F); ``centres``: each candidate's alignment
    delay (N,). Delays on a 1 ms grid within :data:`DELAY_WINDOW_MS` of the centre.
    """
    f = pr.f
    lo, hi = _span(others_d, pr.search.max_delay_ms)
    offsets = np.arange(-DELAY_WINDOW_MS, DELAY_WINDOW_MS + 1e-9, 1.0)
    gains = np.unique(np.clip(np.array([g0 - 4.0, g0, g0 + 4.0]), MIN_GAIN_DB, pr.search.max_gain_db))
    amp = (10 ** (gains / 20))[:, None] * np.array([1.0, -1.0])[None, :]
    best = (np.inf, None)
    idx = np.flatnonzero(allowed)
    for chunk in np.array_split(idx, max(1, len(idx) // 24)):
        if chunk.size == 0:
            continue
        delays = np.clip(centres[chunk, None] + offsets, lo, hi)  # (c, D)
        ph = delay_response(f, delays[..., None])  # (c, D, F)
        b = fixed + (amp[None, :, :, None, None, None] * ph[:, None, None, :, None, :]
                     * x_all[chunk][:, None, None, None])  # (c, G, 2, D, P, F)
        sc = score_parts(f, a, b, pr.weights, pr.band, fc, pr.target_db)["score"]
        i = int(np.argmin(sc))
        if sc.flat[i] < best[0]:
            c, gi, si, di = np.unravel_index(i, sc.shape)
            best = (float(sc.flat[i]), (int(chunk[c]), gains[gi], 1.0 if si == 0 else -1.0, delays[c, di]))
    return best


def _search_count(pr, n, cand_h, cands, fc, starts):
    """Positions and settings for ``n`` subs from several starting sets (each filled up
    greedily, then one sub moved at a time to its best candidate); the best found."""
    a = lr4_highpass(pr.f, fc) * _mains(pr.mains_h)
    x_all = lr4_lowpass(pr.f, fc) * cand_h
    centres = pr.centre(cands)

    def part(idx, g, d, s, skip=None):
        return sum((10 ** (g[j] / 20) * s[j] * delay_response(pr.f, d[j]) * x_all[idx[j]]
                    for j in range(len(idx)) if j != skip), np.zeros_like(a))

    best = None
    for start in starts:
        idx = list(start)
        g = d = s = np.zeros(0)
        while len(idx) < n:
            if idx:
                g, d, s, _ = pr.tune(cand_h[idx], cands[idx], fc)
            _, choice = _position_sweep(pr, a, x_all, centres, part(idx, g, d, s), 0.0, d, fc,
                                        _allowed(cands, idx))
            if choice is None:
                break
            idx.append(choice[0])
        if len(idx) < n:
            continue
        g, d, s, parts = pr.tune(cand_h[idx], cands[idx], fc)
        for _ in range(2):
            moved = False
            for k in range(n):
                others = [j for j in range(n) if j != k]
                sc, choice = _position_sweep(pr, a, x_all, centres, part(idx, g, d, s, skip=k), g[k], d[others], fc,
                                             _allowed(cands, [idx[j] for j in others]))
                if choice is not None and sc < parts["score"] - 1e-6 and choice[0] != idx[k]:
                    idx[k], g[k], s[k], d[k] = choice
                    g, d, s, parts = pr.tune(cand_h[idx], cands[idx], fc, start=(g, d, s))
                    moved = True
            if not moved:
                break
        if best is None or parts["score"] < best[0]:
            best = (parts["score"], list(idx), (g, d, s))
    return best


def _tune_crossover(pr, h, pos_m, xo_grid, start):
    """The crossover from the grid, with the settings tuned at each; the best, finely tuned."""
    best = None
    for fc in xo_grid:
        g, d, s, parts = pr.tune(h, pos_m, fc, start=start)
        if best is None or parts["score"] < best[0]:
            best = (parts["score"], fc, (g, d, s))
    fc = best[1]
    g, d, s, _ = pr.tune(h, pos_m, fc, start=best[2], fine=True)
    return fc, g, d, s


def _as_it_is(pr, room, current, h_cur):
    """The file's subs with the file's own settings: "before"."""
    system = room.system or SystemSettings()
    return _make_config(pr, "as it is", "before", [s.name for s in current], [s.position_m for s in current],
                        [s.gain_db for s in current], [s.delay_ms - system.mains_delay_ms for s in current],
                        [s.polarity for s in current], system.crossover_hz or BEFORE_CROSSOVER_HZ, h_cur,
                        full_range=system.crossover_hz is None)


@dataclass(frozen=True)
class _Curve:
    """A level curve in the shape :func:`roommodes.io.importers.apply_mic_calibration` reads."""

    freq_hz: np.ndarray
    level_db: np.ndarray
    source: str = "measurement"
    notes: tuple = ()


def measured_transfer(ir, fs_hz, freq_hz, *, window_s=1.0, mic_cal=None):
    """Complex response of a measured impulse response, its time origin kept.

    Parameters
    ----------
    ir : array_like (n,)
        The impulse response, sample 0 at the instant the test signal left the output (the
        sweep's timing kept, or a loopback reference): the delays between speakers are real.
    fs_hz : float
    freq_hz : array_like (F,)
        Each at most ``fs_hz / 2``.
    window_s : float
        Length of the window from sample 0, s (a half-Hann fades its last 10 %).
    mic_cal : curve, optional
        The microphone's deviation from flat (:func:`roommodes.io.importers.read_response_text`),
        divided out of the magnitude (end values held outside its range).

    Returns
    -------
    ndarray, complex (F,)
    """
    from ..io.importers import apply_mic_calibration
    from ..measure.deconvolve import frequency_response

    f = np.asarray(freq_hz, dtype=float)
    h = frequency_response(np.asarray(ir, dtype=float), fs_hz, f, window_s=min(window_s, len(ir) / fs_hz))
    if mic_cal is not None:
        raw = _level(h)
        cal = apply_mic_calibration(_Curve(f, raw), mic_cal, outside="hold")
        h = h * 10.0 ** ((np.asarray(cal.level_db) - raw) / 20.0)
    return h


#: What the measured mode says about positions.
MEASURED_NOTE = ("Measured responses cannot move a sub: the gain, delay, polarity and crossover are tuned for the "
                 "subs where they stand now. Run without --measured to search positions on the model.")


def tune_measured(room, measured, *, method=DEFAULT_METHOD, points_per_octave=24, window_s=1.0, mic_cal=None):
    """Gain, delay, polarity and crossover of the file's subs where they stand, on measured
    impulse responses where given and predicted transfer functions elsewhere.

    Parameters
    ----------
    room : Room
        With mains, at least one sub and the seats.
    measured : dict
        ``{(speaker name, seat name): (ir, fs_hz)}``: the impulse response of that speaker at
        that seat, its time origin the test signal's (:func:`measured_transfer`).
    method : str
        Solver of the predicted pairs.
    points_per_octave : int
    window_s : float
        Window on every impulse response, s.
    mic_cal : curve, optional
        Microphone calibration, removed from every measurement.

    Returns
    -------
    SubsResult
        ``ranked`` holds one configuration, the subs where they stand with tuned settings;
        ``before`` the file's settings, on the same (measured and predicted) responses;
        ``sources`` says which pairs were measured; ``level_offset_db`` is the one level
        offset that brought the measurements to the model's scale.

    Notes
    -----
    A measured impulse response is in the units of the measuring chain, the model in dB re
    the free-field level at 1 m. One offset, the median over the measured pairs and the band
    of (measured - predicted) in dB, brings every measurement to the model's scale, so that
    measured and predicted pairs can be summed; when every pair is measured it changes
    nothing but the printed levels. The measurements keep their own time origin, so their
    delays against the predicted pairs are right only when that origin is the test signal's.
    """
    layout = room.layout
    if layout is None or not layout.mains or not layout.subs:
        raise ValueError(f"{room.source or room.name}: tuning on measurements needs the file's mains, its subs "
                         "(role = \"sub\") and the seats")
    search = room.subs_search or SubSearch()
    seats = layout.all_seats
    seat_index = {s.name: j for j, s in enumerate(seats)}
    speakers = tuple(layout.mains) + tuple(layout.subs)
    sp_index = {s.name: k for k, s in enumerate(speakers)}
    for (spk, seat) in measured:
        if spk not in sp_index:
            raise ValueError(f"--measured {spk}@{seat}: no speaker '{spk}' in the room file; the speakers are "
                             + ", ".join(sp_index))
        if seat not in seat_index:
            raise ValueError(f"--measured {spk}@{seat}: no seat '{seat}' in the room file; the seats are "
                             + ", ".join(seat_index))
    weights = seat_weights([s.weight for s in seats]) * len(seats)
    seats_m = np.array([s.position_m for s in seats])
    band = tuple(search.band_hz)
    f = log_frequencies(band[0], band[1], points_per_octave)
    h = speaker_levels(room, speakers, seats_m, f, method=method).transfer.copy()
    sources = {(s.name, st.name): "predicted" for s in speakers for st in seats}
    diffs = []
    meas = {}
    for (spk, seat), (ir, fs) in measured.items():
        if f[-1] > fs / 2:
            raise ValueError(f"--measured {spk}@{seat}: sample rate {fs:g} Hz is too low for {f[-1]:g} Hz")
        hm = measured_transfer(ir, fs, f, window_s=window_s, mic_cal=mic_cal)
        k, j = sp_index[spk], seat_index[seat]
        meas[(k, j)] = hm
        diffs.append(_level(hm) - _level(h[k, j]))
        sources[(spk, seat)] = "measured"
    offset = float(np.median(np.concatenate(diffs))) if diffs else 0.0
    for (k, j), hm in meas.items():
        h[k, j] = hm * 10.0 ** (-offset / 20.0)
    n_main = len(layout.mains)
    mains_h, subs_h = h[:n_main], h[n_main:]
    mains_m = np.array([m.position_m for m in layout.mains])
    pr = _Problem(f, mains_h, mains_m, seats_m, weights, band, target_level_db(f, mains_h, weights, band), search,
                  room.speed_of_sound)
    current = layout.subs
    pos = np.array([s.position_m for s in current])
    fc, g, d, s = _tune_crossover(pr, subs_h, pos, crossover_grid(search.crossover_hz), None)
    label = "measured, as placed" if meas else "current positions"
    best = _make_config(pr, label, "current", [c.name for c in current], pos, g, d, s, fc, subs_h)
    before = _as_it_is(pr, room, current, subs_h)
    return SubsResult(f, seats, band, (best,), before, method, 0, np.zeros((0, 3)), False, search,
                      sources=sources, level_offset_db=offset)


#: Limits of the shared correction EQ: cuts first, a small boost at most (the boost drives every
#: main and every sub harder at once).
SHARED_EQ_MAX_BOOST_DB = 3.0
SHARED_EQ_MAX_FILTERS = 4
#: A seat (or head position) counts as made worse when its flatness rises by more than this, dB.
SHARED_EQ_NO_HARM_DB = 0.1
#: Deepest cut of one filter of the shared EQ, dB. Our choice: one EQ acts at every seat, where a
#: peak's height differs by about the seat-to-seat spread; a deep narrow notch fitted to the
#: average overshoots at a seat where the peak is lower or shifted. The eq command allows 15 dB
#: for one seat.
SHARED_EQ_MAX_CUT_DB = 8.0
#: In the perturbed room no seat or head position may be lifted further above the target than it
#: already was by more than this anywhere on :data:`SHARED_EQ_GRID_HZ`, dB (the tolerance of the
#: EQ rules' own checks in a perturbed room, docs/eq.md).
SHARED_EQ_MAX_RAISE_DB = 1.5
#: The shared EQ is designed and judged on this range (the eq command's): filters act outside the
#: band they correct, and no harm is checked wherever they act, Hz.
SHARED_EQ_GRID_HZ = (15.0, 300.0)


@dataclass(frozen=True, eq=False)
class SharedEq:
    """One correction EQ for the summed system (before the crossover: it acts on every speaker).

    Attributes
    ----------
    label : str
        The configuration it was designed for.
    design : EqDesign or None
        The parametric design (:func:`roommodes.analysis.correction.correct_curve`) on the
        seats' weighted power-average level; None when no design helped every seat.
    band_hz : tuple
    positions : tuple of str
        Names of the positions judged: each seat and the head positions 15 cm around it.
    flatness_before_db, flatness_after_db : ndarray (K,)
        RMS deviation from its own mean over the band at each position, model room, dB.
    perturbed_before_db, perturbed_after_db : ndarray (K,)
        The same in :func:`perturbed_room` (NaN when not checked).
    reason : str
        Why there is no EQ, when ``design`` is None.
    """

    label: str
    design: object
    band_hz: tuple
    positions: tuple
    flatness_before_db: np.ndarray
    flatness_after_db: np.ndarray
    perturbed_before_db: np.ndarray
    perturbed_after_db: np.ndarray
    reason: str = ""
    #: The largest lift further above the target at each position in the perturbed room,
    #: anywhere on :data:`SHARED_EQ_GRID_HZ` (NaN when not checked), dB.
    perturbed_raise_db: np.ndarray = None
    #: The grid of ``design.correction_db``, Hz.
    freq_hz: np.ndarray = None

    @property
    def filters(self):
        return () if self.design is None else tuple(self.design.filters)

    def to_dict(self):
        raise_db = (np.full(len(self.positions), np.nan) if self.perturbed_raise_db is None
                    else self.perturbed_raise_db)
        d = {"configuration": self.label, "band_hz": list(self.band_hz), "reason": self.reason,
             "filters": [f.to_dict() for f in self.filters],
             "max_boost_db": 0.0 if self.design is None else float(max(0.0, self.design.max_boost_db)),
             "max_cut_db": SHARED_EQ_MAX_CUT_DB,
             "positions": [{"name": n, "flatness_before_db": float(a), "flatness_after_db": float(b),
                            "perturbed_before_db": float(c), "perturbed_after_db": float(e),
                            "perturbed_raise_db": float(r)}
                           for n, a, b, c, e, r in zip(self.positions, self.flatness_before_db,
                                                       self.flatness_after_db, self.perturbed_before_db,
                                                       self.perturbed_after_db, raise_db)]}
        if self.design is not None:
            d["correction_db"] = self.design.correction_db
            d["frequencies_hz"] = self.freq_hz
        return d


def _flatness(freq_hz, level_db, band_hz):
    f = np.asarray(freq_hz)
    sel = (f >= band_hz[0]) & (f <= band_hz[1])
    seg = np.asarray(level_db)[..., sel]
    return np.sqrt(np.mean((seg - seg.mean(axis=-1, keepdims=True)) ** 2, axis=-1))


def _positions_levels(room, freq_hz, method):
    """The system's level (mono sum with the room's settings) at every seat and the head
    positions around it: names and (K, F) levels; the seats first."""
    from .correction import head_positions
    from .predict import predict_seats

    lay = room.layout
    seats = lay.all_seats
    pts = [(s.name, s.position_m) for s in seats]
    for s in seats:
        pts += [(f"{s.name} {t}", tuple(p)) for t, p in zip(("fwd", "back", "left", "right", "up", "down"),
                                                            head_positions(s.position_m))]
    pts = [(n, p) for n, p in pts if room.contains([p], 0.02)[0]]
    spread = replace(lay, seats=tuple(Seat(n, p, 1.0) for n, p in pts))
    sp = predict_seats(room, spread, freq_hz, method=method)
    return tuple(n for n, _ in pts), sp.system_db


def shared_eq(room, config, freq_hz, *, method=DEFAULT_METHOD, max_boost_db=SHARED_EQ_MAX_BOOST_DB,
              max_filters=SHARED_EQ_MAX_FILTERS, max_cut_db=SHARED_EQ_MAX_CUT_DB, level_db=None,
              check_perturbed=True):
    """One correction EQ for the whole system, designed on the seats' weighted average and
    judged at every seat.

    The EQ sits before the crossover (a DSP's input or the preamplifier): it changes mains and
    subs alike. It is designed with :func:`roommodes.analysis.correction.correct_curve` on the
    weighted power average of the seats' levels, with every seat and the head positions 15 cm
    around each seat as positions the design must not lift further above the target; then
    each position's flatness (RMS deviation from its own mean over the band) is compared
    before and after, in the model room and in :func:`perturbed_room`, where in addition no
    position may be lifted further above the target by more than
    :data:`SHARED_EQ_MAX_RAISE_DB` anywhere on :data:`SHARED_EQ_GRID_HZ`. When a position gets
    worse, fewer filters are tried, down to none.

    Parameters
    ----------
    room : Room
    config : SubConfig
        The subs and settings the EQ goes with.
    freq_hz : array_like (F,)
    method : str
    max_boost_db, max_filters, max_cut_db :
        Limits of the parametric design. Cuts take their Q from the peak's own width or the
        half-power bandwidth of the room mode inside it, boosts stay broad (Q <= 2), as in
        :func:`roommodes.analysis.correction.correct_curve`.
    level_db : array_like (P, F), optional
        The seats' levels to design on (e.g. from measurements); default the model's. The
        head positions and the perturbed room are then not judged.
    check_perturbed : bool

    Returns
    -------
    SharedEq
    """
    from .correction import _mode_list, correct_curve
    from .eqcheck import judge_levels
    from .predict import room_schroeder_frequency

    f_in = np.asarray(freq_hz, dtype=float)
    r = room_with_config(room, config)
    seats = r.layout.all_seats
    w = seat_weights([s.weight for s in seats])
    if level_db is None:
        # designed and judged over the range where the filters act, not only the scored band
        f = log_frequencies(min(SHARED_EQ_GRID_HZ[0], f_in[0]), max(SHARED_EQ_GRID_HZ[1], f_in[-1]), 24)
        names, L = _positions_levels(r, f, method)
    else:
        f = f_in
        names, L = tuple(s.name for s in seats), np.asarray(level_db, dtype=float)
    L_seats = L[:len(seats)]
    avg = 10.0 * np.log10(np.maximum(w @ 10.0 ** (L_seats / 10.0), 1e-30))
    subs = r.layout.subs
    low = max([float(f_in[0])] + [s.lowcut_hz for s in subs if s.lowcut_hz])
    fs = room_schroeder_frequency(room)
    band = (low, float(min(f_in[-1], fs)))
    order = max([s.lowcut_order for s in subs if s.lowcut_hz] or [2])
    modes = _mode_list(room, float(f[-1]))
    alt = None
    if check_perturbed and level_db is None:
        _, alt = _positions_levels(perturbed_room(r), f, method)
    nan = np.full(len(names), np.nan)
    before = _flatness(f, L, band)
    alt_before = _flatness(f, alt, band) if alt is not None else nan
    reason = "no filter set brought every seat closer to flat"
    for n in range(max_filters, 0, -1):
        corr = correct_curve("system", f, avg, band_hz=band, position_levels_db=L, lowcut_hz=low,
                             lowcut_order=order, max_filters=n, max_boost_db=max_boost_db, schroeder_hz=fs,
                             modes=modes, max_cut_db=max_cut_db)
        design = corr.parametric
        if not design.filters:
            reason = "the seats' average is already as flat as the filters can make it without harm at a seat"
            break
        c = np.asarray(design.correction_db)
        after = _flatness(f, L + c, band)
        alt_after, raise_db = nan, nan
        worse = after > before + SHARED_EQ_NO_HARM_DB
        if alt is not None:
            alt_after = _flatness(f, alt + c, band)
            raise_db = np.array([j.worst_raise_db for j in judge_levels(f, alt, c, np.zeros_like(f), band)])
            worse |= (alt_after > alt_before + SHARED_EQ_NO_HARM_DB) | (raise_db > SHARED_EQ_MAX_RAISE_DB)
        if not worse.any():
            return SharedEq(config.label, design, band, names, before, after, alt_before, alt_after,
                            perturbed_raise_db=raise_db, freq_hz=f)
        reason = ("every filter set left a seat or head position worse, in the model or the perturbed room")
    return SharedEq(config.label, None, band, names, before, before, alt_before, alt_before, reason,
                    perturbed_raise_db=nan, freq_hz=f)


def sub_names(n, current, mains=()):
    """Names for ``n`` subs: the file's subs' names first, then "sub-2", "sub-3", ... (names the
    mains or the file's subs already use are skipped)."""
    names = [s.name for s in current][:n]
    taken = {s.name for s in (*current, *mains)}
    k = 1
    while len(names) < n:
        cand = "sub" if k == 1 else f"sub-{k}"
        if cand not in taken and cand not in names:
            names.append(cand)
        k += 1
    return names


def room_with_config(room, config):
    """The room with ``config``'s subs and settings: the file's own subs (their roll-off and
    other keys kept) moved and set, new ones copied from the first of them (or
    :data:`DEFAULT_SUB`), and ``[system]`` holding the crossover and the mains' delay.

    Parameters
    ----------
    room : Room
        With a layout.
    config : SubConfig

    Returns
    -------
    Room
    """
    lay = room.layout
    current = lay.subs
    proto = current[0] if current else DEFAULT_SUB
    by_name = {s.name: s for s in current}
    subs = []
    for st in config.subs:
        base = by_name.get(st.name, proto)
        subs.append(replace(base, name=st.name, gain_db=float(st.gain_db), delay_ms=float(st.delay_ms),
                            polarity=int(st.polarity)).moved(st.position_m))
    system = SystemSettings(None if config.full_range else config.crossover_hz, float(config.mains_delay_ms))
    return replace(room, layout=replace(lay, speakers=tuple(lay.mains) + tuple(subs)), system=system)


def rank_configs(configs, margin_db=FEWER_SUBS_MARGIN_DB):
    """Rank configurations, best first, preferring fewer subs when more gain little.

    Repeatedly, among the configurations left, those whose score is within ``margin_db`` of the
    lowest score left are the contenders, and the one with the fewest subs among them (then the
    lowest score) comes next. So a configuration with more subs ranks above one with fewer
    only when its score is lower by more than ``margin_db``.

    Parameters
    ----------
    configs : sequence of SubConfig
    margin_db : float
        See :data:`FEWER_SUBS_MARGIN_DB`.

    Returns
    -------
    ranked : tuple of SubConfig
    notes : tuple of dict
        One per place where a configuration with fewer subs was put above the lowest-scoring
        one left: ``fewer`` and ``more`` (labels), ``fewer_subs``, ``more_subs`` (counts) and
        ``score_difference_db`` (how much better the one with more subs scored).
    """
    left = sorted(configs, key=lambda c: c.score)
    ranked, notes = [], []
    while left:
        best = left[0]
        contenders = [c for c in left if c.score <= best.score + margin_db]
        pick = min(contenders, key=lambda c: (len(c.subs), c.score))
        if pick is not best:
            notes.append({"fewer": pick.label, "more": best.label, "fewer_subs": len(pick.subs),
                          "more_subs": len(best.subs), "score_difference_db": float(pick.score - best.score)})
        ranked.append(pick)
        left.remove(pick)
    return tuple(ranked), tuple(notes)


def crossover_grid(crossover_hz, step_hz=5.0):
    """Crossover frequencies tried: ``step_hz`` apart across the range, ends included."""
    lo, hi = crossover_hz
    if hi - lo < step_hz:
        return np.unique([lo, hi])
    return np.unique(np.append(np.arange(lo, hi, step_hz), hi))


def optimise_subs(room, layout=None, search=None, *, method=DEFAULT_METHOD, points_per_octave=24,
                  check_perturbed=True):
    """Where the subs go and how to set them, for each count in ``search.counts``.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default ``room.layout``: its mains, its subs (the current layout) and its seats.
    search : SubSearch, optional
        Default ``room.subs_search`` or the defaults of :class:`SubSearch`.
    method : str
        Solver of every level (:func:`speaker_levels`).
    points_per_octave : int
        Density of the frequency grid over the scored band.
    check_perturbed : bool
        Evaluate each configuration's settings in :func:`perturbed_room` as well.

    Returns
    -------
    SubsResult
        ``ranked`` holds the best configuration for each count, the current subs with tuned
        settings (when the file has subs) and one sub at the front-wall centre, best first;
        ``before`` is the file's layout as it is (the subs with their own settings from the file,
        0 dB, 0 ms, + polarity when not given, and the [system] crossover or a
        low-pass at :data:`BEFORE_CROSSOVER_HZ`; the mains full range), or the mains alone.

    Notes
    -----
    Each candidate position's transfer to the seats is computed once with ``method`` (one
    :func:`speaker_levels` call over all candidates); positions, gains, delays, polarities and
    the crossover are then searched on those arrays. For 2 and 4 subs the search starts from
    the best smaller set filled up greedily, from the opposite-wall midpoints (2), and from the
    four wall midpoints and the four corners (4), and moves one sub at a time.
    """
    layout = room.layout if layout is None else layout
    if layout is None or not layout.mains:
        raise ValueError(f"{room.source or room.name}: the subwoofer search needs the main speakers and the seats "
                         "([speakers.NAME] and [seat] or [seats.NAME])")
    search = search or room.subs_search or SubSearch()
    seats = layout.all_seats
    weights = seat_weights([s.weight for s in seats]) * len(seats)
    seats_m = np.array([s.position_m for s in seats])
    band = tuple(search.band_hz)
    f = log_frequencies(band[0], band[1], points_per_octave)
    mains = layout.mains
    mains_m = np.array([m.position_m for m in mains])
    current = layout.subs
    proto = current[0] if current else DEFAULT_SUB
    lx, ly, _ = room.size_m
    gap = search.wall_gap_m
    front_centre = (gap, ly / 2, search.height_m)
    cands = candidate_positions(room, search, seats_m, mains_m)
    mains_h = speaker_levels(room, mains, seats_m, f, method=method).transfer
    pr = _Problem(f, mains_h, mains_m, seats_m, weights, band, target_level_db(f, mains_h, weights, band), search,
                  room.speed_of_sound)
    cand_sp = [replace(proto, name=f"c{i}").moved(p) for i, p in enumerate(cands)]
    cand_h = speaker_levels(room, cand_sp, seats_m, f, method=method).transfer
    xo_grid = crossover_grid(search.crossover_hz)
    fc0 = float(xo_grid[int(np.argmin(np.abs(np.log(xo_grid / np.sqrt(xo_grid[0] * xo_grid[-1])))))])

    def finish(label, kind, pos, h, names, start):
        fc, g, d, s = _tune_crossover(pr, h, pos, xo_grid, start)
        return _make_config(pr, label, kind, names, pos, g, d, s, fc, h)

    mid = {"front": (gap, ly / 2), "back": (lx - gap, ly / 2), "left": (lx / 2, gap), "right": (lx / 2, ly - gap)}
    corners = [(gap, gap), (gap, ly - gap), (lx - gap, gap), (lx - gap, ly - gap)]
    configs, best_by_n = [], {}
    for n in sorted(set(search.counts) | ({1} if 2 in search.counts else set()) | ({2} if 4 in search.counts else set())):
        starts = [best_by_n[max(best_by_n)]] if best_by_n else [[]]
        groups = {2: [[mid["front"], mid["back"]], [mid["left"], mid["right"]]],
                  4: [[mid[p] for p in ("front", "back", "left", "right")], corners]}.get(n, [])
        for group in groups:
            ids = [_nearest(cands, p) for p in group]
            if None not in ids and len(set(ids)) == n:
                starts.append(ids)
        found = _search_count(pr, n, cand_h, cands, fc0, starts)
        if found is None:
            continue
        _, idx, st = found
        best_by_n[n] = idx
        if n in search.counts:
            names = sub_names(n, current, mains)
            configs.append(finish(f"{n} sub{'s' if n > 1 else ''}", "search", cands[idx], cand_h[idx], names, st))
    cur_pos = np.array([s.position_m for s in current]) if current else np.zeros((0, 3))
    if current:
        h_cur = speaker_levels(room, current, seats_m, f, method=method).transfer
        configs.append(finish("current positions", "current", cur_pos, h_cur, [s.name for s in current], None))
    front_centre, front_note = _allowed_reference(front_centre, cands, search)
    h_front = speaker_levels(room, [proto.moved(front_centre)], seats_m, f, method=method).transfer
    configs.append(replace(finish("front-wall centre", "reference", np.array([front_centre]), h_front, [proto.name],
                                  None), note=front_note))
    if current:
        before = _as_it_is(pr, room, current, h_cur)
    else:
        before = _make_config(pr, "mains alone", "before", [], [], [], [], [], None,
                              np.zeros((0,) + mains_h.shape[1:]), full_range=True)
    if check_perturbed:
        alt = perturbed_room(room)
        alt_mains = speaker_levels(alt, mains, seats_m, f, method=method).transfer
        out = []
        for c in [*configs, before]:
            sp = list(current) if c.kind in ("current", "before") else [
                replace(proto, name=s.name).moved(s.position_m) for s in c.subs]
            h = speaker_levels(alt, sp, seats_m, f, method=method).transfer if sp else np.zeros((0,) + mains_h.shape[1:])
            alt_c = _make_config(pr, c.label, c.kind, [s.name for s in c.subs], [s.position_m for s in c.subs],
                                 [s.gain_db for s in c.subs], [s.delay_ms - c.mains_delay_ms for s in c.subs],
                                 [s.polarity for s in c.subs], c.crossover_hz, h, mains_h=alt_mains,
                                 full_range=c.full_range)
            out.append(replace(c, perturbed_seat_spread_db=alt_c.seat_spread_db))
        configs, before = out[:-1], out[-1]
    ranked, notes = rank_configs(configs)
    return SubsResult(f, seats, band, ranked, before, method, len(cands), cands, not current, search,
                      ranking_notes=notes)
