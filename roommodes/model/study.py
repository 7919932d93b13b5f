"""What a design study compares: ranges of room dimensions, wall constructions, a placement
rule, a seat area and the uncertainty (the ``[study]`` file, docs/study.md)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .room import Uncertainty

__all__ = ["StudySpec", "STUDY_LAYOUTS", "STUDY_PLACEMENTS", "MAX_CANDIDATES", "SCHROEDER"]

#: Placement rules a study may use: "triangle" (the same listening triangle in every room, set
#: in metres and as a fraction of the length: :func:`roommodes.model.placement.triangle_layout`),
#: a standard preset, or "best-preset" (each room gets the preset that scores best on its
#: nominal prediction).
STUDY_LAYOUTS = ("triangle", "corner", "wall", "mid-room", "desk", "best-preset")
#: How each candidate room gets its layout: the ``layout`` rule, or a placement search per room.
STUDY_PLACEMENTS = ("rule", "search")
#: The top of ``band_hz`` that stands for each room's own Schroeder frequency.
SCHROEDER = "schroeder"
#: Most candidate rooms one study may hold.
MAX_CANDIDATES = 100_000


@dataclass(frozen=True)
class StudySpec:
    """A design study over candidate rooms.

    Attributes
    ----------
    length_m, width_m, height_m : (float, float)
        Ranges (low, high) of the room's dimensions, m.
    steps : int
        Grid points per dimension (1 takes the low end only).
    walls : tuple of str
        Library materials tried for the four walls, one candidate room per material and size.
    floor, ceiling : str
        Library materials of the floor and the ceiling.
    layout : str
        Placement rule (:data:`STUDY_LAYOUTS`) when ``placement`` is "rule".
    seat_fraction : float
        The "triangle" rule's seat: this fraction of the room's length from the front wall.
    spacing_m : float
        The "triangle" rule's distance between the two woofers, m.
    placement : str
        "rule" (the ``layout`` rule) or "search" (a placement search in each candidate room,
        :func:`roommodes.analysis.search.search_layouts`, with a bounded budget).
    search_step_m : float
        Coarse grid step of the per-room search, m (its budget: coarser is faster).
    search_refine : bool
        Refine the search's best coarse layout by its pattern search (slower, finer).
    seat_area_m : (float, float)
        Depth (x) and width (y) of the seat area centred on the rule's seat, m.
    seat_area_points : (int, int)
        Grid points of the seat area along x and y.
    band_hz : (float, float or str)
        Band scored and equalised, Hz; a top of :data:`SCHROEDER` stands for each candidate's
        own Schroeder frequency (its modal region, so every room is judged where its modes
        rule the response).
    points_per_octave : int
        Frequency-grid density.
    samples : int
        Rooms drawn per candidate from ``uncertainty``.
    seed : int
        Seed of the study; candidate ``i`` draws from ``(seed, i)``.
    uncertainty : Uncertainty
        As a room file's: by default (and when the study's ``[uncertainty]`` does not state
        ``absorption_rel``) each surface's library material's own range counts first
        (``material_ranges``), as in a room file; a stated ``absorption_rel`` holds for all.
    temperature_c : float
    """

    length_m: tuple
    width_m: tuple
    height_m: tuple
    steps: int
    walls: tuple = ("plasterboard-on-studs",)
    floor: str = "wood-floor-on-joists"
    ceiling: str = "plasterboard-on-studs"
    layout: str = "triangle"
    seat_fraction: float = 0.38
    spacing_m: float = 1.2
    placement: str = "rule"
    search_step_m: float = 0.25
    search_refine: bool = False
    seat_area_m: tuple = (0.6, 0.6)
    seat_area_points: tuple = (3, 3)
    band_hz: tuple = (30.0, SCHROEDER)
    points_per_octave: int = 24
    samples: int = 32
    seed: int = 1
    uncertainty: Uncertainty = Uncertainty(material_ranges=True)
    temperature_c: float = 20.0

    def sizes_m(self):
        """(K, 3) candidate sizes, length fastest-varying last: the grid in a fixed order."""
        axes = [np.linspace(lo, hi, self.steps) if self.steps > 1 else np.array([lo])
                for lo, hi in (self.length_m, self.width_m, self.height_m)]
        grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
        return np.round(grid, 6)

    @property
    def n_candidates(self):
        """Number of candidate rooms: sizes times wall materials."""
        return self.steps**3 * len(self.walls)

    def to_dict(self):
        """JSON-ready values, keyed as in the study file."""
        return {"length_m": list(self.length_m), "width_m": list(self.width_m), "height_m": list(self.height_m),
                "steps": self.steps, "walls": list(self.walls), "floor": self.floor, "ceiling": self.ceiling,
                "layout": self.layout, "seat_fraction": self.seat_fraction, "spacing_m": self.spacing_m,
                "placement": self.placement, "search_step_m": self.search_step_m,
                "search_refine": self.search_refine, "seat_area_m": list(self.seat_area_m),
                "seat_area_points": list(self.seat_area_points), "band_hz": list(self.band_hz),
                "points_per_octave": self.points_per_octave, "samples": self.samples, "seed": self.seed,
                "uncertainty": self.uncertainty.to_dict(), "temperature_c": self.temperature_c}
