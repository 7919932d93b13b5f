"""Room files (TOML) in and out.

Every problem is reported as a :class:`RoomFileError` naming the file, the key path and
what is allowed, e.g.::

    studio.toml: [speakers.left] position_m: y = 3.75 m lies outside the room (0 < y < 3.60 m)

The format is documented key by key in docs/room-file.md.
"""

from __future__ import annotations

import difflib
import math
import os
import tomllib
from pathlib import Path

import numpy as np

from ..model.placement import search_space
from ..model.room import MAX_DIMENSION_M, MIN_DIMENSION_M, WALL_MARGIN_M, WALLS, Cabinet, Layout, Room, Speaker, Surface

__all__ = ["RoomFileError", "load_room", "parse_room", "room_to_toml", "demo_room_path",
           "example_rooms", "write_text_atomic"]


_TOP_KEYS = {"room", "surfaces", "speakers", "seat", "search", "format"}
_ROOM_KEYS = {"name", "size_m", "temperature_c"}
_SPEAKER_KEYS = {"position_m", "lowcut_hz", "lowcut_order", "response_file", "sensitivity_db",
                 "amplifier_w", "max_spl_db", "cabinet_m", "woofer_on_face_m", "tweeter_on_face_m"}
_SEAT_KEYS = {"position_m"}
_SURFACE_TABLE_KEYS = {"absorption", "bands_hz", "material"}


class RoomFileError(ValueError):
    """A room file that cannot be used; the message says where and how to fix it."""


def _rooms_folder():
    # Installed: the repository's rooms/ folder is package data inside the package
    # (roommodes/rooms). Editable or source checkout: the folder beside the package.
    package = Path(__file__).resolve().parent.parent
    for folder in (package / "rooms", package.parent / "rooms"):
        if (folder / "demo-studio.toml").is_file():
            return folder
    raise RoomFileError(f"the bundled example rooms are missing (looked in {package / 'rooms'}); reinstall roommodes")


def demo_room_path():
    """Path of the bundled demo room file."""
    return _rooms_folder() / "demo-studio.toml"


def example_rooms():
    """Paths of every bundled example room file."""
    return sorted(_rooms_folder().glob("*.toml"))


def _suggest(word, choices):
    close = difflib.get_close_matches(word, sorted(choices), n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


class _Ctx:
    def __init__(self, name):
        self.name = name

    def fail(self, key, msg):
        where = f"{key}: " if key else ""
        raise RoomFileError(f"{self.name}: {where}{msg}")

    def unknown_keys(self, table, allowed, key):
        for k in table:
            if k not in allowed:
                self.fail(key, f"unknown key '{k}'{_suggest(k, allowed)}; allowed: {', '.join(sorted(allowed))}")

    def number(self, value, key, lo=None, hi=None, what="a number"):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail(key, f"expected {what}, got {value!r}")
        v = float(value)
        if not math.isfinite(v):
            self.fail(key, f"expected a finite number, got {value!r}")
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            rng = f"{lo:g} to {hi:g}" if lo is not None and hi is not None else (
                f">= {lo:g}" if lo is not None else f"<= {hi:g}")
            self.fail(key, f"{v:g} is out of range; allowed {rng}")
        return v

    def vector(self, value, key, n=3):
        if not isinstance(value, list) or len(value) != n:
            self.fail(key, f"expected a list of {n} numbers in metres, e.g. [1.0, 2.0, 1.2], got {value!r}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))


def _parse_surface(ctx, name, value):
    key = f"[surfaces] {name}"
    from ..model.materials import get_material

    if isinstance(value, str) or (isinstance(value, dict) and "material" in value):
        mat_name = value if isinstance(value, str) else value["material"]
        if isinstance(value, dict):
            ctx.unknown_keys(value, {"material"}, key)
        try:
            mat = get_material(mat_name)
        except ValueError as exc:
            ctx.fail(key, str(exc))
        return Surface(name, tuple(mat.absorption), tuple(mat.bands_hz), mat.name,
                       tuple(mat.extrapolated_hz))
    if isinstance(value, dict):
        ctx.unknown_keys(value, _SURFACE_TABLE_KEYS, key)
        if "absorption" not in value or "bands_hz" not in value:
            ctx.fail(key, "a table needs both 'absorption' and 'bands_hz' lists, e.g. "
                          "{ absorption = [0.25, 0.15, 0.10], bands_hz = [63, 125, 250] }")
        ab, bands = value["absorption"], value["bands_hz"]
        if not isinstance(ab, list) or not isinstance(bands, list) or not ab:
            ctx.fail(key, "'absorption' and 'bands_hz' must be non-empty lists of numbers")
        if len(ab) != len(bands):
            ctx.fail(key, f"'absorption' has {len(ab)} values but 'bands_hz' has {len(bands)}; give one value per band")
        a = tuple(_alpha(ctx, v, f"{key}.absorption[{i}]") for i, v in enumerate(ab))
        b = tuple(ctx.number(v, f"{key}.bands_hz[{i}]", 1.0, 20000.0) for i, v in enumerate(bands))
        if any(b2 <= b1 for b1, b2 in zip(b, b[1:])):
            ctx.fail(f"{key}.bands_hz", f"band frequencies must rise strictly, got {list(b)}")
        return Surface(name, a, b)
    return Surface(name, (_alpha(ctx, value, key),))


def _alpha(ctx, value, key):
    v = ctx.number(value, key, what="an absorption coefficient (a number from 0 to below 1)")
    if not 0.0 <= v < 1.0:
        ctx.fail(key, f"absorption coefficient {v:g} is out of range; allowed 0 <= alpha < 1")
    return v


def _check_inside(ctx, key, pos, size):
    for v, L, wall in zip(pos, size, ("x", "y", "z")):
        if not WALL_MARGIN_M <= v <= L - WALL_MARGIN_M:
            ctx.fail(key, f"{wall} = {v:g} m lies outside the room or inside a wall; allowed "
                          f"{WALL_MARGIN_M:g} <= {wall} <= {L - WALL_MARGIN_M:g} m (room is {L:g} m along {wall})")


def parse_room(data, name="<room>", base_dir=None):
    """Build a :class:`Room` from the dict of a parsed room file.

    Parameters
    ----------
    data : dict
        The TOML document.
    name : str
        File name used in messages.
    base_dir : path, optional
        Folder that relative paths in the file (``response_file``) are resolved against.

    Raises
    ------
    RoomFileError
    """
    ctx = _Ctx(name)
    if not isinstance(data, dict) or not data:
        ctx.fail("", "the file is empty; it needs at least [room] and [surfaces] tables "
                     "(see docs/room-file.md or copy rooms/demo-studio.toml)")
    ctx.unknown_keys(data, _TOP_KEYS, "top level")
    for required in ("room", "surfaces"):
        if required not in data:
            ctx.fail(f"[{required}]", "missing table; see docs/room-file.md")
    room_t = data["room"]
    if not isinstance(room_t, dict):
        ctx.fail("[room]", "must be a table")
    ctx.unknown_keys(room_t, _ROOM_KEYS, "[room]")
    if "size_m" not in room_t:
        ctx.fail("[room] size_m", "missing; give [length, width, height] in metres, e.g. [4.8, 3.6, 2.5]")
    size = ctx.vector(room_t["size_m"], "[room] size_m")
    for i, (v, label) in enumerate(zip(size, ("length", "width", "height"))):
        if not MIN_DIMENSION_M <= v <= MAX_DIMENSION_M:
            ctx.fail(f"[room] size_m[{i}]", f"{label} {v:g} m is not a plausible room dimension; "
                                              f"allowed {MIN_DIMENSION_M:g} to {MAX_DIMENSION_M:g} m")
    temp = ctx.number(room_t.get("temperature_c", 20.0), "[room] temperature_c", -20.0, 50.0)
    room_name = room_t.get("name", Path(name).stem)
    if not isinstance(room_name, str):
        ctx.fail("[room] name", f"expected text, got {room_name!r}")

    surf_t = data["surfaces"]
    if not isinstance(surf_t, dict):
        ctx.fail("[surfaces]", "must be a table")
    ctx.unknown_keys(surf_t, set(WALLS), "[surfaces]")
    missing = [w for w in WALLS if w not in surf_t]
    if missing:
        ctx.fail("[surfaces]", f"missing {', '.join(missing)}; every one of {', '.join(WALLS)} needs an "
                               "absorption coefficient or a material name")
    surfaces = tuple(_parse_surface(ctx, w, surf_t[w]) for w in WALLS)

    layout = None
    speakers_t = data.get("speakers", {})
    if not isinstance(speakers_t, dict):
        ctx.fail("[speakers]", "must be a table of named speakers, e.g. [speakers.left]")
    speakers = []
    for sname, st in speakers_t.items():
        key = f"[speakers.{sname}]"
        if not isinstance(st, dict):
            ctx.fail(key, "must be a table with at least position_m")
        ctx.unknown_keys(st, _SPEAKER_KEYS, key)
        if "position_m" not in st:
            ctx.fail(f"{key} position_m", "missing; give [x, y, z] in metres")
        pos = ctx.vector(st["position_m"], f"{key} position_m")
        _check_inside(ctx, f"{key} position_m", pos, size)
        lowcut = st.get("lowcut_hz")
        if lowcut is not None:
            lowcut = ctx.number(lowcut, f"{key} lowcut_hz", 5.0, 500.0)
        order = st.get("lowcut_order", 2)
        if order not in (2, 4) or isinstance(order, bool):
            ctx.fail(f"{key} lowcut_order", f"must be 2 (sealed box) or 4 (vented box), got {order!r}")
        response = None
        rfile = st.get("response_file")
        if rfile is not None:
            if not isinstance(rfile, str):
                ctx.fail(f"{key} response_file", "expected a file path as text")
            response = _read_speaker_curve(ctx, f"{key} response_file", rfile, base_dir)
        extra = {}
        for k, lo, hi in (("sensitivity_db", 60.0, 120.0), ("amplifier_w", 0.1, 10000.0),
                          ("max_spl_db", 60.0, 150.0)):
            if k in st:
                extra[k] = ctx.number(st[k], f"{key} {k}", lo, hi)
        cabinet = _parse_cabinet(ctx, key, st)
        if cabinet is not None:
            extra["cabinet"] = cabinet
        speakers.append(Speaker(sname, pos, lowcut, int(order), response, rfile, **extra))
    for a in range(len(speakers)):
        for b in range(a + 1, len(speakers)):
            d = np.linalg.norm(np.subtract(speakers[a].position_m, speakers[b].position_m))
            if d < 0.05:
                ctx.fail(f"[speakers.{speakers[b].name}] position_m",
                         f"is {d * 100:.1f} cm from speaker '{speakers[a].name}'; two speakers cannot share a point "
                         "(keep them at least 5 cm apart)")
    seat = None
    if "seat" in data:
        seat_t = data["seat"]
        if not isinstance(seat_t, dict):
            ctx.fail("[seat]", "must be a table with position_m")
        ctx.unknown_keys(seat_t, _SEAT_KEYS, "[seat]")
        if "position_m" not in seat_t:
            ctx.fail("[seat] position_m", "missing; give [x, y, z] in metres (z is ear height)")
        seat = ctx.vector(seat_t["position_m"], "[seat] position_m")
        _check_inside(ctx, "[seat] position_m", seat, size)
        for s in speakers:
            if np.linalg.norm(np.subtract(s.position_m, seat)) < 0.1:
                ctx.fail("[seat] position_m", f"is within 10 cm of speaker '{s.name}'; move the seat or the speaker")
    if speakers and seat is None:
        ctx.fail("[seat]", "missing; a room file with speakers needs a [seat] with position_m")
    if seat is not None and not speakers:
        ctx.fail("[speakers]", "missing; a room file with a seat needs at least one [speakers.NAME] table")
    if speakers:
        layout = Layout(tuple(speakers), seat, "file")
    search = data.get("search", {})
    if not isinstance(search, dict):
        ctx.fail("[search]", "must be a table")
    room = Room(room_name, size, surfaces, temp, layout, search, str(name))
    try:  # the placement constraints are checked now, not when a search first reads them
        search_space(room)
    except ValueError as exc:
        raise RoomFileError(str(exc)) from None
    return room


def _parse_cabinet(ctx, key, st):
    """The speaker's box from ``cabinet_m``, ``woofer_on_face_m`` and ``tweeter_on_face_m``."""
    if "cabinet_m" not in st:
        for k in ("woofer_on_face_m", "tweeter_on_face_m"):
            if k in st:
                ctx.fail(f"{key} {k}", "needs cabinet_m = [width, height, depth] (metres) beside it")
        return None
    v = st["cabinet_m"]
    if not isinstance(v, list) or len(v) != 3:
        ctx.fail(f"{key} cabinet_m", f"expected [width, height, depth] in metres, e.g. [0.2, 0.32, 0.25], got {v!r}")
    size = tuple(ctx.number(x, f"{key} cabinet_m[{i}]", 0.05, 2.5) for i, x in enumerate(v))
    faces = {}
    for k in ("woofer_on_face_m", "tweeter_on_face_m"):
        if k not in st:
            if k == "woofer_on_face_m":
                ctx.fail(f"{key} woofer_on_face_m", "missing; give [across, up] in metres: the woofer centre's "
                         "offset from the front face's vertical centre line (positive toward the listener's axis) "
                         "and its height above the box's bottom, e.g. [0.0, 0.1]")
            continue
        w = st[k]
        if not isinstance(w, list) or len(w) != 2:
            ctx.fail(f"{key} {k}", f"expected [across, up] in metres, e.g. [0.0, 0.1], got {w!r}")
        across = ctx.number(w[0], f"{key} {k}[0]", -size[0] / 2, size[0] / 2)
        up = ctx.number(w[1], f"{key} {k}[1]", 0.0, size[1])
        faces[k] = (across, up)
    return Cabinet(size, faces["woofer_on_face_m"], faces.get("tweeter_on_face_m"))


def _read_speaker_curve(ctx, key, rfile, base_dir):
    path = Path(rfile)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    try:
        from .importers import read_response_text
    except ImportError:  # pragma: no cover - importers are part of the package
        ctx.fail(key, "reading response files needs roommodes.measure.importers")
    try:
        curve = read_response_text(path)
    except (OSError, ValueError) as exc:
        ctx.fail(key, f"cannot read '{rfile}': {exc}")
    return (np.asarray(curve.freq_hz), np.asarray(curve.level_db))


def load_room(path):
    """Read and validate a room file.

    Parameters
    ----------
    path : str or Path
        A TOML room file (see docs/room-file.md).

    Returns
    -------
    Room
        With its layout when the file gives speakers and a seat.

    Raises
    ------
    RoomFileError
        For anything wrong, with the file, the key and what is allowed in the message.
    """
    p = Path(path)
    name = str(path)
    if not p.exists():
        raise RoomFileError(f"{name}: no such file")
    if p.is_dir():
        raise RoomFileError(f"{name}: is a directory; give the path of a .toml room file")
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise RoomFileError(f"{name}: cannot be read ({exc.strerror})") from None
    if not raw.strip():
        raise RoomFileError(f"{name}: the file is empty; it needs at least [room] and [surfaces] tables "
                            "(see docs/room-file.md or copy rooms/demo-studio.toml)")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise RoomFileError(f"{name}: is not a text file (not UTF-8); a room file is TOML text") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RoomFileError(f"{name}: is not valid TOML: {exc}") from None
    return parse_room(data, name, p.parent)


def _fmt(v):
    return f"{v:.4g}" if isinstance(v, float) else repr(v)


def room_to_toml(room, comment=None):
    """Text of a room file for ``room`` (the inverse of :func:`load_room`)."""
    lines = []
    if comment:
        lines += [f"# {line}" for line in comment.splitlines()] + [""]
    lines += ["[room]", f'name = "{room.name}"',
              "size_m = [" + ", ".join(_fmt(v) for v in room.size_m) + "]   # length (x), width (y), height (z)",
              f"temperature_c = {_fmt(float(room.temperature_c))}", "", "[surfaces]"]
    for s in room.surfaces:
        if s.material:
            val = f'"{s.material}"'
        elif s.bands_hz is None:
            val = _fmt(float(s.absorption[0]))
        else:
            val = ("{ absorption = [" + ", ".join(_fmt(float(a)) for a in s.absorption) + "], bands_hz = ["
                   + ", ".join(_fmt(float(b)) for b in s.bands_hz) + "] }")
        lines.append(f"{s.name} = {val}")
    if room.layout is not None:
        for sp in room.layout.speakers:
            lines += ["", f"[speakers.{sp.name}]",
                      "position_m = [" + ", ".join(f"{v:.3f}" for v in sp.position_m) + "]"]
            if sp.lowcut_hz:
                lines += [f"lowcut_hz = {_fmt(float(sp.lowcut_hz))}", f"lowcut_order = {sp.lowcut_order}"]
            if sp.response_file:
                lines.append(f'response_file = "{sp.response_file}"')
            for k in ("sensitivity_db", "amplifier_w", "max_spl_db"):
                if getattr(sp, k) is not None:
                    lines.append(f"{k} = {_fmt(float(getattr(sp, k)))}")
            if sp.cabinet is not None:
                cab = sp.cabinet
                lines.append("cabinet_m = [" + ", ".join(_fmt(float(x)) for x in cab.size_m) + "]   # width, height, depth")
                lines.append("woofer_on_face_m = [" + ", ".join(_fmt(float(x)) for x in cab.woofer_m) + "]")
                if cab.tweeter_m is not None:
                    lines.append("tweeter_on_face_m = [" + ", ".join(_fmt(float(x)) for x in cab.tweeter_m) + "]")
        lines += ["", "[seat]", "position_m = [" + ", ".join(f"{v:.3f}" for v in room.layout.seat_m) + "]"]
    if room.search:
        lines += ["", "[search]"]
        for k, v in room.search.items():
            lines.append(f"{k} = {_toml_value(v)}")
    return "\n".join(lines) + "\n"


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return _fmt(v) if isinstance(v, float) else str(v)
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {v!r} to TOML")


def write_text_atomic(path, text, overwrite=False):
    """Write ``text`` to ``path`` atomically (temporary file, then rename).

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``overwrite`` is false.
    """
    p = Path(path)
    if p.exists() and not overwrite:
        raise FileExistsError(f"{p} already exists; choose another name or pass --force")
    tmp = p.with_name(f".{p.name}.tmp-{os.getpid()}")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, p)
    finally:
        if tmp.exists():
            tmp.unlink()
