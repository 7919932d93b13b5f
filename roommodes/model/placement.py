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

import numpy as np

from .room import Layout, Speaker

__all__ = ["PRESETS", "preset_layout", "SEAT_HEIGHT_M"]

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
