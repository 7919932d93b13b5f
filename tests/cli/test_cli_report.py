"""The report, map and init commands as a user meets them.

The report's numbers are checked against the ones the other commands print with --json
for the same inputs (modes, eq, place, compare, fit); the page is parsed with the standard
library's html.parser (tests/test_report.py: check_page). The map's pattern at the
(1,0,0) mode follows cos(pi x / Lx) (Rayleigh; Kuttruff, Room Acoustics, 5th ed., 2009,
sec. 3.3). Lengths typed to init: 1 ft = 0.3048 m, 1 in = 0.0254 m exactly (NIST SP 811,
2008, B.8).

Sources of the check values are named beside each test (see also tests/reference).
"""

import csv
import json
import os
import re
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from pagecheck import PNG_SIGNATURE, check_page, data_values

from roommodes import demo_room_path, load_room, log_frequencies, predict
from roommodes.analysis.compare import predicted_level
from roommodes.cli import main
from roommodes.cli.init import init
from roommodes.cli.map import map_
from roommodes.cli.report import REPORT_MARKER, report
from roommodes.model.materials import material_names
from roommodes.model.room import Surface
from roommodes.present.report import Report, ReportFigure, Table

DEMO = str(demo_room_path())


def run(cmd, *args, input=None):
    return CliRunner().invoke(cmd, [str(a) for a in args], input=input, catch_exceptions=False)


def run_json(*args):
    res = run(main, *args, "--json")
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def leftovers(folder):
    """Temporary or half-written files the writer might leave."""
    return [p.name for p in Path(folder).iterdir() if p.name.startswith(".")]


# ------------------------------------------------------------------------------ report
@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    out = folder / "demo.html"
    res = run(report, DEMO, "-o", out)
    assert res.exit_code == 0, res.output
    return out, res


def test_report_writes_page_and_folder(demo_report):
    out, res = demo_report
    page = out.read_text(encoding="utf-8")
    c = check_page(page)
    assert "wrote" in res.stderr and res.stdout == ""
    files = out.parent / "demo_files"
    assert not leftovers(out.parent)
    # every figure of the page as PNG and SVG, every table as CSV
    figs = sorted(c.figures)
    assert len(figs) >= 9
    for n in range(1, len(figs) + 1):
        assert f"fig-{n}" in c.ids
    pngs = sorted(files.glob("*.png"))
    svgs = sorted(files.glob("*.svg"))
    assert len(pngs) == len(svgs) == len(figs)
    for p in pngs:
        assert p.read_bytes().startswith(PNG_SIGNATURE)
        assert p.name in page  # the caption names its files
    for s in svgs:
        assert ET.parse(s).getroot().tag.endswith("svg")
    tables = sorted(files.glob("*.csv"))
    assert len(tables) == page.count("<table ")
    for t in tables:
        rows = list(csv.reader(t.open(encoding="utf-8")))
        assert len(rows) >= 2 and all(len(r) == len(rows[0]) for r in rows)
    # the sections a client and an installer look for
    for anchor in ("room", "modes", "maps", "responses", "placement", "explain", "eq", "validity", "cautions",
                   "reproduce"):
        assert anchor in c.ids
    text = " ".join(c.text)
    assert "Schroeder frequency" in text and "cm from the front wall" in text
    assert "SHA-256" in text
    assert load_room(DEMO).name in text


def test_report_numbers_equal_the_json_commands(demo_report):
    out, _ = demo_report
    page = out.read_text(encoding="utf-8")
    modes = run_json("modes", DEMO)
    # Schroeder frequency
    shown = [float(v) for v in re.findall(r'data-key="schroeder_hz" data-value="([^"]+)"', page)]
    assert shown == [modes["summary"]["schroeder_hz"]]
    rows = data_values(page, "room-figures")
    assert rows[-1][0][0] == modes["summary"]["schroeder_hz"]
    assert rows[-1][0][1] == f"{modes['summary']['schroeder_hz']:.0f}"
    # mode frequencies up to 200 Hz, in order, as printed and at full precision
    ref = [m["freq_hz"] for m in modes["modes"] if m["freq_hz"] <= 200.0]
    table = data_values(page, "modes")
    assert [r[0][0] for r in table] == ref
    assert [r[0][1] for r in table] == [f"{v:.1f}" for v in ref]
    # EQ: the largest boost of each channel
    eq = run_json("eq", DEMO)
    head = data_values(page, "headroom")
    assert [r[0][0] for r in head] == [c["max_boost_db"] for c in eq["channels"]]
    for ch in eq["channels"]:
        filt = data_values(page, f"eq-{ch['name']}")
        ref_f = sorted((f["freq_hz"], f["gain_db"], f["q"]) for f in ch["filters"])
        assert [(r[0][0], r[1][0], r[2][0]) for r in filt] == ref_f
    # placement: the report runs the same search as `place`
    place = run_json("place", DEMO)
    scores = data_values(page, "placement")
    assert scores[0][0][0] == place["ranked"][0]["score"]
    assert [r[0][0] for r in scores[:len(place["ranked"])]] == [s["score"] for s in place["ranked"]]


def _truth_files(folder):
    """Invented measurements: the demo room with 1.8 x the absorption, at the seat."""
    room = load_room(DEMO)
    truth = replace(room, surfaces=tuple(Surface(s.name, tuple(a * 1.8 for a in s.absorption), s.bands_hz)
                                         for s in room.surfaces))
    f = log_frequencies(10.0, 400.0, 48)
    paths = {}
    for ch in ("left", "right"):
        p = folder / f"{ch}.txt"
        np.savetxt(p, np.c_[f, predicted_level(truth, ch, None, f) + 20.0], fmt="%.6f", header="freq_hz level_db")
        paths[ch] = p
    return paths


def test_report_with_measurements_and_fit(tmp_path):
    paths = _truth_files(tmp_path)
    out = tmp_path / "measured.html"
    res = run(report, DEMO, "--measure", "left", "seat", paths["left"], "--measure", "right", "seat", paths["right"],
              "--fit", "--search", "off", "--units", "m", "-o", out)
    assert res.exit_code == 0, res.output
    page = out.read_text(encoding="utf-8")
    c = check_page(page)
    assert "measurements" in c.ids and "fit" in c.ids
    # the fit equals `fit --json` with the same measurements
    fit = run_json("fit", DEMO, "--measure", "left", "seat", paths["left"], "--measure", "right", "seat",
                   paths["right"], "-o", tmp_path / "cal.toml")
    table = data_values(page, "fit")
    assert [r[1][0] for r in table] == [p["value"] for p in fit["parameters"]]
    # with --fit the report predicts from the calibrated model: its comparison equals
    # `compare --json` on the calibrated room file for the same file and speaker
    cmp = run_json("compare", tmp_path / "cal.toml", paths["left"], "--channel", "left")
    vals = data_values(page, "compare-left")
    shown = [v[0][0] for v in vals]
    assert cmp["median_abs_diff_db"] in shown and cmp["p90_abs_diff_db"] in shown
    assert "calibrated to the measurements" in page
    # measurement first: a measured channel's EQ is designed on its measured curve, as
    # `eq --measured` designs it (on the calibrated file, which sets the Schroeder frequency)
    grid = f"{20 / 2 ** 0.5!r},{200 * 2 ** 0.5!r}"  # the report reads measurements over the band +- half an octave
    eq = run_json("eq", tmp_path / "cal.toml", "--measured", f"left={paths['left']}", "--freq-range", grid)
    rows = data_values(page, "eq-left")
    assert [r[0][0] for r in rows] == pytest.approx([f["freq_hz"] for f in eq["channels"][0]["filters"]], abs=1e-9)
    assert "left: its measured curve" in page
    # the absorption went up, toward the invented truth (1.8 x the file's)
    assert all(p["change"] > 0 for p in fit["parameters"] if p["kind"] == "absorption")
    assert "What the measurements and the fit changed" in page
    assert "m from the front wall" in page  # --units m


@pytest.mark.parametrize("exists", ["page", "folder"])
def test_report_refuses_to_overwrite_without_force(tmp_path, exists):
    out = tmp_path / "r.html"
    if exists == "page":
        out.write_text("old report")
    else:
        (tmp_path / "r_files").mkdir()
    before = sorted(p.name for p in tmp_path.iterdir())
    res = run(report, DEMO, "-o", out)
    assert res.exit_code == 2
    assert "already exists" in res.stderr and "--force" in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    if exists == "page":
        assert out.read_text() == "old report"


def test_report_bad_output_places(tmp_path):
    res = run(report, DEMO, "-o", tmp_path / "missing" / "r.html")
    assert res.exit_code == 2 and "does not exist" in res.stderr
    assert not (tmp_path / "missing").exists()
    afile = tmp_path / "plain"
    afile.write_text("x")
    res = run(report, DEMO, "-o", afile / "r.html")
    assert res.exit_code == 2 and "not a folder" in res.stderr
    res = run(report, DEMO, "-o", tmp_path / "r.pdf")
    assert res.exit_code == 2 and "must be an .html file" in res.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plain"]


def test_report_folder_not_writable(tmp_path):
    if os.geteuid() == 0:
        folder = Path("/proc")  # no one may create files there, root included
    else:
        folder = tmp_path / "ro"
        folder.mkdir()
        folder.chmod(0o500)
    res = run(report, DEMO, "-o", folder / "roommodes-test-report.html")
    assert res.exit_code == 2
    assert "not writable" in res.stderr
    assert not (folder / "roommodes-test-report.html").exists()


def test_report_bad_measurement_input(tmp_path):
    out = tmp_path / "r.html"
    res = run(report, DEMO, "--fit", "-o", out)
    assert res.exit_code == 2 and "--fit needs measurements" in res.stderr
    res = run(report, DEMO, tmp_path / "nope.txt", "--channel", "left", "-o", out)
    assert res.exit_code == 2 and "no such file" in res.stderr
    res = run(report, DEMO, "--measure", "centre", "seat", tmp_path / "nope.txt", "-o", out)
    assert res.exit_code == 2 and "'centre' is not a speaker" in res.stderr
    res = run(report, DEMO, "--at", "1,1,1", "-o", out)
    assert res.exit_code == 2 and "none were given" in res.stderr
    assert list(tmp_path.iterdir()) == []


_SVG = b'<svg xmlns="http://www.w3.org/2000/svg" width="1" height="1"/>'


def _fake_report(*args, **kwargs):
    fig = ReportFigure("f01-fake", 1, "fake", "", PNG_SIGNATURE + b"rest", _SVG)
    table = Table("t01-fake", 1, "fake", ("a", "b"), (("1.0", "x"),), ((1.0, "x"),))
    return Report("<!DOCTYPE html><html><body>new</body></html>\n", (fig,), (table,), {})


def test_report_force_replaces_page_and_folder_whole(tmp_path, monkeypatch):
    import roommodes.cli.report

    monkeypatch.setattr(roommodes.cli.report, "build_report", _fake_report)
    out = tmp_path / "r.html"
    out.write_text("old")
    (tmp_path / "r_files").mkdir()
    (tmp_path / "r_files" / REPORT_MARKER).write_text("")  # the folder of an earlier report
    (tmp_path / "r_files" / "stale.png").write_bytes(b"old figure")
    res = run(report, DEMO, "-o", out, "--force")
    assert res.exit_code == 0, res.output
    assert "new" in out.read_text()
    assert sorted(p.name for p in (tmp_path / "r_files").iterdir()) == [REPORT_MARKER, "f01-fake.png",
                                                                       "f01-fake.svg", "t01-fake.csv"]
    assert (tmp_path / "r_files" / "t01-fake.csv").read_text() == "a,b\n1.0,x\n"
    assert not leftovers(tmp_path)


def test_report_failure_while_writing_leaves_the_old_report(tmp_path, monkeypatch):
    import roommodes.cli.report

    monkeypatch.setattr(roommodes.cli.report, "build_report", _fake_report)

    def full_disk(self):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Table, "csv_text", full_disk)
    out = tmp_path / "r.html"
    out.write_text("old")
    (tmp_path / "r_files").mkdir()
    (tmp_path / "r_files" / REPORT_MARKER).write_text("")
    (tmp_path / "r_files" / "old.png").write_bytes(b"old figure")
    res = run(report, DEMO, "-o", out, "--force")
    assert res.exit_code == 2
    assert "No space left on device" in res.stderr
    assert out.read_text() == "old"
    assert sorted(p.name for p in (tmp_path / "r_files").iterdir()) == [REPORT_MARKER, "old.png"]
    assert not leftovers(tmp_path)
    # and without an old report, nothing at all remains
    out2 = tmp_path / "s.html"
    res = run(report, DEMO, "-o", out2)
    assert res.exit_code == 2
    assert not out2.exists() and not (tmp_path / "s_files").exists() and not leftovers(tmp_path)


# ------------------------------------------------------------------------------ map
def test_map_json_and_the_axial_mode_pattern():
    room = load_room(DEMO)
    f = 343.2146 / (2 * room.size_m[0])  # near the (1,0,0) mode, c / 2 Lx
    res = run(map_, DEMO, "--freq", f"{f:.3f}", "--step", "10 cm", "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    lv = np.array(d["level_db"], dtype=float)
    assert lv.shape == (len(d["x_m"]), len(d["y_m"]))
    assert tuple(d["near_modes"][0]["indices"]) == (1, 0, 0)
    # quietest across the middle of the room's length, loudest at the end walls (cos(pi x / Lx))
    profile = np.nanmean(lv, axis=1)
    x = np.array(d["x_m"])
    # cell centres are printed to the micrometre, not as 3.0749999999999997
    assert all(len(repr(v).split(".")[-1]) <= 6 for v in d["x_m"] + d["y_m"])
    assert abs(x[np.argmin(profile)] - room.size_m[0] / 2) <= 0.15
    assert profile[-1] - profile.min() > 10
    # the seat's value is the predicted curve's at that frequency (both speakers in phase)
    fr = np.append(log_frequencies(15.0, 300.0, 48), float(f"{f:.3f}"))
    h = sum(c.transfer for c in predict(room, freq_hz=fr).channels)[-1]
    assert d["seat_level_db"] == pytest.approx(20 * np.log10(abs(h)), abs=1e-6)


def test_map_text_plot_units_and_channel(tmp_path):
    png = tmp_path / "map.png"
    res = run(map_, DEMO, "--freq", "37.3", "--channel", "left", "--height", "4 ft", "--units", "ft-in",
              "--plot", png)
    assert res.exit_code == 0, res.output
    assert "4 ft 0 in high (the left speaker" in res.stdout
    assert "near mode (1,0,0) axial at 37.3 Hz" in res.stdout
    rows = [ln.strip()[1:-1] for ln in res.stdout.splitlines() if ln.strip().startswith("|")]
    shades = " .:-=+*#%@"
    level = [np.mean([shades.index(ch) for ch in r if ch in shades]) for r in rows]
    mid = len(rows) // 2
    assert level[0] > level[mid] + 3 and level[-1] > level[mid] + 3  # loud ends, quiet middle
    assert png.read_bytes().startswith(PNG_SIGNATURE)
    again = run(map_, DEMO, "--freq", "37.3", "--plot", png)
    assert again.exit_code == 2 and "already exists" in again.stderr


@pytest.mark.parametrize("args, message", [
    (("--freq", "0"), "--freq must be 5 to 1000 Hz"),
    (("--freq", "50", "--height", "3 m"), "height must lie inside the room"),
    (("--freq", "50", "--height", "tall"), "cannot read 'tall' as a length"),
    (("--freq", "50", "--step", "1 mm"), "--step must be 0.01 to 0.5 m"),
    (("--freq", "50", "--channel", "centre"), "no speaker named 'centre'"),
    (("--freq", "50", "--plot", "map.gif"), "must be a .png, .svg or .pdf file"),
])
def test_map_bad_input(tmp_path, monkeypatch, args, message):
    monkeypatch.chdir(tmp_path)
    res = run(map_, DEMO, *args)
    assert res.exit_code == 2, res.output
    assert message in res.stderr
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------------------ init
def test_init_scripted_session_with_bad_answers(tmp_path):
    out = tmp_path / "studio.toml"
    ninth = material_names()[8]
    answers = [
        "My studio",                  # name
        "12 ft 3 in",                 # length
        "abc", "340 cm",              # width: a bad answer, then a good one
        "245", "2.45 m",              # height: 245 m is not a room
        "plasterbord-on-studs", "plasterboard-on-studs",  # front: a typo first
        "",                           # back: same as the front (default)
        "1.5", "0.12",                # left: not an absorption coefficient, then one
        "9",                          # right: the ninth material of the list
        "wood-floor-on-joists",       # floor
        "",                           # ceiling: same as the front (default)
        "",                           # two speakers (default)
        "",                           # first is 'left'
        "50 cm", "62 cm", "115 cm",   # its position
        "48", "boxy", "vented",       # its -3 dB point and box
        "",                           # second is 'right'
        "50 cm", "62 cm from right", "5 m", "115 cm",  # 5 m is above the ceiling
        "", "",                       # same -3 dB point and box
        "185 cm", "", "",             # seat: 185 cm from the front, centre line, 120 cm
        "",                           # 20 C
        "y",                          # write it
    ]
    res = run(init, out, input="\n".join(answers) + "\n")
    assert res.exit_code == 0, res.output
    err = res.stderr
    # each bad answer was explained and asked again
    assert "unknown unit 'abc'" in err
    assert "did you mean 245 cm?" in err
    assert "did you mean 'plasterboard-on-studs'?" in err
    assert "absorption coefficient must be 0 to below 1" in err
    assert "answer sealed or vented" in err
    assert "must lie inside the room" in err
    assert "wood-floor-on-joists" in err and "Surface materials" in err  # the library was offered
    assert "length 373 cm" in err and "width 340 cm" in err  # the sketch
    room = load_room(out)
    assert room.name == "My studio"
    assert room.size_m == (3.7338, 3.4, 2.45)  # 147 in x 0.0254 m, exactly
    by = {s.name: s for s in room.surfaces}
    assert by["front"].material == by["back"].material == by["ceiling"].material == "plasterboard-on-studs"
    assert by["left"].material is None and by["left"].absorption == (0.12,)
    assert by["right"].material == ninth
    assert by["floor"].material == "wood-floor-on-joists"
    left, right = room.layout.speakers
    assert (left.name, right.name) == ("left", "right")
    assert left.position_m == (0.5, 0.62, 1.15)
    assert right.position_m == (0.5, 2.78, 1.15)  # 62 cm from the right wall of a 340 cm room
    assert left.lowcut_hz == right.lowcut_hz == 48.0 and left.lowcut_order == right.lowcut_order == 4
    assert room.layout.seat_m == (1.85, 1.7, 1.2)
    assert room.temperature_c == 20.0


def test_init_from_options_round_trips(tmp_path):
    out = tmp_path / "room.toml"
    res = run(init, out, "--name", "Den", "--size", "15' 1\" x 11' 2\" x 8'", "--walls", "plaster-on-brick",
              "--right", "glass-window", "--floor", "0.05", "--ceiling", "acoustic-ceiling-tile",
              "--speaker", "left=2 ft,3 ft,3 ft 2 in", "--speaker", "right=2 ft,8 ft 2 in,3 ft 2 in",
              "--seat", "7 ft,5 ft 7 in,3 ft 11 in", "--lowcut", "40", "--box", "sealed", "--temperature", "22",
              "--units", "ft-in", "--yes")
    assert res.exit_code == 0, res.output
    ft, inch = 0.3048, 0.0254
    room = load_room(out)
    np.testing.assert_allclose(room.size_m, (15 * ft + inch, 11 * ft + 2 * inch, 8 * ft), atol=1e-9)
    assert [s.material for s in room.surfaces] == ["plaster-on-brick", "plaster-on-brick", "plaster-on-brick",
                                                  "glass-window", None, "acoustic-ceiling-tile"]
    assert room.surfaces[4].absorption == (0.05,)
    np.testing.assert_allclose(room.layout.speakers[0].position_m, (2 * ft, 3 * ft, 3 * ft + 2 * inch), atol=1e-9)
    np.testing.assert_allclose(room.layout.speakers[1].position_m, (2 * ft, 8 * ft + 2 * inch, 3 * ft + 2 * inch),
                               atol=1e-9)
    np.testing.assert_allclose(room.layout.seat_m, (7 * ft, 5 * ft + 7 * inch, 3 * ft + 11 * inch), atol=1e-9)
    assert all(s.lowcut_hz == 40.0 and s.lowcut_order == 2 for s in room.layout.speakers)
    assert room.temperature_c == 22.0
    text = out.read_text()
    assert "# length 15 ft 1 in" in text and "sealed box" in text  # commented in the chosen units
    # the file's own values survive another write: what load_room reads is what was written
    assert load_room(out) == room


def test_init_yes_needs_every_value(tmp_path):
    res = run(init, tmp_path / "r.toml", "--size", "4,3,2.5", "--walls", "hard-surface", "--yes")
    assert res.exit_code == 2
    assert "missing: --floor, --ceiling" in res.stderr
    res = run(init, tmp_path / "r.toml", "--size", "4,3", "--walls", "hard-surface", "--floor", "0.1",
              "--ceiling", "0.1", "--yes")
    assert res.exit_code == 2 and "--size: expected 3 lengths" in res.stderr
    res = run(init, tmp_path / "r.toml", "--size", "400,3,2.5", "--walls", "hard-surface", "--floor", "0.1",
              "--ceiling", "0.1", "--yes")
    assert res.exit_code == 2 and "not plausible" in res.stderr
    res = run(init, tmp_path / "r.toml", "--size", "4,3,2.5", "--walls", "brick", "--floor", "0.1",
              "--ceiling", "0.1", "--yes")
    assert res.exit_code == 2 and "unknown material 'brick'" in res.stderr
    res = run(init, tmp_path / "r.toml", "--size", "4,3,2.5", "--walls", "hard-surface", "--floor", "0.1",
              "--ceiling", "0.1", "--speaker", "left=1,1,1", "--seat", "1,1.05,1", "--yes")
    assert res.exit_code == 2 and "within 10 cm of speaker 'left'" in res.stderr
    assert list(tmp_path.iterdir()) == []


def test_init_never_overwrites_without_force(tmp_path):
    out = tmp_path / "r.toml"
    out.write_text("# mine\n")
    args = (out, "--size", "4,3,2.5", "--walls", "hard-surface", "--floor", "0.1", "--ceiling", "0.1",
            "--no-speakers", "--yes")
    res = run(init, *args)
    assert res.exit_code == 2 and "already exists" in res.stderr
    assert out.read_text() == "# mine\n"
    res = run(init, *args, "--force")
    assert res.exit_code == 0, res.output
    room = load_room(out)
    assert room.layout is None and room.size_m == (4.0, 3.0, 2.5)


def test_init_declined_writes_nothing(tmp_path):
    out = tmp_path / "r.toml"
    res = run(init, out, "--size", "4,3,2.5", "--walls", "hard-surface", "--floor", "0.1", "--ceiling", "0.1",
              "--no-speakers", "--name", "x", "--temperature", "20", input="n\nn\n")
    assert res.exit_code == 1
    assert "Nothing written." in res.stderr
    assert not out.exists()
