"""The one chain from a room and its speakers to the level at a set of points.

Every analysis that needs a predicted level (predict, explain, the correction EQ, compare,
fit, the floor map, the report) calls :func:`speaker_levels`, so that the solver choice, the
speaker's own response and the dB floor are the same everywhere. The placement search keeps
a batched scorer of its own (:mod:`roommodes.analysis.search`) for speed; a test holds it to
this function.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.response import level_db as _level_db
from ..model.speaker import speaker_response
from ..solvers import DEFAULT_METHOD, METHODS, transfer_function

__all__ = ["Levels", "speaker_levels", "METHODS"]


@dataclass(frozen=True, eq=False)
class Levels:
    """Complex transfer of each speaker to each point, the speaker's own response included.

    Attributes
    ----------
    freq_hz : ndarray (F,)
        Frequencies, Hz.
    names : tuple of str
        The speakers, in the order of the first axis.
    sources_m : ndarray (S, 3)
        Speaker positions, m.
    points_m : ndarray (P, 3)
        Receiver positions, m.
    transfer : ndarray, complex (S, P, F)
        Pressure relative to the free-field pressure of the same speaker at 1 m, times the
        speaker's own response when it was included.
    method : str
        The solver that computed it.
    """

    freq_hz: np.ndarray
    names: tuple
    sources_m: np.ndarray
    points_m: np.ndarray
    transfer: np.ndarray
    method: str

    @property
    def level_db(self):
        """``20 log10 |transfer|`` (S, P, F), dB, floored at -300 dB."""
        return _level_db(self.transfer)

    def power_mean_db(self):
        """Level of the power average over the points (S, F), dB."""
        return 10.0 * np.log10(np.maximum(np.mean(np.abs(self.transfer) ** 2, axis=1), 1e-30))


def speaker_levels(room, speakers, points_m, freq_hz, *, method=DEFAULT_METHOD, include_speaker=True, **options):
    """Level of each speaker at each point: the room's transfer times the speaker's response.

    Parameters
    ----------
    room : Room
        The room (size, surfaces, air).
    speakers : sequence of Speaker
        The sources; their ``position_m`` and their own low-frequency response
        (:func:`roommodes.model.speaker.speaker_response`) are used.
    points_m : array_like (P, 3)
        Receiver positions, m, inside the room.
    freq_hz : array_like (F,)
        Frequencies, Hz (> 0).
    method : {"modal", "image", ...}
        The solver (:data:`roommodes.solvers.METHODS`).
    include_speaker : bool
        Multiply by each speaker's own response (default). False gives the bare room
        transfer of point sources.
    **options
        Passed to the solver (:func:`roommodes.transfer_function`).

    Returns
    -------
    Levels

    Examples
    --------
    >>> import roommodes
    >>> from roommodes.analysis.levels import speaker_levels
    >>> room = roommodes.load_room(roommodes.demo_room_path())
    >>> lv = speaker_levels(room, room.layout.speakers, [room.layout.seat_m], [40.0, 50.0])
    >>> lv.transfer.shape
    (2, 1, 2)
    """
    speakers = tuple(speakers)
    if not speakers:
        raise ValueError("speakers must name at least one speaker")
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    pts = np.atleast_2d(np.asarray(points_m, dtype=float))
    src = np.array([s.position_m for s in speakers], dtype=float)
    h = transfer_function(room, src, pts, f, method=method, **options)
    if include_speaker:
        h = h * np.stack([speaker_response(s, f) for s in speakers])[:, None, :]
    return Levels(f, tuple(s.name for s in speakers), src, pts, h, method)
