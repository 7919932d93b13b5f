"""The ``init`` command: a commented room file written from questions (or from options)."""

from __future__ import annotations

import datetime
import difflib
import re
import tomllib
from pathlib import Path

import click
import numpy as np

from .. import __version__
from ..io.roomfile import RoomFileError, parse_room, room_to_toml, write_text_atomic
from ..model.materials import get_material, material_names
from ..model.room import MAX_DIMENSION_M, MIN_DIMENSION_M, WALL_MARGIN_M, Layout, Room, Speaker, Surface
from ..present.units import format_length, parse_length, parse_lengths, walls_text
from ._util import (
    CONTEXT,
    UserError,
    check_folder_writable,
    display_units_option,
    dump_json,
    echo_err,
    fail,
    guard,
    json_option,
)

__all__ = ["init", "room_sketch", "commented_room_toml"]


_SURFACE_PROMPTS = {
    "front": "front wall (behind the speakers)", "back": "back wall", "left": "left wall (seen from the seat)",
    "right": "right wall", "floor": "floor", "ceiling": "ceiling",
}


def _surface_value(text):
    """A material name, a number from the library list, or an absorption coefficient."""

    names = material_names()
    t = str(text).strip()
    if not t:
        raise ValueError("give a material name, its number from the list, or an absorption coefficient")
    if t.isdigit() and 1 <= int(t) <= len(names) and not t.startswith("0"):
        return names[int(t) - 1]
    try:
        v = float(t)
    except ValueError:
        v = None
    if v is not None:
        if not (np.isfinite(v) and 0.0 <= v < 1.0):
            raise ValueError(f"an absorption coefficient must be 0 to below 1, got {t} "
                             f"(or pick 1-{len(names)} from the list)")
        return v
    try:
        return get_material(t.lower()).name
    except ValueError:
        close = difflib.get_close_matches(t.lower(), names, n=1, cutoff=0.5)
        hint = f" (did you mean '{close[0]}'?)" if close else ""
        raise ValueError(f"unknown material '{t}'{hint}; give a name or number from the list, or an absorption "
                         "coefficient such as 0.1") from None


def _material_list():

    lines = ["Surface materials (type the number or the name, or an absorption coefficient 0 to 0.99):"]
    for i, n in enumerate(material_names(), 1):
        m = get_material(n)
        lines.append(f"  {i:2d}. {n:<26} {m.description}")
    return lines


def _rounded(v):
    """Lengths are kept to the micrometre, so the file shows clean numbers (2.8, not 2.8000000000000003)."""
    return float(round(float(v), 6))


def commented_room_toml(name, size_m, surfaces, speakers=(), seat_m=None, temperature_c=20.0, units="cm",
                        header=None):
    """Text of a commented room file that :func:`roommodes.load_room` reads back to these values.

    Builds the :class:`Room` and writes it with the package's one writer
    (:func:`roommodes.io.roomfile.room_to_toml`), with the lengths restated in ``units`` in
    comments.

    Parameters
    ----------
    name : str
    size_m : (float, float, float)
    surfaces : dict
        Surface name -> material name or absorption coefficient, for all six surfaces.
    speakers : sequence of dict
        ``name``, ``position_m`` and optionally ``lowcut_hz``, ``lowcut_order``.
    seat_m : (float, float, float) or None
    temperature_c : float
    units : {"cm", "m", "ft-in"}
        Units of the comments that restate each length.
    header : str, optional
        First comment lines.
    """
    surf = tuple(Surface(w, (1.0,), None, surfaces[w]) if isinstance(surfaces[w], str)
                 else Surface(w, (float(surfaces[w]),)) for w in _SURFACE_PROMPTS)
    sps = tuple(Speaker(sp["name"], tuple(float(v) for v in sp["position_m"]), sp.get("lowcut_hz"),
                        int(sp.get("lowcut_order", 2))) for sp in speakers)
    layout = Layout(sps, tuple(float(v) for v in seat_m), "file") if seat_m is not None and sps else None
    room = Room(name, tuple(float(v) for v in size_m), surf, float(temperature_c), layout)
    lx, ly, lz = size_m

    def note(what, pos):
        where = walls_text(room, pos, units)
        return f"the listener's ears: {where}" if what == "seat" else f"woofer centre: {where}"

    return room_to_toml(room, header, position_note=note,
                        size_note=f"length {format_length(lx, units)}, width {format_length(ly, units)}, "
                                  f"height {format_length(lz, units)}")


def room_sketch(size_m, speakers=(), seat_m=None, surfaces=None, units="cm", width=44):
    """Sketch the room's plan in characters, dimensioned (front wall at the top).

    Parameters
    ----------
    size_m : (float, float, float)
    speakers : sequence of (name, position_m)
    seat_m : (float, float, float) or None
    surfaces : dict, optional
        Surface -> material or coefficient, written around the plan.
    units : {"cm", "m", "ft-in"}
    width : int
        Characters across the room's width.

    Returns
    -------
    list of str
    """
    lx, ly, lz = size_m
    cols = int(width)
    rows = int(min(26, max(5, round(cols * lx / ly * 0.45))))
    grid = [[" "] * cols for _ in range(rows)]
    marks = []
    used = set()
    for i, (name, pos) in enumerate(speakers):
        ch = (name[:1].upper() or "?")
        if ch in used or ch == "S":
            ch = str(i + 1)
        used.add(ch)
        marks.append((ch, f"{name} speaker", pos))
    if seat_m is not None:
        marks.append(("S", "seat (ears)", seat_m))
    for ch, _, pos in marks:
        r = min(rows - 1, max(0, int(round(pos[0] / lx * (rows - 1)))))
        c = min(cols - 1, max(0, int(round(pos[1] / ly * (cols - 1)))))
        grid[r][c] = ch
    s = surfaces or {}

    def lab(w):
        v = s.get(w)
        return "" if v is None else f": {v}"

    length = f"length {format_length(lx, units)}"
    out = [f"  front wall{lab('front')}".center(cols + 4)]
    out.append("  +" + "-" * cols + "+")
    mid = rows // 2
    for i, row in enumerate(grid):
        side = f"  {length}" if i == mid else ("  ^" if i == 0 else ("  v" if i == rows - 1 else "  |"))
        out.append("  |" + "".join(row) + "|" + side)
    out.append("  +" + "-" * cols + "+")
    w_txt = f" width {format_length(ly, units)} "
    arrow = "<" + w_txt.center(cols - 2, "-") + ">"
    out.append("   " + arrow)
    out.append(f"  back wall{lab('back')}".center(cols + 4))
    out.append(f"  left wall{lab('left')};  right wall{lab('right')}")
    out.append(f"  floor{lab('floor')};  ceiling{lab('ceiling')};  height {format_length(lz, units)}")
    probe_size = size_m
    for ch, what, pos in marks:
        d = (pos[0], min(pos[1], probe_size[1] - pos[1]), pos[2])
        side = "left" if pos[1] <= probe_size[1] - pos[1] else "right"
        out.append(f"  {ch} = {what}: {format_length(d[0], units)} from the front wall, "
                   f"{format_length(d[1], units)} from the {side} wall, {format_length(d[2], units)} high")
    return out


class _Answer:
    """A prompt's value processor: parse, check, or explain why not (click asks again)."""

    def __init__(self, func):
        self.func = func

    def __call__(self, text):
        try:
            return self.func(text)
        except ValueError as exc:
            raise click.BadParameter(str(exc)) from None


def _dimension(text, label):

    v = _rounded(parse_length(text))
    if not MIN_DIMENSION_M <= v <= MAX_DIMENSION_M:
        hint = ""
        if v > MAX_DIMENSION_M and str(text).strip().replace(".", "", 1).isdigit():
            hint = f"; a bare number is in metres: did you mean {str(text).strip()} cm?"
        raise ValueError(f"a room {label} of {v:g} m is not plausible; allowed {MIN_DIMENSION_M:g} to "
                         f"{MAX_DIMENSION_M:g} m{hint}")
    return v


def _coordinate(text, length_m, near, far, what):
    """Read a distance from the ``near`` wall, or from the ``far`` one when the text names it.

    E.g. "60 cm", "60 cm from right", "1.2 m from the back wall".
    """

    low = str(text).strip().lower()
    from_far = re.search(rf"\b{far}\b", low) is not None
    cleaned = re.sub(rf"\b(from\s+)?(the\s+)?({far}|{near})(\s+wall)?\b", " ", low).strip()
    v = _rounded(parse_length(cleaned))
    v = _rounded(length_m - v) if from_far else v
    if not WALL_MARGIN_M <= v <= length_m - WALL_MARGIN_M:
        raise ValueError(f"{what} must lie inside the room: {format_length(WALL_MARGIN_M, 'cm')} to "
                         f"{format_length(length_m - WALL_MARGIN_M, 'cm')} from the {near} "
                         f"{'wall' if near not in ('floor', 'ceiling') else ''}".rstrip()
                         + f" (the room measures {length_m:g} m this way), got {v:g} m")
    return v


def _point(text, size_m, what):

    try:
        p = tuple(_rounded(v) for v in parse_lengths(text, 3))
    except ValueError as exc:
        raise ValueError(f"{what}: {exc}") from None
    for v, L, axis in zip(p, size_m, "xyz"):
        if not WALL_MARGIN_M <= v <= L - WALL_MARGIN_M:
            raise ValueError(f"{what}: {axis} = {v:g} m lies outside the room (allowed {WALL_MARGIN_M:g} to "
                             f"{L - WALL_MARGIN_M:g} m)")
    return p


def _spacing_problem(speakers, seat):
    pos = [np.asarray(s["position_m"]) for s in speakers]
    for i in range(len(pos)):
        for j in range(i):
            if np.linalg.norm(pos[i] - pos[j]) < 0.05:
                return f"speakers '{speakers[j]['name']}' and '{speakers[i]['name']}' are closer than 5 cm"
    if seat is not None:
        for s, p in zip(speakers, pos):
            if np.linalg.norm(p - np.asarray(seat)) < 0.1:
                return f"the seat is within 10 cm of speaker '{s['name']}'"
    return None


def _ask(label, proc, default=None):
    return click.prompt(label, default=default, value_proc=_Answer(proc), show_default=default not in (None, ""),
                        err=True)


def _ask_position(label, size_m, units, default=None):
    lx, ly, lz = size_m
    d = default or (None, None, None)
    x = _ask(f"{label}: distance from the front wall", lambda t: _coordinate(t, lx, "front", "back", "the distance"),
             None if d[0] is None else format_length(d[0], units))
    y = _ask(f"{label}: distance from the left wall (or e.g. '60 cm from right')",
             lambda t: _coordinate(t, ly, "left", "right", "the distance"),
             None if d[1] is None else format_length(d[1], units))
    z = _ask(f"{label}: height above the floor", lambda t: _coordinate(t, lz, "floor", "ceiling", "the height"),
             None if d[2] is None else format_length(d[2], units))
    return (x, y, z)


def _lowcut(text):
    t = str(text).strip().lower().removesuffix("hz").strip()
    if t in ("", "-", "none", "unknown"):
        return None
    try:
        v = float(t)
    except ValueError:
        raise ValueError(f"give the -3 dB point in Hz (e.g. 45), or press Enter if unknown; got '{text}'") from None
    if not 5.0 <= v <= 500.0:
        raise ValueError(f"a -3 dB point of {v:g} Hz is out of range; allowed 5 to 500 Hz")
    return v


def _box(text):
    t = str(text).strip().lower()
    if t in ("sealed", "closed", "2"):
        return 2
    if t in ("vented", "ported", "reflex", "bass-reflex", "4"):
        return 4
    raise ValueError(f"answer sealed or vented, got '{text}'")


def _speaker_name(text):
    name = str(text).strip()
    if not name or not all(c.isalnum() or c in "-_" for c in name):
        raise ValueError(f"a speaker name is letters, digits, - or _ (e.g. left), got '{text}'")
    return name


def _speaker_option(text, size_m):
    name, sep, where = str(text).partition("=")
    if not sep:
        raise ValueError(f"--speaker must be NAME=X,Y,Z, e.g. left=50cm,62cm,115cm; got '{text}'")
    name = _speaker_name(name)
    return {"name": name, "position_m": _point(where, size_m, f"--speaker {name}")}


@click.command(context_settings=CONTEXT)
@click.argument("out", type=click.Path(path_type=Path), default="room.toml")
@click.option("--name", help="Name of the room [default: from the file name].")
@click.option("--size", metavar="L,W,H", help="Length, width, height, e.g. 4.6,3.4,2.45 or 15ft 1in, 11ft, 8ft.")
@click.option("--temperature", type=float, default=None, help="Air temperature, C [default 20].")
@click.option("--walls", metavar="MATERIAL", help="Material (or absorption coefficient) of all four walls.")
@click.option("--front", metavar="MATERIAL", help="Front wall (behind the speakers).")
@click.option("--back", metavar="MATERIAL", help="Back wall.")
@click.option("--left", metavar="MATERIAL", help="Left wall.")
@click.option("--right", metavar="MATERIAL", help="Right wall.")
@click.option("--floor", metavar="MATERIAL", help="Floor.")
@click.option("--ceiling", metavar="MATERIAL", help="Ceiling.")
@click.option("--speaker", "speaker_opts", multiple=True, metavar="NAME=X,Y,Z",
              help="A speaker's woofer centre from the front wall, the left wall and the floor (repeatable).")
@click.option("--seat", metavar="X,Y,Z", help="The listener's ears from the front wall, the left wall and the floor.")
@click.option("--no-speakers", is_flag=True, help="Write a room without speakers and seat.")
@click.option("--lowcut", "lowcut_hz", type=float, help="The speakers' own -3 dB point, Hz.")
@click.option("--box", type=click.Choice(["sealed", "vented"]), help="The speakers' box type [default sealed].")
@display_units_option
@click.option("-y", "--yes", is_flag=True,
              help="Ask nothing: take every value from the options (missing ones are an error).")
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
@json_option
@guard
def init(out, name, size, temperature, walls, front, back, left, right, floor, ceiling, speaker_opts, seat,
         no_speakers, lowcut_hz, box, units, yes, force, as_json):
    """Write a commented room file, by answering questions or from options.

    \b
    roommodes init my-room.toml
    roommodes init my-room.toml --size "460cm,340cm,245cm" --walls plasterboard-on-studs \\
        --floor wood-floor-on-joists --ceiling plasterboard-on-studs \\
        --speaker left=50cm,62cm,115cm --speaker right=50cm,277cm,115cm --seat 185cm,170cm,120cm -y

    Asks for the room's dimensions, what each surface is made of (from the material
    library, or an absorption coefficient), where the speakers and the seat are, shows a
    dimensioned sketch to check, and writes the file. Lengths may be given in metres
    (3.6 or 3.6 m), centimetres (360 cm) or feet and inches (12 ft 3 in, 12' 3"); a bare
    number is in metres. A wrong answer is explained and asked again. Values given as
    options are not asked; with --yes nothing is asked at all.
    """

    out = Path(out)
    if out.suffix.lower() != ".toml":
        fail(f"{out}: a room file must be a .toml file")
    check_folder_writable(out.parent if str(out.parent) else Path("."))
    if out.exists() and not force:
        fail(f"{out} already exists; choose another name or pass --force")
    surf_opts = {"front": front or walls, "back": back or walls, "left": left or walls, "right": right or walls,
                 "floor": floor, "ceiling": ceiling}
    if no_speakers and (speaker_opts or seat):
        fail("--no-speakers cannot go with --speaker or --seat")
    if lowcut_hz is not None and not 5.0 <= lowcut_hz <= 500.0:
        fail(f"--lowcut {lowcut_hz:g} Hz is out of range; allowed 5 to 500 Hz")
    if temperature is not None and not -20.0 <= temperature <= 50.0:
        fail(f"--temperature {temperature:g} C is out of range; allowed -20 to 50 C")
    if yes:
        missing = [o for o, v in (("--size", size),) if v is None]
        missing += [f"--{w} (or --walls)" if w in ("front", "back", "left", "right") else f"--{w}"
                    for w, v in surf_opts.items() if v is None]
        if not no_speakers and bool(speaker_opts) != bool(seat):
            missing.append("--seat" if speaker_opts else "--speaker")
        if missing:
            fail("with --yes every value must come from the options; missing: " + ", ".join(missing))

    def parsed(value, proc, option):
        try:
            return proc(value)
        except ValueError as exc:
            fail(f"{option}: {exc}")

    while True:
        room_name = name if name is not None else (out.stem if yes else
                                                   click.prompt("Name of the room", default=out.stem, err=True))
        if size is not None:
            try:
                dims = tuple(_rounded(v) for v in parse_lengths(size, 3))
            except ValueError as exc:
                fail(f"--size: {exc}")
            for v, label in zip(dims, ("length", "width", "height")):
                parsed(str(v), lambda t, lb=label: _dimension(t, lb), "--size")
        else:
            click.echo("Room dimensions (metres unless you say cm, or ft and in):", err=True)
            dims = (_ask("Length, front wall to back wall", lambda t: _dimension(t, "length")),
                    _ask("Width, left wall to right wall", lambda t: _dimension(t, "width")),
                    _ask("Height, floor to ceiling", lambda t: _dimension(t, "height")))
        temp = 20.0 if temperature is None and yes else temperature
        surfaces = {}
        shown = False
        previous = None
        for w in _SURFACE_PROMPTS:
            if surf_opts[w] is not None:
                surfaces[w] = parsed(surf_opts[w], _surface_value, f"--{w}")
            else:
                if not shown:
                    for line in _material_list():
                        click.echo(line, err=True)
                    shown = True
                default = previous if w in ("back", "left", "right") else (
                    surfaces.get("front") if w == "ceiling" else None)
                surfaces[w] = _ask(f"Surface: {_SURFACE_PROMPTS[w]}", _surface_value,
                                   None if default is None else str(default))
            previous = surfaces[w]
        speakers, seat_m = [], None
        if speaker_opts:
            speakers = [parsed(t, lambda s, d=dims: _speaker_option(s, d), "--speaker") for t in speaker_opts]
            if len({s["name"] for s in speakers}) != len(speakers):
                fail("--speaker: two speakers have the same name")
        if seat is not None:
            seat_m = parsed(seat, lambda t, d=dims: _point(t, d, "--seat"), "--seat")
        if not yes and not no_speakers and not speakers:
            n = click.prompt("How many speakers (0 for none)", default=2, type=click.IntRange(0, 8), err=True)
            for i in range(n):
                default_name = ("left", "right")[i] if n == 2 else ("main" if n == 1 else f"speaker{i + 1}")
                sname = click.prompt(f"Speaker {i + 1} name", default=default_name, err=True,
                                     value_proc=_Answer(_speaker_name))
                while True:
                    pos = _ask_position(f"{sname} speaker (woofer centre)", dims, units)
                    problem = _spacing_problem(speakers + [{"name": sname, "position_m": pos}], None)
                    if problem is None:
                        break
                    click.echo(f"Error: {problem}; give this speaker's position again.", err=True)
                sp = {"name": sname, "position_m": pos}
                lc = lowcut_hz
                if lc is None:
                    prev = speakers[-1].get("lowcut_hz") if speakers else None
                    lc = _ask(f"{sname} speaker's own -3 dB point in Hz (Enter if unknown)", _lowcut,
                              "" if prev is None else f"{prev:g}")
                if lc:
                    sp["lowcut_hz"] = lc
                    order = {"sealed": 2, "vented": 4}.get(box) if box else None
                    if order is None:
                        prev = speakers[-1].get("lowcut_order", 2) if speakers else 2
                        order = _ask(f"{sname} speaker's box: sealed or vented", _box,
                                     "vented" if prev == 4 else "sealed")
                    sp["lowcut_order"] = order
                speakers.append(sp)
        elif lowcut_hz:
            for sp in speakers:
                sp["lowcut_hz"] = lowcut_hz
                sp["lowcut_order"] = 4 if box == "vented" else 2
        if speakers and seat_m is None:
            lx, ly, lz = dims
            while True:
                seat_m = _ask_position("seat (the listener's ears)", dims, units,
                                       (min(lx * 0.4, lx - 0.5), ly / 2, min(1.2, lz - 0.3)))
                problem = _spacing_problem(speakers, seat_m)
                if problem is None:
                    break
                click.echo(f"Error: {problem}; give the seat's position again.", err=True)
        problem = _spacing_problem(speakers, seat_m)
        if problem is not None:
            fail(problem)
        if temp is None:
            temp = click.prompt("Air temperature in C", default=20.0, type=click.FloatRange(-20, 50), err=True)
        header = (f"{room_name}: room file written by roommodes {__version__} init on "
                  f"{datetime.date.today().isoformat()}.")
        text = commented_room_toml(room_name, dims, surfaces, speakers, seat_m, temp, units, header)
        try:
            parse_room(tomllib.loads(text), str(out), out.parent)
        except (RoomFileError, tomllib.TOMLDecodeError) as exc:  # pragma: no cover - the checks above prevent it
            fail(f"the answers do not make a valid room file: {exc}")
        sketch = room_sketch(dims, [(s["name"], s["position_m"]) for s in speakers], seat_m, surfaces, units)
        click.echo("", err=True)
        for line in sketch:
            click.echo(line, err=True)
        click.echo("", err=True)
        if yes or click.confirm(f"Write {out}?", default=True, err=True):
            break
        if not click.confirm("Start again?", default=False, err=True):
            echo_err("Nothing written.")
            raise click.exceptions.Exit(1)
        name = size = temperature = seat = None
        surf_opts = dict.fromkeys(surf_opts)
        speaker_opts = ()
    try:
        write_text_atomic(out, text, overwrite=force)
    except (FileExistsError, OSError) as exc:
        raise UserError(str(exc)) from None
    echo_err(f"wrote {out}")
    if as_json:
        dump_json({"output": str(out), "room": room_name, "size_m": list(dims)})
    else:
        click.echo(f"Next: roommodes report {out} -o {out.stem}-report.html")
