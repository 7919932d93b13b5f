"""Study files (TOML) for ``roommodes study``: read and validate into a :class:`StudySpec`.

Every problem is one line naming the file, the key and what is allowed, like the room file's
(:class:`StudyFileError` is a :class:`~roommodes.io.roomfile.RoomFileError`).
"""

from __future__ import annotations

from ..model.materials import get_material
from ..model.room import MAX_DIMENSION_M, MIN_DIMENSION_M
from ..model.study import MAX_CANDIDATES, SCHROEDER, STUDY_LAYOUTS, STUDY_PLACEMENTS, StudySpec
from .roomfile import RoomFileError, _Ctx, _parse_uncertainty, _shown, read_toml

__all__ = ["StudyFileError", "load_study", "parse_study"]

_STUDY_KEYS = {"length_m", "width_m", "height_m", "steps", "walls", "floor", "ceiling", "layout", "seat_area_m",
               "seat_area_points", "band_hz", "points_per_octave", "samples", "seed", "temperature_c",
               "seat_fraction", "spacing_m", "placement", "search_step_m", "search_refine"}
_EXAMPLE = "[study] length_m = [4.0, 6.0], width_m = [3.0, 4.5], height_m = [2.4, 3.0], steps = 4"


class StudyFileError(RoomFileError):
    """A study file that cannot be used; the message says where and how to fix it."""


class _StudyCtx(_Ctx):
    def fail(self, key, msg):
        where = f"{key}: " if key else ""
        raise StudyFileError(f"{self.name}: {where}{msg}")


def _whole(ctx, value, key, lo, hi):
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        ctx.fail(key, f"expected a whole number from {lo} to {hi}, got {_shown(value)}")
    return int(value)


def _pair(ctx, value, key, lo, hi, rising=False):
    if not isinstance(value, list) or len(value) != 2:
        ctx.fail(key, f"expected [LOW, HIGH], e.g. [{lo:g}, {hi:g}], got {_shown(value)}")
    a, b = (ctx.number(v, f"{key}[{i}]", lo, hi) for i, v in enumerate(value))
    if a > b or (rising and a == b):
        ctx.fail(key, f"LOW ({a:g}) must be {'below' if rising else 'at most'} HIGH ({b:g})")
    return (a, b)


def _material(ctx, value, key):
    if not isinstance(value, str):
        ctx.fail(key, f"expected a material name from the library, got {_shown(value)}")
    try:
        get_material(value)
    except ValueError as exc:
        ctx.fail(key, str(exc))
    return value


def parse_study(data, name="<study>"):
    """Build a :class:`StudySpec` from the dict of a parsed study file.

    Raises
    ------
    StudyFileError
    """
    ctx = _StudyCtx(name)
    if not isinstance(data, dict) or "study" not in data:
        ctx.fail("[study]", f"missing table; a study file needs at least {_EXAMPLE}")
    ctx.unknown_keys(data, {"study", "uncertainty"}, "top level")
    t = data["study"]
    if not isinstance(t, dict):
        ctx.fail("[study]", f"must be a table, e.g. {_EXAMPLE}")
    ctx.unknown_keys(t, _STUDY_KEYS, "[study]")
    kw = {}
    for k in ("length_m", "width_m", "height_m"):
        if k not in t:
            ctx.fail(f"[study] {k}", f"missing; give [LOW, HIGH] in metres ({_EXAMPLE})")
        kw[k] = _pair(ctx, t[k], f"[study] {k}", MIN_DIMENSION_M, MAX_DIMENSION_M)
    if "steps" not in t:
        ctx.fail("[study] steps", "missing; give the number of grid points per dimension, e.g. steps = 4")
    kw["steps"] = _whole(ctx, t["steps"], "[study] steps", 1, 100)
    if "walls" in t:
        w = t["walls"]
        if isinstance(w, str):
            w = [w]
        if not isinstance(w, list) or not w:
            ctx.fail("[study] walls", "expected a material name or a list of them, e.g. [\"plasterboard-on-studs\"]")
        kw["walls"] = tuple(_material(ctx, v, f"[study] walls[{i}]") for i, v in enumerate(w))
        if len(set(kw["walls"])) != len(kw["walls"]):
            ctx.fail("[study] walls", "names a material twice; list each construction once")
    for k in ("floor", "ceiling"):
        if k in t:
            kw[k] = _material(ctx, t[k], f"[study] {k}")
    if "layout" in t:
        if t["layout"] not in STUDY_LAYOUTS:
            ctx.fail("[study] layout", f"must be one of {', '.join(STUDY_LAYOUTS)}, got {_shown(t['layout'])}")
        kw["layout"] = t["layout"]
    if "seat_fraction" in t:
        kw["seat_fraction"] = ctx.number(t["seat_fraction"], "[study] seat_fraction", 0.1, 0.9)
    if "spacing_m" in t:
        kw["spacing_m"] = ctx.number(t["spacing_m"], "[study] spacing_m", 0.5, 5.0)
    if "placement" in t:
        if t["placement"] not in STUDY_PLACEMENTS:
            ctx.fail("[study] placement", f"must be one of {', '.join(STUDY_PLACEMENTS)}, got {_shown(t['placement'])}")
        kw["placement"] = t["placement"]
    if "search_step_m" in t:
        kw["search_step_m"] = ctx.number(t["search_step_m"], "[study] search_step_m", 0.05, 1.0)
    if "search_refine" in t:
        if not isinstance(t["search_refine"], bool):
            ctx.fail("[study] search_refine", f"expected true or false, got {_shown(t['search_refine'])}")
        kw["search_refine"] = t["search_refine"]
    if "seat_area_m" in t:
        v = t["seat_area_m"]
        if not isinstance(v, list) or len(v) != 2:
            ctx.fail("[study] seat_area_m", f"expected [depth, width] in metres, e.g. [0.6, 0.6], got {_shown(v)}")
        kw["seat_area_m"] = tuple(ctx.number(x, f"[study] seat_area_m[{i}]", 0.0, 3.0) for i, x in enumerate(v))
    if "seat_area_points" in t:
        v = t["seat_area_points"]
        if not isinstance(v, list) or len(v) != 2:
            ctx.fail("[study] seat_area_points", f"expected [along x, along y], e.g. [3, 3], got {_shown(v)}")
        kw["seat_area_points"] = tuple(_whole(ctx, x, f"[study] seat_area_points[{i}]", 1, 9) for i, x in enumerate(v))
    if "band_hz" in t:
        v = t["band_hz"]
        if isinstance(v, list) and len(v) == 2 and v[1] == SCHROEDER:
            kw["band_hz"] = (ctx.number(v[0], "[study] band_hz[0]", 10.0, 150.0), SCHROEDER)
        else:
            if isinstance(v, list) and len(v) == 2 and isinstance(v[1], str):
                ctx.fail("[study] band_hz[1]", f"expected a frequency in Hz or \"{SCHROEDER}\", got {_shown(v[1])}")
            kw["band_hz"] = _pair(ctx, v, "[study] band_hz", 10.0, 500.0, rising=True)
    if "points_per_octave" in t:
        kw["points_per_octave"] = _whole(ctx, t["points_per_octave"], "[study] points_per_octave", 3, 96)
    if "samples" in t:
        kw["samples"] = _whole(ctx, t["samples"], "[study] samples", 2, 5000)
    if "seed" in t:
        kw["seed"] = _whole(ctx, t["seed"], "[study] seed", 0, 2**32 - 1)
    if "temperature_c" in t:
        kw["temperature_c"] = ctx.number(t["temperature_c"], "[study] temperature_c", -20.0, 50.0)
    if "uncertainty" in data:
        kw["uncertainty"] = _parse_uncertainty(ctx, data["uncertainty"])
    if kw.get("placement") == "search" and any(n % 2 == 0 for n in kw.get("seat_area_points", (3, 3))):
        ctx.fail("[study] seat_area_points", "must be odd numbers with placement = \"search\" (the seat is the "
                                             "middle point of the search's area), e.g. [3, 3]")
    spec = StudySpec(**kw)
    if spec.n_candidates > MAX_CANDIDATES:
        ctx.fail("[study] steps", f"gives {spec.n_candidates} candidate rooms (steps^3 x walls); at most "
                                  f"{MAX_CANDIDATES} are allowed: lower steps or split the study")
    return spec


def load_study(path):
    """Read and validate a study file.

    Raises
    ------
    StudyFileError
        For anything wrong, with the file, the key and what is allowed in the message.
    """
    name = str(path)
    data = read_toml(path, "study file", StudyFileError, empty=f"it needs at least {_EXAMPLE}",
                     nesting="a study file nests at most two levels")
    if not data:
        raise StudyFileError(f"{name}: the file is empty; it needs at least {_EXAMPLE}")
    return parse_study(data, name)
