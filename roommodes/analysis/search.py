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
(batched: all source positions x all listening points x all frequencies as real matrix
products, grouped by seat position), the best are scored with the robustness part, the
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
from dataclasses import dataclass, replace

import numpy as np

from ..dsp.response import log_frequencies, smooth_fractional_octave
from ..model.placement import PRESETS, SEAT_HEIGHT_M, preset_layout
from ..model.room import WALL_MARGIN_M, Layout, Speaker
from ..model.speaker import speaker_response
from ..solvers.modal import modal_sum_block, modal_weights, static_green_block, static_green_pairs
from .predict import usable_band

__all__ = [
    "PARTS", "DEFAULT_WEIGHTS", "KeepOut", "SearchSpace", "ScoredLayout", "SearchResult",
    "search_space", "check_weights", "default_band", "flatness_db", "mismatch_db", "area_spread_db",
    "eq_boost_db", "score_parts", "score_layouts", "search_layouts", "seat_score_map",
    "front_distance_profile", "perturbations", "area_offsets",
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
#: Refinement stops when the step falls below this, m.
MIN_STEP_M = 0.01
_SMOOTH_FRACTION = 6  # 1/6 octave for the level curves
_BROAD_FRACTION = 3  # 1/3 octave for "broad" dips
_TINY = 1e-30

_SEARCH_KEYS = {
    "speaker_front_m", "speaker_side_m", "speaker_height_m", "symmetric", "spacing_m", "triangle",
    "triangle_tolerance", "seat_on_centre_line", "seat_height_m", "seat_front_m", "seat_side_m", "area_m",
    "area_points", "keep_out", "step_m",
}


# ------------------------------------------------------------------------------ constraints
@dataclass(frozen=True)
class KeepOut:
    """An axis-aligned box no speaker and no seat may enter (a desk, a door swing, a sofa).

    Attributes
    ----------
    name : str
    min_m, max_m : tuple of float
        Opposite corners (x, y, z), m, ``min_m < max_m`` on every axis.
    """

    name: str
    min_m: tuple
    max_m: tuple

    def contains(self, points_m):
        """Boolean mask of the points (..., 3) inside the box (edges included)."""
        p = np.asarray(points_m, dtype=float)
        return np.all((p >= np.asarray(self.min_m)) & (p <= np.asarray(self.max_m)), axis=-1)


@dataclass(frozen=True)
class SearchSpace:
    """Where the speakers and the seat may go (see docs/placement.md for every key).

    Distances are of the woofer centre (speakers) or the ear (seat), in metres.

    Attributes
    ----------
    speaker_front_m : (float, float)
        Distance range of the speakers from the front wall.
    speaker_side_m : (float, float)
        Distance range of each speaker from its own side wall (left speaker from the left
        wall, right speaker from the right wall).
    speaker_height_m : (float, float)
        Woofer height range.
    symmetric : bool
        The pair is mirror-symmetric about the centre line ``y = Ly / 2``.
    spacing_m : (float, float)
        Distance range between the two speakers.
    triangle : bool
        Each speaker-seat distance equals the spacing within ``triangle_tolerance``.
    triangle_tolerance : float
        Allowed relative difference, 0..1.
    seat_on_centre_line : bool
        The seat lies on ``y = Ly / 2``.
    seat_height_m : float
        Ear height.
    seat_front_m : (float, float)
        Distance range of the seat from the front wall.
    seat_side_m : float
        Smallest distance of the seat from either side wall (when off the centre line).
    area_m : (float, float)
        Listening area, depth (x) by width (y), centred on the seat at ear height.
    area_points : (int, int)
        Odd numbers of grid points along x and y (1 = the seat alone).
    keep_out : tuple of KeepOut
    step_m : float or None
        Coarse grid step; None chooses it from :data:`COARSE_STEPS_M` and the budget.
    """

    speaker_front_m: tuple
    speaker_side_m: tuple
    speaker_height_m: tuple
    symmetric: bool
    spacing_m: tuple
    triangle: bool
    triangle_tolerance: float
    seat_on_centre_line: bool
    seat_height_m: float
    seat_front_m: tuple
    seat_side_m: float
    area_m: tuple
    area_points: tuple
    keep_out: tuple = ()
    step_m: float | None = None


def default_space(room):
    """The documented defaults of every ``[search]`` key for ``room`` (see docs/placement.md)."""
    lx, ly, lz = room.size_m
    return SearchSpace(
        speaker_front_m=(0.2, round(0.4 * lx, 2)),
        speaker_side_m=(0.25, round(ly / 2, 2)),
        speaker_height_m=(0.7, round(min(1.5, lz - 0.3), 2)),
        symmetric=True,
        spacing_m=(1.0, round(min(3.0, ly - 0.5), 2)),
        triangle=True,
        triangle_tolerance=0.15,
        seat_on_centre_line=True,
        seat_height_m=min(SEAT_HEIGHT_M, lz - 0.3),
        seat_front_m=(1.0, round(lx - 0.5, 2)),
        seat_side_m=0.6,
        area_m=(0.6, 0.6),
        area_points=(3, 3),
    )


def _where(room):
    return f"{room.source or room.name}: [search]"


def search_space(room, table=None):
    """Read the placement constraints from a ``[search]`` table, with defaults.

    Parameters
    ----------
    room : Room
    table : dict, optional
        The table; default ``room.search`` (the room file's own).

    Returns
    -------
    SearchSpace

    Raises
    ------
    ValueError
        Naming the key, the value and what is allowed.
    """
    t = dict(room.search if table is None else table)
    where = _where(room)
    for k in t:
        if k not in _SEARCH_KEYS:
            raise ValueError(f"{where} unknown key '{k}'; allowed: {', '.join(sorted(_SEARCH_KEYS))}")
    base = default_space(room)
    lx, ly, lz = room.size_m
    m = WALL_MARGIN_M

    def number(key, value, lo, hi):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise ValueError(f"{where} {key}: expected a number, got {value!r}")
        if not lo <= value <= hi:
            raise ValueError(f"{where} {key}: {value:g} is out of range; allowed {lo:g} to {hi:g}")
        return float(value)

    def rng(key, lo_ok, hi_ok, what):
        if key not in t:
            return getattr(base, key)
        v = t[key]
        if not isinstance(v, list) or len(v) != 2:
            raise ValueError(f"{where} {key}: expected [low, high] in metres, got {v!r}")
        lo, hi = (number(key, x, -1e9, 1e9) for x in v)
        if lo > hi:
            raise ValueError(f"{where} {key}: the range {lo:g}-{hi:g} m is empty (low > high)")
        if lo < lo_ok or hi > hi_ok:
            raise ValueError(f"{where} {key}: {lo:g}-{hi:g} m reaches outside the room; {what} must lie "
                             f"within {lo_ok:g}-{hi_ok:g} m")
        return (lo, hi)

    def flag(key):
        if key not in t:
            return getattr(base, key)
        if not isinstance(t[key], bool):
            raise ValueError(f"{where} {key}: expected true or false, got {t[key]!r}")
        return t[key]

    front = rng("speaker_front_m", m, lx - m, f"the speakers' distance from the front wall (room length {lx:g} m)")
    side = rng("speaker_side_m", m, ly / 2, f"a speaker's distance from its side wall (half the width, {ly / 2:g} m)")
    height = rng("speaker_height_m", m, lz - m, f"the woofer height (room height {lz:g} m)")
    spacing = rng("spacing_m", 0.1, ly + lx, "the spacing")
    seat_front = rng("seat_front_m", m, lx - m, f"the seat's distance from the front wall (room length {lx:g} m)")
    tol = number("triangle_tolerance", t["triangle_tolerance"], 0.0, 1.0) if "triangle_tolerance" in t \
        else base.triangle_tolerance
    seat_h = number("seat_height_m", t["seat_height_m"], m, lz - m) if "seat_height_m" in t else base.seat_height_m
    seat_side = number("seat_side_m", t["seat_side_m"], m, ly / 2) if "seat_side_m" in t else base.seat_side_m
    area = base.area_m
    if "area_m" in t:
        v = t["area_m"]
        if not isinstance(v, list) or len(v) != 2:
            raise ValueError(f"{where} area_m: expected [depth, width] in metres, got {v!r}")
        area = (number("area_m", v[0], 0.0, lx), number("area_m", v[1], 0.0, ly))
    points = base.area_points
    if "area_points" in t:
        v = t["area_points"]
        if not isinstance(v, list) or len(v) != 2 or not all(isinstance(x, int) and not isinstance(x, bool) for x in v):
            raise ValueError(f"{where} area_points: expected two whole numbers [along x, along y], got {v!r}")
        if any(x < 1 or x > 9 or x % 2 == 0 for x in v):
            raise ValueError(f"{where} area_points: {v} not allowed; use odd numbers 1 to 9 so the seat is a point "
                             "of the grid")
        points = tuple(v)
    step = None
    if "step_m" in t:
        step = number("step_m", t["step_m"], 0.02, 1.0)
    keep = []
    ko = t.get("keep_out", [])
    if not isinstance(ko, list):
        raise ValueError(f"{where} keep_out: expected a list of boxes, e.g. "
                         "[{ name = \"desk\", min_m = [0.3, 0.8, 0], max_m = [1.1, 2.6, 0.75] }]")
    for i, box in enumerate(ko):
        key = f"keep_out[{i}]"
        if not isinstance(box, dict) or not {"min_m", "max_m"} <= set(box) \
                or not set(box) <= {"name", "min_m", "max_m"}:
            raise ValueError(f"{where} {key}: a box needs min_m and max_m ([x, y, z] in metres) and may have a name")
        corners = []
        for c in ("min_m", "max_m"):
            v = box[c]
            if not isinstance(v, list) or len(v) != 3:
                raise ValueError(f"{where} {key}.{c}: expected [x, y, z] in metres, got {v!r}")
            corners.append(tuple(number(f"{key}.{c}", x, -1e9, 1e9) for x in v))
        if any(a >= b for a, b in zip(*corners)):
            raise ValueError(f"{where} {key}: min_m {list(corners[0])} must be below max_m {list(corners[1])} "
                             "on every axis")
        keep.append(KeepOut(str(box.get("name", f"box {i + 1}")), corners[0], corners[1]))
    space = SearchSpace(front, side, height, flag("symmetric"), spacing, flag("triangle"), tol,
                        flag("seat_on_centre_line"), seat_h, seat_front, seat_side, area, points, tuple(keep), step)
    for i, x in enumerate((area[0] / 2, area[1] / 2)):
        lim = (seat_front[0], lx - seat_front[1]) if i == 0 else (
            (ly / 2, ly / 2) if space.seat_on_centre_line else (seat_side, seat_side))
        if x > min(lim) - m:
            given = "area_m" in t
            raise ValueError(f"{where} area_m: a listening area {area[0]:g} x {area[1]:g} m around the seat"
                             + ("" if given else " (the default; the file gives no area_m)")
                             + " would reach a wall from the allowed seat positions; "
                             + ("make it smaller or move seat_front_m" if given else
                                "give a smaller area_m in [search], e.g. area_m = [0.1, 0.1]"))
    return space


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


def score_parts(freq_hz, left_db, right_db, band_hz, seat_index=None):
    """The first four score parts from the two channels' levels over the listening area.

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
        ``flatness``, ``mismatch``, ``area``, ``boost`` in dB.
    """
    left = np.atleast_2d(left_db)
    right = np.atleast_2d(right_db)
    i = left.shape[0] // 2 if seat_index is None else seat_index
    fl = flatness_db(freq_hz, np.stack([left[i], right[i]]), band_hz)
    ar = area_spread_db(freq_hz, np.stack([left, right]), band_hz)
    return {
        "flatness": float(np.sqrt(np.mean(fl**2))),
        "mismatch": float(mismatch_db(freq_hz, left[i], right[i], band_hz)),
        "area": float(np.sqrt(np.mean(ar**2))),
        "boost": float(np.max(eq_boost_db(freq_hz, np.stack([left[i], right[i]]), band_hz))),
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
        self.proj = _line_projection(f[self.sel])
        self.offsets = area_offsets(area_m, area_points)
        self.seat_row = self.offsets.shape[0] // 2
        self.nmax = self.idx.max(axis=0)
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
        p = np.atleast_2d(points)
        tabs = [np.cos(np.pi / self.size[i] * p[:, i:i + 1] * np.arange(self.nmax[i] + 1)) for i in range(3)]
        out = tabs[0][:, self.idx[:, 0]] * tabs[1][:, self.idx[:, 1]]
        out *= tabs[2][:, self.idx[:, 2]]
        return out

    def transfer_block(self, src, rec, psi_src=None):
        """(S, R, F) complex transfers, every source to every receiver (``psi_src``: the
        sources' mode shapes, when already known)."""
        psi_s = self.shapes(src) if psi_src is None else psi_src
        psi_r = self.shapes(rec)
        h = modal_sum_block(psi_s, psi_r, self.weight)
        tail = 4 * np.pi * static_green_block(self.size, src, rec) - psi_s @ (self.static_weight[:, None] * psi_r.T)
        h += tail[:, :, None]
        self.pair_evaluations += src.shape[0] * rec.shape[0]
        return h

    def transfer_layouts(self, vecs, chunk=256):
        """(K, 2, A, F) complex transfers of both speakers to the area points of K layouts.

        For each layout the products ``psi_n(speaker) psi_n(point)`` (2 A x N) are formed by
        broadcasting and multiply the weights in one real GEMM; the same products give the
        low-mode part of the static tail.
        """
        v = np.atleast_2d(vecs)
        k = v.shape[0]
        a = self.offsets.shape[0]
        out = np.empty((k, 2, a, self.freq_hz.size), dtype=complex)
        wr = self.weight.view(np.float64)
        for i0 in range(0, k, chunk):
            vi = v[i0:i0 + chunk]
            n = vi.shape[0]
            src = vi[:, :6].reshape(n, 2, 3)
            rec = np.clip(vi[:, None, 6:9] + self.offsets[None], WALL_MARGIN_M, self.size - WALL_MARGIN_M)
            psi_s = self.shapes(src.reshape(-1, 3)).reshape(n, 2, 1, -1)
            psi_r = self.shapes(rec.reshape(-1, 3)).reshape(n, 1, a, -1)
            prod = (psi_s * psi_r).reshape(n * 2 * a, -1)  # (pairs, N)
            h = (prod @ wr).view(np.complex128)
            ss = np.broadcast_to(src[:, :, None, :], (n, 2, a, 3)).reshape(-1, 3)
            rr = np.broadcast_to(rec[:, None, :, :], (n, 2, a, 3)).reshape(-1, 3)
            h += (4 * np.pi * static_green_pairs(self.size, ss, rr) - prod @ self.static_weight)[:, None]
            out[i0:i0 + n] = h.reshape(n, 2, a, -1)
        self.pair_evaluations += 2 * a * k
        self.layout_evaluations += k
        return out

    # -- score parts from transfers
    def features(self, h, channel):
        """Per-source features from transfers ``h`` (..., A, F) of one channel."""
        power = (h.real**2 + h.imag**2) * self.speaker_power[channel]
        ls = 10 * np.log10(np.maximum(power @ self.smooth6, _TINY))  # (..., A, Fb)
        seat = ls[..., self.seat_row, :]
        resid = seat @ self.proj
        broad = 10 * np.log10(np.maximum(power[..., self.seat_row, :] @ self.smooth3, _TINY))
        return {
            "seat": seat,
            "flat_ms": np.mean(resid**2, axis=-1),
            "area_var": np.mean(np.var(ls, axis=-2), axis=-1),
            "boost": np.maximum(0.0, np.max(seat - resid - broad, axis=-1)),
        }

    def parts(self, fl, fr, mismatch_ms=None):
        mm = np.mean((fl["seat"] - fr["seat"]) ** 2, axis=-1) if mismatch_ms is None else mismatch_ms
        return {
            "flatness": np.sqrt(0.5 * (fl["flat_ms"] + fr["flat_ms"])),
            "mismatch": np.sqrt(np.maximum(mm, 0.0)),
            "area": np.sqrt(0.5 * (fl["area_var"] + fr["area_var"])),
            "boost": np.maximum(fl["boost"], fr["boost"]),
        }

    def base_score(self, parts):
        return sum(self.weights[k] * parts[k] for k in PARTS[:4])

    def score_vecs(self, vecs, robustness=True):
        """Parts (dict of (K,) arrays, with ``robustness``) and scores (K,) of K layouts."""
        v = np.atleast_2d(np.asarray(vecs, dtype=float))
        h = self.transfer_layouts(v)
        parts = self.parts(self.features(h[:, 0], 0), self.features(h[:, 1], 1))
        s4 = self.base_score(parts)
        if robustness and self.weights["robustness"] > 0:
            moves = perturbations().reshape(8, 9)
            pv = self.clip_inside(v[:, None, :] + moves[None]).reshape(-1, 9)
            hp = self.transfer_layouts(pv)
            sp = self.base_score(self.parts(self.features(hp[:, 0], 0), self.features(hp[:, 1], 1)))
            parts["robustness"] = np.mean(np.maximum(0.0, sp.reshape(-1, 8) - s4[:, None]), axis=1)
        else:
            parts["robustness"] = np.zeros(v.shape[0])
        return parts, s4 + self.weights["robustness"] * parts["robustness"]

    def clip_inside(self, vecs):
        size3 = np.tile(self.size, 3)
        return np.clip(vecs, WALL_MARGIN_M, size3 - WALL_MARGIN_M)


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
    """

    name: str
    layout: Layout
    score: float
    parts: dict
    in_region: bool = True


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


# ------------------------------------------------------------------------------ layouts <-> vectors
def _pair_speakers(room):
    if room.layout is not None and len(room.layout.speakers) >= 2:
        return tuple(room.layout.speakers[:2])
    if room.layout is not None and len(room.layout.speakers) == 1:
        s = room.layout.speakers[0]
        return (replace(s, name="left"), replace(s, name="right"))
    return (Speaker("left", (0.0, 0.0, 0.0)), Speaker("right", (0.0, 0.0, 0.0)))


def _vec(layout):
    return np.concatenate([np.asarray(layout.speakers[0].position_m, float),
                           np.asarray(layout.speakers[1].position_m, float), np.asarray(layout.seat_m, float)])


def _layout(vec, speakers, name):
    v = [round(float(x), 4) for x in vec]
    return Layout((speakers[0].moved(v[0:3]), speakers[1].moved(v[3:6])), tuple(v[6:9]), name)


def _grid(lo, hi, step):
    n = max(1, int(round((hi - lo) / step))) + 1 if hi > lo else 1
    return np.linspace(lo, hi, n)


class _Constraints:
    """Vectorised checks of the [search] constraints on layout 9-vectors."""

    def __init__(self, room, space):
        self.room, self.space = room, space
        self.size = np.asarray(room.size_m, dtype=float)

    def speaker_ok(self, p, side):
        """Region and keep-out test of speaker positions (..., 3); side 0 left, 1 right."""
        sp, ly = self.space, self.size[1]
        y_wall = p[..., 1] if side == 0 else ly - p[..., 1]
        ok = ((p[..., 0] >= sp.speaker_front_m[0] - 1e-9) & (p[..., 0] <= sp.speaker_front_m[1] + 1e-9)
              & (y_wall >= sp.speaker_side_m[0] - 1e-9) & (y_wall <= sp.speaker_side_m[1] + 1e-9)
              & (p[..., 2] >= sp.speaker_height_m[0] - 1e-9) & (p[..., 2] <= sp.speaker_height_m[1] + 1e-9))
        return ok & ~self.in_keep_out(p)

    def in_keep_out(self, p):
        bad = np.zeros(p.shape[:-1], dtype=bool)
        for box in self.space.keep_out:
            bad |= box.contains(p)
        return bad

    def seat_ok(self, p):
        sp, ly = self.space, self.size[1]
        ok = (p[..., 0] >= sp.seat_front_m[0] - 1e-9) & (p[..., 0] <= sp.seat_front_m[1] + 1e-9)
        if sp.seat_on_centre_line:
            ok &= np.abs(p[..., 1] - ly / 2) < 1e-6
        else:
            ok &= (p[..., 1] >= sp.seat_side_m - 1e-9) & (p[..., 1] <= ly - sp.seat_side_m + 1e-9)
        ok &= np.abs(p[..., 2] - sp.seat_height_m) < 1e-6
        return ok & ~self.in_keep_out(p)

    def pair_ok(self, left, right, seat):
        """Spacing and listening-triangle tests of arrays of positions (..., 3)."""
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
        if sp.symmetric:
            ok &= (np.abs(left[..., 0] - right[..., 0]) < 1e-6) & (np.abs(left[..., 2] - right[..., 2]) < 1e-6) & (
                np.abs(left[..., 1] + right[..., 1] - self.size[1]) < 1e-6)
        return ok

    def valid(self, vecs):
        v = np.atleast_2d(vecs)
        left, right, seat = v[:, 0:3], v[:, 3:6], v[:, 6:9]
        return (self.speaker_ok(left, 0) & self.speaker_ok(right, 1) & self.seat_ok(seat)
                & self.pair_ok(left, right, seat) & (left[:, 1] < right[:, 1]))


# ------------------------------------------------------------------------------ coarse pass
def _seat_grid(space, size, step):
    sx = _grid(*space.seat_front_m, step)
    if space.seat_on_centre_line:
        sy = np.array([size[1] / 2])
    else:
        sy = _grid(space.seat_side_m, size[1] - space.seat_side_m, step)
    xx, yy = np.meshgrid(sx, sy, indexing="ij")
    return np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, space.seat_height_m)], axis=1)


def _speaker_grid(space, size, step, side):
    x = _grid(*space.speaker_front_m, step)
    lo, hi = space.speaker_side_m
    # a mirrored pair needs its spacing from the centre line; a free one only stays on its side
    hi = min(hi, size[1] / 2 - 0.5 * space.spacing_m[0]) if space.symmetric else min(hi, size[1] / 2)
    if hi < lo:
        return np.zeros((0, 3))
    w = _grid(lo, hi, step)
    y = w if side == 0 else size[1] - w
    z = _grid(*space.speaker_height_m, step)
    xx, yy, zz = np.meshgrid(x, y, z, indexing="ij")
    return np.stack([xx.ravel(), yy.ravel(), zz.ravel()], axis=1)


def _mirror(p, ly):
    q = np.array(p, dtype=float, copy=True)
    q[..., 1] = ly - q[..., 1]
    return q


def _coarse_plan(room, space, step, count_only=False):
    """Seat positions and, for each, the compatible left (and right) speaker positions.

    With ``count_only``, only the number of (speaker position, seat) pairs to evaluate.
    """
    cons = _Constraints(room, space)
    size = cons.size
    seats = _seat_grid(space, size, step)
    seats = seats[cons.seat_ok(seats)]
    left = _speaker_grid(space, size, step, 0)
    if left.size == 0:
        raise ValueError(f"{_where(room)} no speaker position fits: the spacing range starts at "
                         f"{space.spacing_m[0]:g} m, but speaker_side_m {space.speaker_side_m[0]:g}-"
                         f"{space.speaker_side_m[1]:g} m leaves at most {size[1] - 2 * space.speaker_side_m[0]:g} m "
                         f"between the speakers in a room {size[1]:g} m wide")
    n_region = left.shape[0]
    left = left[cons.speaker_ok(left, 0)]
    right = _speaker_grid(space, size, step, 1)
    right = right[cons.speaker_ok(right, 1)]
    if space.symmetric:
        keep = cons.speaker_ok(_mirror(left, size[1]), 1)
        left = left[keep]
        right = _mirror(left, size[1])
    if left.size == 0 or right.size == 0:
        names = ", ".join(b.name for b in space.keep_out)
        raise ValueError(f"{_where(room)} the keep-out boxes ({names}) cover every allowed speaker position "
                         f"({n_region} grid positions); shrink or move them, or widen the speaker ranges")
    if seats.size == 0:
        raise ValueError(f"{_where(room)} no seat position is allowed: seat_front_m {space.seat_front_m[0]:g}-"
                         f"{space.seat_front_m[1]:g} m, seat height {space.seat_height_m:g} m"
                         + (" (the keep-out boxes cover them)" if space.keep_out else ""))
    if count_only:  # mirrored pairs with the seat on the centre line cost one speaker each
        if space.symmetric:
            per = 1 if space.seat_on_centre_line else 2
            return int(sum(per * np.count_nonzero(cons.pair_ok(left, right, seat[None, :])) for seat in seats))
        return int(sum(np.count_nonzero(_distance_possible(left, seat, space))
                       + np.count_nonzero(_distance_possible(right, seat, space)) for seat in seats))
    plan = []
    for seat in seats:
        if space.symmetric:
            ok = cons.pair_ok(left, right, seat[None, :])
            if ok.any():
                plan.append((seat, left[ok], right[ok], None))
        else:
            d_ok_l = _distance_possible(left, seat, space)
            d_ok_r = _distance_possible(right, seat, space)
            li, ri = np.flatnonzero(d_ok_l), np.flatnonzero(d_ok_r)
            if li.size and ri.size:
                mask = cons.pair_ok(left[li][:, None, :], right[ri][None, :, :], seat[None, None, :])
                if mask.any():
                    keep_l, keep_r = mask.any(axis=1), mask.any(axis=0)
                    plan.append((seat, left[li][keep_l], right[ri][keep_r], mask[np.ix_(keep_l, keep_r)]))
    if not plan:
        what = (f"the listening triangle (speaker-seat distances within {space.triangle_tolerance:.0%} of the "
                f"spacing {space.spacing_m[0]:g}-{space.spacing_m[1]:g} m)" if space.triangle
                else f"the spacing range {space.spacing_m[0]:g}-{space.spacing_m[1]:g} m")
        raise ValueError(f"{_where(room)} no layout satisfies every constraint: with the speakers "
                         f"{space.speaker_front_m[0]:g}-{space.speaker_front_m[1]:g} m from the front wall and the "
                         f"seat {space.seat_front_m[0]:g}-{space.seat_front_m[1]:g} m from it, {what} cannot be "
                         "met; widen the ranges")
    return plan


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
    for step in COARSE_STEPS_M:
        if step == COARSE_STEPS_M[-1] or _coarse_plan(room, space, step, count_only=True) * flop_per_pair \
                <= COARSE_BUDGET_FLOP:
            break
    return step, _coarse_plan(room, space, step)


def _coarse_pass(scorer, plan, keep_per_seat, progress):
    """Score every candidate of the plan by the first four parts; keep the best per seat."""
    vecs, s4s, n_cand = [], [], 0
    mirror = scorer.mirror_rows()
    # the speaker positions repeat from seat to seat: their mode shapes are computed once
    grid = np.unique(np.round(np.concatenate([np.concatenate([l_, r_]) for _, l_, r_, _ in plan]), 9), axis=0)
    psi_grid = scorer.shapes(grid)

    def shapes_of(points):
        rows = np.searchsorted(_row_keys(grid), _row_keys(np.round(points, 9)))
        return psi_grid[rows]

    for i, (seat, left, right, mask) in enumerate(plan):
        rec = seat[None, :] + scorer.offsets
        nl = left.shape[0]
        if mask is None and mirror is not None and abs(seat[1] - scorer.size[1] / 2) < 1e-9:
            # the model is symmetric about y = Ly/2 (the damping weighs the left and right
            # walls alike): the mirrored speaker's transfer to a point is the speaker's
            # transfer to the mirrored point, so the right channel costs nothing
            h = scorer.transfer_block(left, rec, shapes_of(left))
            fl, fr = scorer.features(h, 0), scorer.features(h[:, mirror], 1)
        else:
            both = np.concatenate([left, right])
            h = scorer.transfer_block(both, rec, shapes_of(both))
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
        top = np.argsort(s4)[:keep_per_seat]
        v = np.concatenate([left[li[top]], right[ri[top]], np.repeat(seat[None], top.size, axis=0)], axis=1)
        vecs.append(v)
        s4s.append(s4[top])
        if progress:
            progress(i + 1, len(plan))
    scorer.layout_evaluations += n_cand
    return np.concatenate(vecs), np.concatenate(s4s), n_cand


def _row_keys(points):
    """Sortable keys of rows (lexicographic, as np.unique(axis=0) orders them)."""
    p = np.ascontiguousarray(points, dtype=float)
    return np.rec.fromarrays(p.T, names="x,y,z")


def _directions(space):
    dirs = []
    if space.symmetric:
        dirs += [[1, 0, 0, 1, 0, 0, 0, 0, 0], [0, 1, 0, 0, -1, 0, 0, 0, 0], [0, 0, 1, 0, 0, 1, 0, 0, 0]]
    else:
        for i in range(6):
            e = [0] * 9
            e[i] = 1
            dirs.append(e)
    dirs.append([0] * 6 + [1, 0, 0])
    if not space.seat_on_centre_line:
        dirs.append([0] * 7 + [1, 0])
    return np.array(dirs, dtype=float)


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
        if owner.size:
            cand = nb[owner, which]
            p4, _ = scorer.score_vecs(cand, robustness=False)
            s4 = scorer.base_score(p4)
            # robustness only for the best few moves of each seed whose base score can still win
            chosen = []
            for a in np.unique(owner):
                rows = np.flatnonzero(owner == a)
                rows = rows[s4[rows] < score[active[a]]]
                chosen.extend(rows[np.argsort(s4[rows])[:per_seed]])
            chosen = np.array(chosen, dtype=int)
        else:
            chosen = np.array([], dtype=int)
        improved = np.zeros(active.size, dtype=bool)
        if chosen.size:
            _, full = scorer.score_vecs(cand[chosen])
            for a in np.unique(owner[chosen]):
                rows = np.flatnonzero(owner[chosen] == a)
                best = rows[np.argmin(full[rows])]
                if full[best] < score[active[a]] - 1e-9:
                    cur[active[a]] = cand[chosen[best]]
                    score[active[a]] = full[best]
                    improved[a] = True
        step[active[~improved]] /= 2
        if progress:
            progress(it + 1, max_iter)
    return cur, score


def _dedupe(vecs, scores, tol_m=0.02):
    order = np.argsort(scores)
    kept = []
    for i in order:
        if all(np.max(np.abs(vecs[i] - vecs[j])) > tol_m for j in kept):
            kept.append(i)
    return kept


def search_layouts(room, space=None, weights=None, band_hz=None, top=5, points_per_octave=DEFAULT_POINTS_PER_OCTAVE,
                   progress=None, n_seeds=6, refine=True):
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
        Run the local refinement (off: the coarse grid's best, scored in full).

    Returns
    -------
    SearchResult

    Raises
    ------
    ValueError
        For an empty or impossible region, keep-out boxes covering it, bad weights or band.

    Notes
    -----
    The coarse pass ranks by the first four parts; its best ``max(4 top, 24)`` layouts get
    the robustness part, and ``n_seeds`` distinct ones among them (more than one coarse step
    apart) start the pattern search, which scores every accepted move in full.
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

    vecs, s4, n_cand = _coarse_pass(scorer, plan, max(32, 4 * top), report(0.0, 0.6))
    pool = np.argsort(s4)[:max(4 * top, 24)]
    _, full_pool = scorer.score_vecs(vecs[pool])
    if progress:
        progress(0.65)
    order = np.argsort(full_pool)
    seeds = []
    for i in order:
        if len(seeds) >= n_seeds:
            break
        if all(np.max(np.abs(vecs[pool[i]] - vecs[pool[j]])) > 1.01 * step for j in seeds):
            seeds.append(i)
    final_vecs, final_scores = vecs[pool], full_pool
    if refine and seeds:
        rv, rs = _refine(scorer, cons, vecs[pool[seeds]], full_pool[seeds], step / 2, report(0.65, 0.95))
        final_vecs = np.concatenate([rv, final_vecs])
        final_scores = np.concatenate([rs, final_scores])
    keep = _dedupe(final_vecs, final_scores, max(0.02, step / 2))[:top]
    parts, scores = scorer.score_vecs(final_vecs[keep])
    ranked = tuple(
        ScoredLayout(str(r + 1), _layout(final_vecs[i], speakers, f"search {r + 1}"), float(scores[r]),
                     {k: float(parts[k][r]) for k in PARTS}, True)
        for r, i in enumerate(keep))
    ranked = tuple(sorted(ranked, key=lambda s: s.score))
    ranked = tuple(replace(s, name=str(r + 1), layout=replace(s.layout, name=f"search {r + 1}"))
                   for r, s in enumerate(ranked))
    presets, current = _reference_layouts(room, scorer, cons)
    if progress:
        progress(1.0)
    return SearchResult(ranked, presets, current, band, w, space, float(step), int(n_cand),
                        int(scorer.layout_evaluations), int(scorer.pair_evaluations), int(scorer.freq_hz.size))


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
    out = [ScoredLayout(lay.name, Layout(tuple(lay.speakers[:2]), lay.seat_m, lay.name), float(scores[i]),
                        {k: float(parts[k][i]) for k in PARTS}, bool(inside[i])) for i, lay in enumerate(all_l)]
    return tuple(out[:len(layouts)]), (out[-1] if current is not None else None)


def score_layouts(room, layouts, weights=None, band_hz=None, area_m=(0.6, 0.6), area_points=(3, 3),
                  points_per_octave=DEFAULT_POINTS_PER_OCTAVE, robustness=True):
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

    Returns
    -------
    list of ScoredLayout
        ``in_region`` is True (no constraints are checked here).
    """
    layouts = list(layouts)
    if not layouts:
        raise ValueError("no layouts to score")
    scorer = _scorer_for(room, layouts[0], weights, band_hz, area_m, area_points, points_per_octave)
    vecs = np.array([_vec(lay) for lay in layouts])
    _check_inside(room, scorer, vecs)
    parts, scores = scorer.score_vecs(vecs, robustness=robustness)
    return [ScoredLayout(lay.name, lay, float(scores[i]), {k: float(parts[k][i]) for k in PARTS})
            for i, lay in enumerate(layouts)]


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
