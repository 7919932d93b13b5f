"""roommodes: room modes and loudspeaker placement in small rectangular rooms.

The public API, re-exported here, is what the command-line tool uses:

>>> import roommodes
>>> room = roommodes.load_room(roommodes.demo_room_path())
>>> pred = roommodes.predict(room)
>>> [c.name for c in pred.channels]
['left', 'right']
"""

import os as _os

# After each product OpenBLAS's worker threads keep spinning for about 2^28 clock ticks (~0.1 s,
# its default as we recall it) and hold the cores the numba loops that follow want: measured,
# an image-solver call with 100 receivers right after a GEMM took 205 ms instead of 150 ms
# (roommodes.solvers.threads). 2^22 ticks (~1.4 ms) keeps them awake through a run of
# products. OpenBLAS reads this once, when numpy loads it: it has no effect when numpy was
# imported before roommodes, and none when the environment sets it.
_os.environ.setdefault("OPENBLAS_THREAD_TIMEOUT", "22")

__version__ = "0.1.0"

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

# Every name is imported on first use, so that `import roommodes` (and the command line,
# which must be able to take Ctrl-C from its first instant) costs almost nothing; the
# measurement, search and correction parts pull in scipy.signal and scipy.optimize.
_LAZY = {
    "Prediction": "analysis.predict",
    "predict": "analysis.predict",
    "response_features": "analysis.predict",
    "room_schroeder_frequency": "analysis.predict",
    "room_summary": "analysis.summary",
    "Response": "dsp.response",
    "log_frequencies": "dsp.response",
    "smooth_fractional_octave": "dsp.response",
    "RoomFileError": "io.roomfile",
    "demo_room_path": "io.roomfile",
    "example_rooms": "io.roomfile",
    "load_room": "io.roomfile",
    "room_to_toml": "io.roomfile",
    "ModeSet": "model.modes",
    "room_modes": "model.modes",
    "PRESETS": "model.placement",
    "preset_layout": "model.placement",
    "WALLS": "model.room",
    "Layout": "model.room",
    "Room": "model.room",
    "Speaker": "model.room",
    "Surface": "model.room",
    "speed_of_sound": "model.room",
    "transfer_function": "solvers",
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


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
