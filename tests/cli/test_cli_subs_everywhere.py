"""predict, explain, place and report on a room with subs and several seats, and unchanged on a
room without them (issue 11, "everywhere else")."""

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room
from roommodes.analysis.levels import speaker_levels
from roommodes.analysis.subs import mono_sum
from roommodes.cli import main
from roommodes.present.report import build_report

SOFA = str(Path(__file__).resolve().parents[2] / "rooms" / "sofa-and-sub.toml")
DEMO = str(demo_room_path())


def run(*args):
    res = CliRunner().invoke(main, [str(a) for a in args])
    assert res.exit_code == 0, res.output
    return res


def _json(*args):
    return json.loads(run(*args, "--json").stdout)


def test_predict_json_seats_and_system_match_the_library_sum():
    """The system key is the mono sum with 0 dB, 0 ms, + polarity and no crossover: it equals
    the library's own sum (analysis.subs.mono_sum) and the plain complex sum of the speakers'
    transfers (the definition of a mono sum, common practice); the channels keep their keys
    (the project's own rule: stable JSON keys)."""
    d = _json("predict", SOFA, "--freq-range", "20,120", "--points-per-octave", "12")
    room = load_room(SOFA)
    lay = room.layout
    assert [s["name"] for s in d["seats"]] == [s.name for s in lay.all_seats] == ["middle", "left", "right"]
    assert d["seats"][0]["main"] and not d["seats"][1]["main"]
    roles = {c["name"]: c["role"] for c in d["seats"][0]["channels"]}
    assert roles == {"left": "main", "right": "main", "sub": "sub"}
    assert set(d["channels"][0]) == {"name", "position_m", "level_db", "band_figures", "features"}
    assert d["system"]["crossover_hz"] is None
    assert d["system"]["subs"] == [{"name": "sub", "gain_db": 0.0, "delay_ms": 0.0, "polarity": 1}]
    f = np.asarray(d["frequencies_hz"])
    seats_m = [s.position_m for s in lay.all_seats]
    h = speaker_levels(room, lay.speakers, seats_m, f).transfer
    lib = mono_sum(f, h[:2], h[2:], [0.0], [0.0], [1], None)
    got = np.array([s["level_db"] for s in d["system"]["seats"]])
    np.testing.assert_allclose(got, 20 * np.log10(np.abs(lib)), atol=1e-6)
    np.testing.assert_allclose(got, 20 * np.log10(np.abs(h.sum(axis=0))), atol=1e-6)
    # with a crossover the same library sum differs (so the check above can fail)
    with_xo = mono_sum(f, h[:2], h[2:], [0.0], [0.0], [1], 80.0)
    assert np.max(np.abs(20 * np.log10(np.abs(with_xo)) - got)) > 1.0


def test_predict_text_names_subs_seats_and_the_sum():
    """The project's own rule (issue 11): say which speakers are subs, every seat, the sum's
    settings and where to get better ones."""
    out = run("predict", SOFA, "--freq-range", "20,120", "--points-per-octave", "12").stdout
    assert "sub (subwoofer):" in out
    assert "(the main seat, 'middle')" in out
    assert "no crossover" in out and "roommodes subs" in out
    assert out.index("    middle (main), weight 1") < out.index("    left, weight 0.7")
    assert "Seat-to-seat spread" in out


def test_predict_demo_room_has_no_seats_or_system():
    """The project's own rule: a room without subs and with one seat prints as before."""
    d = _json("predict", DEMO, "--freq-range", "20,120", "--points-per-octave", "12")
    assert "seats" not in d and "system" not in d
    out = run("predict", DEMO, "--freq-range", "20,120", "--points-per-octave", "12").stdout
    assert "subwoofer" not in out and "System" not in out and "roommodes subs" not in out


def test_explain_says_the_sub_is_left_out():
    """The project's own rule (issue 11): explain compares the two mains and says how the subs
    are treated, in text and JSON."""
    out = run("explain", SOFA).stdout
    assert "left out of this explanation" in out and "roommodes subs" in out
    d = _json("explain", SOFA)
    assert d["channels"] == ["left", "right"]
    assert d["subs"]["names"] == ["sub"] and d["subs"]["seat_used"] == "middle"
    assert "subs" not in _json("explain", DEMO)


def test_place_says_the_sub_is_left_out():
    """The project's own rule (issue 11): place keeps the mains' search and says so."""
    d = _json("place", SOFA, "--top", "1", "--points-per-octave", "6")
    assert d["subs"]["names"] == ["sub"] and d["subs"]["treatment"] == "left out"
    assert all(len(s["speakers"]) == 2 for s in d["ranked"])
    assert all(sp["name"] != "sub" for s in d["ranked"] for sp in s["speakers"])


@pytest.fixture(scope="module")
def odd_report(tmp_path_factory):
    text = Path(SOFA).read_text(encoding="utf-8")
    text = text.replace("[speakers.sub]", '[speakers."<b>sub&"]').replace("[seats.left]", '[seats."<i>left"]')
    path = tmp_path_factory.mktemp("odd") / "odd.toml"
    path.write_text(text, encoding="utf-8")
    return build_report(load_room(str(path)), search="quick", embed="png")


def test_report_has_a_subwoofer_section_with_names_escaped(odd_report):
    """The project's own rules: the report gets a Subwoofers section when the file has subs, with
    the settings, seats, configurations, the figure and the sub cautions; every user-given name
    is escaped."""
    page = odd_report.html
    assert 'id="subs"' in page
    section = page[page.index('id="subs"'):]
    section = section[:section.index("<h2", 10)]
    for key in ("subs-settings", "subs"):
        assert f'data-key="{key}"' in section
    assert "<img" in section and "heavy" in section and "excursion" in section
    assert "&lt;b&gt;sub&amp;" in section and "&lt;i&gt;left" in section
    assert "<b>sub&" not in page and "<i>left" not in page
    assert "subs" in odd_report.values


def test_report_demo_room_has_no_subwoofer_section():
    """The project's own rule: no Subwoofers section without subs and with one seat."""
    rep = build_report(load_room(DEMO), search="off", embed="png")
    page = rep.html
    assert 'id="subs"' not in page and "subs" not in rep.values
