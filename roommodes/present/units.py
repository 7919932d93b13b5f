r"""Lengths as people write them, and as they like to read them.

Inside roommodes every length is in metres. At the edges, people measure with tapes
marked in centimetres or in feet and inches, so this module reads

* metres: ``"3.6"``, ``"3.6 m"``, ``"3.6m"``, ``"3.6 metres"``;
* centimetres and millimetres: ``"360 cm"``, ``"3600 mm"``;
* feet and inches: ``"12 ft 3 in"``, ``"12' 3\""``, ``"12'3"``, ``"12 ft"``, ``"147 in"``,
  ``"12 ft 3 1/2 in"``, ``"3/4 in"`` (typographic marks and ``''`` for inches too);

and writes metres back as centimetres, metres or feet and inches. A bare number is in
metres (the unit of room files), whatever the display units.

The foot and the inch are the international ones, exact by definition:
1 in = 25.4 mm, 1 ft = 12 in = 0.3048 m (International Yard and Pound Agreement, 1959;
NIST Special Publication 811, 2008, appendix B.8). So ``"12 ft 3 in"`` is exactly
147 x 0.0254 = 3.7338 m.
"""

from __future__ import annotations

import math
import re

__all__ = ["UNITS", "INCH_M", "FOOT_M", "parse_length", "parse_lengths", "format_length", "walls_text",
           "wall_distances"]

#: Display units accepted by :func:`format_length` (and the ``--units`` options).
UNITS = ("cm", "m", "ft-in")
#: The international inch and foot, metres (exact).
INCH_M = 0.0254
FOOT_M = 0.3048

_UNIT_M = {
    "m": 1.0, "metre": 1.0, "metres": 1.0, "meter": 1.0, "meters": 1.0,
    "cm": 0.01, "centimetre": 0.01, "centimetres": 0.01, "centimeter": 0.01, "centimeters": 0.01,
    "mm": 0.001, "millimetre": 0.001, "millimetres": 0.001, "millimeter": 0.001, "millimeters": 0.001,
    "ft": FOOT_M, "foot": FOOT_M, "feet": FOOT_M, "'": FOOT_M,
    "in": INCH_M, "inch": INCH_M, "inches": INCH_M, '"': INCH_M,
}
# typographic and doubled marks people type or paste for feet and inches
_MARKS = {"\u2032": "'", "\u2019": "'", "\u00b4": "'", "`": "'", "\u2033": '"', "\u201d": '"',
          "\u201c": '"', "''": '"'}
_TOKEN = re.compile(r"""\s*(?:(?P<num>\d+(?:\.\d*)?|\.\d+)(?:\s*/\s*(?P<den>\d+(?:\.\d*)?))?
                        |(?P<unit>[a-z]+|['"]))""", re.IGNORECASE | re.VERBOSE)
_EXAMPLES = "e.g. 3.6 (metres), 3.6 m, 360 cm, 12 ft 3 in or 12' 3\""


def _fail(text, why):
    raise ValueError(f"cannot read '{text}' as a length: {why}; write {_EXAMPLES}")


def _tokens(text):
    s = text.strip()
    for mark, plain in _MARKS.items():
        s = s.replace(mark, plain)
    out, pos = [], 0
    while pos < len(s):
        m = _TOKEN.match(s, pos)
        if m is None or m.end() == pos:
            bad = s[pos:].strip()
            if bad[:1] == ",":
                _fail(text, "use a decimal point, not a comma (3.6, not 3,6)")
            if bad[:1] == "-":
                _fail(text, "a length cannot be negative")
            _fail(text, f"'{bad[:12]}' is not a number or a unit")
        if m.group("num") is not None:
            num = float(m.group("num"))
            if m.group("den") is not None:
                den = float(m.group("den"))
                if den == 0:
                    _fail(text, "a fraction cannot have 0 below the line")
                num = num / den
                out.append(("frac", num))
            else:
                out.append(("num", num))
        else:
            unit = m.group("unit").lower()
            if unit not in _UNIT_M:
                _fail(text, f"unknown unit '{m.group('unit')}' (known: m, cm, mm, ft or ', in or \")")
            out.append(("unit", unit))
        pos = m.end()
    return out


def _quantities(text, tokens):
    """Group tokens into (value, unit-or-None) pairs; '3 1/2' is one value."""
    out = []
    i = 0
    while i < len(tokens):
        kind, v = tokens[i]
        if kind == "unit":
            _fail(text, f"the unit '{v}' has no number before it")
        i += 1
        if kind == "num" and i < len(tokens) and tokens[i][0] == "frac":
            if not tokens[i][1] < 1:
                _fail(text, "a mixed number needs a proper fraction after the whole part (3 1/2)")
            v += tokens[i][1]
            i += 1
        unit = None
        if i < len(tokens) and tokens[i][0] == "unit":
            unit = tokens[i][1]
            i += 1
        out.append((v, unit))
    return out


def parse_length(text):
    r"""Read a length written in metres, centimetres, millimetres or feet and inches.

    Parameters
    ----------
    text : str or float
        E.g. ``"3.6"``, ``"3.6 m"``, ``"360 cm"``, ``"12 ft 3 in"``, ``"12' 3\""``,
        ``"12'3"``, ``"147 in"``, ``"12 ft 3 1/2 in"``. A bare number is in metres; after a
        number of feet, a bare number is in inches (``12' 3``). A number (int or float) is
        taken as metres.

    Returns
    -------
    float
        The length in metres, >= 0.

    Raises
    ------
    ValueError
        For anything else, with the text, the reason and examples of what is accepted.

    Notes
    -----
    1 in = 0.0254 m and 1 ft = 0.3048 m exactly (International Yard and Pound Agreement,
    1959; NIST SP 811, 2008, B.8). In a feet-and-inches pair the inches must be below 12.

    Examples
    --------
    >>> parse_length("12 ft 3 in")
    3.7338
    >>> parse_length("360 cm")
    3.6
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        v = float(text)
        if not math.isfinite(v) or v < 0:
            raise ValueError(f"a length must be a finite number of metres >= 0, got {text!r}")
        return v
    if not isinstance(text, str):
        raise ValueError(f"a length must be text such as '3.6 m' or a number of metres, got {text!r}")
    if not text.strip():
        _fail(text, "it is empty")
    qs = _quantities(text, _tokens(text))
    if len(qs) == 1:
        v, unit = qs[0]
        metres = v * _UNIT_M[unit or "m"]
    elif len(qs) == 2 and _UNIT_M.get(qs[0][1]) == FOOT_M and (qs[1][1] is None or _UNIT_M[qs[1][1]] == INCH_M):
        feet, inches = qs[0][0], qs[1][0]
        if inches >= 12:
            _fail(text, f"{inches:g} inches is a foot or more; write it as feet and inches below 12")
        metres = (feet * 12 + inches) * INCH_M
    elif len(qs) == 2:
        _fail(text, "two parts are only accepted as feet then inches (12 ft 3 in)")
    else:
        _fail(text, "too many parts")
    # round off the binary noise of the unit products (12 ft 3 in gives 3.7338, not 3.7338000000000004)
    return float(f"{metres:.12g}")


def parse_lengths(text, count=3):
    r"""Read ``count`` lengths separated by commas, semicolons or an ``x``.

    ``"4.6, 3.4, 2.45"``, ``"460 cm x 340 cm x 245 cm"``, ``"15' 1\" x 11' x 8'"``.

    Returns
    -------
    tuple of float
        Metres.

    Raises
    ------
    ValueError
        When the count differs or a part cannot be read (:func:`parse_length`).
    """
    if not isinstance(text, str):
        raise ValueError(f"expected {count} lengths as text, got {text!r}")
    parts = [p for p in re.split(r"[;,]|\s+x\s+|(?<=[\d'\"a-z])x(?=[\d.\s])", text.strip(), flags=re.IGNORECASE)]
    parts = [p.strip() for p in parts]
    if len(parts) != count or not all(parts):
        raise ValueError(f"expected {count} lengths separated by commas (e.g. 0.5, 0.62, 1.15 or "
                         f"50 cm, 62 cm, 115 cm), got '{text}'")
    return tuple(parse_length(p) for p in parts)


def _ft_in(metres, quarter=True):
    sign = "-" if metres < 0 else ""
    steps = 4 if quarter else 1
    total = round(abs(metres) / INCH_M * steps)  # in quarter inches
    feet, rest = divmod(total, 12 * steps)
    whole, frac = divmod(rest, steps)
    frac_txt = {0: "", 1: " 1/4", 2: " 1/2", 3: " 3/4"}[frac] if quarter else ""
    if feet == 0:
        inch = f"{whole}{frac_txt}" if whole or not frac_txt else frac_txt.strip()
        return f"{sign}{inch} in"
    return f"{sign}{feet} ft {whole}{frac_txt} in"


def format_length(metres, units="cm"):
    """Write a length for people: ``"123 cm"``, ``"1.23 m"`` or ``"4 ft 0 1/2 in"``.

    Parameters
    ----------
    metres : float
        Length, m (finite).
    units : {"cm", "m", "ft-in"}
        Centimetres to the nearest centimetre, metres to the centimetre, or feet and inches
        to the nearest quarter inch (the inch part carries into the feet, never 12 in).

    Returns
    -------
    str

    Raises
    ------
    ValueError
        For unknown units or a non-finite length.
    """
    if units not in UNITS:
        raise ValueError(f"units must be one of {', '.join(UNITS)}, got {units!r}")
    v = float(metres)
    if not math.isfinite(v):
        raise ValueError(f"length must be finite, got {metres!r}")
    if units == "cm":
        return f"{v * 100:.0f} cm"
    if units == "m":
        return f"{v:.2f} m"
    return _ft_in(v)


def wall_distances(room, position_m):
    """Distance (m) of a point to each of the six surfaces, keyed by surface name."""
    lx, ly, lz = room.size_m
    x, y, z = (float(v) for v in position_m)
    return {"front": x, "back": lx - x, "left": y, "right": ly - y, "floor": z, "ceiling": lz - z}


def walls_text(room, position_m, units="cm"):
    """Where a point is, in words: from the front wall, from the nearer side wall, and high.

    Parameters
    ----------
    room : Room
    position_m : sequence of 3 float
        (x, y, z), m.
    units : {"cm", "m", "ft-in"}

    Returns
    -------
    str
        E.g. ``"50 cm from the front wall, 62 cm from the left wall, 115 cm high"``.
        x is always given from the front wall (the wall behind the speakers, the
        reference of every layout); y from the nearer side wall (the left one at the
        centre line).
    """
    d = wall_distances(room, position_m)
    side = "left" if d["left"] <= d["right"] else "right"
    return (f"{format_length(d['front'], units)} from the front wall, "
            f"{format_length(d[side], units)} from the {side} wall, {format_length(d['floor'], units)} high")

