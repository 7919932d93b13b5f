"""Why two channels differ at the seat, in terms a practitioner can act on.

:func:`explain` predicts both channels at the seat (speaker responses included), their
difference (first minus second) and the mono sum (both driven in phase: the complex sum),
finds the frequency regions where the power-smoothed difference reaches a threshold, and
for each region

* ranks its causes by contribution: the room modes, each with the mode-shape value at
  both speakers and at the seat, and the boundaries (each speaker's distance to the
  surface and its quarter-wave notch ``c / 4d``);
* computes the move of one speaker (10-30 cm along one axis) that most reduces the
  difference there, and the predicted effect of that move;
* says it in a sentence.

Contributions, in dB of the region's mean |difference|:

*mode* n
    The modal sum is ``H_c = sum_n psi_n(r_c) psi_n(r_seat) W_n + T_c``
    (:mod:`roommodes.solvers.modal`). The contribution of mode n is how much the mean
    |difference| over the region falls when both speakers are given the same coupling to
    that mode, ``(psi_n(r_1) + psi_n(r_2)) / 2``, everything else unchanged.
*boundary* w
    Each speaker's radiated power next to one rigid plane at distance d, relative to
    free space, is ``1 + sin(2kd) / (2kd)`` (Waterhouse 1958); the contribution is the mean
    over the region of the difference of the two speakers' factors in dB, counted in the
    direction of the level difference. Side walls are taken per speaker (each speaker's
    nearer side wall); the front wall, floor, ceiling and back wall are shared.

References
----------
R. V. Waterhouse, "Output of a sound source in a reverberation chamber and other
reflecting environments", J. Acoust. Soc. Am. 30(1):4, 1958.
H. Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.4-3.5 (modal sum).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..dsp.response import level_db, log_frequencies, smooth_db
from ..dsp.text import range_text
from ..model.modes import KINDS, mode_shapes
from ..model.room import WALL_AXIS, WALL_FAR, WALLS
from ..model.speaker import speaker_response
from ..solvers import DEFAULT_METHOD
from ..solvers.modal import modal_weights, static_tail_term
from .levels import speaker_levels
from .predict import boundary_notches, room_schroeder_frequency, usable_band

#: Modes read for the causes: up to this factor times the top of the band.
_CAUSE_CUTOFF_FACTOR = 1.5

__all__ = ["Cause", "Move", "Region", "Explanation", "ExplainBands", "explain", "explain_bands", "modal_decomposition"]

DEFAULT_THRESHOLD_DB = 3.0
#: Moves tried for each speaker along each axis, both ways, m.
MOVE_STEPS_M = (0.1, 0.2, 0.3)
#: Default (and, in the report, the most) number of rooms drawn for the explanation's bands.
EXPLAIN_SAMPLES = 100
_AXIS_NAMES = ("length", "width", "height")
_TINY = 1e-30


@dataclass(frozen=True)
class Cause:
    """One cause of a left/right difference, with its contribution (dB) and details."""

    kind: str  # "mode" or "boundary"
    contribution_db: float
    text: str
    data: dict


@dataclass(frozen=True)
class Move:
    """A move of one speaker and its predicted effect on the difference.

    ``region_*_db`` are the largest |difference| (smoothed) in the region before and after;
    ``band_*_db`` the RMS difference over the whole band.
    """

    speaker: str
    axis: int
    delta_m: float
    direction: str
    position_m: tuple
    region_before_db: float
    region_after_db: float
    band_before_db: float
    band_after_db: float


@dataclass(frozen=True)
class Region:
    """A frequency region where |first - second| reaches the threshold."""

    freq_hz: tuple
    peak_hz: float
    difference_db: float
    valid: bool
    causes: tuple
    notches: tuple
    move: Move | None
    sentence: str

    def to_dict(self):
        """JSON-ready values (the ``regions`` entries of ``explain --json``)."""
        m = self.move
        return {
            "freq_hz": list(self.freq_hz), "peak_hz": self.peak_hz, "difference_db": self.difference_db,
            "valid": self.valid,
            "causes": [{**c.data, "contribution_db": c.contribution_db, "text": c.text} for c in self.causes],
            "notches": list(self.notches),
            "move": None if m is None else {
                "speaker": m.speaker, "axis": "xyz"[m.axis], "delta_m": m.delta_m, "direction": m.direction,
                "position_m": m.position_m, "region_before_db": m.region_before_db,
                "region_after_db": m.region_after_db, "band_before_db": m.band_before_db,
                "band_after_db": m.band_after_db},
            "sentence": self.sentence,
        }


@dataclass(frozen=True)
class Explanation:
    """Both channels at the seat, their difference, the mono sum, and the regions.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    names : (str, str)
    positions_m : (tuple, tuple)
    seat_m : tuple
    level_db : ndarray (2, F)
        Unsmoothed levels (speaker response included), dB re free field at 1 m.
    smoothed_db : ndarray (2, F)
        Power-smoothed over 1/``smoothing`` octave.
    difference_db, difference_smoothed_db : ndarray (F,)
        First minus second.
    mono_db, mono_smoothed_db : ndarray (F,)
        Level of the complex sum of the two channels.
    band_hz : (float, float)
    threshold_db : float
    smoothing : int
    schroeder_hz : float
    band_mismatch_db : float
        RMS of the smoothed difference over the band.
    regions : tuple of Region
    mono_cancelled : tuple of dict
        Modes the two speakers drive in opposite phase (cancelling in the mono sum).
    method : str
        The solver of the curves.
    """

    freq_hz: np.ndarray
    names: tuple
    positions_m: tuple
    seat_m: tuple
    level_db: np.ndarray
    smoothed_db: np.ndarray
    difference_db: np.ndarray
    difference_smoothed_db: np.ndarray
    mono_db: np.ndarray
    mono_smoothed_db: np.ndarray
    band_hz: tuple
    threshold_db: float
    smoothing: int
    schroeder_hz: float
    band_mismatch_db: float
    regions: tuple
    mono_cancelled: tuple
    method: str = "modal"

    def to_dict(self):
        """JSON-ready values: the keys of ``explain --json`` (shared/ARCHITECTURE.md)."""
        n1, n2 = self.names
        return {
            "method": self.method, "channels": list(self.names), "positions_m": list(self.positions_m),
            "seat_m": self.seat_m, "frequencies_hz": self.freq_hz,
            "level_db": {n1: self.level_db[0], n2: self.level_db[1]},
            "smoothed_db": {n1: self.smoothed_db[0], n2: self.smoothed_db[1]},
            "smoothing_octave_fraction": self.smoothing,
            "difference_db": self.difference_db, "difference_smoothed_db": self.difference_smoothed_db,
            "mono_db": self.mono_db, "mono_smoothed_db": self.mono_smoothed_db,
            "band_hz": self.band_hz, "threshold_db": self.threshold_db, "schroeder_hz": self.schroeder_hz,
            "band_mismatch_db": self.band_mismatch_db,
            "regions": [r.to_dict() for r in self.regions],
            "mono_cancelled_modes": list(self.mono_cancelled),
        }


def modal_decomposition(room, sources_m, receiver_m, freq_hz):
    """Each mode's term of the modal sum from each source to one receiver.

    Parameters
    ----------
    room : Room
    sources_m : array_like (S, 3)
    receiver_m : array_like (3,)
    freq_hz : array_like (F,)

    Returns
    -------
    indices : ndarray (N, 3)
    terms : ndarray, complex (S, N, F)
        ``psi_n(r_s) psi_n(r) W_n(f)``.
    rest : ndarray (S,)
        The static tail; ``terms.sum(axis=1) + rest[:, None]`` equals
        :func:`roommodes.transfer_function` (modal method) to round-off.
    """
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    src = np.atleast_2d(np.asarray(sources_m, dtype=float))
    rec = np.atleast_2d(np.asarray(receiver_m, dtype=float))
    idx, weight, sw = modal_weights(room.size_m, room.impedance(f), f, room.speed_of_sound)
    psi_s = mode_shapes(idx, room.size_m, src)
    psi_r = mode_shapes(idx, room.size_m, rec)[0]
    terms = (psi_s * psi_r)[:, :, None] * weight[None]
    rest = static_tail_term(room.size_m, src, rec, idx, sw)[:, 0]
    return idx, terms, rest


def _smooth_db(f, h, fraction):
    return smooth_db(f, level_db(h), fraction)


def _where_in_mode(psi):
    a = abs(psi)
    if a >= 0.7:
        return "near a pressure maximum"
    if a <= 0.3:
        return "near a node"
    return "between a node and a maximum"


def _mode_name(n):
    axes = [_AXIS_NAMES[i] for i in range(3) if n[i]]
    kind = KINDS[len(axes)]
    return f"{kind} mode ({n[0]},{n[1]},{n[2]})" + (f", a {'-'.join(axes)} mode" if axes else "")


_DIRECTIONS = {(0, 1): "away from the front wall", (0, -1): "toward the front wall",
               (1, 1): "toward the right wall", (1, -1): "toward the left wall", (2, 1): "up", (2, -1): "down"}


def _regions(f, diff, sel, threshold):
    over = sel & (np.abs(diff) >= threshold)
    runs = []
    i = 0
    while i < f.size:
        if over[i]:
            j = i
            while j + 1 < f.size and over[j + 1]:
                j += 1
            runs.append((i, j))
            i = j + 1
        else:
            i += 1
    return runs


def _surface(wall):
    return wall if wall in ("floor", "ceiling") else f"{wall} wall"


def _outer_walls(positions):
    """Each speaker's own side wall: the left one's left wall, the right one's right wall."""
    return ("left", "right") if positions[0][1] <= positions[1][1] else ("right", "left")


def _wall_distance(room, pos, wall):
    i = WALLS.index(wall)
    axis = WALL_AXIS[i]
    return float(room.size_m[axis] - pos[axis] if WALL_FAR[i] else pos[axis])


def _boundary_causes(room, f, rows, sign, names, positions):
    k = 2 * np.pi * f[rows] / room.speed_of_sound
    out = []
    for shared in ("front", "side", "floor", "ceiling", "back"):
        walls = list(_outer_walls(positions)) if shared == "side" else [shared, shared]
        d = [_wall_distance(room, p, w) for p, w in zip(positions, walls)]
        gains = [10 * np.log10(1 + np.sin(2 * k * di) / (2 * k * di)) for di in d]
        contrib = float(np.mean(sign * (gains[0] - gains[1])))
        c = room.speed_of_sound
        notch = [c / (4 * di) for di in d]
        label = "side walls" if shared == "side" else _surface(shared)
        text = (f"{label}: {names[0]} {d[0] * 100:.0f} cm from the {_surface(walls[0])} (c/4d = {notch[0]:.0f} Hz), "
                f"{names[1]} {d[1] * 100:.0f} cm from the {_surface(walls[1])} (c/4d = {notch[1]:.0f} Hz)")
        data = {"type": "boundary", "surface": shared,
                "speakers": [{"name": n, "wall": w, "distance_m": di, "notch_hz": nh}
                             for n, w, di, nh in zip(names, walls, d, notch)]}
        out.append(Cause("boundary", contrib, text, data))
    return out


def _region_notches(room, speakers, lo_hz, hi_hz, min_difference_m=0.05):
    """Each speaker's quarter-wave notches in [lo, hi] Hz at surfaces whose distance differs
    between the two speakers (side walls: each speaker's own; the rest shared)."""
    out = []
    outer = _outer_walls([s.position_m for s in speakers])
    for i, sp in enumerate(speakers):
        other = speakers[1 - i].position_m
        for w, d, nh in boundary_notches(room, sp.position_m):
            if not lo_hz <= nh <= hi_hz:
                continue
            mate = w
            if w in ("left", "right"):  # own (outer) side wall pairs with the other's own, inner with inner
                mate = outer[1 - i] if w == outer[i] else outer[i]
            if abs(d - _wall_distance(room, other, mate)) >= min_difference_m:
                out.append({"speaker": sp.name, "wall": w, "distance_m": float(d), "notch_hz": float(nh)})
    return tuple(out)


def _mode_causes(f, h, weight, resp, psi, idx, mode_freq, rows, fraction, mean_abs, max_modes=12):
    lo, hi = f[rows[0]], f[rows[-1]]
    near = np.flatnonzero((mode_freq >= lo / 1.5) & (mode_freq <= hi * 1.5) & (np.arange(mode_freq.size) > 0))
    if near.size == 0:
        return []
    # rank candidates by the size of their differential term in the region, keep the largest
    seat_w = psi[2, near][:, None] * weight[near]  # psi_n(seat) W_n(f)
    diff_term = seat_w[:, rows] * (psi[0, near][:, None] * resp[0, rows] - psi[1, near][:, None] * resp[1, rows])
    near = near[np.argsort(-np.max(np.abs(diff_term), axis=1))[:max_modes]]
    out = []
    for n in near:
        mean_psi = 0.5 * (psi[0, n] + psi[1, n])
        h2 = [h[c] + (mean_psi - psi[c, n]) * psi[2, n] * weight[n] * resp[c] for c in range(2)]
        d2 = _smooth_db(f, h2[0], fraction) - _smooth_db(f, h2[1], fraction)
        contrib = float(mean_abs - np.mean(np.abs(d2[rows])))
        ni = tuple(int(v) for v in idx[n])
        text = f"{_mode_name(ni)} at {mode_freq[n]:.1f} Hz"
        data = {"type": "mode", "indices": list(ni), "freq_hz": float(mode_freq[n]),
                "kind": KINDS[int(np.count_nonzero(idx[n]))],
                "psi_speakers": [float(psi[0, n]), float(psi[1, n])], "psi_seat": float(psi[2, n])}
        out.append(Cause("mode", contrib, text, data))
    return out


def explain(room, layout=None, channels=None, freq_hz=None, threshold_db=DEFAULT_THRESHOLD_DB, band_hz=None,
            smoothing=6, move_steps_m=MOVE_STEPS_M, keep_out=(), method=DEFAULT_METHOD):
    """Explain why two channels differ at the seat.

    Parameters
    ----------
    room : Room
    layout : Layout, optional
        Default the room file's own.
    channels : (str, str), optional
        Names of the two speakers compared (first minus second); default the first two.
    freq_hz : array_like, optional
        Default 15-300 Hz at 48 points per octave.
    threshold_db : float
        Smallest |difference| (smoothed) that makes a region, dB, > 0.
    band_hz : (float, float), optional
        Where regions are looked for; default max(20 Hz, the speakers' low cut) to 200 Hz.
    smoothing : int
        1/``smoothing``-octave power smoothing of the curves that regions are found on
        (0 for none).
    move_steps_m : sequence of float
        Move lengths tried for each speaker along each axis, both ways.
    keep_out : sequence of KeepOut
        Boxes a moved speaker may not enter (the ``[search]`` keep-out boxes).
    method : str
        The solver of the curves, the difference and the suggested moves
        (:data:`roommodes.solvers.METHODS`). The causes are always read from the modal
        decomposition: each mode's term of the modal sum.

    Returns
    -------
    Explanation

    Raises
    ------
    ValueError
        Unknown channel names, a layout with fewer than two speakers, a bad threshold or band.
    """
    layout = room.layout if layout is None else layout
    if layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat] to explain")
    names = [s.name for s in layout.speakers]
    if len(names) < 2:
        raise ValueError(f"explain compares two speakers; the layout has {len(names)} ({', '.join(names)}): add "
                         "a second [speakers.NAME] to the room file, or use `roommodes predict` for one speaker")
    if channels is None:
        # the stereo pair: the first two mains (subs are left out; they are not a channel of the pair)
        chosen = list(layout.mains[:2]) if len(layout.mains) >= 2 else list(layout.speakers[:2])
    else:
        if len(channels) != 2 or channels[0] == channels[1]:
            raise ValueError(f"give two different speaker names to compare, got {channels!r}")
        for c in channels:
            if c not in names:
                raise ValueError(f"no speaker named '{c}'; the room file has {', '.join(names)}")
        chosen = [layout.speakers[names.index(c)] for c in channels]
    if not (np.isfinite(threshold_db) and threshold_db > 0):
        raise ValueError(f"threshold must be a positive number of dB, got {threshold_db}")
    if smoothing and not 1 <= smoothing <= 48:
        raise ValueError(f"smoothing must be 0 (none) or 1..48 (1/N octave), got {smoothing}")
    f = log_frequencies(15.0, 300.0, 48) if freq_hz is None else np.asarray(freq_hz, dtype=float)
    band = usable_band(chosen) if band_hz is None else tuple(float(v) for v in band_hz)
    if not 0 < band[0] < band[1]:
        raise ValueError(f"band must satisfy 0 < low < high, got {band[0]:g}-{band[1]:g} Hz")
    sel = (f >= band[0]) & (f <= band[1])
    if sel.sum() < 2:
        raise ValueError(f"band {band[0]:g}-{band[1]:g} Hz holds fewer than two of the grid's frequencies "
                         f"({f[0]:g}-{f[-1]:g} Hz)")
    seat = np.asarray(layout.seat_m, dtype=float)
    pos = np.array([s.position_m for s in chosen], dtype=float)
    resp = np.stack([speaker_response(s, f) for s in chosen])
    # the causes are read from the modes up to 1.5 times the top of the band: modes further up
    # add only a smooth background there, and bounding them bounds the (modes, F) weights
    idx, weight, _ = modal_weights(room.size_m, room.impedance(f), f, room.speed_of_sound,
                                   cutoff_hz=_CAUSE_CUTOFF_FACTOR * band[1])
    psi = np.vstack([mode_shapes(idx, room.size_m, pos), mode_shapes(idx, room.size_m, [seat])])  # (3, N)
    h = speaker_levels(room, chosen, [seat], f, method=method).transfer[:, 0, :]
    level = level_db(h)
    smooth = np.stack([_smooth_db(f, h[c], smoothing) for c in range(2)])
    diff_s = smooth[0] - smooth[1]
    mono = h[0] + h[1]
    mode_freq = 0.5 * room.speed_of_sound * np.sqrt(np.sum((idx / np.asarray(room.size_m)) ** 2, axis=1))
    fs = room_schroeder_frequency(room)
    band_rms = float(np.sqrt(np.mean(diff_s[sel] ** 2)))
    moves = _candidate_moves(room, chosen, pos, seat, f, h, smoothing, move_steps_m, keep_out, method)
    names2 = (chosen[0].name, chosen[1].name)
    regions = []
    for i0, i1 in _regions(f, diff_s, sel, threshold_db):
        rows = np.arange(i0, i1 + 1)
        pk = rows[np.argmax(np.abs(diff_s[rows]))]
        sign = float(np.sign(diff_s[pk]))
        mean_abs = float(np.mean(np.abs(diff_s[rows])))
        causes = _mode_causes(f, h, weight, resp, psi, idx, mode_freq, rows, smoothing, mean_abs)
        causes += _boundary_causes(room, f, rows, sign, names2, pos)
        causes = tuple(sorted((c for c in causes if c.contribution_db > 0.05), key=lambda c: -c.contribution_db))
        notches = _region_notches(room, chosen, f[i0] / 2 ** (1 / 3), f[i1] * 2 ** (1 / 3))
        move = _best_move(moves, diff_s, rows, sel, band_rms)
        region = Region((float(f[i0]), float(f[i1])), float(f[pk]), float(diff_s[pk]), bool(f[pk] <= fs), causes,
                        notches, move, "")
        regions.append(Region(**{**region.__dict__, "sentence": _sentence(region, names2)}))
    cancelled = []
    for n in np.flatnonzero((mode_freq <= band[1]) & (np.arange(idx.shape[0]) > 0)):
        big = max(abs(psi[0, n]), abs(psi[1, n]))
        if big >= 0.3 and abs(psi[0, n] + psi[1, n]) <= 0.05 * big:
            cancelled.append({"indices": [int(v) for v in idx[n]], "freq_hz": float(mode_freq[n]),
                              "kind": KINDS[int(np.count_nonzero(idx[n]))],
                              "psi_speakers": [float(psi[0, n]), float(psi[1, n])], "psi_seat": float(psi[2, n])})
    return Explanation(f, names2, (tuple(pos[0]), tuple(pos[1])), tuple(seat), level, smooth, level[0] - level[1],
                       diff_s, level_db(mono), _smooth_db(f, mono, smoothing), band, float(threshold_db),
                       int(smoothing), float(fs), band_rms, tuple(regions), tuple(cancelled), method)


def _candidate_moves(room, speakers, pos, seat, f, h, smoothing, steps, keep_out, method):
    """Every single-speaker move along one axis, with its smoothed difference curve."""
    size = np.asarray(room.size_m, dtype=float)
    cands = []
    for c in range(2):
        for axis in range(3):
            for sgn in (1, -1):
                for step in steps:
                    p = pos[c].copy()
                    p[axis] += sgn * step
                    if np.any(p < 0.1) or np.any(p > size - 0.1):
                        continue
                    if np.linalg.norm(p - seat) < 0.5 or np.linalg.norm(p - pos[1 - c]) < 0.3:
                        continue
                    if any(box.contains(p) for box in keep_out):
                        continue
                    cands.append((c, axis, sgn * step, p))
    if not cands:
        return []
    moved = [replace(speakers[c], position_m=tuple(float(v) for v in p)) for c, *_, p in cands]
    hn = speaker_levels(room, moved, [seat], f, method=method).transfer[:, 0, :]
    out = []
    for (c, axis, delta, p), hc in zip(cands, hn):
        pair = [hc, h[1]] if c == 0 else [h[0], hc]
        d = _smooth_db(f, pair[0], smoothing) - _smooth_db(f, pair[1], smoothing)
        out.append((speakers[c].name, axis, delta, tuple(float(v) for v in p), d))
    return out


def _best_move(moves, diff_s, rows, sel, band_rms, tolerance_db=0.5):
    if not moves:
        return None
    before = float(np.max(np.abs(diff_s[rows])))
    scored = []
    for name, axis, delta, p, d in moves:
        after = float(np.max(np.abs(d[rows])))
        band_after = float(np.sqrt(np.mean(d[sel] ** 2)))
        scored.append((after, band_after, abs(delta), name, axis, delta, p))
    # prefer moves that do not make the whole band worse; among near-equal ones the shortest
    ok = [s for s in scored if s[1] <= band_rms + tolerance_db] or scored
    best_after = min(s[0] for s in ok)
    best = min((s for s in ok if s[0] <= best_after + 0.25), key=lambda s: (s[2], s[0]))
    if before - best[0] < tolerance_db:
        return None
    after, band_after, _, name, axis, delta, p = best
    return Move(name, axis, delta, _DIRECTIONS[axis, int(np.sign(delta))], p, before, after, band_rms, band_after)


def _sentence(region, names):
    lo, hi = region.freq_hz
    louder = "louder" if region.difference_db > 0 else "quieter"
    s = (f"{range_text(lo, hi)}: {names[0]} is up to {abs(region.difference_db):.1f} dB {louder} than {names[1]} "
         f"(at {region.peak_hz:.0f} Hz).")
    if not region.valid:
        s += " This is above the Schroeder frequency: indicative only."
    if region.causes:
        c = region.causes[0]
        if c.kind == "mode":
            p1, p2 = c.data["psi_speakers"]
            phase = ", in opposite phase" if p1 * p2 < 0 and min(abs(p1), abs(p2)) > 0.3 else ""
            if _where_in_mode(p1) == _where_in_mode(p2):
                where = (f"both speakers sit {_where_in_mode(p1)} of it (psi = {p1:+.2f} and {p2:+.2f}){phase}")
            else:
                where = (f"the {names[0]} speaker sits {_where_in_mode(p1)} of it (psi = {p1:+.2f}) while the "
                         f"{names[1]} speaker sits {_where_in_mode(p2)} (psi = {p2:+.2f}){phase}")
            s += f" Mainly the {c.text}: {where}; the seat's value is {c.data['psi_seat']:+.2f}."
        else:
            a, b = c.data["speakers"]
            what = "side-wall" if c.data["surface"] == "side" else c.data["surface"]
            s += (f" Mainly the {what} boundary: the {a['name']} speaker is {a['distance_m'] * 100:.0f} cm "
                  f"from the {_surface(a['wall'])} (quarter-wave notch c/4d = {a['notch_hz']:.0f} Hz), the "
                  f"{b['name']} speaker {b['distance_m'] * 100:.0f} cm from the {_surface(b['wall'])} "
                  f"(c/4d = {b['notch_hz']:.0f} Hz).")
    else:
        s += " No single mode or boundary stands out: the difference comes from many modes together."
    m = region.move
    if m is None:
        s += " No single move of one speaker by up to 30 cm reduces it by 0.5 dB or more."
    else:
        s += (f" Moving the {m.speaker} speaker {abs(m.delta_m) * 100:.0f} cm {m.direction} is predicted to bring the "
              f"largest difference here from {m.region_before_db:.1f} to {m.region_after_db:.1f} dB (whole-band RMS "
              f"difference {m.band_before_db:.1f} -> {m.band_after_db:.1f} dB).")
    return s


@dataclass(frozen=True, eq=False)
class ExplainBands:
    """10-50-90 % bands of the two channels and of their difference over drawn rooms.

    Every drawn room's levels are smoothed like the explanation's curves (1/N octave,
    power), the difference is taken per drawn room, then the percentiles.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    names : (str, str)
    level_db_p10, level_db_p50, level_db_p90 : ndarray (2, F)
    difference_db_p10, difference_db_p50, difference_db_p90 : ndarray (F,)
        First minus second, dB.
    n_samples, seed : int
    smoothing : int
    method : str
    """

    freq_hz: np.ndarray
    names: tuple
    level_db_p10: np.ndarray
    level_db_p50: np.ndarray
    level_db_p90: np.ndarray
    difference_db_p10: np.ndarray
    difference_db_p50: np.ndarray
    difference_db_p90: np.ndarray
    n_samples: int
    seed: int
    smoothing: int
    method: str

    def to_dict(self):
        """JSON-ready: ``difference_db_p10/p50/p90`` on the explanation's ``frequencies_hz``."""
        return {"difference_db_p10": self.difference_db_p10, "difference_db_p50": self.difference_db_p50,
                "difference_db_p90": self.difference_db_p90}


def explain_bands(room, explanation, layout=None, *, n_samples, seed, uncertainty=None):
    """The explanation's two channels and their difference in rooms drawn from the uncertainty.

    Parameters
    ----------
    room : Room
    explanation : Explanation
        Gives the channels, frequencies, smoothing and solver.
    layout : Layout, optional
        Default ``room.layout`` (the one the explanation was made on).
    n_samples, seed : int
    uncertainty : Uncertainty, optional
        Default ``room.uncertainty``.

    Returns
    -------
    ExplainBands
    """
    from .uncertainty import PERCENTILES, ensemble_levels

    e = explanation
    layout = room.layout if layout is None else layout
    names = [s.name for s in layout.speakers]
    cols = [names.index(n) for n in e.names]
    lv = ensemble_levels(room, e.freq_hz, layout, n_samples=n_samples, seed=seed, uncertainty=uncertainty,
                         method=e.method)[:, cols, 0, :]  # (N, 2, F) at the main seat
    sm = np.stack([[smooth_db(e.freq_hz, lv[i, c], e.smoothing) for c in range(2)] for i in range(lv.shape[0])])
    lp = np.percentile(sm, PERCENTILES, axis=0)
    dp = np.percentile(sm[:, 0] - sm[:, 1], PERCENTILES, axis=0)
    return ExplainBands(e.freq_hz, tuple(e.names), lp[0], lp[1], lp[2], dp[0], dp[1], dp[2], int(lv.shape[0]),
                        int(seed), int(e.smoothing), e.method)
