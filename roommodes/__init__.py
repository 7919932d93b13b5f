"""roommodes: room modes and loudspeaker placement in small rectangular rooms.

The public API, re-exported here, is what the command-line tool uses:

>>> import roommodes
>>> room = roommodes.load_room(roommodes.demo_room_path())
>>> pred = roommodes.predict(room)
>>> [c.name for c in pred.channels]
['left', 'right']
"""

__version__ = "0.1.0"

from .compare import compare_measurements, compare_to_prediction, load_measurement
from .correction import correct_curve, correct_prediction
from .explain import explain
from .fit import fit_room
from .modes import ModeSet, room_modes
from .placement import PRESETS, preset_layout
from .predict import Prediction, predict, response_features, room_schroeder_frequency
from .response import Response, log_frequencies, smooth_fractional_octave
from .room import WALLS, Layout, Room, Speaker, Surface, speed_of_sound
from .roomfile import RoomFileError, demo_room_path, example_rooms, load_room, room_to_toml
from .search import score_layouts, search_layouts
from .solvers import transfer_function
from .summary import room_summary

__all__ = [
    "__version__",
    "WALLS",
    "PRESETS",
    "Layout",
    "ModeSet",
    "Prediction",
    "Response",
    "Room",
    "RoomFileError",
    "Speaker",
    "Surface",
    "compare_measurements",
    "compare_to_prediction",
    "correct_curve",
    "correct_prediction",
    "explain",
    "fit_room",
    "load_measurement",
    "score_layouts",
    "search_layouts",
    "demo_room_path",
    "example_rooms",
    "load_room",
    "log_frequencies",
    "predict",
    "preset_layout",
    "response_features",
    "room_modes",
    "room_schroeder_frequency",
    "room_summary",
    "room_to_toml",
    "smooth_fractional_octave",
    "speed_of_sound",
    "transfer_function",
]
