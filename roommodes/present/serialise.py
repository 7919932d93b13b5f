"""Results as JSON: plain values from numpy arrays and scalars, and the one document header.

Every JSON document the tool writes (a command's ``--json``, the report's data block)
starts with :func:`document`, so the writing version is stated in one place.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np

from .. import __version__

__all__ = ["jsonable", "document", "dumps"]

#: The key naming the version of roommodes that wrote a document.
VERSION_KEY = "roommodes_version"


def jsonable(o):
    """``o`` with numpy arrays and scalars turned into lists, floats, ints and bools.

    Non-finite floats become None (JSON has no NaN); floats keep full precision (filter
    coefficients need it). Objects with a ``to_dict()`` method are serialised through it,
    and other dataclasses field by field.
    """
    if hasattr(o, "to_dict") and callable(o.to_dict):
        return jsonable(o.to_dict())
    if dataclasses.is_dataclass(o) and not isinstance(o, type):
        return {f.name: jsonable(getattr(o, f.name)) for f in dataclasses.fields(o)}
    if isinstance(o, dict):
        return {str(k): jsonable(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [jsonable(v) for v in o]
    if isinstance(o, np.ndarray):
        return jsonable(o.tolist())
    if isinstance(o, (np.floating, float)):
        v = float(o)
        return v if np.isfinite(v) else None
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.bool_):
        return bool(o)
    return o


def document(payload):
    """The JSON document of a result: the version key first, then ``payload``'s keys."""
    return {VERSION_KEY: __version__, **jsonable(payload)}


def dumps(payload):
    """``document(payload)`` as JSON text (indented, strict: no NaN)."""
    return json.dumps(document(payload), indent=1, allow_nan=False)
