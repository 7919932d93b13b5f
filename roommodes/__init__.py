"""roommodes: room modes and loudspeaker placement in small rectangular rooms.

The public API, re-exported here, is what the command-line tool uses:

>>> import roommodes
>>> room = roommodes.load_room(roommodes.demo_room_path())
>>> pred = roommodes.predict(room)
>>> [c.name for c in pred.channels]
['left', 'right']
"""

__version__ = "0.1.0"

from .analysis.predict import Prediction, predict, response_features, room_schroeder_frequency
from .analysis.summary import room_summary
from .dsp.response import Response, log_frequencies, smooth_fractional_octave
from .io.roomfile import RoomFileError, demo_room_path, example_rooms, load_room, room_to_toml
from .model.modes import ModeSet, room_modes
from .model.placement import PRESETS, preset_layout
from .model.room import WALLS, Layout, Room, Speaker, Surface, speed_of_sound
from .solvers import transfer_function

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

# The measurement, search and correction parts pull in scipy.signal and scipy.optimize;
# they are imported on first use so that `import roommodes` (and every command) starts fast.
_LAZY = {
    "compare_measurements": "analysis.compare", "compare_to_prediction": "analysis.compare",
    "load_measurement": "analysis.compare", "correct_curve": "analysis.correction",
    "correct_prediction": "analysis.correction", "explain": "analysis.explain",
    "fit_room": "analysis.fit", "score_layouts": "analysis.search", "search_layouts": "analysis.search",
}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'roommodes' has no attribute {name!r}")
