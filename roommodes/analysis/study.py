"""Design studies: rank candidate rooms by their predicted bass after their own EQ.

A study (:class:`roommodes.model.study.StudySpec`) is a grid of room sizes times wall
constructions. Each candidate is scored by :func:`evaluate_candidate`, a pure function of the
spec and the candidate's index:

1. the room: the candidate's size and materials (surfaces made as a room file makes them, so
   each library material's own absorption range counts as it does there), the study's air
   and uncertainty;
2. the band: from the study's low limit to the room's own Schroeder frequency (its modal
   region), or a fixed band;
3. the layout: the "triangle" rule (the same listening triangle, in metres, in every room;
   seat at a fraction of the length), a standard preset, the best preset, or a placement
   search in this room (``placement = "search"``, a bounded budget), which also judges the
   rule's layout and keeps whichever scores better, so it never scores worse than the rule;
4. the levels of both speakers at a grid over the seat area (the same size in every room) in
   ``samples`` rooms drawn from the uncertainty
   (:func:`roommodes.analysis.uncertainty.ensemble_levels`), seeded from ``(seed, index)``,
   so the result does not depend on which worker computes it;
5. the room's own EQ per channel: a parametric design (:func:`roommodes.analysis.eq.design_parametric`)
   on the ensemble median of the seat area's power-average level;
6. the score of each drawn room after that EQ, on 1/6-octave smoothed levels: the rms
   deviation of the seat area's power-average level from its own mean over the band
   (response, dB) plus the rms over the band of the level's standard deviation across the
   seat area (spread, dB); both channels averaged. The candidate's score is the ensemble
   median, with its 10th and 90th percentiles.

The proportion criteria (:func:`roommodes.analysis.summary.room_summary`) are reported beside
each candidate, not used in the score.

:func:`run_study` maps :func:`evaluate_candidate` over the candidates on a
``dask.distributed`` client (one task per candidate) or, without one, in a loop; the ranking
sorts by score and then by index, so the result is the same for any number of workers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from dask.distributed import as_completed

from ..dsp.response import log_frequencies, smooth_db
from ..model.placement import PRESETS, preset_layout, search_space, triangle_layout
from ..model.room import WALL_MARGIN_M, WALLS, Room, Surface
from ..model.study import SCHROEDER
from ..solvers import DEFAULT_METHOD
from . import eq
from .levels import speaker_levels
from .predict import room_schroeder_frequency
from .search import search_layouts
from .summary import room_summary
from .uncertainty import ensemble_levels

__all__ = ["CandidateResult", "StudyResult", "candidate_band", "candidate_room", "candidate_seed",
           "evaluate_candidate", "run_study", "score_levels", "study_frequencies"]

#: Smoothing of the curves the EQ is designed on, 1/N octave (common practice for room EQ).
EQ_SMOOTHING = 12
#: Largest boost the study's EQ may use, dB (a conservative default, as in ``roommodes eq``).
MAX_BOOST_DB = 6.0
#: Smoothing of the levels the score is computed on, 1/N octave (common practice for judging
#: a bass response: finer detail moves with a head's few centimetres).
SCORE_SMOOTHING = 6
#: Limits of a band top taken from the Schroeder frequency, Hz: at least an octave above the
#: low limit, at most 300 Hz (where the bass ends for this program).
_TOP_MAX_HZ = 300.0
#: Search budget of ``placement = "search"``: starting points of the refinement (when on), and
#: the solver that ranks its finalists (the study's own score then judges the chosen layout).
_SEARCH_SEEDS = 1
#: Distinct layouts the per-room search returns; the study keeps the one its own score, on the
#: nominal room, likes best (the two scores weigh things differently).
_SEARCH_KEEP = 3
_SEARCH_METHOD = "modal"


def candidate_room(spec, index):
    """The nominal room of candidate ``index`` (sizes vary fastest, then wall materials)."""
    sizes = spec.sizes_m()
    wi, si = divmod(int(index), len(sizes))
    size = tuple(float(v) for v in sizes[si])
    mats = {"floor": spec.floor, "ceiling": spec.ceiling}
    surfaces = tuple(Surface.from_material(w, mats.get(w, spec.walls[wi])) for w in WALLS)
    name = f"{size[0]:g} x {size[1]:g} x {size[2]:g} m, {spec.walls[wi]}"
    return Room(name, size, surfaces, spec.temperature_c, uncertainty=spec.uncertainty)


def candidate_seed(spec, index):
    """Seed of candidate ``index``: from the study's seed and the index only."""
    return int(np.random.SeedSequence([int(spec.seed), int(index)]).generate_state(1)[0])


def candidate_band(spec, room):
    """The band (Hz) candidate ``room`` is scored and equalised over.

    The study's ``band_hz``; a top of "schroeder" is the room's Schroeder frequency
    (:func:`roommodes.analysis.predict.room_schroeder_frequency`), kept between an octave
    above the low limit and 300 Hz.
    """
    lo, hi = spec.band_hz
    if hi == SCHROEDER:
        hi = min(max(room_schroeder_frequency(room), 2.0 * lo), _TOP_MAX_HZ)
    return (float(lo), round(float(hi), 3))


def study_frequencies(spec, band_hz):
    """Frequency grid of a candidate: the band plus half the score's smoothing window each side."""
    half = 2.0 ** (1.0 / (2 * SCORE_SMOOTHING))
    return log_frequencies(band_hz[0] / half, band_hz[1] * half, spec.points_per_octave)


def seat_area(room, seat_m, area_m, points):
    """(P, 3) grid over the seat area (depth along x, width along y) at ear height, inside the room."""
    axes = [np.linspace(c - a / 2, c + a / 2, n) if n > 1 else np.array([c])
            for c, a, n in zip(seat_m[:2], area_m, points)]
    gx, gy = np.meshgrid(*axes, indexing="ij")
    pts = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, seat_m[2])])
    return np.clip(pts, WALL_MARGIN_M, np.asarray(room.size_m) - WALL_MARGIN_M)


def _area_db(levels_db):
    """Power average over the points axis (-2) of levels in dB."""
    return 10.0 * np.log10(np.maximum(np.mean(10.0 ** (levels_db / 10.0), axis=-2), 1e-30))


def room_eq_db(freq_hz, area_db, band_hz, lowest_mode_hz=None):
    """Each channel's EQ curve (S, F), dB: a parametric design on the smoothed seat-area level (S, F)."""
    f = np.asarray(freq_hz, dtype=float)
    out = np.zeros_like(area_db)
    for c, curve in enumerate(area_db):
        lv = smooth_db(f, curve, EQ_SMOOTHING)
        tg = eq.make_target(f, lv, band_hz)
        out[c] = eq.design_parametric(f, lv, tg, band_hz, max_boost_db=MAX_BOOST_DB).correction_db
    return out


def score_levels(freq_hz, levels_db, band_hz, smoothing=SCORE_SMOOTHING):
    """Response and spread (dB) of levels (..., S, P, F) over the band.

    Each point's level is first power-smoothed over 1/``smoothing`` octave (0: not).

    Returns
    -------
    (response_db, spread_db) : ndarray (...)
        rms over the band of the seat-area power average's deviation from its own mean, and rms
        over the band of the standard deviation across the points; both averaged over channels.
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = (f >= band_hz[0] * (1 - 1e-9)) & (f <= band_hz[1] * (1 + 1e-9))
    lv = smooth_db(f, levels_db, smoothing)[..., sel]
    area = _area_db(lv)
    dev = area - area.mean(axis=-1, keepdims=True)
    response = np.sqrt(np.mean(dev**2, axis=-1)).mean(axis=-1)
    spread = np.sqrt(np.mean(np.var(lv, axis=-2), axis=-1)).mean(axis=-1)
    return response, spread


def _nominal_score(room, layout, f, spec, band, method):
    pts = seat_area(room, layout.seat_m, spec.seat_area_m, spec.seat_area_points)
    lv = speaker_levels(room, layout.speakers, pts, f, method=method).level_db
    corr = room_eq_db(f, _area_db(lv), band)
    r, s = score_levels(f, lv + corr[:, None, :], band)
    return float(r + s)


def rule_layout(room, spec, f, method=DEFAULT_METHOD, band=None):
    """The study's rule layout in ``room`` (``spec.layout``): the triangle rule, a named preset,
    or the best-scoring preset on the nominal room.

    Raises
    ------
    ValueError
        When the rule's layout does not fit the room.
    """
    band = spec.band_hz if band is None else band
    if spec.layout == "triangle":
        return triangle_layout(room, spec.seat_fraction, spec.spacing_m)
    if spec.layout != "best-preset":
        return preset_layout(room, spec.layout)
    best, best_score = None, np.inf
    for name in PRESETS:
        try:
            lay = preset_layout(room, name)
        except ValueError:
            continue
        s = _nominal_score(room, lay, f, spec, band, method)
        if s < best_score:
            best, best_score = lay, s
    if best is None:
        raise ValueError(f"no standard layout fits a {room.size_m[0]:g} x {room.size_m[1]:g} m floor")
    return best


def _search_choice(room, spec, band, f, method):
    """(chosen, rule): the search mode's pick on the nominal room and the rule's layout (None
    when it does not fit)."""
    table = {"step_m": float(spec.search_step_m), "area_m": list(spec.seat_area_m),
             "area_points": list(spec.seat_area_points)}
    res = search_layouts(room, search_space(room, table), band_hz=band, top=_SEARCH_KEEP, n_seeds=_SEARCH_SEEDS,
                         refine=bool(spec.search_refine), method=_SEARCH_METHOD)
    options = [type(r.layout)(r.layout.speakers, r.layout.seat_m, "search") for r in res.ranked]
    try:
        rule = rule_layout(room, spec, f, method, band)
    except ValueError:
        rule = None
    if rule is not None:
        options.append(rule)
    scores = [_nominal_score(room, lay, f, spec, band, method) for lay in options]
    return options[int(np.argmin(scores))], rule


def search_layout(room, spec, band, f=None, method=DEFAULT_METHOD):
    """The layout of ``placement = "search"`` in ``room``, on the nominal room.

    A placement search with the study's bounded budget: its own constraints default as in a
    room file without ``[search]`` (docs/placement.md), its listening area is the study's seat
    area, its coarse step ``spec.search_step_m``, its refinement on only with
    ``spec.search_refine``; it ranks with its own score (flatness, mismatch, area, boost,
    robustness) over the candidate's band. Its best distinct layouts (up to three, named
    "search") and the study's rule layout (:func:`rule_layout`, under its own name, when it
    fits) are judged by the study's score on the nominal room; the best is returned (ties: the
    search's order, then the rule). Deterministic: no random draws.
    (:func:`evaluate_candidate` then also compares a chosen search layout with the rule's over
    the drawn rooms.)
    """
    f = study_frequencies(spec, band) if f is None else f
    return _search_choice(room, spec, band, f, method)[0]


def choose_layout(room, spec, f, method=DEFAULT_METHOD, band=None):
    """The study's layout in ``room`` on the nominal room: :func:`search_layout` with
    ``placement = "search"``, else :func:`rule_layout`."""
    band = spec.band_hz if band is None else band
    if spec.placement == "search":
        return search_layout(room, spec, band, f, method)
    return rule_layout(room, spec, f, method, band)


@dataclass(frozen=True)
class CandidateResult:
    """One candidate room's score.

    Attributes
    ----------
    index : int
        Position in the study's grid (sizes fastest, then wall materials).
    size_m : tuple of float
    walls : str
        Wall material.
    layout : str
        The layout used: the rule's name (triangle or a preset), or "search" (with
        ``placement = "search"``, the rule's name when the rule's layout scored better).
    band_hz : (float, float)
        The band scored, Hz.
    seat_m : tuple of float or None
        The seat of the layout, m.
    speakers_m : tuple of tuple or None
        The left and right woofer positions, m.
    score_db : float
        Ensemble median of response + spread after the room's EQ, dB (lower is better); NaN
        when no layout fits.
    score_p10_db, score_p90_db : float
        10th and 90th percentiles of the score over the drawn rooms, dB.
    spread_db : float
        Ensemble median of the spread across the seat area, dB.
    response_db : float
        Ensemble median of the seat area's deviation from flat, dB.
    criteria : dict
        Proportion criteria: name -> passed.
    seed : int
    note : str
    """

    index: int
    size_m: tuple
    walls: str
    layout: str
    score_db: float
    score_p10_db: float
    score_p90_db: float
    spread_db: float
    response_db: float
    criteria: dict = field(default_factory=dict)
    seed: int = 0
    note: str = ""
    band_hz: tuple = ()
    seat_m: tuple | None = None
    speakers_m: tuple | None = None

    @property
    def feasible(self):
        """Whether the candidate was scored (a layout fits)."""
        return bool(np.isfinite(self.score_db))

    def to_dict(self):
        """JSON-ready values (the ``candidates`` objects of ``study --json``)."""
        return {"index": self.index, "size_m": list(self.size_m), "walls": self.walls, "layout": self.layout,
                "score": self.score_db, "score_p10": self.score_p10_db, "score_p90": self.score_p90_db,
                "spread_db": self.spread_db, "response_db": self.response_db, "criteria": dict(self.criteria),
                "seed": self.seed, "note": self.note, "band_hz": list(self.band_hz),
                "seat_m": None if self.seat_m is None else list(self.seat_m),
                "speakers_m": None if self.speakers_m is None else [list(p) for p in self.speakers_m]}


def _ensemble_score(room, layout, f, spec, band, seed, method):
    """(score, response, spread) arrays over the drawn rooms of ``layout`` after the room's EQ."""
    pts = seat_area(room, layout.seat_m, spec.seat_area_m, spec.seat_area_points)
    lv = ensemble_levels(room, f, layout, pts, n_samples=spec.samples, seed=seed, method=method)
    corr = room_eq_db(f, np.median(_area_db(lv), axis=0), band)
    response, spread = score_levels(f, lv + corr[None, :, None, :], band)
    return response + spread, response, spread


def evaluate_candidate(index, spec, method=DEFAULT_METHOD):
    """Score candidate ``index`` of ``spec`` (pure: the same inputs give the same result).

    With ``placement = "search"``, when the nominal room's pick is one of the search's layouts
    and the rule's layout fits, both are scored over the drawn rooms (the same draws) and the
    lower median score is kept (ties: the search's): the search never scores worse than the
    rule on the same candidate.
    """
    room = candidate_room(spec, index)
    seed = candidate_seed(spec, index)
    walls = spec.walls[index // len(spec.sizes_m())]
    criteria = {c.name: bool(c.passed) for c in room_summary(room).checks}
    band = candidate_band(spec, room)
    f = study_frequencies(spec, band)
    nan = float("nan")
    rule = None
    try:
        if spec.placement == "search":
            layout, rule = _search_choice(room, spec, band, f, method)
        else:
            layout = rule_layout(room, spec, f, method, band)
    except ValueError as exc:
        return CandidateResult(int(index), room.size_m, walls, "", nan, nan, nan, nan, nan, criteria, seed, str(exc),
                               band)
    score, response, spread = _ensemble_score(room, layout, f, spec, band, seed, method)
    if rule is not None and layout is not rule:
        other = _ensemble_score(room, rule, f, spec, band, seed, method)
        if np.median(other[0]) < np.median(score):
            layout, (score, response, spread) = rule, other
    p10, p50, p90 = np.percentile(score, (10, 50, 90))
    speakers = tuple(tuple(round(float(v), 4) for v in s.position_m) for s in layout.speakers[:2])
    return CandidateResult(int(index), room.size_m, walls, layout.name, float(p50), float(p10), float(p90),
                           float(np.median(spread)), float(np.median(response)), criteria, seed, "", band,
                           tuple(round(float(v), 4) for v in layout.seat_m), speakers)


def _rank_key(r):
    return (not r.feasible, r.score_db if r.feasible else 0.0, r.index)


@dataclass(frozen=True)
class StudyResult:
    """The ranked candidates of a study and how they were computed.

    Attributes
    ----------
    spec : StudySpec
    candidates : tuple of CandidateResult
        Best first (unscored candidates last).
    engine : dict
        ``name`` and ``workers`` (and ``scheduler`` when known).
    method : str
    """

    spec: object
    candidates: tuple
    engine: dict
    method: str = DEFAULT_METHOD

    def to_dict(self):
        """JSON-ready values: ``study``, ``engine``, ``method`` and ``candidates`` (best first)."""
        return {"study": self.spec.to_dict(), "engine": dict(self.engine), "method": self.method,
                "candidates": [c.to_dict() for c in self.candidates]}


def run_study(spec, client=None, *, method=DEFAULT_METHOD, progress=None, engine=None):
    """Score every candidate of ``spec`` and rank them.

    Parameters
    ----------
    spec : StudySpec
    client : dask.distributed.Client, optional
        Where the candidates are scored (one task per candidate); None scores them here, in order.
    method : str
        The solver.
    progress : callable, optional
        Called with the number of candidates finished so far, as they finish.
    engine : dict, optional
        Description of the engine for the result (default from ``client``).

    Returns
    -------
    StudyResult
    """
    n = spec.n_candidates
    results = []
    if client is None:
        for i in range(n):
            results.append(evaluate_candidate(i, spec, method))
            if progress is not None:
                progress(len(results))
        engine = engine or {"name": "serial", "workers": 1}
    else:
        spec_future = client.scatter(spec, broadcast=True)
        futures = client.map(evaluate_candidate, range(n), spec=spec_future, method=method)
        for done in as_completed(futures):
            results.append(done.result())
            if progress is not None:
                progress(len(results))
        if engine is None:
            engine = {"name": "dask.distributed", "workers": len(client.scheduler_info().get("workers", {}))}
    return StudyResult(spec, tuple(sorted(results, key=_rank_key)), engine, method)
