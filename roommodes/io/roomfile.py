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
from dataclasses import replace
from pathlib import Path

import numpy as np
import tomlkit

from ..model.materials import get_material
from ..model.placement import search_space
from ..model.room import (
    MAX_DIMENSION_M,
    MIN_DIMENSION_M,
    ROLES,
    WALL_MARGIN_M,
    WALLS,
    Box,
    Cabinet,
    Layout,
    Room,
    Seat,
    Speaker,
    SubSearch,
    Surface,
    SystemSettings,
    Uncertainty,
)
from .files import ROOM_FILE_BYTES, InputFileError, read_regular
from .importers import read_response_text

__all__ = ["RoomFileError", "load_room", "parse_room", "room_to_toml", "demo_room_path",
           "example_rooms", "write_text_atomic"]


_TOP_KEYS = {"room", "surfaces", "speakers", "seat", "seats", "search", "subs", "format", "uncertainty", "system"}
#: ``[uncertainty]`` keys and the largest standard deviation each accepts (a survey that knows a
#: position to worse than half a metre, or the temperature to worse than 10 C, is no survey).
_UNCERTAINTY_LIMITS = {"position_m": 0.5, "size_m": 0.5, "absorption_rel": 2.0, "temperature_c": 10.0}
_ROOM_KEYS = {"name", "size_m", "temperature_c"}
_SPEAKER_KEYS = {"position_m", "lowcut_hz", "lowcut_order", "response_file", "sensitivity_db",
                 "amplifier_w", "max_spl_db", "role", "cabinet_m", "woofer_on_face_m", "tweeter_on_face_m",
                 "gain_db", "delay_ms", "polarity"}
#: A sub's own settings (``[speakers.NAME]`` with role = "sub"): key, lowest, highest.
_SUB_SETTING_LIMITS = (("gain_db", -30.0, 12.0), ("delay_ms", 0.0, 100.0))
_SYSTEM_KEYS = {"crossover_hz", "mains_delay_ms"}
_SEAT_KEYS = {"position_m"}
_SEATS_KEYS = {"position_m", "weight"}
_SUBS_KEYS = {"counts", "crossover_hz", "max_delay_ms", "max_gain_db", "height_m", "step_m", "wall_gap_m",
              "regions", "wall_band_m", "candidates_m", "keep_out", "band_hz"}
_SUB_COUNTS = (1, 2, 4)
_SURFACE_TABLE_KEYS = {"absorption", "bands_hz", "material", "absorption_rel"}


class RoomFileError(ValueError):
    """A room file that cannot be used; the message says where and how to fix it."""


#: Longest room or speaker name accepted (a name is a label, not a document).
MAX_NAME_CHARS = 200


def _shown(value, limit=60):
    """``repr(value)`` cut to ``limit`` characters, for messages."""
    text = repr(value)
    return text if len(text) <= limit else text[:limit - 3] + "..."


def _label(name, limit=40):
    """A name as it goes into a message: as written if printable, else quoted; cut to ``limit``."""
    text = name if name.isprintable() else repr(name)
    return text if len(text) <= limit else text[:limit - 3] + "..."


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
            self.fail(key, f"expected {what}, got {_shown(value)}")
        try:
            v = float(value)
        except OverflowError:  # an integer of hundreds of digits
            v = math.inf
        if not math.isfinite(v):
            self.fail(key, f"expected a finite number, got {_shown(value)}")
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            rng = f"{lo:g} to {hi:g}" if lo is not None and hi is not None else (
                f">= {lo:g}" if lo is not None else f"<= {hi:g}")
            self.fail(key, f"{v:g} is out of range; allowed {rng}")
        return v

    def vector(self, value, key, n=3):
        if not isinstance(value, list) or len(value) != n:
            self.fail(key, f"expected a list of {n} numbers in metres, e.g. [1.0, 2.0, 1.2], got {_shown(value)}")
        return tuple(self.number(v, f"{key}[{i}]") for i, v in enumerate(value))


def _surface_rel(ctx, value, key):
    """A surface's own ``absorption_rel`` (None when not given)."""
    if "absorption_rel" not in value:
        return None
    return ctx.number(value["absorption_rel"], f"{key}.absorption_rel", 0.0, _UNCERTAINTY_LIMITS["absorption_rel"],
                      what="a relative standard deviation (e.g. 0.3 for 30 %)")


def _parse_surface(ctx, name, value):
    key = f"[surfaces] {name}"

    if isinstance(value, str) or (isinstance(value, dict) and "material" in value):
        mat_name = value if isinstance(value, str) else value["material"]
        rel = None
        if isinstance(value, dict):
            ctx.unknown_keys(value, {"material", "absorption_rel"}, key)
            rel = _surface_rel(ctx, value, key)
        try:
            return Surface.from_material(name, mat_name, rel)
        except ValueError as exc:
            ctx.fail(key, str(exc))
    if isinstance(value, dict):
        ctx.unknown_keys(value, _SURFACE_TABLE_KEYS, key)
        rel = _surface_rel(ctx, value, key)
        if "bands_hz" not in value and "absorption" in value and not isinstance(value["absorption"], list):
            return Surface(name, (_alpha(ctx, value["absorption"], f"{key}.absorption"),), absorption_rel=rel)
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
        return Surface(name, a, b, absorption_rel=rel)
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
        ctx.fail("[room] name", f"expected text, got {_shown(room_name)}")
    if len(room_name) > MAX_NAME_CHARS:
        ctx.fail("[room] name", f"is {len(room_name)} characters long; a name has at most {MAX_NAME_CHARS}")

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
        key = f"[speakers.{_label(sname)}]"
        _check_speaker_name(ctx, sname)
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
            ctx.fail(f"{key} lowcut_order", f"must be 2 (sealed box) or 4 (vented box), got {_shown(order)}")
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
        role = st.get("role", "main")
        if role not in ROLES:
            ctx.fail(f"{key} role", f"must be one of {', '.join(repr(r) for r in ROLES)}, got {role!r}")
        cabinet = _parse_cabinet(ctx, key, st)
        if cabinet is not None:
            extra["cabinet"] = cabinet
        extra.update(_parse_sub_settings(ctx, key, st, role))
        speakers.append(Speaker(sname, pos, lowcut, int(order), response, rfile, role=role, **extra))
    for a in range(len(speakers)):
        for b in range(a + 1, len(speakers)):
            d = np.linalg.norm(np.subtract(speakers[a].position_m, speakers[b].position_m))
            if d < 0.05:
                ctx.fail(f"[speakers.{speakers[b].name}] position_m",
                         f"is {d * 100:.1f} cm from speaker '{speakers[a].name}'; two speakers cannot share a point "
                         "(keep them at least 5 cm apart)")
    seat = None
    seats = ()
    if "seat" in data and "seats" in data:
        ctx.fail("[seats]", "the file has both [seat] and [seats.NAME] tables; keep one: [seat] for one "
                            "listening position, or [seats.NAME] for several (the first listed is the main seat)")
    if "seats" in data:
        seats = _parse_seats(ctx, data["seats"], size, speakers)
        seat = seats[0].position_m
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
    if speakers and all(s.role == "sub" for s in speakers):
        ctx.fail("[speakers]", "every speaker has role = \"sub\"; give at least one main speaker "
                               "(role = \"main\", the default)")
    if speakers:
        # mains first, then subs (each in file order): code that takes the first two speakers as
        # the stereo pair keeps working
        ordered = tuple(s for s in speakers if s.role == "main") + tuple(s for s in speakers if s.role == "sub")
        layout = Layout(ordered, seat, "file", seats)
    search = data.get("search", {})
    if not isinstance(search, dict):
        ctx.fail("[search]", "must be a table")
    subs_search = None
    if "subs" in data:
        subs_search = _parse_subs(ctx, data["subs"], size)
    _check_numbers_fit(ctx, search, "[search]")
    uncertainty = (_parse_uncertainty(ctx, data["uncertainty"]) if "uncertainty" in data
                   else Uncertainty(material_ranges=True))
    system = _parse_system(ctx, data["system"], speakers) if "system" in data else None
    room = Room(room_name, size, surfaces, temp, layout, search, str(name), subs_search, uncertainty, system)
    if search:  # the user's placement constraints are checked now, not when a search first reads them
        try:
            search_space(room)
        except ValueError as exc:
            raise RoomFileError(str(exc)) from None
    return room


def _parse_sub_settings(ctx, key, st, role):
    """A sub's ``gain_db``, ``delay_ms`` and ``polarity``; refused on a main."""
    given = [k for k in ("gain_db", "delay_ms", "polarity") if k in st]
    if not given:
        return {}
    if role != "sub":
        ctx.fail(f"{key} {given[0]}", "only a subwoofer (role = \"sub\") takes gain_db, delay_ms and polarity; "
                                      "delay the mains with [system] mains_delay_ms, or add role = \"sub\"")
    out = {k: ctx.number(st[k], f"{key} {k}", lo, hi) for k, lo, hi in _SUB_SETTING_LIMITS if k in st}
    if "polarity" in st:
        p = st["polarity"]
        if isinstance(p, bool) or p not in (1, -1):
            ctx.fail(f"{key} polarity", f"must be 1 (normal) or -1 (inverted), got {_shown(p)}")
        out["polarity"] = int(p)
    return out


def _parse_system(ctx, table, speakers):
    """The ``[system]`` table: the crossover between mains and subs and the mains' delay."""
    if not isinstance(table, dict):
        ctx.fail("[system]", "must be a table, e.g. crossover_hz = 80 (see docs/room-file.md)")
    ctx.unknown_keys(table, _SYSTEM_KEYS, "[system]")
    if not any(s.role == "sub" for s in speakers):
        ctx.fail("[system]", "the file has no subwoofer (a [speakers.NAME] with role = \"sub\"); the crossover and "
                             "mains delay join mains and subs: add a sub or remove [system]")
    xo = None
    if "crossover_hz" in table:
        xo = ctx.number(table["crossover_hz"], "[system] crossover_hz", 30.0, 200.0)
    delay = ctx.number(table.get("mains_delay_ms", 0.0), "[system] mains_delay_ms", 0.0, 100.0)
    return SystemSettings(xo, delay)


def _parse_uncertainty(ctx, table):
    """The ``[uncertainty]`` table: standard deviations, each optional (defaults of :class:`Uncertainty`)."""
    if not isinstance(table, dict):
        ctx.fail("[uncertainty]", "must be a table of standard deviations, e.g. position_m = 0.02")
    ctx.unknown_keys(table, set(_UNCERTAINTY_LIMITS), "[uncertainty]")
    kw = {k: ctx.number(table[k], f"[uncertainty] {k}", 0.0, hi, what="a standard deviation (a number >= 0)")
          for k, hi in _UNCERTAINTY_LIMITS.items() if k in table}
    # a stated absorption_rel holds for every surface without a range of its own; without it,
    # library materials' own ranges come first (docs/uncertainty.md)
    return Uncertainty(**kw, material_ranges="absorption_rel" not in kw)


def _parse_seats(ctx, table, size, speakers):
    """The ``[seats.NAME]`` tables as a tuple of :class:`Seat`, in file order."""
    if not isinstance(table, dict) or not table:
        ctx.fail("[seats]", "must hold one or more named seats, e.g. [seats.middle] with position_m = [x, y, z]")
    seats = []
    for sname, st in table.items():
        key = f"[seats.{sname}]"
        if not isinstance(st, dict):
            ctx.fail(key, "must be a table with position_m and an optional weight")
        ctx.unknown_keys(st, _SEATS_KEYS, key)
        if "position_m" not in st:
            ctx.fail(f"{key} position_m", "missing; give [x, y, z] in metres (z is ear height)")
        pos = ctx.vector(st["position_m"], f"{key} position_m")
        _check_inside(ctx, f"{key} position_m", pos, size)
        for s in speakers:
            if np.linalg.norm(np.subtract(s.position_m, pos)) < 0.1:
                ctx.fail(f"{key} position_m", f"is within 10 cm of speaker '{s.name}'; move the seat or the speaker")
        weight = ctx.number(st.get("weight", 1.0), f"{key} weight", 0.0, 100.0)
        for other in seats:
            if np.linalg.norm(np.subtract(other.position_m, pos)) < 0.05:
                ctx.fail(f"{key} position_m", f"is within 5 cm of seat '{other.name}'; two seats cannot share a point")
        seats.append(Seat(sname, pos, weight))
    if seats[0].weight <= 0:
        ctx.fail(f"[seats.{seats[0].name}] weight", "the first seat listed is the main seat and needs a weight "
                                                     "above 0; list another seat first or raise its weight")
    return tuple(seats)


def _boxes(ctx, value, key, size, allow_2d=True):
    """A list of ``{ name, min_m, max_m }`` boxes (``[x, y]`` corners span the full height)."""
    example = '[{ name = "door", min_m = [3.7, 2.5, 0.0], max_m = [4.6, 3.4, 2.1] }]'
    if not isinstance(value, list):
        ctx.fail(key, f"expected a list of boxes, e.g. {example}")
    out = []
    for i, box in enumerate(value):
        k = f"{key}[{i}]"
        if not isinstance(box, dict) or not {"min_m", "max_m"} <= set(box) or not set(box) <= {"name", "min_m", "max_m"}:
            ctx.fail(k, f"a box needs min_m and max_m ([x, y, z] in metres) and may have a name, e.g. {example}")
        corners = []
        for c in ("min_m", "max_m"):
            v = box[c]
            if not isinstance(v, list) or len(v) not in ((2, 3) if allow_2d else (3,)):
                ctx.fail(f"{k}.{c}", f"expected [x, y, z] (or [x, y] for the full height) in metres, got {v!r}")
            pt = [ctx.number(x, f"{k}.{c}[{j}]", -1e3, 1e3) for j, x in enumerate(v)]
            if len(pt) == 2:
                pt.append(0.0 if c == "min_m" else float(size[2]))
            corners.append(tuple(pt))
        if any(a >= b for a, b in zip(*corners)):
            ctx.fail(k, f"min_m {list(corners[0])} must be below max_m {list(corners[1])} on every axis")
        name = box.get("name", f"box {i + 1}")
        if not isinstance(name, str):
            ctx.fail(f"{k}.name", f"expected text, got {name!r}")
        out.append(Box(name, corners[0], corners[1]))
    return tuple(out)


def _parse_subs(ctx, t, size):
    """The ``[subs]`` table as a :class:`SubSearch` (defaults documented in docs/room-file.md)."""
    if not isinstance(t, dict):
        ctx.fail("[subs]", "must be a table of subwoofer search settings (see docs/room-file.md)")
    ctx.unknown_keys(t, _SUBS_KEYS, "[subs]")
    d = SubSearch()
    kw = {}
    if "counts" in t:
        c = t["counts"]
        if not isinstance(c, list) or not c or any(isinstance(v, bool) or v not in _SUB_COUNTS for v in c) \
                or len(set(c)) != len(c):
            ctx.fail("[subs] counts", f"expected a list of distinct sub counts from 1, 2, 4, e.g. [1, 2, 4], got {c!r}")
        kw["counts"] = tuple(sorted(int(v) for v in c))
    for k, lo, hi, default in (("crossover_hz", 30.0, 200.0, d.crossover_hz), ("band_hz", 10.0, 300.0, d.band_hz)):
        if k in t:
            v = t[k]
            if not isinstance(v, list) or len(v) != 2:
                ctx.fail(f"[subs] {k}", f"expected [low, high] in Hz, e.g. {list(default)}, got {v!r}")
            a, b = (ctx.number(x, f"[subs] {k}[{i}]", lo, hi) for i, x in enumerate(v))
            if a > b:
                ctx.fail(f"[subs] {k}", f"low {a:g} Hz is above high {b:g} Hz; give [low, high]")
            kw[k] = (a, b)
    band = kw.get("band_hz", d.band_hz)
    xo = kw.get("crossover_hz", d.crossover_hz)
    if band[1] < xo[1] or band[0] > xo[0] / 2:
        ctx.fail("[subs] band_hz", f"the scored band {band[0]:g}-{band[1]:g} Hz must reach from half the lowest "
                                   f"crossover ({xo[0] / 2:g} Hz) to the highest ({xo[1]:g} Hz)")
    for k, lo, hi in (("max_delay_ms", 0.0, 100.0), ("max_gain_db", 0.0, 12.0),
                      ("step_m", 0.05, 2.0), ("wall_gap_m", WALL_MARGIN_M, 1.0), ("wall_band_m", 0.1, 5.0)):
        if k in t:
            kw[k] = ctx.number(t[k], f"[subs] {k}", lo, hi)
    if "height_m" in t:
        kw["height_m"] = ctx.number(t["height_m"], "[subs] height_m", WALL_MARGIN_M, size[2] - WALL_MARGIN_M)
    if "regions" in t:
        kw["regions"] = _boxes(ctx, t["regions"], "[subs] regions", size)
        if not kw["regions"]:
            ctx.fail("[subs] regions", "is empty; leave it out for the default band along the walls, or give boxes")
    if "keep_out" in t:
        kw["keep_out"] = _boxes(ctx, t["keep_out"], "[subs] keep_out", size)
    if "candidates_m" in t:
        c = t["candidates_m"]
        if not isinstance(c, list):
            ctx.fail("[subs] candidates_m", "expected a list of [x, y, z] positions in metres, e.g. [[0.3, 1.7, 0.3]]")
        pts = []
        for i, v in enumerate(c):
            p = ctx.vector(v, f"[subs] candidates_m[{i}]")
            _check_inside(ctx, f"[subs] candidates_m[{i}]", p, size)
            pts.append(p)
        kw["candidates_m"] = tuple(pts)
    return SubSearch(**kw)


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


def _check_numbers_fit(ctx, value, key, depth=0):
    """Refuse numbers no float holds (integers of hundreds of digits) and deep nesting in a
    table read by another part of the package (``[search]``); its own checks do the rest."""
    if depth > 4:
        ctx.fail(key, "is nested too deeply; see docs/placement.md for what the table holds")
    if isinstance(value, dict):
        for k, v in value.items():
            _check_numbers_fit(ctx, v, f"{key} {k}" if depth == 0 else f"{key}.{k}", depth + 1)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _check_numbers_fit(ctx, v, f"{key}[{i}]", depth + 1)
    elif isinstance(value, int) and not isinstance(value, bool):
        try:
            float(value)
        except OverflowError:
            ctx.fail(key, f"expected a number of sensible size, got an integer of {len(str(abs(value)))} digits")


def _check_speaker_name(ctx, name):
    """A speaker's name is a label printed in tables, plots and file names: printable, one line."""
    key = f"[speakers.{_label(name)}]"
    if not name.strip():
        ctx.fail(key, "the speaker's name is empty; name it, e.g. [speakers.left]")
    if len(name) > MAX_NAME_CHARS:
        ctx.fail(key, f"the speaker's name is {len(name)} characters long; a name has at most {MAX_NAME_CHARS}")
    if not name.isprintable():
        ctx.fail(key, "the speaker's name holds a control character (a line break, tab or NUL); use a "
                      "name on one line, e.g. [speakers.left]")


def _read_speaker_curve(ctx, key, rfile, base_dir):
    path = Path(rfile)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    try:
        curve = read_response_text(path)
    except (OSError, ValueError) as exc:
        reason = getattr(exc, "reason", None) or str(exc)
        line = getattr(exc, "line", None)
        ctx.fail(key, f"cannot read '{rfile}'" + (f" (line {line})" if line else "") + f": {reason}")
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
    data = read_toml(p, "room file", RoomFileError,
                     empty="it needs at least [room] and [surfaces] tables (see docs/room-file.md or copy "
                           "rooms/demo-studio.toml)",
                     nesting="a room file nests at most two levels (see docs/room-file.md)")
    return parse_room(data, name, p.parent)


def read_toml(path, kind, error, *, empty, nesting):
    """The TOML table of a small input file, or ``error`` (a ValueError class) with one line
    naming the file: unreadable or not a regular file, empty (``empty`` says what it needs),
    not UTF-8 text, not TOML, or nested past the parser's depth (``nesting`` says the limit)."""
    name = str(path)
    try:
        raw = read_regular(Path(path), f"{kind} (.toml)", ROOM_FILE_BYTES)
    except InputFileError as exc:
        raise error(str(exc)) from None
    raw = raw.removeprefix(b"\xef\xbb\xbf")  # a UTF-8 byte-order mark, as some editors write
    if not raw.strip():
        raise error(f"{name}: the file is empty; {empty}")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise error(f"{name}: is not a text file (not UTF-8); a {kind} is TOML text") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{name}: is not valid TOML: {exc}") from None
    except RecursionError:
        raise error(f"{name}: arrays or tables are nested too deeply; {nesting}") from None


_COORDINATES_NOTE = (
    "Coordinates are metres from the floor corner where the front wall (behind the speakers)\n"
    "meets the left wall (as seen from the seat): x toward the back wall, y toward the right\n"
    "wall, z up. The format is described in docs/room-file.md.")


def _number(v):
    v = float(v)
    return int(v) if v.is_integer() and abs(v) < 1e15 else v


def _array(values, note=None):
    arr = tomlkit.array([_number(v) for v in values])
    if note:
        arr.comment(note)
    return arr


def _item(value, note=None):
    it = tomlkit.item(value)
    if note:
        it.comment(note)
    return it


def _table(doc, key, super_table=False):
    """``doc[key]`` as a table, created (and appended) when missing; a super table holds
    only sub-tables and has no header of its own."""
    if key not in doc:
        doc[key] = tomlkit.table(is_super_table=super_table)
    return doc[key]


def _set(table, key, value):
    """Set ``table[key]``, keeping the comment that followed the old value."""
    old = table.get(key) if hasattr(table, "get") else None
    note = getattr(getattr(old, "trivia", None), "comment", "") if old is not None else ""
    new = value if isinstance(value, tomlkit.items.Item) else tomlkit.item(value)
    if note and not getattr(new.trivia, "comment", ""):
        new.trivia.comment = note
        new.trivia.comment_ws = old.trivia.comment_ws or "   "
    table[key] = new


def _surface_value(s):
    own = s.absorption_rel
    if s.material:
        if own is None:
            return s.material
        t = tomlkit.inline_table()
        t["material"] = s.material
        t["absorption_rel"] = _number(own)
        return t
    if s.bands_hz is None and own is None:
        return _number(s.absorption[0])
    t = tomlkit.inline_table()
    if s.bands_hz is None:
        t["absorption"] = _number(s.absorption[0])
    else:
        t["absorption"] = [_number(a) for a in s.absorption]
        t["bands_hz"] = [_number(b) for b in s.bands_hz]
    if own is not None:
        t["absorption_rel"] = _number(own)
    return t


def _relative_path(path_text, from_dir, to_dir):
    """``path_text`` (relative to ``from_dir``) as a path relative to ``to_dir``."""
    p = Path(path_text)
    if p.is_absolute() or from_dir is None or to_dir is None:
        return str(p)
    target = (Path(from_dir) / p).resolve()
    try:
        return os.path.relpath(target, Path(to_dir).resolve())
    except ValueError:  # another drive (Windows)
        return str(target)


def room_to_toml(room, comment=None, *, original_text=None, position_note=None, size_note=None, written_to=None):
    """Text of a room file for ``room`` (the inverse of :func:`load_room`): the one writer.

    Parameters
    ----------
    room : Room
    comment : str, optional
        Comment lines put first.
    original_text : str, optional
        The text of the room file ``room`` came from. Its comments, key order and any keys
        the writer does not know are kept; only the values that describe ``room`` change.
    position_note : callable, optional
        ``position_note(what, position_m) -> str``, ``what`` a speaker's name or ``"seat"``:
        a comment written beside each position of a new file (e.g. the distances from the
        walls in the user's units).
    size_note : str, optional
        The comment beside ``size_m`` in a new file (default: which length is which).
    written_to : path, optional
        Where the text will be written: a relative ``response_file`` is rewritten relative
        to that file's folder, so that it still points at the same curve.

    Returns
    -------
    str
        TOML text; names, paths and keys are quoted and escaped as TOML requires.
    """
    doc = tomlkit.parse(original_text.removeprefix("\ufeff")) if original_text else tomlkit.document()
    if not original_text:
        for line in _COORDINATES_NOTE.splitlines():
            doc.add(tomlkit.comment(line))
        doc.add(tomlkit.nl())
    rt = _table(doc, "room")
    _set(rt, "name", room.name)
    _set(rt, "size_m", _array(room.size_m, None if original_text else (size_note or "length (x), width (y), height (z)")))
    _set(rt, "temperature_c", _number(room.temperature_c))
    st = _table(doc, "surfaces")
    for s in room.surfaces:
        note = None
        if not original_text:
            note = get_material(s.material).description if s.material else "random-incidence absorption coefficient"
        _set(st, s.name, _item(_surface_value(s), note))
    if room.layout is not None:
        speakers = _table(doc, "speakers", super_table=True)
        names = [sp.name for sp in room.layout.speakers]
        for old in [k for k in list(speakers.keys()) if k not in names]:
            del speakers[old]
        src_dir = Path(room.source).parent if room.source else None
        out_dir = Path(written_to).parent if written_to is not None else None
        kept = [k for k in speakers.keys() if isinstance(speakers[k], tomlkit.items.Table)]
        # the blank lines and comments after the last speaker's keys introduce the next table
        tail = _pop_trailing_space(speakers[kept[-1]]) if kept and original_text else []
        if kept and original_text and not tail:
            tail = [tomlkit.items.Whitespace("\n")]
        for sp in room.layout.speakers:
            if sp.name not in speakers:
                speakers[sp.name] = tomlkit.table()
            t = speakers[sp.name]
            fresh = not original_text
            note = position_note(sp.name, sp.position_m) if position_note and fresh else None
            if sp.is_sub and not fresh and "position_m" in t and _moved(t["position_m"], sp.position_m):
                # the old comment described the old place
                note = "moved by roommodes subs; was [" + ", ".join(f"{_number(v):g}" for v in t["position_m"]) + "]"
                t["position_m"] = _array(sp.position_m, note)
            _set(t, "position_m", _array(sp.position_m, note))
            if sp.lowcut_hz:
                box = "vented box" if sp.lowcut_order == 4 else "sealed box"
                _set(t, "lowcut_hz", _item(_number(sp.lowcut_hz), "the speaker's own -3 dB point" if fresh else None))
                _set(t, "lowcut_order", _item(int(sp.lowcut_order), box if fresh else None))
            if sp.response_file:
                _set(t, "response_file", _relative_path(sp.response_file, src_dir, out_dir))
            for k in ("sensitivity_db", "amplifier_w", "max_spl_db"):
                if getattr(sp, k) is not None:
                    _set(t, k, _number(getattr(sp, k)))
            if sp.role != "main" or "role" in t:
                _set(t, "role", sp.role)
            if sp.is_sub:
                gap = _pop_trailing_space(t)
                for k, default in (("gain_db", 0.0), ("delay_ms", 0.0), ("polarity", 1)):
                    v = getattr(sp, k)
                    if v != default or k in t or room.system is not None:
                        _set(t, k, int(v) if k == "polarity" else _number(v))
                t.value.body.extend((None, ws) for ws in gap)
            if sp.cabinet is not None:
                cab = sp.cabinet
                _set(t, "cabinet_m", _array(cab.size_m, "width, height, depth" if fresh else None))
                _set(t, "woofer_on_face_m", _array(cab.woofer_m))
                if cab.tweeter_m is not None:
                    _set(t, "tweeter_on_face_m", _array(cab.tweeter_m))
        if tail:
            last = speakers[[k for k in speakers.keys() if isinstance(speakers[k], tomlkit.items.Table)][-1]]
            last.value.body.extend((None, ws) for ws in _pop_trailing_space(last) + tail)
        if room.layout.seats:
            _write_seats(doc, room.layout.seats, position_note if not original_text else None)
        elif "seats" in doc:
            # a layout with one seat written over a file with [seats.NAME]: the main seat (the
            # first listed) moves, the others stay
            first = next(iter(doc["seats"].keys()))
            _set(doc["seats"][first], "position_m", _array(room.layout.seat_m))
        else:
            seat = _table(doc, "seat")
            note = position_note("seat", room.layout.seat_m) if position_note and not original_text else None
            _set(seat, "position_m", _array(room.layout.seat_m, note))
    if room.search and "search" not in doc:
        doc["search"] = dict(room.search)
    elif room.search.get("keep_out") and "search" in doc and \
            doc["search"].unwrap().get("keep_out") != room.search["keep_out"]:
        # keep-out boxes that followed a moved wall (a calibrated room): the new corners
        boxes = tomlkit.array()
        for box in room.search["keep_out"]:
            t = tomlkit.inline_table()
            t.update({k: ([_number(v) for v in box[k]] if k != "name" else box[k]) for k in box})
            boxes.append(t)
        _set(doc["search"], "keep_out", boxes)
    if room.subs_search is not None and "subs" not in doc:
        doc["subs"] = _subs_table(room.subs_search)
    elif room.subs_search is not None and "subs" in doc:
        # regions, keep-outs and candidates that followed a moved wall (a calibrated room): their
        # new corners and positions go into the user's own entries, names, comments and 2-D
        # corners ([x, y]: the full height) kept
        _update_subs_geometry(doc["subs"], room.subs_search)
    has_subs = room.layout is not None and bool(room.layout.subs)
    if room.system is not None and has_subs:
        sy = _table(doc, "system")
        if room.system.crossover_hz is not None:
            _set(sy, "crossover_hz", _number(room.system.crossover_hz))
        elif "crossover_hz" in sy:
            del sy["crossover_hz"]
        if room.system.mains_delay_ms or "mains_delay_ms" in sy or room.system.crossover_hz is not None:
            _set(sy, "mains_delay_ms", _number(room.system.mains_delay_ms))
    elif "system" in doc:
        del doc["system"]
    u = room.uncertainty
    if "uncertainty" in doc or replace(u, material_ranges=False) != Uncertainty():
        ut = _table(doc, "uncertainty")
        for k, v in u.to_dict().items():
            if k == "material_ranges":
                continue
            if k == "absorption_rel" and u.material_ranges:
                # not stated: the materials' own ranges come first (re-read as such)
                if k in ut and float(ut[k]) != v:
                    del ut[k]
                continue
            _set(ut, k, _number(v))
    text = tomlkit.dumps(doc)
    if comment:
        text = "".join(f"# {line}".rstrip() + "\n" for line in comment.splitlines()) + "\n" + text
    return text


def _moved(old, new_m, tol_m=1e-6):
    """Whether a position in the document differs from ``new_m``."""
    try:
        return any(abs(float(a) - float(b)) > tol_m for a, b in zip(old, new_m)) or len(old) != len(new_m)
    except (TypeError, ValueError):
        return True


def _pop_trailing_space(table):
    """Take the blank lines and comments off the end of ``table`` (returned): they introduce the
    next table, so keys added now go above them."""
    body = table.value.body
    tail = []
    while body and body[-1][0] is None and isinstance(body[-1][1], (tomlkit.items.Whitespace, tomlkit.items.Comment)):
        tail.insert(0, body.pop()[1])
    return tail


def _write_seats(doc, seats, position_note=None):
    table = _table(doc, "seats", super_table=True)
    names = [st.name for st in seats]
    for old in [k for k in list(table.keys()) if k not in names]:
        del table[old]
    for st in seats:
        if st.name not in table:
            table[st.name] = tomlkit.table()
        t = table[st.name]
        note = position_note(st.name, st.position_m) if position_note else None
        _set(t, "position_m", _array(st.position_m, note))
        if st.weight != 1.0 or "weight" in t:
            _set(t, "weight", _number(st.weight))


def _update_subs_geometry(table, ss):
    """Write changed box corners and candidate positions of ``ss`` into the ``[subs]`` table."""

    def changed(a, b):
        return any(abs(float(x) - float(y)) > 1e-9 for x, y in zip(a, b))

    for k in ("regions", "keep_out"):
        items, boxes = table.get(k), getattr(ss, k)
        if items is None or len(items) != len(boxes):
            continue
        for item, box in zip(items, boxes):
            for c, corner in (("min_m", box.min_m), ("max_m", box.max_m)):
                if isinstance(item, dict) and c in item and changed(item[c], corner):
                    item[c] = [_number(v) for v in corner[:len(item[c])]]
    items = table.get("candidates_m")
    if items is not None and len(items) == len(ss.candidates_m):
        for i, p in enumerate(ss.candidates_m):
            if changed(items[i], p):
                items[i] = [_number(v) for v in p]


def _subs_table(ss):
    """``[subs]`` as a TOML table: the keys whose values differ from the defaults."""
    default = SubSearch()
    t = tomlkit.table()

    def box_list(boxes):
        arr = tomlkit.array()
        for b in boxes:
            it = tomlkit.inline_table()
            it["name"] = b.name
            it["min_m"] = [_number(v) for v in b.min_m]
            it["max_m"] = [_number(v) for v in b.max_m]
            arr.append(it)
        return arr

    for k in ("counts", "crossover_hz", "band_hz", "max_delay_ms", "max_gain_db", "height_m", "step_m",
              "wall_gap_m", "wall_band_m"):
        v = getattr(ss, k)
        if v != getattr(default, k):
            t[k] = [_number(x) for x in v] if isinstance(v, tuple) else _number(v)
    for k in ("regions", "keep_out"):
        if getattr(ss, k):
            t[k] = box_list(getattr(ss, k))
    if ss.candidates_m:
        t["candidates_m"] = [[_number(x) for x in p] for p in ss.candidates_m]
    return t


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
