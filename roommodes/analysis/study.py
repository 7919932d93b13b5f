"""Design studies: rank candidate rooms by their predicted bass after their own EQ.

A study (:class:`roommodes.model.study.StudySpec`) is a grid of room sizes times wall
constructions. Each candidate is scored by :func:`evaluate_candidate`, a pure function of the
spec and the candidate's index:

1. the room: the candidate's size and materials, the study's air and uncertainty;
2. the layout: a standard preset, or the preset that scores best on the nominal room;
3. the levels of both speakers at a grid over the seat area in ``samples`` rooms drawn from
   the uncertainty (:func:`roommodes.analysis.uncertainty.ensemble_levels`), seeded from
   ``(seed, index)``, so the result does not depend on which worker computes it;
4. the room's own EQ per channel: a parametric design (:func:`roommodes.analysis.eq.design_parametric`)
   on the ensemble median of the seat area's power-average level;
5. the score of each drawn room after that EQ: the rms deviation of the seat area's
   power-average level from its own mean over the band (response, dB) plus the rms over the
   band of the level's standard deviation across the seat area (spread, dB); both channels
   averaged. The candidate's score is the ensemble median, with its 10th and 90th percentiles.

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
from ..model.materials import get_material
from ..model.placement import PRESETS, preset_layout
from ..model.room import WALL_MARGIN_M, WALLS, Room, Surface
from ..solvers import DEFAULT_METHOD
from . import eq
from .levels import speaker_levels
from .summary import room_summary
from .uncertainty import ensemble_levels

__all__ = ["CandidateResult", "StudyResult", "candidate_room", "candidate_seed", "evaluate_candidate",
           "run_study", "score_levels"]

#: Smoothing of the curves the EQ is designed on, 1/N octave (common practice for room EQ).
EQ_SMOOTHING = 12
#: Largest boost the study's EQ may use, dB (a conservative default, as in ``roommodes eq``).
MAX_BOOST_DB = 6.0


def _surface(name, material):
    m = get_material(material)
    return Surface(name, tuple(m.absorption), tuple(m.bands_hz), m.name, tuple(m.extrapolated_hz))


def candidate_room(spec, index):
    """The nominal room of candidate ``index`` (sizes vary fastest, then wall materials)."""
    sizes = spec.sizes_m()
    wi, si = divmod(int(index), len(sizes))
    size = tuple(float(v) for v in sizes[si])
    mats = {"floor": spec.floor, "ceiling": spec.ceiling}
    surfaces = tuple(_surface(w, mats.get(w, spec.walls[wi])) for w in WALLS)
    name = f"{size[0]:g} x {size[1]:g} x {size[2]:g} m, {spec.walls[wi]}"
    return Room(name, size, surfaces, spec.temperature_c, uncertainty=spec.uncertainty)


def candidate_seed(spec, index):
    """Seed of candidate ``index``: from the study's seed and the index only."""
    return int(np.random.SeedSequence([int(spec.seed), int(index)]).generate_state(1)[0])


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


def score_levels(freq_hz, levels_db, band_hz):
    """Response and spread (dB) of levels (..., S, P, F) over the band.

    Returns
    -------
    (response_db, spread_db) : ndarray (...)
        rms over the band of the seat-area power average's deviation from its own mean, and rms
        over the band of the standard deviation across the points; both averaged over channels.
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = (f >= band_hz[0]) & (f <= band_hz[1])
    lv = levels_db[..., sel]
    area = _area_db(lv)
    dev = area - area.mean(axis=-1, keepdims=True)
    response = np.sqrt(np.mean(dev**2, axis=-1)).mean(axis=-1)
    spread = np.sqrt(np.mean(np.var(lv, axis=-2), axis=-1)).mean(axis=-1)
    return response, spread


def _nominal_score(room, layout, f, spec, method):
    pts = seat_area(room, layout.seat_m, spec.seat_area_m, spec.seat_area_points)
    lv = speaker_levels(room, layout.speakers, pts, f, method=method).level_db
    corr = room_eq_db(f, _area_db(lv), spec.band_hz)
    r, s = score_levels(f, lv + corr[:, None, :], spec.band_hz)
    return float(r + s)


def choose_layout(room, spec, f, method=DEFAULT_METHOD):
    """The study's placement rule in ``room``: the named preset, or the best-scoring preset."""
    if spec.layout != "best-preset":
        return preset_layout(room, spec.layout)
    best, best_score = None, np.inf
    for name in PRESETS:
        try:
            lay = preset_layout(room, name)
        except ValueError:
            continue
        s = _nominal_score(room, lay, f, spec, method)
        if s < best_score:
            best, best_score = lay, s
    if best is None:
        raise ValueError(f"no standard layout fits a {room.size_m[0]:g} x {room.size_m[1]:g} m floor")
    return best


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
        The preset used.
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

    @property
    def feasible(self):
        """Whether the candidate was scored (a layout fits)."""
        return bool(np.isfinite(self.score_db))

    def to_dict(self):
        """JSON-ready values (the ``candidates`` objects of ``study --json``)."""
        return {"index": self.index, "size_m": list(self.size_m), "walls": self.walls, "layout": self.layout,
                "score": self.score_db, "score_p10": self.score_p10_db, "score_p90": self.score_p90_db,
                "spread_db": self.spread_db, "response_db": self.response_db, "criteria": dict(self.criteria),
                "seed": self.seed, "note": self.note}


def evaluate_candidate(index, spec, method=DEFAULT_METHOD):
    """Score candidate ``index`` of ``spec`` (pure: the same inputs give the same result)."""
    room = candidate_room(spec, index)
    seed = candidate_seed(spec, index)
    criteria = {c.name: bool(c.passed) for c in room_summary(room).checks}
    f = log_frequencies(spec.band_hz[0], spec.band_hz[1], spec.points_per_octave)
    nan = float("nan")
    try:
        layout = choose_layout(room, spec, f, method)
    except ValueError as exc:
        return CandidateResult(int(index), room.size_m, spec.walls[index // len(spec.sizes_m())], "", nan, nan, nan,
                               nan, nan, criteria, seed, str(exc))
    pts = seat_area(room, layout.seat_m, spec.seat_area_m, spec.seat_area_points)
    lv = ensemble_levels(room, f, layout, pts, n_samples=spec.samples, seed=seed, method=method)
    corr = room_eq_db(f, np.median(_area_db(lv), axis=0), spec.band_hz)
    response, spread = score_levels(f, lv + corr[None, :, None, :], spec.band_hz)
    score = response + spread
    p10, p50, p90 = np.percentile(score, (10, 50, 90))
    return CandidateResult(int(index), room.size_m, spec.walls[index // len(spec.sizes_m())], layout.name,
                           float(p50), float(p10), float(p90), float(np.median(spread)), float(np.median(response)),
                           criteria, seed)


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
