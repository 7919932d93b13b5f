"""Before/after figures of the placement search on every bundled room (and the bedroom studio).

For each room: the search's best layout against the room file's own layout and the four
standard placements, with the score, its parts, and the flatness at the seat before and
after each layout's EQ. Then an independent check of the advice: the same layouts judged
on a room the search did not see (dimensions +1 % / -1 % / +1 %, absorption x 1.3, modal
solver; and, for an absorbent room such as absorbent-room.toml here, the image-source solver), at the seat and at head
positions 15 cm in front, behind, left and right of it.

Run: python tests/bench/place_study.py [ROOM.toml ...]. Prints; asserts nothing.
"""

from __future__ import annotations

import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.search import (
    area_offsets,
    area_spread_db,
    eq_proxy_db,
    flatness_db,
    search_layouts,
    search_space,
)
from roommodes.dsp.response import log_frequencies, smooth_fractional_octave
from roommodes.io.roomfile import example_rooms, load_room

HERE = Path(__file__).resolve().parent
HEAD_OFFSETS_M = np.array([[0, 0, 0], [0.15, 0, 0], [-0.15, 0, 0], [0, 0.15, 0], [0, -0.15, 0]], float)


def perturbed(room, scale_size=(1.01, 0.99, 1.01), scale_alpha=1.3):
    """The room with its dimensions and absorption changed (a room the search did not see)."""
    surfaces = tuple(replace(s, absorption=tuple(min(0.95, a * scale_alpha) for a in s.absorption))
                     for s in room.surfaces)
    return replace(room, size_m=tuple(v * k for v, k in zip(room.size_m, scale_size)), surfaces=surfaces)


def heard(room, layout, space, band, method="modal"):
    """After-EQ flatness (dB) at the seat and the four head positions, the area spread and the
    EQ's boost, in ``room``; the EQ (eq_proxy_db) set up from this room's own levels over the
    listening area, as a user would from a measurement in the real room."""
    half = 2 ** (1 / 6)
    f = log_frequencies(band[0] / half, band[1] * half, 24)
    sel = (f >= band[0] * (1 - 1e-9)) & (f <= band[1] * (1 + 1e-9))
    area = np.asarray(layout.seat_m) + area_offsets(space.area_m, space.area_points)
    heads = np.asarray(layout.seat_m) + HEAD_OFFSETS_M
    lv = speaker_levels(room, layout.speakers[:2], np.concatenate([area, heads]), f, method=method).level_db
    na = area.shape[0]
    x = np.stack([np.ones(sel.sum()), np.log(f[sel])], axis=1)
    out, boost = np.zeros(HEAD_OFFSETS_M.shape[0]), 0.0
    for c in range(2):
        corr = eq_proxy_db(f, lv[c, :na], band)
        boost = max(boost, float(np.max(corr)))
        for k in range(HEAD_OFFSETS_M.shape[0]):
            after = 10 * np.log10(smooth_fractional_octave(f, 10 ** (lv[c, na + k] / 10), 6))[sel] + corr
            r = after - x @ np.linalg.lstsq(x, after, rcond=None)[0]
            out[k] += np.mean(r**2) / 2
    raw = float(np.sqrt(np.mean(flatness_db(f, lv[:, na + 0], band) ** 2)))
    spread = float(np.sqrt(np.mean(area_spread_db(f, lv[:, :na], band) ** 2)))
    return np.sqrt(out), raw, spread, boost


def study(path, image=False):
    room = load_room(path)
    t0 = time.perf_counter()
    res = search_layouts(room)
    dt = time.perf_counter() - t0
    space = search_space(room)
    print(f"\n=== {room.name} ({path.name}), band {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz, search {dt:.1f} s")
    print(f"  {'layout':<9}{'score':>7}{'flat':>7}{'mism':>7}{'area':>7}{'boost':>7}{'robust':>7}"
          f"{'raw':>7}{'spacing':>9}{'dist':>7}{'angle':>7}  region")
    rows = [("#" + s.name, s) for s in res.ranked[:2]] + ([("file", res.current)] if res.current else []) \
        + [(s.name, s) for s in res.presets]
    for label, s in rows:
        p, g = s.parts, s.figures
        print(f"  {label:<9}{s.score:7.2f}{p['flatness']:7.2f}{p['mismatch']:7.2f}{p['area']:7.2f}{p['boost']:7.2f}"
              f"{p['robustness']:7.2f}{g['flatness_raw']:7.2f}{g['spacing_m']:9.2f}{g['seat_distance_m']:7.2f}"
              f"{g['angle_deg']:7.0f}  {'yes' if s.in_region else 'no'}")
    refs = [("perturbed room (size +-1 %, absorption x1.3), modal", perturbed(room), "modal")]
    if image:
        refs.append(("the same room, image-source solver", room, "image"))
    for title, ref_room, method in refs:
        t0 = time.perf_counter()
        print(f"  check on {title} (dB): after-EQ flatness at the seat, mean over 4 heads 15 cm off, raw at the "
              "seat, area spread, EQ boost; 'heard' = flatness + spread + boost/4, at the seat / at the heads")
        for label, s in rows:
            fl, raw, spread, boost = heard(ref_room, s.layout, space, res.band_hz, method)
            h = spread + 0.25 * boost
            print(f"    {label:<9}{fl[0]:7.2f}{np.mean(fl[1:]):7.2f}{raw:7.2f}{spread:7.2f}{boost:7.2f}   heard "
                  f"{fl[0] + h:5.2f} / {np.mean(fl[1:]) + h:5.2f}")
        print(f"    ({time.perf_counter() - t0:.1f} s)")


def main(argv):
    paths = [Path(a) for a in argv] or list(example_rooms()) + [HERE / "bedroom-studio.toml",
                                                                HERE / "absorbent-room.toml"]
    for p in paths:
        room = load_room(p)
        # the image-source sum converges quickly only in an absorbent room (order ~ 20 / alpha)
        absorbent = min(float(s.absorption_at(63.0)) for s in room.surfaces) >= 0.4
        study(p, image=absorbent)


if __name__ == "__main__":
    main(sys.argv[1:])
