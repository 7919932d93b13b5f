"""Named standard placements of a stereo pair and the seat.

Each preset is a rule that scales with the room, so that the four can be compared in
any room file. All are mirror images about the room's centre line ``y = Ly / 2``, with
the seat on that line at the apex of an equilateral listening triangle (speaker-seat
distances equal to the speaker spacing; common practice for stereo monitoring),
moved forward when the triangle would put it closer than 0.5 m to the back wall.
Heights are woofer centres; the seat height 1.20 m is a seated ear height (common
practice). Distances to walls are to the woofer's acoustic centre, not the cabinet.

============  =====================  ==================  ===================  ==========
preset        from the front wall    spacing             from side walls      height
============  =====================  ==================  ===================  ==========
corner        0.30 m                 Ly - 0.60 m         0.30 m               1.00 m
wall          0.20 m (box backed     min(2.0, Ly - 1.2)  >= 0.60 m            1.10 m
              onto the front wall)
mid-room      max(1.0, Lx / 4)       min(2.0, Ly - 1.2)  >= 0.60 m            1.10 m
desk          0.55 m (rear edge of   min(1.1, Ly - 1.2)  >= 0.60 m            1.20 m
              a desk on the wall)
============  =====================  ==================  ===================  ==========

Why these: *corner* gives the largest boundary gain and excites every mode (a corner is
a pressure maximum of all of them); *wall* keeps the first front-wall reflection above
the band of interest (c / 4d = 429 Hz at 0.20 m) and takes the +3 dB of one boundary;
*mid-room* moves the speakers off the front wall into the region where the front-wall
cancellation notch falls in the bass (c / 4d = 86 Hz at 1 m); *desk* is the near-field
placement of small rooms and edit suites, where the desk and the short distances set
the response.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .room import WALL_MARGIN_M, Cabinet, Layout, Speaker

__all__ = ["PRESETS", "preset_layout", "triangle_layout", "TRIANGLE_FRONT_MIN_M",
           "SEAT_HEIGHT_M", "KeepOut", "SearchSpace", "default_space", "search_space",
           "DEFAULT_CABINET", "cabinet_corners", "spacing_for_cabinet", "SEARCH_KEYS"]

PRESETS = ("corner", "wall", "mid-room", "desk")
SEAT_HEIGHT_M = 1.20
_BACK_CLEARANCE_M = 0.5


def _rule(name, lx, ly):
    if name == "corner":
        return 0.30, ly - 0.60, 1.00
    if name == "wall":
        return 0.20, min(2.0, ly - 1.2), 1.10
    if name == "mid-room":
        return max(1.0, lx / 4.0), min(2.0, ly - 1.2), 1.10
    if name == "desk":
        return 0.55, min(1.1, ly - 1.2), 1.20
    raise ValueError(f"unknown layout '{name}'; choose one of {', '.join(PRESETS)}")


def preset_layout(room, name):
    """The stereo pair and seat of preset ``name`` in ``room``.

    Parameters
    ----------
    room : Room
        Its size sets the positions; the speakers of its own layout (names, low-cut,
        sensitivity) are reused, first two as left and right.
    name : str
        One of :data:`PRESETS`.

    Returns
    -------
    Layout
    """
    lx, ly, lz = room.size_m
    front, spacing, height = _rule(name, lx, ly)
    if spacing < 0.5:
        raise ValueError(f"the room is too narrow ({ly:g} m) for the '{name}' layout")
    height = min(height, lz - 0.3)
    seat_x = min(front + spacing * np.sqrt(3) / 2, lx - _BACK_CLEARANCE_M)
    if seat_x <= front + 0.3:
        raise ValueError(f"the room is too short ({lx:g} m) for the '{name}' layout")
    yl, yr = ly / 2 - spacing / 2, ly / 2 + spacing / 2
    if room.layout is not None and len(room.layout.speakers) >= 2:
        left, right = room.layout.speakers[:2]
    else:
        left, right = Speaker("left", (0, 0, 0)), Speaker("right", (0, 0, 0))
    speakers = (left.moved((front, yl, height)), right.moved((front, yr, height)))
    seat = (float(seat_x), ly / 2, min(SEAT_HEIGHT_M, lz - 0.3))
    return Layout(speakers, seat, name)


#: Smallest distance of the "triangle" rule's woofers from the front wall, m: a 30 cm deep box
#: with 10 cm behind it (the default cabinet and rear clearance of the search).
TRIANGLE_FRONT_MIN_M = 0.40
#: Smallest distance of the "triangle" rule's woofers from a side wall, m.
_TRIANGLE_SIDE_MIN_M = 0.30
#: Woofer height of the "triangle" rule, m: the tweeter of the default cabinet then sits 8 cm
#: above the seated ear (1.20 m).
_TRIANGLE_WOOFER_M = 1.10


def triangle_layout(room, seat_fraction=0.38, spacing_m=1.2):
    """The same listening triangle in every room: a rule stated in a builder's terms.

    The seat is on the centre line at ``seat_fraction`` of the length from the front wall
    (0.38 is a common-practice starting point: away from the half-length null of the odd
    length modes), at ear height 1.20 m. The woofers are ``spacing_m`` apart, 1.10 m high,
    at the apex-to-base distance of an equilateral triangle in front of the seat (common
    practice for stereo monitoring). Where that would put them nearer than
    :data:`TRIANGLE_FRONT_MIN_M` to the front wall, they stay there and the seat moves back
    to keep the triangle.

    Parameters
    ----------
    room : Room
    seat_fraction : float
        0 < seat_fraction < 1.
    spacing_m : float

    Returns
    -------
    Layout
        Named "triangle".

    Raises
    ------
    ValueError
        When the room is too narrow for the spacing or too short for the triangle.
    """
    lx, ly, lz = room.size_m
    depth = spacing_m * math.sqrt(3) / 2
    if spacing_m > ly - 2 * _TRIANGLE_SIDE_MIN_M:
        raise ValueError(f"the room is too narrow ({ly:g} m) for woofers {spacing_m:g} m apart and "
                         f"{_TRIANGLE_SIDE_MIN_M:g} m from the side walls")
    front = max(TRIANGLE_FRONT_MIN_M, seat_fraction * lx - depth)
    seat_x = front + depth
    if seat_x > lx - _BACK_CLEARANCE_M:
        raise ValueError(f"the room is too short ({lx:g} m) for a {spacing_m:g} m listening triangle "
                         f"{TRIANGLE_FRONT_MIN_M:g} m off the front wall")
    height = min(_TRIANGLE_WOOFER_M, lz - 0.3)
    if room.layout is not None and len(room.layout.speakers) >= 2:
        left, right = room.layout.speakers[:2]
    else:
        left, right = Speaker("left", (0, 0, 0)), Speaker("right", (0, 0, 0))
    speakers = (left.moved((front, ly / 2 - spacing_m / 2, height)), right.moved((front, ly / 2 + spacing_m / 2, height)))
    return Layout(speakers, (float(seat_x), ly / 2, min(SEAT_HEIGHT_M, lz - 0.3)), "triangle")


# ------------------------------------------------------------------------------ search constraints
#: The cabinet assumed when the room file describes none: a mid-size two-way box, 25 cm wide,
#: 40 cm tall, 30 cm deep, woofer 12 cm and tweeter 30 cm above its bottom (our choice; a
#: conservative size, so that a search without cabinets still keeps a real box off the wall).
DEFAULT_CABINET = Cabinet((0.25, 0.40, 0.30), (0.0, 0.12), (0.0, 0.30))

#: Keys of the ``[search]`` table (docs/placement.md).
SEARCH_KEYS = (
    "speaker_front_m", "speaker_side_m", "speaker_height_m", "symmetric", "spacing_m", "triangle",
    "triangle_tolerance", "seat_fixed", "seat_on_centre_line", "seat_height_m", "seat_front_m", "seat_side_m",
    "area_m", "area_points", "keep_out", "step_m", "ear_height_tolerance_m", "rear_clearance_m", "toe_in",
    "distinct_m",
)


def spacing_for_cabinet(cabinet):
    """Default spacing range of a stereo pair for the size of its boxes, m.

    Small boxes (under 45 cm tall) are near-field monitors: 1.0-2.0 m apart; boxes up to
    80 cm tall (large stand-mounted): 1.2-2.6 m; taller (floor-standing): 1.5-3.0 m
    (common practice for near-, mid- and far-field listening).
    """
    h = cabinet.size_m[1]
    if h < 0.45:
        return (1.0, 2.0)
    if h < 0.8:
        return (1.2, 2.6)
    return (1.5, 3.0)


def cabinet_corners(position_m, cabinet, seat_m, toe_in=True):
    """The eight corners of speaker boxes, m.

    Parameters
    ----------
    position_m : array_like (..., 3)
        Woofer centres (on the front face), m.
    cabinet : Cabinet
    seat_m : array_like (..., 3)
        The seat each box faces (broadcast against ``position_m``).
    toe_in : bool
        Turn each box about the vertical so that its front faces the seat (common practice
        for a listening triangle); False keeps the front parallel to the front wall.

    Returns
    -------
    ndarray (..., 8, 3)

    Notes
    -----
    With ``f`` the horizontal unit vector the box faces, ``l`` the horizontal unit vector
    across its face toward the seat's axis (inboard) and ``(o, u)`` the woofer's place on
    the face, the corners are ``p + a f + b l + c z`` for ``a`` in ``{0, -depth}``, ``b``
    in ``{-o - w/2, -o + w/2}`` and ``c`` in ``{-u, h - u}``.
    """
    p = np.asarray(position_m, dtype=float)
    seat = np.broadcast_to(np.asarray(seat_m, dtype=float), p.shape)
    w, h, d = cabinet.size_m
    o, u = cabinet.woofer_m
    if toe_in:
        fx, fy = seat[..., 0] - p[..., 0], seat[..., 1] - p[..., 1]
        n = np.hypot(fx, fy)
        n = np.where(n > 1e-9, n, 1.0)
        fx, fy = np.where(n > 1e-9, fx / n, 1.0), fy / n
    else:
        fx, fy = np.ones(p.shape[:-1]), np.zeros(p.shape[:-1])
    side = np.where(seat[..., 1] >= p[..., 1], 1.0, -1.0)
    lx, ly = -fy * side, fx * side
    out = []
    for a in (0.0, -d):
        for b in (-o - w / 2, -o + w / 2):
            for c in (-u, h - u):
                out.append(np.stack([p[..., 0] + a * fx + b * lx, p[..., 1] + a * fy + b * ly,
                                     p[..., 2] + c + 0 * fx], axis=-1))
    return np.stack(out, axis=-2)


@dataclass(frozen=True)
class KeepOut:
    """An axis-aligned box no speaker, no cabinet and no seat may enter (a desk, a door swing).

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

    def overlaps(self, lo_m, hi_m):
        """Boolean mask: which boxes ``[lo_m, hi_m]`` (..., 3) share volume with this one
        (touching faces do not count: a speaker may stand on a desk)."""
        lo, hi = np.asarray(lo_m, dtype=float), np.asarray(hi_m, dtype=float)
        return np.all((lo < np.asarray(self.max_m) - 1e-9) & (hi > np.asarray(self.min_m) + 1e-9), axis=-1)


@dataclass(frozen=True)
class SearchSpace:
    """Where the speakers and the seat may go (see docs/placement.md for every key).

    Distances are of the woofer centre (speakers) or the ear (seat), in metres.

    Attributes
    ----------
    speaker_front_m : (float, float)
        Distance range of the woofers from the front wall.
    speaker_side_m : (float, float)
        Distance range of each woofer from its own side wall.
    speaker_height_m : (float, float)
        Woofer height range.
    symmetric : bool
        The pair is mirror-symmetric about the seat's axis (the line through the seat,
        parallel to x): same distance from the front wall, same height.
    spacing_m : (float, float)
        Distance range between the two woofers.
    triangle : bool
        Each speaker-seat distance equals the spacing within ``triangle_tolerance``.
    triangle_tolerance : float
        Allowed relative difference, 0..1.
    seat_on_centre_line : bool
        The seat lies on ``y = Ly / 2`` (when it is not fixed).
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
        Coarse grid step; None chooses it from the budget.
    seat_fixed_m : tuple of float or None
        The seat does not move (a sofa, a console): the room file's ``[seat]``.
    ear_height_tolerance_m : float
        Largest difference between the tweeter's height (the woofer's, for a box without
        one) and the ear height, m.
    rear_clearance_m : float
        Smallest gap between the back of each box and the front wall, m.
    toe_in : bool
        Boxes face the seat (their corners are checked turned so).
    distinct_m : float
        Ranked layouts differ by at least this much: some object (a speaker or the seat)
        is this far from its place in every better-ranked layout, m.
    cabinets : tuple of Cabinet
        The two boxes (the room file's, or :data:`DEFAULT_CABINET`).
    cabinet_assumed : bool
        True when the room file describes no cabinet and :data:`DEFAULT_CABINET` is used.
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
    seat_fixed_m: tuple | None = None
    ear_height_tolerance_m: float = 0.10
    rear_clearance_m: float = 0.10
    toe_in: bool = True
    distinct_m: float = 0.25
    cabinets: tuple = (DEFAULT_CABINET, DEFAULT_CABINET)
    cabinet_assumed: bool = True

    def woofer_height_range_m(self):
        """Woofer heights allowed by ``speaker_height_m`` and the ear-height rule, m (may be empty)."""
        lo, hi = self.speaker_height_m
        for cab in self.cabinets:
            c = self.seat_height_m - cab.centre_above_woofer_m
            lo, hi = max(lo, c - self.ear_height_tolerance_m), min(hi, c + self.ear_height_tolerance_m)
        return lo, hi


def _cabinets_of(room):
    speakers = room.layout.speakers[:2] if room.layout is not None else ()
    cabs = [s.cabinet for s in speakers if s.cabinet is not None]
    if not cabs:
        return (DEFAULT_CABINET, DEFAULT_CABINET), True
    if len(cabs) == 1:
        return (cabs[0], cabs[0]), False
    return tuple(cabs[:2]), False


def default_space(room):
    """The documented defaults of every ``[search]`` key for ``room`` (see docs/placement.md)."""
    lx, ly, lz = room.size_m
    cabinets, assumed = _cabinets_of(room)
    s_lo, s_hi = spacing_for_cabinet(cabinets[0])
    return SearchSpace(
        speaker_front_m=(0.2, round(0.4 * lx, 2)),
        speaker_side_m=(0.25, round(ly / 2, 2)),
        speaker_height_m=(0.3, round(min(1.5, lz - 0.3), 2)),
        symmetric=True,
        spacing_m=(s_lo, round(max(s_lo, min(s_hi, ly - 0.5)), 2)),
        triangle=True,
        triangle_tolerance=0.15,
        seat_on_centre_line=True,
        seat_height_m=min(SEAT_HEIGHT_M, lz - 0.3),
        seat_front_m=(1.0, round(lx - 0.5, 2)),
        seat_side_m=0.6,
        area_m=(0.6, 0.6),
        area_points=(3, 3),
        cabinets=cabinets,
        cabinet_assumed=assumed,
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
        Naming the file, the key, the value and what is allowed.
    """
    t = dict(room.search if table is None else table)
    where = _where(room)
    for k in t:
        if k not in SEARCH_KEYS:
            raise ValueError(f"{where} unknown key '{k}'; allowed: {', '.join(sorted(SEARCH_KEYS))}")
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

    def scalar(key, lo, hi):
        return number(key, t[key], lo, hi) if key in t else getattr(base, key)

    front = rng("speaker_front_m", m, lx - m, f"the speakers' distance from the front wall (room length {lx:g} m)")
    side = rng("speaker_side_m", m, ly / 2, f"a speaker's distance from its side wall (half the width, {ly / 2:g} m)")
    height = rng("speaker_height_m", m, lz - m, f"the woofer height (room height {lz:g} m)")
    spacing = rng("spacing_m", 0.1, ly + lx, "the spacing")
    seat_front = rng("seat_front_m", m, lx - m, f"the seat's distance from the front wall (room length {lx:g} m)")
    tol = scalar("triangle_tolerance", 0.0, 1.0)
    seat_h = scalar("seat_height_m", m, lz - m)
    seat_side = scalar("seat_side_m", m, ly / 2)
    ear_tol = scalar("ear_height_tolerance_m", 0.0, lz)
    rear = scalar("rear_clearance_m", 0.0, lx / 2)
    distinct = scalar("distinct_m", 0.0, 2.0)
    seat_fixed = None
    if flag("seat_fixed") if "seat_fixed" in t else False:
        if room.layout is None or room.layout.seat_m is None:
            raise ValueError(f"{where} seat_fixed: true needs a [seat] with position_m to keep; add one or set "
                             "seat_fixed = false")
        for k in ("seat_front_m", "seat_height_m", "seat_on_centre_line", "seat_side_m"):
            if k in t:
                raise ValueError(f"{where} {k}: has no effect when seat_fixed = true (the seat stays at [seat] "
                                 "position_m); remove one of the two")
        seat_fixed = tuple(float(v) for v in room.layout.seat_m)
        seat_front = (seat_fixed[0], seat_fixed[0])
        seat_h = seat_fixed[2]
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
                        flag("seat_on_centre_line"), seat_h, seat_front, seat_side, area, points, tuple(keep), step,
                        seat_fixed, ear_tol, rear, flag("toe_in"), distinct, base.cabinets, base.cabinet_assumed)
    for i, x in enumerate((area[0] / 2, area[1] / 2)):
        if seat_fixed is not None:
            lim = (seat_fixed[0], lx - seat_fixed[0]) if i == 0 else (seat_fixed[1], ly - seat_fixed[1])
        else:
            lim = (seat_front[0], lx - seat_front[1]) if i == 0 else (
                (ly / 2, ly / 2) if space.seat_on_centre_line else (seat_side, seat_side))
        if x > min(lim) - m:
            given = "area_m" in t
            raise ValueError(f"{where} area_m: a listening area {area[0]:g} x {area[1]:g} m around the seat"
                             + ("" if given else " (the default; the file gives no area_m)")
                             + " would reach a wall from the allowed seat positions; "
                             + ("make it smaller or move the seat" if given else
                                "give a smaller area_m in [search], e.g. area_m = [0.1, 0.1]"))
    lo, hi = space.woofer_height_range_m()
    if lo > hi:
        raise ValueError(f"{where} ear_height_tolerance_m: no woofer height in speaker_height_m "
                         f"{height[0]:g}-{height[1]:g} m puts the tweeter within {ear_tol:g} m of the ear height "
                         f"{seat_h:g} m; widen speaker_height_m or ear_height_tolerance_m")
    return space
