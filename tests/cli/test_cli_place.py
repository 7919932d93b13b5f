"""The ``place`` and ``explain`` commands as a user meets them: output, JSON keys, files, errors.

No outside check values here: the physics behind these commands is checked against its
sources in tests/test_search.py and tests/test_explain.py.
"""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, example_rooms, load_room, predict
from roommodes.analysis.search import PARTS
from roommodes.cli import main
from roommodes.cli import place as cli_place

DEMO = str(demo_room_path())


def run(*args):
    """Through the main group once the commands are registered there, else directly."""
    args = [str(a) for a in args]
    if args[0] in main.commands:
        return CliRunner().invoke(main, args, catch_exceptions=False)
    return CliRunner().invoke(getattr(cli_place, args[0]), args[1:], catch_exceptions=False)


def _room_with_search(tmp_path, search_lines, src=DEMO, name="room.toml"):
    p = tmp_path / name
    text = open(src, encoding="utf-8").read()
    lines = "\n".join(search_lines) + "\n"
    if "\n[search]\n" in text:  # the file has its own [search] table (e.g. a fixed sofa seat): add to it
        text = text.replace("\n[search]\n", "\n[search]\n" + lines, 1)
    else:
        text += "\n[search]\n" + lines
    p.write_text(text)
    return p


@pytest.fixture(scope="module")
def place_json():
    res = run("place", DEMO, "--json")
    assert res.exit_code == 0, res.stderr
    return json.loads(res.stdout), res


def test_help():
    for name in ("place", "explain"):
        r = run(name, "--help")
        assert r.exit_code == 0 and "Usage" in r.stdout
        assert len(getattr(cli_place, name).help) > 40


def test_place_json_keys_and_values(place_json):
    data, res = place_json
    assert "Model:" in res.stderr  # cautions on stderr, stdout is the JSON alone
    assert "must be secured" in res.stderr
    assert "why" in data and data["search"]["distinct_m"] == 0.25
    assert len(data["ranked"]) == 5
    assert [p["name"] for p in data["presets"]] == ["corner", "wall", "mid-room", "desk"]
    assert data["current"]["name"] == "file"
    weights = data["weights"]
    for lay in data["ranked"] + data["presets"] + [data["current"]]:
        assert {"name", "speakers", "seat_m", "score", "parts"} <= set(lay)
        assert [s["name"] for s in lay["speakers"]] == ["left", "right"]
        assert all(len(s["position_m"]) == 3 for s in lay["speakers"]) and len(lay["seat_m"]) == 3
        assert set(lay["parts"]) == set(PARTS)
        # geometry from the positions themselves (the angle by the law of cosines)
        a, b = (np.array(sp["position_m"]) for sp in lay["speakers"])
        seat = np.array(lay["seat_m"])
        da, db, ab = np.linalg.norm(a - seat), np.linalg.norm(b - seat), np.linalg.norm(a - b)
        assert lay["spacing_m"] == pytest.approx(ab) and lay["seat_distance_m"] == pytest.approx((da + db) / 2)
        assert lay["angle_deg"] == pytest.approx(np.degrees(np.arccos((da**2 + db**2 - ab**2) / (2 * da * db))))
        assert lay["flatness_after_eq_db"] == lay["parts"]["flatness"] and lay["flatness_before_eq_db"] > 0
        # the score is the documented weighted sum of the parts (docs/placement.md)
        assert lay["score"] == pytest.approx(sum(weights[k] * lay["parts"][k] for k in PARTS), abs=1e-5)
    scores = [lay["score"] for lay in data["ranked"]]
    assert scores == sorted(scores)
    assert scores[0] < min(p["score"] for p in data["presets"] + [data["current"]] if p["in_region"])
    assert data["band_hz"] == [48.0, 200.0]


def test_place_text_plot_and_write_layout(tmp_path):
    room = _room_with_search(tmp_path, ["step_m = 0.3", "keep_out = [{ name = \"door\", min_m = [3.6, 2.4, 0.0], "
                                        "max_m = [4.6, 3.4, 2.1] }]"])
    before = room.read_bytes()
    out, plot = tmp_path / "best.toml", tmp_path / "place.png"
    res = run("place", room, "--write-layout", out, "--plot", plot, "--top", "3")
    assert res.exit_code == 0, res.stderr
    assert "left speaker (woofer):" in res.stdout and "cm from the front wall" in res.stdout
    assert "listening angle" in res.stdout and "before EQ" in res.stdout
    assert "must be secured as their makers and your local building codes require" in res.stderr
    for name in ("#1", "#3", "file", "corner", "wall", "mid-room", "desk"):
        assert f"\n  {name} " in res.stdout
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert room.read_bytes() == before
    written = load_room(out)
    assert written.search["step_m"] == 0.3 and written.search["keep_out"][0]["name"] == "door"
    # the written layout is the best one listed (positions to the millimetre)
    head, best_line = res.stdout.split("\n#1: ")[1].splitlines()[:2]
    left = written.layout.speakers[0].position_m
    right = written.layout.speakers[1].position_m
    # the header's spacing is the written pair's (woofer to woofer)
    assert head.startswith(f"spacing {np.linalg.norm(np.subtract(left, right)) * 100:.0f} cm")
    assert best_line.strip() == (f"left speaker (woofer): {left[0] * 100:.0f} cm from the front wall, "
                                 f"{left[1] * 100:.0f} cm from the left wall, {left[2] * 100:.0f} cm high")
    assert written.layout.speakers[0].lowcut_hz == 48 and written.layout.speakers[0].lowcut_order == 4
    again = run("place", room, "--write-layout", out)
    assert again.exit_code == 2 and "already exists" in again.stderr
    over = run("place", room, "--write-layout", room, "--force")
    assert over.exit_code == 2 and "refusing to write over the input" in over.stderr


@pytest.mark.parametrize("path", example_rooms(), ids=lambda p: p.stem)
def test_place_works_on_every_example_room(tmp_path, path):
    # a coarse grid keeps the test short; the defaults otherwise
    room = _room_with_search(tmp_path, ["step_m = 0.3"], src=str(path))
    res = run("place", room, "--json", "--top", "2")
    assert res.exit_code == 0, res.stderr
    data = json.loads(res.stdout)
    # the search beats every standard placement that meets the same constraints (a preset
    # that breaks them, e.g. a box against the wall, may score lower and is named as such)
    inside = [p["score"] for p in data["presets"] if p["in_region"]]
    assert not inside or data["ranked"][0]["score"] < min(inside)
    assert all(lay["in_region"] for lay in data["ranked"])
    assert data["current"]["name"] == "file"


def test_explain_json_keys_and_values():
    res = run("explain", DEMO, "--json")
    assert res.exit_code == 0, res.stderr
    data = json.loads(res.stdout)
    f = np.array(data["frequencies_hz"])
    assert f[0] == pytest.approx(15.0) and f[-1] == pytest.approx(300.0)
    p = predict(load_room(DEMO), freq_hz=f)
    np.testing.assert_allclose(data["difference_db"], p.channels[0].level_db - p.channels[1].level_db, atol=1e-5)
    assert len(data["mono_db"]) == f.size
    assert data["regions"], "the demo room's pair is asymmetric: it has regions"
    for r in data["regions"]:
        assert len(r["freq_hz"]) == 2 and r["freq_hz"][0] <= r["freq_hz"][1]
        assert abs(r["difference_db"]) >= 3.0
        contrib = [c["contribution_db"] for c in r["causes"]]
        assert contrib == sorted(contrib, reverse=True)
        for c in r["causes"]:
            assert c["type"] in ("mode", "boundary")
            if c["type"] == "mode":
                assert len(c["indices"]) == 3 and len(c["psi_speakers"]) == 2 and "psi_seat" in c


def test_explain_text_and_plot(tmp_path):
    plot = tmp_path / "explain.png"
    res = run("explain", DEMO, "--plot", plot, "--threshold", "4")
    assert res.exit_code == 0, res.stderr
    assert "Regions where |left - right| >= 4 dB" in res.stdout
    assert "1. " in res.stdout and "Moving the" in res.stdout
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("search,args,message", [
    (["speaker_front_m = [1.0, 0.5]"], [], "is empty"),
    (["spacing_m = [3.3, 3.4]"], [], "no speaker position fits"),
    (["speaker_front_m = [0.2, 0.9]",
      "keep_out = [{ name = \"everything\", min_m = [0, 0, 0], max_m = [0.95, 3.4, 2.45] }]"], [],
     "cover every allowed speaker position"),
    (["rear_clearance_m = -1"], [], "[search] rear_clearance_m: -1 is out of range"),
    (["seat_front_m = [4.0, 4.1]", "speaker_front_m = [0.2, 0.3]"], [], "no layout satisfies every constraint"),
    ([], ["--weights", "mismatch=-1"], "must be >= 0"),
    ([], ["--weights", "flatness=0,mismatch=0,area=0,boost=0"], "all zero"),
    ([], ["--weights", "mismatch"], "--weights must be NAME=VALUE"),
    ([], ["--weights", "loudness=2"], "unknown score part"),
    ([], ["--band", "200,100"], "--band must be LOW,HIGH"),
    ([], ["--write-layout", "x.txt"], "needs a .toml file"),
])
def test_place_bad_input_one_line_exit_2(tmp_path, search, args, message):
    room = _room_with_search(tmp_path, search) if search else DEMO
    res = run("place", room, *[str(tmp_path / a) if a.endswith(".txt") else a for a in args])
    assert res.exit_code == 2
    assert message in res.stderr
    assert res.stderr.startswith("roommodes: error:") and len(res.stderr.strip().splitlines()) == 1
    assert "Traceback" not in res.stderr


@pytest.mark.parametrize("args,message", [
    (["--channels", "left,sub"], "no speaker named 'sub'"),
    (["--channels", "left"], "--channels must be two speaker names"),
    (["--threshold", "-1"], "--threshold must be a positive"),
])
def test_explain_bad_input_one_line_exit_2(args, message):
    res = run("explain", DEMO, *args)
    assert res.exit_code == 2 and message in res.stderr
    assert res.stderr.startswith("roommodes: error:") and "Traceback" not in res.stderr


def _band_edges(coll, freq_hz):
    """(lower, upper) y of a fill_between band at each frequency, read back from its polygon."""
    v = coll.get_paths()[0].vertices
    lo = np.array([v[np.isclose(v[:, 0], x, rtol=1e-9), 1].min() for x in freq_hz])
    hi = np.array([v[np.isclose(v[:, 0], x, rtol=1e-9), 1].max() for x in freq_hz])
    return lo, hi


def test_explain_uncertainty_bands_on_plot_and_json(tmp_path, monkeypatch):
    import matplotlib.collections as mcoll

    from roommodes.analysis.uncertainty import ensemble_levels
    from roommodes.dsp.response import smooth_db
    from roommodes.present import plots_place

    figs = []
    real = plots_place.plot_explain
    monkeypatch.setattr(plots_place, "plot_explain", lambda *a, **k: figs.append(real(*a, **k)) or figs[-1])
    plot = tmp_path / "explain.png"
    res = run("explain", DEMO, "--json", "--plot", plot, "--uncertainty", "--samples", "6", "--seed", "11")
    assert res.exit_code == 0, res.stderr
    data = json.loads(res.stdout)
    f = np.array(data["frequencies_hz"])
    # recomputed here: both channels at the main seat in the same drawn rooms, smoothed like the curves
    room = load_room(DEMO)
    names = [s.name for s in room.layout.speakers]
    cols = [names.index(n) for n in data["channels"]]
    lv = ensemble_levels(room, f, n_samples=6, seed=11, method=data["method"])[:, cols, 0, :]
    sm = np.array([[smooth_db(f, lv[i, c], data["smoothing_octave_fraction"]) for c in range(2)]
                   for i in range(6)])
    lev_p = np.percentile(sm, (10, 50, 90), axis=0)
    diff_p = np.percentile(sm[:, 0] - sm[:, 1], (10, 50, 90), axis=0)
    for k, q in enumerate(("p10", "p50", "p90")):
        np.testing.assert_allclose(data[f"difference_db_{q}"], diff_p[k], atol=1e-6)
    assert (diff_p[2] - diff_p[0]).max() > 0.1, "the drawn rooms spread the difference"
    assert data["uncertainty"] == {"samples": 6, "seed": 11, "method": data["method"]}
    ax1, ax2 = figs[0].axes[:2]
    polys1 = [c for c in ax1.collections if isinstance(c, mcoll.PolyCollection) and "drawn rooms" in c.get_label()]
    polys2 = [c for c in ax2.collections if isinstance(c, mcoll.PolyCollection) and "drawn rooms" in c.get_label()]
    assert len(polys1) == 2 and len(polys2) == 1
    for c, coll in enumerate(polys1):
        lo, hi = _band_edges(coll, f)
        np.testing.assert_allclose(lo, lev_p[0, c], atol=1e-6)
        np.testing.assert_allclose(hi, lev_p[2, c], atol=1e-6)
    lo, hi = _band_edges(polys2[0], f)
    np.testing.assert_allclose(lo, diff_p[0], atol=1e-6)
    np.testing.assert_allclose(hi, diff_p[2], atol=1e-6)


def test_explain_without_uncertainty_adds_nothing(tmp_path, monkeypatch):
    from roommodes.present import plots_place

    figs = []
    real = plots_place.plot_explain
    monkeypatch.setattr(plots_place, "plot_explain", lambda *a, **k: figs.append(real(*a, **k)) or figs[-1])
    res = run("explain", DEMO, "--json", "--plot", tmp_path / "e.png")
    assert res.exit_code == 0, res.stderr
    data = json.loads(res.stdout)
    assert not any(k.startswith("difference_db_p") for k in data) and "uncertainty" not in data
    assert not any("drawn rooms" in (c.get_label() or "") for ax in figs[0].axes for c in ax.collections)
