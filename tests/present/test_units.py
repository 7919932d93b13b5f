"""Lengths in and out: metres, centimetres, feet and inches.

Reference: the international inch is exactly 25.4 mm and the foot exactly 0.3048 m
(International Yard and Pound Agreement, 1959; NIST Special Publication 811, 2008,
appendix B.8). So 12 ft 3 in = 147 in = 147 x 0.0254 m = 3.7338 m exactly.
"""

import pytest
from hypothesis import given
from hypothesis import strategies as st

from roommodes import demo_room_path, load_room
from roommodes.cli._util import walls_text as cli_walls_text
from roommodes.present.units import FOOT_M, INCH_M, format_length, parse_length, parse_lengths, walls_text


def test_foot_and_inch_are_the_international_ones():
    # NIST SP 811 (2008) B.8: 1 in = 2.54 cm exactly, 1 ft = 0.3048 m exactly
    assert INCH_M == 0.0254
    assert FOOT_M == 0.3048
    assert FOOT_M == pytest.approx(12 * INCH_M, abs=1e-15)


@pytest.mark.parametrize("text, metres", [
    # feet and inches: 147 in x 0.0254 m = 3.7338 m (NIST SP 811 B.8)
    ("12 ft 3 in", 3.7338),
    ("12' 3\"", 3.7338),
    ("12'3\"", 3.7338),
    ("12'3", 3.7338),
    ("12 ft 3", 3.7338),
    ("12 feet 3 inches", 3.7338),
    ("12\u2032 3\u2033", 3.7338),       # prime and double prime
    ("12\u2019 3\u201d", 3.7338),       # typographic quotes, as phones type them
    ("12' 3''", 3.7338),                # two apostrophes for inches
    ("147 in", 3.7338),
    ("147\"", 3.7338),
    ("12 ft", 3.6576),                  # 12 x 0.3048
    ("12 ft 3 1/2 in", 3.7465),         # 147.5 in
    ("1/2 in", 0.0127),
    ("0 ft 6 in", 0.1524),
    # metric
    ("3.6", 3.6),
    ("3.6 m", 3.6),
    ("3.6m", 3.6),
    ("3.6 metres", 3.6),
    ("3.6 meters", 3.6),
    ("360 cm", 3.6),
    ("360cm", 3.6),
    ("3600 mm", 3.6),
    (".5", 0.5),
    ("  2.45 M ", 2.45),
])
def test_parse_length_table(text, metres):
    assert parse_length(text) == metres  # exact: the definitions are exact decimals


def test_parse_length_takes_numbers_as_metres():
    assert parse_length(2.5) == 2.5
    assert parse_length(3) == 3.0


@pytest.mark.parametrize("text, match", [
    ("3,6", "decimal point"),
    ("-3", "negative"),
    ("12 yd", "unknown unit 'yd'"),
    ("", "empty"),
    ("   ", "empty"),
    ("m", "no number before it"),
    ("3 6", "feet then inches"),
    ("3 m 20 cm", "feet then inches"),
    ("12 ft 13 in", "13 inches is a foot or more"),
    ("1/0 in", "0 below the line"),
    ("3 4/3 in", "proper fraction"),
    ("1 2 3", "too many parts"),
    ("3 #", "not a number or a unit"),
    ("abc", "unknown unit 'abc'"),
])
def test_parse_length_refuses_with_a_reason(text, match):
    with pytest.raises(ValueError, match=match):
        parse_length(text)


def test_parse_length_refuses_other_types():
    with pytest.raises(ValueError, match="finite number of metres"):
        parse_length(float("nan"))
    with pytest.raises(ValueError, match="finite number of metres"):
        parse_length(-1.0)
    with pytest.raises(ValueError, match="text such as"):
        parse_length(None)


@pytest.mark.parametrize("text, metres", [
    ("4.6, 3.4, 2.45", (4.6, 3.4, 2.45)),
    ("460 cm x 340 cm x 245 cm", (4.6, 3.4, 2.45)),
    ("4.6x3.4x2.45", (4.6, 3.4, 2.45)),
    ("15' 1\" x 11' x 8'", (15 * FOOT_M + INCH_M, 11 * FOOT_M, 8 * FOOT_M)),
    ("50cm; 62cm; 115cm", (0.5, 0.62, 1.15)),
])
def test_parse_lengths(text, metres):
    assert parse_lengths(text, 3) == pytest.approx(metres, abs=1e-12)


def test_parse_lengths_counts():
    with pytest.raises(ValueError, match="expected 3 lengths"):
        parse_lengths("4.6, 3.4", 3)
    with pytest.raises(ValueError, match="cannot read 'x3' as a length|expected 3 lengths"):
        parse_lengths("4.6, x3, 2", 3)


@pytest.mark.parametrize("metres, cm, m, ftin", [
    (3.7338, "373 cm", "3.73 m", "12 ft 3 in"),
    (3.7465, "375 cm", "3.75 m", "12 ft 3 1/2 in"),
    (0.19, "19 cm", "0.19 m", "7 1/2 in"),          # 7.48 in -> nearest quarter 7 1/2
    (6 * FOOT_M + 11.9 * INCH_M, "213 cm", "2.13 m", "7 ft 0 in"),  # 11.9 in carries into the feet
    (0.5, "50 cm", "0.50 m", "1 ft 7 3/4 in"),      # 19.685 in
    (0.0, "0 cm", "0.00 m", "0 in"),
    (0.0064, "1 cm", "0.01 m", "1/4 in"),           # 0.252 in
])
def test_format_length_table(metres, cm, m, ftin):
    assert format_length(metres, "cm") == cm
    assert format_length(metres, "m") == m
    assert format_length(metres, "ft-in") == ftin


def test_format_length_refuses_bad_input():
    with pytest.raises(ValueError, match="units must be one of cm, m, ft-in"):
        format_length(1.0, "yd")
    with pytest.raises(ValueError, match="finite"):
        format_length(float("inf"), "cm")


@given(st.floats(min_value=0.0, max_value=100.0, allow_nan=False))
def test_feet_and_inches_round_trip_within_an_eighth_of_an_inch(metres):
    # the display rounds to the nearest quarter inch, so reading it back is within 1/8 in
    assert abs(parse_length(format_length(metres, "ft-in")) - metres) <= INCH_M / 8 + 1e-12


@given(st.floats(min_value=0.0, max_value=100.0, allow_nan=False))
def test_centimetres_round_trip_within_half_a_centimetre(metres):
    assert abs(parse_length(format_length(metres, "cm")) - metres) <= 0.005 + 1e-12


def test_walls_text_in_centimetres_matches_what_the_commands_print():
    # so that other commands can adopt units.walls_text without changing their output
    room = load_room(demo_room_path())
    for pos in [s.position_m for s in room.layout.speakers] + [room.layout.seat_m, (4.0, 3.1, 0.3)]:
        assert walls_text(room, pos, "cm") == cli_walls_text(room, pos)


def test_walls_text_names_the_nearer_side_wall_in_each_unit():
    room = load_room(demo_room_path())
    right = room.layout.speakers[1].position_m  # 3.40 - 2.27 = 1.13 m from the right wall
    assert walls_text(room, right, "m") == "0.50 m from the front wall, 1.13 m from the right wall, 1.15 m high"
    assert walls_text(room, right, "ft-in") == ("1 ft 7 3/4 in from the front wall, 3 ft 8 1/2 in from the right "
                                                "wall, 3 ft 9 1/4 in high")
