"""A room's summary figures: size, reverberation, Schroeder frequency, proportion checks."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..model.criteria import Check, bonello_checks, eyring_rt60, integer_ratio_check, proportion_rule_check, sabine_rt60
from ..model.modes import mode_indices
from .predict import room_schroeder_frequency

#: Top of the bands the mode-distribution criteria cover, Hz (criteria.bonello_checks).
_BONELLO_TOP_HZ = 200.0

__all__ = ["RoomSummary", "room_summary", "SUMMARY_BANDS_HZ"]

#: Octave bands of the reverberation figures.
SUMMARY_BANDS_HZ = (63.0, 125.0, 250.0)


@dataclass(frozen=True)
class RoomSummary:
    """Figures of :func:`room_summary`."""

    volume_m3: float
    total_area_m2: float
    speed_of_sound: float
    bands_hz: tuple
    sabine_rt60_s: np.ndarray
    eyring_rt60_s: np.ndarray
    schroeder_hz: float
    checks: tuple
    extrapolated: tuple  # (surface, bands) whose absorption below 125 Hz is extrapolated


def room_summary(room):
    """Volume, area, Sabine and Eyring RT60 per octave band, Schroeder frequency, checks.

    The Schroeder frequency uses the Sabine time at 125 Hz (see
    :func:`roommodes.predict.room_schroeder_frequency`). The proportion checks are the
    BBC / ITU-R BS.1116 inequality, near-integer dimension ratios and Bonello's two
    criteria (:mod:`roommodes.criteria`).
    """
    bands = np.array(SUMMARY_BANDS_HZ)
    alpha = room.absorption(bands)
    c = room.speed_of_sound
    sab = np.atleast_1d(sabine_rt60(room.volume_m3, room.surface_areas_m2, alpha, speed_of_sound=c))
    eyr = np.atleast_1d(eyring_rt60(room.volume_m3, room.surface_areas_m2, alpha, speed_of_sound=c))
    _, f = mode_indices(room.size_m, 260.0, c)
    if f.size > 1 and f[1] < _BONELLO_TOP_HZ:
        density, coincidence = bonello_checks(f[1:])
    else:  # a very small room: no mode in the bands the criteria cover
        first = mode_indices(room.size_m, c / (2.0 * max(room.size_m)) * 1.001, c)[1][1]
        why = (f"Not applicable: the room's lowest mode ({first:.0f} Hz) lies above the {_BONELLO_TOP_HZ:.0f} Hz "
               "the criterion covers")
        density = Check("bonello-density", True, why, {"lowest_mode_hz": float(first)})
        coincidence = Check("bonello-coincidence", True, why, {"lowest_mode_hz": float(first)})
    checks = (proportion_rule_check(room.size_m), integer_ratio_check(room.size_m), density, coincidence)
    extrap = tuple((s.name, s.extrapolated_hz) for s in room.surfaces if s.extrapolated_hz)
    return RoomSummary(room.volume_m3, room.total_area_m2, c, tuple(SUMMARY_BANDS_HZ), sab, eyr,
                       room_schroeder_frequency(room), checks, extrap)
