"""Where the modes and the level fall in the room.

* :func:`mode_coupling`: for every room mode, the mode shape at each speaker and at the
  seat, and the coupling ``|psi(speaker) psi(seat)|``: the factor by which the mode's
  resonance term enters that speaker's transfer to the seat in the modal sum
  ``H = sum_n psi_n(r_speaker) psi_n(r_seat) W_n(f)`` (Kuttruff, Room Acoustics, 5th ed.,
  2009, sec. 3.4);
* :func:`floor_level_map`: the predicted level over a horizontal plane at one frequency;
* :func:`floor_map_bands`: the same map's 10-50-90 % percentiles over rooms drawn from the
  room file's ``[uncertainty]`` (:mod:`roommodes.analysis.uncertainty`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from time import process_time

import numpy as np

from ..dsp.checks import check_number
from ..model.modes import mode_shapes, room_modes
from ..model.room import WALL_MARGIN_M
from ..model.speaker import speaker_response
from ..solvers import DEFAULT_METHOD
from .levels import speaker_levels
from .predict import DEFAULT_RANGE_HZ, room_schroeder_frequency
from .uncertainty import DEFAULT_SEED, PERCENTILES, _check_count, _generators, draw_room

__all__ = ["MATTERS_COUPLING", "ModeCoupling", "FloorMap", "mode_coupling", "floor_level_map", "FloorMapBands",
           "floor_map_bands", "coupling_ranges", "MAP_SAMPLES", "MAP_UNSURE_DB", "MAP_BANDS_MAX_VALUES"]

#: A mode "matters" at the seat when a speaker's coupling ``|psi_s psi_seat|`` reaches this
#: (our choice: a quarter of the coupling between two corners, -12 dB).
MATTERS_COUPLING = 0.25
#: Near a node: |psi| below this (the threshold :func:`roommodes.predict.response_features` uses).
_NODE_PSI = 0.3


# ======================================================================================
# Modes at the seat
# ======================================================================================
@dataclass(frozen=True)
class ModeCoupling:
    """Every mode up to ``fmax_hz`` with its shape at the speakers and the seat.

    Attributes
    ----------
    indices : ndarray of int (N, 3)
    freq_hz, t60_s, bandwidth_hz : ndarray (N,)
    kind : ndarray of str (N,)
    names : tuple of str
        Speaker names.
    psi_speakers : ndarray (S, N)
        Mode shape at each speaker, -1..1.
    psi_seat : ndarray (N,)
    coupling : ndarray (S, N)
        ``|psi_speaker psi_seat|``, 0..1.
    matters : ndarray of bool (N,)
        Some speaker's coupling reaches ``threshold``.
    threshold, fmax_hz, schroeder_hz : float
    """

    indices: np.ndarray
    freq_hz: np.ndarray
    kind: np.ndarray
    t60_s: np.ndarray
    bandwidth_hz: np.ndarray
    names: tuple
    psi_speakers: np.ndarray
    psi_seat: np.ndarray
    coupling: np.ndarray
    matters: np.ndarray
    threshold: float
    fmax_hz: float
    schroeder_hz: float

    def note(self, i):
        """Short words on mode ``i``: seat or speakers near a node, speakers in opposite phase."""
        out = []
        if abs(self.psi_seat[i]) < _NODE_PSI:
            out.append("seat near a node")
        ps = self.psi_speakers[:, i]
        if ps.size and np.max(np.abs(ps)) < _NODE_PSI:
            out.append("speakers near a node")
        if ps.size >= 2 and ps[0] * ps[1] < 0 and min(abs(ps[0]), abs(ps[1])) >= _NODE_PSI:
            out.append(f"{self.names[0]} and {self.names[1]} in opposite phase (weakened in the mono sum)")
        return "; ".join(out)


def mode_coupling(room, layout=None, fmax_hz=None, threshold=MATTERS_COUPLING):
    """List the room's modes with their shape at each speaker and at the seat.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default the room file's own.
    fmax_hz : float, optional
        Highest mode, Hz, 1..1000; default the lower of the Schroeder frequency and 200 Hz
        (above it single modes no longer describe the response).
    threshold : float
        Coupling from which a mode "matters", 0..1 (default :data:`MATTERS_COUPLING`).

    Returns
    -------
    ModeCoupling

    Notes
    -----
    ``psi_n(r) = cos(nx pi x / Lx) cos(ny pi y / Ly) cos(nz pi z / Lz)`` (Rayleigh; Kuttruff
    2009, sec. 3.3). In the modal sum the mode's term in the transfer from a speaker at
    ``r_s`` to the seat at ``r_r`` carries the factor ``psi_n(r_s) psi_n(r_r)``; its magnitude
    is the coupling shown. A speaker in a corner has ``|psi| = 1`` for every mode.
    """
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: no speakers and seat to couple the modes to")
    fs = room_schroeder_frequency(room)
    fmax = min(200.0, fs) if fmax_hz is None else float(fmax_hz)
    if not (math.isfinite(fmax) and 1.0 <= fmax <= 1000.0):
        raise ValueError(f"fmax_hz must be 1 to 1000 Hz, got {fmax_hz!r}")
    thr = float(threshold)
    if not 0.0 <= thr <= 1.0:
        raise ValueError(f"threshold must be 0 to 1, got {threshold!r}")
    ms = room_modes(room, fmax)
    psi_s = mode_shapes(ms.indices, room.size_m, layout.source_positions_m)  # (S, N)
    psi_r = mode_shapes(ms.indices, room.size_m, [layout.seat_m])[0]
    coupling = np.abs(psi_s * psi_r[None, :])
    matters = np.any(coupling >= thr, axis=0) if coupling.size else np.zeros(len(ms), bool)
    return ModeCoupling(ms.indices, ms.freq_hz, ms.kind, ms.t60_s, ms.bandwidth_hz,
                        tuple(s.name for s in layout.speakers), psi_s, psi_r, coupling, matters, thr, fmax, fs)


# ======================================================================================
# Level over the floor
# ======================================================================================
@dataclass(frozen=True)
class FloorMap:
    """Predicted level over a horizontal plane at one frequency.

    Attributes
    ----------
    freq_hz, height_m : float
    x_m : ndarray (X,)
        Distances from the front wall of the grid's cell centres, m.
    y_m : ndarray (Y,)
        Distances from the left wall, m.
    level_db : ndarray (X, Y)
        dB re the free-field level of one speaker at 1 m (the speakers summed in phase).
    channels : tuple of str
    sources_m : ndarray (S, 3)
    seat_m : tuple or None
    seat_level_db : float or None
        The same quantity at the seat, with the modes :func:`roommodes.predict` keeps on its
        default grid, so that it equals the predicted curve at ``freq_hz`` (the grid's cells
        use the solver's cutoff for ``freq_hz`` alone; the two differ by hundredths of a dB).
    near_modes : tuple of dict
        Modes within their half-power bandwidth (or 3 %) of the frequency, nearest first:
        ``indices``, ``freq_hz``, ``kind``, ``bandwidth_hz``.
    method : str
    """

    freq_hz: float
    height_m: float
    x_m: np.ndarray
    y_m: np.ndarray
    level_db: np.ndarray
    channels: tuple
    sources_m: np.ndarray
    seat_m: tuple | None
    seat_level_db: float | None
    near_modes: tuple
    method: str

    def to_dict(self):
        """JSON-ready values: the keys of ``map --json``."""
        (xm, ym, top), (xn, yn, low) = self.extreme("max"), self.extreme("min")
        return {
            "method": self.method, "freq_hz": self.freq_hz, "height_m": self.height_m,
            "channels": list(self.channels),
            "speakers": [{"name": n, "position_m": p} for n, p in zip(self.channels, self.sources_m)],
            "x_m": self.x_m, "y_m": self.y_m, "level_db": self.level_db,
            "level_reference": "dB re free-field pressure of one speaker at 1 m; speakers summed in phase",
            "seat_m": self.seat_m, "seat_level_db": self.seat_level_db,
            "max": {"position_m": [xm, ym, self.height_m], "level_db": top},
            "min": {"position_m": [xn, yn, self.height_m], "level_db": low},
            "near_modes": [dict(m) for m in self.near_modes],
        }

    def extreme(self, which="max"):
        """(x_m, y_m, level_db) of the loudest (``"max"``) or quietest (``"min"``) cell."""
        i = np.nanargmax(self.level_db) if which == "max" else np.nanargmin(self.level_db)
        ix, iy = np.unravel_index(i, self.level_db.shape)
        return float(self.x_m[ix]), float(self.y_m[iy]), float(self.level_db[ix, iy])


#: Map cells closer than this to a speaker are left out, m.
_MAP_CLEARANCE_M = 0.08


def _separated_groups(source_m, points_m, mask, gap_m=0.05):
    """Split ``points_m[mask]`` into groups the solver sums at once.

    Each group lies on one side of the source along one axis, further from it along that
    axis than every point is along the others.
    The modal solver sums its static tail for a whole group at once along the axis of the
    group's largest separation from the source; mixing sides makes it go pair by pair, and a
    small separation along the chosen axis makes every term count. For a plane of points
    ``dz`` above or below the source, the groups beside the source (along x or y) are kept
    further than ``dz`` from it, so the solver sums along x or y, where most points are
    far; the few points over or under the source form the last groups. The values do not
    depend on the grouping.
    """
    idx = np.flatnonzero(mask)
    if idx.size == 0:
        return []
    d = points_m[idx] - np.asarray(source_m)[None, :]
    least = np.abs(d).min(axis=0)  # the smallest separation along each axis
    left = np.ones(idx.size, bool)
    groups = []
    for axis in range(3):
        others = max(least[b] for b in range(3) if b != axis)
        threshold = max(gap_m, 1.05 * others + 0.005)
        for sign in (1.0, -1.0):
            g = left & (sign * d[:, axis] >= threshold)
            if g.any():
                groups.append(idx[g])
                left &= ~g
    if left.any():
        groups.append(idx[left])
    return groups


def _cubic_weights(u, n):
    """Cubic-convolution interpolation weights on ``n`` equally spaced nodes.

    Keys (1981), "Cubic convolution interpolation for digital image processing", IEEE
    Trans. ASSP 29(6): the kernel with a = -1/2 (third-order accurate), and the end
    condition f(-1) = 3 f(0) - 3 f(1) + f(2) (and its mirror) for the nodes past either end.
    Every value depends only on the four nodes around it, so a bad node spoils only the
    cells next to it.

    Parameters
    ----------
    u : ndarray
        Positions in node units, 0..n-1.
    n : int
        Nodes, at least 4.

    Returns
    -------
    ndarray
        (len(u), n): value at u = weights @ node values.
    """
    u = np.clip(np.asarray(u, float), 0.0, n - 1.0)
    i = np.clip(np.floor(u).astype(int), 0, n - 2)
    t = u - i
    w = np.stack([(-t**3 + 2 * t**2 - t) / 2, (3 * t**3 - 5 * t**2 + 2) / 2, (-3 * t**3 + 4 * t**2 + t) / 2,
                  (t**3 - t**2) / 2], axis=1)
    full = np.zeros((u.size, n + 2))  # column 0 and n + 1: the nodes past either end
    rows = np.arange(u.size)
    for c in range(4):
        full[rows, i + c] += w[:, c]
    for ghost, (a, b, c) in ((0, (1, 2, 3)), (n + 1, (n, n - 1, n - 2))):
        g = full[:, ghost].copy()
        full[:, a] += 3 * g
        full[:, b] -= 3 * g
        full[:, c] += g
    return full[:, 1:n + 1]


#: Solvers whose maps may be interpolated (``solve_step_m``): tested against solving every cell.
INTERPOLATED_METHODS = ("exact", "modal")

#: Nodes closer than this to a speaker are not interpolated from, m (there the remainder
#: after taking out the speaker's free field is the difference of two large numbers); the
#: cells that would use them are solved directly.
_INTERP_CLEARANCE_M = 0.05


def _plane_pressure(room, speakers, x, y, h_m, f, solve, near_src, method, include_speaker, solve_step_m):
    """Summed complex pressure of ``speakers`` on the grid ``x`` by ``y`` at ``h_m`` (NaN at ``near_src``).

    ``solve(points, mask)`` gives the summed pressure at ``points[mask]`` (NaN elsewhere). With
    ``solve_step_m`` (and a solver in :data:`INTERPOLATED_METHODS`), the grid is solved at
    nodes about that far apart and interpolated as :func:`floor_level_map` describes.
    """
    nx, ny = x.size, y.size
    xx, yy = np.meshgrid(x, y, indexing="ij")
    pts = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, h_m)], axis=1)
    src = np.array([s.position_m for s in speakers], dtype=float)
    coarse = None
    if solve_step_m is not None:
        solve_step = check_number("solve step", solve_step_m, 0.01, 1.0, unit=" m")
        # nodes spanning the first to the last cell centre along each axis
        mx = math.ceil((x[-1] - x[0]) / solve_step) + 1
        my = math.ceil((y[-1] - y[0]) / solve_step) + 1
        # tested with these two solvers (the image solver's truncated lattice is not smooth
        # enough between nodes: solved at every cell)
        if method in INTERPOLATED_METHODS and mx >= 4 and my >= 4 and mx * my < 0.5 * nx * ny:
            coarse = mx, my
    if coarse is None:
        p = solve(pts, ~near_src)
        p[near_src] = np.nan
    else:
        mx, my = coarse
        cx, cy = np.linspace(x[0], x[-1], mx), np.linspace(y[0], y[-1], my)
        wx = _cubic_weights((x - x[0]) / (cx[1] - cx[0]), mx)
        wy = _cubic_weights((y - y[0]) / (cy[1] - cy[0]), my)
        cxx, cyy = np.meshgrid(cx, cy, indexing="ij")
        nodes = np.stack([cxx.ravel(), cyy.ravel(), np.full(cxx.size, h_m)], axis=1)
        bad = np.min(np.linalg.norm(nodes[:, None, :] - src[None, :, :], axis=-1), axis=1) < _INTERP_CLEARANCE_M
        # a cell uses a node when both its weights for it are non-zero
        uses_bad = ((wx != 0).astype(float) @ bad.reshape(mx, my).astype(float) @ (wy != 0).T.astype(float)) > 0
        direct = uses_bad.ravel() & ~near_src
        # the speakers' own free field S e^{-jkr} / r (the room's transfer is it plus a part
        # that is smooth in the room) is taken out before interpolating and put back after
        k = 2.0 * np.pi * f / room.speed_of_sound
        gain = np.array([speaker_response(sp, [f])[0] if include_speaker else 1.0 for sp in speakers])

        def free_field(points):
            r = np.maximum(np.linalg.norm(points[:, None, :] - src[None, :, :], axis=-1), 1e-6)
            return (gain[None, :] * np.exp(-1j * k * r) / r).sum(axis=1)

        p_nodes = solve(nodes, ~bad) - free_field(nodes)
        p_nodes = np.where(bad, 0.0, p_nodes).reshape(mx, my)
        p = (wx @ p_nodes @ wy.T).ravel() + free_field(pts)
        if direct.any():
            p[direct] = solve(pts[direct], np.ones(int(direct.sum()), bool))
        p[near_src] = np.nan
    return p


#: Most grid points a floor map computes (a 4.6 x 3.4 m floor at 2 cm is 39,100 points).
MAP_MAX_POINTS = 40000


def floor_level_map(room, freq_hz, layout=None, height_m=None, step_m=None, channels=None, method=DEFAULT_METHOD,
                    include_speaker=True, solve_step_m=None):
    """Predicted level over the floor plan at ear height at one frequency.

    Parameters
    ----------
    room : Room
    freq_hz : float
        Hz, 5..1000.
    layout : Layout, optional
        Speakers and seat; default the room file's own.
    height_m : float, optional
        Height of the plane, m, inside the room; default the seat's (ear) height.
    step_m : float
        Grid step, m, 0.01..0.5 (cells of equal size filling the plan); at most
        :data:`MAP_MAX_POINTS` points. None: 5 cm, or coarser in a floor too large for
        that many points at 5 cm.
    channels : sequence of str, optional
        Speakers that play (summed in phase); default all.
    method : {"modal", "image"}
    include_speaker : bool
        Apply each speaker's own low-frequency response.
    solve_step_m : float, optional
        None: the solver computes every cell. A step, m (coarser than ``step_m``): the
        solver computes a grid of about this step spanning the same cells; the speakers'
        own free field ``S e^{-jkr} / r`` is taken out of the summed pressure there, the
        smooth remainder is interpolated to every cell by cubic convolution (Keys 1981) and
        the free field is added back exactly. Cells whose interpolation would use a node
        within 5 cm of a speaker are solved directly. At 10 cm on the demo room's 5 cm map
        the level differs from the directly solved map by at most 0.1 dB up to 200 Hz within
        30 dB of its loudest cells (measured; tested at 0.25 dB). Seat level and nearest
        modes are not affected. Used with the exact and the modal solver; other solvers
        solve every cell.

    Returns
    -------
    FloorMap

    Notes
    -----
    At a mode's frequency in a lightly damped room that mode dominates away from the
    speakers, so the map shows ``|cos(nx pi x / Lx) cos(ny pi y / Ly)|`` (Rayleigh; Kuttruff
    2009, sec. 3.3): loud along the walls its pressure maxima lie on, quiet on its nodal lines.
    """
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; "
                         "a map needs at least one speaker")
    f = float(freq_hz)
    if not (math.isfinite(f) and 5.0 <= f <= 1000.0):
        raise ValueError(f"frequency must be 5 to 1000 Hz, got {freq_hz!r}")
    lx, ly, lz = room.size_m
    h_m = float(layout.seat_m[2] if height_m is None else height_m)
    if not (math.isfinite(h_m) and 0.0 < h_m < lz):
        raise ValueError(f"height must lie inside the room (0 < z < {lz:g} m), got {height_m!r} m")
    if step_m is None:
        # 5 cm, or the finest step that keeps the grid within MAP_MAX_POINTS in a large room
        step = max(0.05, math.sqrt(lx * ly / MAP_MAX_POINTS) * 1.02)
        if step > 0.5:
            raise ValueError(f"the floor ({lx:g} x {ly:g} m) is too large to map at a step of 50 cm or less within "
                             f"{MAP_MAX_POINTS} points")
    else:
        step = check_number("step", step_m, 0.01, 0.5, unit=" m")
    names = [s.name for s in layout.speakers]
    chosen = names if channels is None else list(channels)
    for c in chosen:
        if c not in names:
            raise ValueError(f"no speaker named '{c}'; the layout has {', '.join(names)}")
    if not chosen:
        raise ValueError("choose at least one speaker")
    speakers = [layout.speakers[names.index(c)] for c in chosen]
    nx, ny = max(2, math.ceil(lx / step)), max(2, math.ceil(ly / step))
    if nx * ny > MAP_MAX_POINTS:
        least = math.sqrt(lx * ly / MAP_MAX_POINTS) * 1.02
        raise ValueError(f"step {step * 100:g} cm gives {nx} x {ny} = {nx * ny} points over the {lx:g} x {ly:g} m floor; "
                         f"a map computes at most {MAP_MAX_POINTS} points: use a step of at least "
                         f"{math.ceil(least * 100)} cm")
    # cell centres rounded to 1 micrometre, so JSON carries 3.075 rather than 3.0749999999999997
    x = np.round((np.arange(nx) + 0.5) * lx / nx, 6)
    y = np.round((np.arange(ny) + 0.5) * ly / ny, 6)
    xx, yy = np.meshgrid(x, y, indexing="ij")
    pts = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, h_m)], axis=1)
    src = np.array([s.position_m for s in speakers], dtype=float)
    seat = tuple(layout.seat_m)
    # cells within _MAP_CLEARANCE_M of a speaker are left out (NaN): the marker covers them
    # and the level there is the source's own 1/r near field
    near_src = np.min(np.linalg.norm(pts[:, None, :] - src[None, :, :], axis=-1), axis=1) < _MAP_CLEARANCE_M
    def solve(points, mask):
        """Summed complex pressure of the chosen speakers at ``points[mask]`` (NaN elsewhere)."""
        h = np.full((src.shape[0], points.shape[0]), np.nan + 0j)
        for i, sp in enumerate(speakers):
            # the modal sum's closed-form tail is fastest on groups of points on one side of
            # the source; the other solvers take every point at once
            groups = _separated_groups(src[i], points, mask) if method == "modal" else [np.flatnonzero(mask)]
            for group in groups:
                # [f, f]: the solver's own mode cutoff for this frequency (and its block form
                # cannot take a single frequency yet; reported)
                h[i, group] = speaker_levels(room, [sp], points[group], [f, f], method=method,
                                             include_speaker=include_speaker).transfer[0, :, 0]
        return h.sum(axis=0)

    total = np.abs(_plane_pressure(room, speakers, x, y, h_m, f, solve, near_src, method, include_speaker,
                                   solve_step_m))
    with np.errstate(invalid="ignore"):
        level = np.where(np.isfinite(total), 20.0 * np.log10(np.maximum(total, 1e-12)), np.nan)
    # the seat on a grid reaching the prediction's top frequency: the modal solver then keeps
    # the same modes as `predict`, so this value equals the predicted curve's at f
    hs = speaker_levels(room, speakers, [seat], [f, max(f, DEFAULT_RANGE_HZ[1])], method=method,
                        include_speaker=include_speaker).transfer[:, 0, 0]
    seat_level = float(20.0 * np.log10(max(abs(np.sum(hs)), 1e-12)))
    ms = room_modes(room, f * 1.3 + 10.0)
    near = np.flatnonzero(np.abs(ms.freq_hz - f) <= np.maximum(ms.bandwidth_hz, 0.03 * f))
    # rank by how much of the drawn pattern each mode makes: its resonance at f, its coupling
    # to the speakers, and its shape at the map's height (a height mode with a node there, or
    # one the speakers do not drive, is not what the floor plan shows)
    half_bw = np.maximum(ms.bandwidth_hz[near] / 2, 1e-3)
    resonance = 1.0 / np.hypot(1.0, (ms.freq_hz[near] - f) / half_bw)
    drive = np.abs(mode_shapes(ms.indices[near], room.size_m, src)).sum(axis=0)
    at_height = np.abs(np.cos(np.pi * ms.indices[near, 2] * h_m / room.size_m[2]))
    near = near[np.argsort(-(resonance * drive * at_height), kind="stable")][:3]
    modes = tuple({"indices": tuple(int(v) for v in ms.indices[i]), "freq_hz": float(ms.freq_hz[i]),
                   "kind": str(ms.kind[i]), "bandwidth_hz": float(ms.bandwidth_hz[i])} for i in near)
    return FloorMap(f, h_m, x, y, level.reshape(nx, ny), tuple(chosen), src, seat, seat_level, modes, method)


# ======================================================================================
# How sure the map is: the level over the floor in drawn rooms
# ======================================================================================
#: Rooms drawn by default for a floor map's bands (``map --uncertainty``). Each is one solver
#: call holding every speaker and grid node (about 0.03-0.1 s of one core on the demo room's
#: 5 cm map, docs/uncertainty.md); 200 leave about 20 rooms beyond each of the 10 % and 90 %
#: points, as :data:`~roommodes.analysis.uncertainty.SUBS_SAMPLES` does.
MAP_SAMPLES = 200
#: A cell whose 10-90 % spread relative to the floor's median exceeds this is marked unsure on
#: the plot, dB (our choice: its level against the rest of the floor is then not known to
#: within +-3 dB, the contour step of the map).
MAP_UNSURE_DB = 6.0
#: Most levels (drawn rooms x grid cells) the bands hold at once: 40 million, 160 MB as 32-bit
#: floats (the demo room's 5 cm map at 800 rooms holds 5 million).
MAP_BANDS_MAX_VALUES = 40_000_000


@dataclass(frozen=True, eq=False)
class FloorMapBands:
    """Percentiles of the level over the floor over rooms drawn from ``[uncertainty]``.

    Attributes
    ----------
    level_db_p10, level_db_p50, level_db_p90 : ndarray (X, Y)
        10th, 50th and 90th percentile of each cell's level, dB (the grid of the nominal
        :class:`FloorMap`; NaN where the nominal map has none and where a drawn speaker came
        within the map's clearance of the cell in half the rooms or more).
    quietest_m : ndarray (N, 2)
        Distance from the front wall and from the left wall of the quietest cell in each
        drawn room, m: where the deepest node lands.
    seed : int
    method : str
    uncertainty : Uncertainty
    solve_step_m : float or None
        Step of the solved grid in each drawn room (None: every cell solved).
    elapsed_s : float
        CPU time of the drawn rooms, s.
    pattern_spread_db : ndarray (X, Y)
        10-90 % width of each cell's level relative to the median level of the floor in the
        same drawn room, dB: how sure the *pattern* is (where the loud and quiet spots lie),
        with the shift of the whole floor taken out. Cells above :data:`MAP_UNSURE_DB` are
        marked unsure.
    floor_median_db : ndarray (N,)
        Median level over the floor in each drawn room, dB.
    """

    level_db_p10: np.ndarray
    level_db_p50: np.ndarray
    level_db_p90: np.ndarray
    quietest_m: np.ndarray
    seed: int
    method: str
    uncertainty: object
    solve_step_m: float | None
    elapsed_s: float
    pattern_spread_db: np.ndarray
    floor_median_db: np.ndarray

    @property
    def n_samples(self):
        """Number of drawn rooms."""
        return int(self.quietest_m.shape[0])

    @property
    def spread_db(self):
        """Width of each cell's 10-90 % band (X, Y), dB."""
        return self.level_db_p90 - self.level_db_p10

    @property
    def floor_shift_db(self):
        """10th and 90th percentile of the floor's median level over the drawn rooms, dB: how
        far the whole floor moves together."""
        return tuple(float(v) for v in np.percentile(self.floor_median_db, [10.0, 90.0]))

    @property
    def unsure(self):
        """Cells whose pattern spread exceeds :data:`MAP_UNSURE_DB` (X, Y), bool."""
        return np.nan_to_num(self.pattern_spread_db, nan=0.0) > MAP_UNSURE_DB

    def to_dict(self):
        """JSON-ready values: ``level_db_p10/p50/p90`` on the map's grid and the ensemble's settings."""
        return {"level_db_p10": self.level_db_p10, "level_db_p50": self.level_db_p50,
                "level_db_p90": self.level_db_p90, "pattern_spread_db": self.pattern_spread_db,
                "uncertainty": {"samples": self.n_samples, "seed": self.seed, "method": self.method,
                                "uncertainty": self.uncertainty.to_dict(), "solve_step_m": self.solve_step_m,
                                "unsure_spread_db": MAP_UNSURE_DB,
                                "floor_median_db_p10": self.floor_shift_db[0],
                                "floor_median_db_p90": self.floor_shift_db[1],
                                "quietest_m": self.quietest_m}}


def floor_map_bands(room, floor_map, layout=None, *, n_samples=MAP_SAMPLES, seed=None, uncertainty=None,
                    include_speaker=True, solve_step_m=None):
    """The level over the floor of ``floor_map`` in rooms drawn from ``room``'s uncertainty.

    Parameters
    ----------
    room : Room
    floor_map : FloorMap
        The nominal map (:func:`floor_level_map`): its grid, height, speakers and solver are
        used in every drawn room.
    layout : Layout, optional
        The layout the map was drawn for; default the room file's own.
    n_samples, seed : int
        Drawn rooms and their seed (default
        :data:`~roommodes.analysis.uncertainty.DEFAULT_SEED`); drawn room *i* is the one
        :func:`~roommodes.analysis.uncertainty.predict_bands` draws as its *i*-th.
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.
    include_speaker : bool
    solve_step_m : float, optional
        As :func:`floor_level_map`: solve a coarser grid in each drawn room and interpolate.

    Returns
    -------
    FloorMapBands

    Notes
    -----
    The grid stays where it is in the room's coordinates (distances from the front and left
    walls, kept inside a drawn room that came out smaller); the speakers move by their drawn
    position errors, the walls and the air change. Each drawn room is one solver call holding
    every playing speaker and every solved point (two when cells next to a speaker are solved
    directly). The levels are kept as 32-bit floats, at most :data:`MAP_BANDS_MAX_VALUES`.
    """
    m = floor_map
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]")
    n = _check_count(n_samples)
    seed = DEFAULT_SEED if seed is None else int(seed)
    u = room.uncertainty if uncertainty is None else uncertainty
    nx, ny = m.x_m.size, m.y_m.size
    if n * nx * ny > MAP_BANDS_MAX_VALUES:
        raise ValueError(f"{n} drawn rooms of a {nx} x {ny} grid hold {n * nx * ny} levels, more than "
                         f"{MAP_BANDS_MAX_VALUES}: use fewer samples (at most {MAP_BANDS_MAX_VALUES // (nx * ny)}) "
                         "or a coarser step")
    f = float(m.freq_hz)
    xx, yy = np.meshgrid(m.x_m, m.y_m, indexing="ij")
    pts = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, m.height_m)], axis=1)
    near_nominal = (np.min(np.linalg.norm(pts[:, None, :] - np.asarray(m.sources_m)[None, :, :], axis=-1), axis=1)
                    < _MAP_CLEARANCE_M)
    base = room.with_layout(layout)
    levels = np.empty((n, nx * ny), dtype=np.float32)
    quietest = np.empty((n, 2))
    t0 = process_time()
    for i, g in enumerate(_generators(seed, n)):
        drawn, _ = draw_room(base, g, u)
        by_name = {s.name: s for s in drawn.layout.speakers}
        speakers = [by_name[c] for c in m.channels]
        src = np.array([s.position_m for s in speakers], dtype=float)
        inner = np.clip(pts, WALL_MARGIN_M, np.asarray(drawn.size_m) - WALL_MARGIN_M)
        near = near_nominal | (np.min(np.linalg.norm(inner[:, None, :] - src[None, :, :], axis=-1), axis=1)
                               < _MAP_CLEARANCE_M)

        def solve(points, mask, drawn=drawn, speakers=speakers):
            out = np.full(points.shape[0], np.nan + 0j)
            if mask.any():
                out[mask] = speaker_levels(drawn, speakers, points[mask], [f], method=m.method,
                                           include_speaker=include_speaker).transfer[:, :, 0].sum(axis=0)
            return out

        # the grid clipped inside the drawn room is no longer regular at its far edge by up to
        # a few mm; the interpolation's nodes span the nominal cell centres
        x_in = np.clip(m.x_m, WALL_MARGIN_M, drawn.size_m[0] - WALL_MARGIN_M)
        y_in = np.clip(m.y_m, WALL_MARGIN_M, drawn.size_m[1] - WALL_MARGIN_M)
        p = _plane_pressure(drawn, speakers, x_in, y_in, m.height_m, f, solve, near, m.method, include_speaker,
                            solve_step_m)
        with np.errstate(invalid="ignore", divide="ignore"):
            lv = 20.0 * np.log10(np.maximum(np.abs(p), 1e-12))
        lv[~np.isfinite(p)] = np.nan
        levels[i] = lv
        k = int(np.nanargmin(lv))
        quietest[i] = m.x_m[k // ny], m.y_m[k % ny]
    elapsed = process_time() - t0
    p10, p50, p90 = (v.reshape(nx, ny) for v in _cell_percentiles(levels, PERCENTILES))
    # each cell against its own drawn room's floor median: the pattern over the floor, without
    # the shift of the whole floor (at a mode's own frequency the absorption moves the
    # resonance's height everywhere alike)
    floor_median = np.nanmedian(levels, axis=1)
    r10, r90 = _cell_percentiles(levels - floor_median[:, None], (10.0, 90.0))
    return FloorMapBands(p10, p50, p90, quietest, seed, m.method, u, solve_step_m, float(elapsed),
                         (r90 - r10).reshape(nx, ny), floor_median)


def _cell_percentiles(values, percentiles):
    """Percentiles over drawn rooms (axis 0) of each cell; NaN where half the rooms or more
    have none (a drawn speaker within the clearance), the rest over the rooms that have one."""
    n = values.shape[0]
    holes = np.isnan(values)
    pct = np.full((len(percentiles), values.shape[1]), np.nan)
    clean = ~holes.any(axis=0)
    pct[:, clean] = np.percentile(values[:, clean], percentiles, axis=0)
    some = ~clean & (holes.sum(axis=0) < n / 2)
    if some.any():
        pct[:, some] = np.nanpercentile(values[:, some], percentiles, axis=0)
    return pct


def coupling_ranges(room, coupling, layout=None, *, n_samples=MAP_SAMPLES, seed=None, uncertainty=None):
    """10th and 90th percentile of each mode's coupling over rooms drawn from ``room``.

    The modes of ``coupling`` (their index triples) are kept; in each drawn room
    (:func:`~roommodes.analysis.uncertainty.draw_room`: its size, the speakers and the seat
    moved by their drawn errors) the coupling ``|psi(speaker) psi(seat)|`` is taken again.

    Parameters
    ----------
    room : Room
    coupling : ModeCoupling
        From :func:`mode_coupling` for ``layout``.
    layout : Layout, optional
        Default the room file's own.
    n_samples, seed, uncertainty
        As :func:`floor_map_bands`.

    Returns
    -------
    (coupling_p10, coupling_p90) : two arrays (S, N)
    """
    layout = room.layout if layout is None else layout
    n = _check_count(n_samples)
    seed = DEFAULT_SEED if seed is None else int(seed)
    u = room.uncertainty if uncertainty is None else uncertainty
    base = room.with_layout(layout)
    out = np.empty((n,) + coupling.coupling.shape)
    for i, g in enumerate(_generators(seed, n)):
        drawn, _ = draw_room(base, g, u)
        psi_s = mode_shapes(coupling.indices, drawn.size_m, drawn.layout.source_positions_m)
        psi_r = mode_shapes(coupling.indices, drawn.size_m, [drawn.layout.seat_m])[0]
        out[i] = np.abs(psi_s * psi_r[None, :])
    p10, p90 = np.percentile(out, [10.0, 90.0], axis=0)
    return p10, p90
