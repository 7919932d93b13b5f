"""``--uncertainty`` on the commands: the JSON keys of docs/ and shared/ARCHITECTURE.md, the
numbers of the API, and bad options as one line. Source of the check values: none from
outside; the command's numbers are held to the library's (tests/analysis/test_uncertainty.py
checks those against coverage on random rooms)."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room, log_frequencies
from roommodes.analysis.uncertainty import predict_bands
from roommodes.cli import main

DEMO = str(demo_room_path())


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_predict_uncertainty_json_and_plot(tmp_path):
    out = tmp_path / "band.png"
    res = run("predict", DEMO, "--uncertainty", "--samples", 8, "--seed", 5, "--points-per-octave", 12,
              "--json", "--plot", out)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["uncertainty"]["samples"] == 8 and data["uncertainty"]["seed"] == 5
    ref = predict_bands(load_room(DEMO), freq_hz=log_frequencies(15, 300, 12), n_samples=8, seed=5)
    for i, ch in enumerate(data["channels"]):
        p10, p50, p90 = (np.array(ch[f"level_db_p{q}"]) for q in (10, 50, 90))
        assert len(p10) == len(data["frequencies_hz"])
        assert np.all(p10 <= p50) and np.all(p50 <= p90)
        np.testing.assert_allclose(p50, ref.level_db_p50[i], atol=1e-6)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_predict_without_uncertainty_has_no_band_keys():
    data = json.loads(run("predict", DEMO, "--points-per-octave", 6, "--json").stdout)
    assert "level_db_p10" not in data["channels"][0] and "uncertainty" not in data


def test_bad_sample_count_is_one_line():
    res = run("predict", DEMO, "--uncertainty", "--samples", 1)
    assert res.exit_code == 2
    assert res.stderr.count("\n") == 1 and "--samples" in res.stderr


def test_place_uncertainty_ranks_by_median_with_spread(tmp_path):
    room = tmp_path / "room.toml"
    room.write_text(open(DEMO, encoding="utf-8").read() + "\n[search]\nstep_m = 0.3\n", encoding="utf-8")
    args = ("place", room, "--top", 3, "--method", "modal", "--points-per-octave", 12, "--uncertainty",
            "--samples", 4, "--seed", 9)
    res = run(*args, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["uncertainty"]["samples"] == 4 and data["uncertainty"]["seed"] == 9
    assert data["uncertainty"]["method"] == "modal"  # the drawn rooms' default solver (docs/uncertainty.md)
    med = [r["score_median"] for r in data["ranked"]]
    assert med == sorted(med)
    for r in data["ranked"] + [data["current"]]:
        assert r["score_p10"] <= r["score_median"] <= r["score_p90"]
    assert "score_median" not in data["presets"][0]
    out = tmp_path / "best.toml"
    text = run(*args, "--write-layout", out)
    assert text.exit_code == 0
    assert "ranked by the median score" in text.stdout and f"#{data['ranked'][0]['name']}" in text.stdout
    written = load_room(out)  # the median's best layout is the one written
    np.testing.assert_allclose(written.layout.seat_m, data["ranked"][0]["seat_m"])
    assert "median" in out.read_text().splitlines()[0]


def test_eq_uncertainty_json_and_screen():
    res = run("eq", DEMO, "--uncertainty", "--samples", 6, "--seed", 3, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["uncertainty"]["samples"] == 6 and data["uncertainty"]["seed"] == 3
    for ch in data["channels"]:
        for flt in ch["filters"]:
            st = flt["stability"]
            assert st["samples"] == 6 and 0 <= st["depth_share"] <= 1
            if flt["role"] == "cut":
                assert st["present_share"] >= data["uncertainty"]["stable_share"]
                assert st["freq_spread_octaves"] <= st["bandwidth_octaves"]
    screen = run("eq", DEMO, "--uncertainty", "--samples", 6, "--seed", 3)
    assert screen.exit_code == 0 and "Held to 6 rooms drawn" in screen.stdout and "drawn rooms: peak in" in screen.stdout


def test_eq_without_uncertainty_has_no_stability():
    data = json.loads(run("eq", DEMO, "--json").stdout)
    assert "uncertainty" not in data
    assert all("stability" not in flt for ch in data["channels"] for flt in ch["filters"])


def test_eq_uncertainty_with_an_area_is_one_line():
    res = run("eq", DEMO, "--uncertainty", "--area", "0.6,0.6")
    assert res.exit_code == 2
    assert res.stderr.count("\n") == 1 and "--uncertainty" in res.stderr and "--area" in res.stderr


def test_place_uncertainty_method_is_selectable(tmp_path):
    room = tmp_path / "room.toml"
    room.write_text(open(DEMO, encoding="utf-8").read() + "\n[search]\nstep_m = 0.3\n", encoding="utf-8")
    base = ("place", room, "--top", 2, "--method", "modal", "--points-per-octave", 12, "--uncertainty",
            "--samples", 2, "--seed", 9, "--json")
    modal = json.loads(run(*base).stdout)
    res = run(*base, "--uncertainty-method", "exact")
    assert res.exit_code == 0, res.output
    exact = json.loads(res.stdout)
    assert exact["uncertainty"]["method"] == "exact"
    # the same finalists, scored in the same drawn rooms by another solver: close, not equal
    a = [r["score_median"] for r in sorted(modal["ranked"], key=lambda r: r["name"])]
    b = [r["score_median"] for r in sorted(exact["ranked"], key=lambda r: r["name"])]
    assert a != b
    np.testing.assert_allclose(a, b, atol=0.88)  # modal vs exact level error p90 (docs/validation.md)
    bad = run(*base, "--uncertainty-method", "nope")
    assert bad.exit_code == 2 and bad.stderr.count("\n") == 1 and "--uncertainty-method" in bad.stderr


def _spread_panel(fig):
    """Panel (e) of the place figure, or None."""
    return next((ax for ax in fig.axes if ax.get_title().startswith("(e)")), None)


@pytest.mark.slow  # two placement searches with figures: about 12 s
def test_place_plot_shows_each_layouts_spread_beside_its_nominal_score(tmp_path, monkeypatch):
    from roommodes.present import plots_place

    figures = []
    original = plots_place.plot_place

    def keep(*a, **kw):
        figures.append(original(*a, **kw))
        return figures[-1]

    monkeypatch.setattr(plots_place, "plot_place", keep)
    room = tmp_path / "room.toml"
    room.write_text(open(DEMO, encoding="utf-8").read() + "\n[search]\nstep_m = 0.3\n", encoding="utf-8")
    base = ("place", room, "--top", 3, "--method", "modal", "--points-per-octave", 12, "--json")
    res = run(*base, "--uncertainty", "--samples", 6, "--seed", 9, "--plot", tmp_path / "p.png")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    ax = _spread_panel(figures[-1])
    assert ax is not None
    rows = data["ranked"] + [data["current"]]
    assert [t.get_text() for t in ax.get_xticklabels()] == [f"#{r['name']}" for r in data["ranked"]] + ["file"]
    bars = next(c for c in ax.collections if c.get_label() == "10-90 % of 6 drawn rooms")
    seg = np.array(bars.get_segments())  # (K, 2, 2): each layout's bar from p10 to p90
    np.testing.assert_allclose(seg[:, 0, 1], [r["score_p10"] for r in rows], atol=1e-12)
    np.testing.assert_allclose(seg[:, 1, 1], [r["score_p90"] for r in rows], atol=1e-12)
    med = next(c for c in ax.collections if c.get_label() == "median of 6 drawn rooms")
    np.testing.assert_allclose(med.get_offsets()[:, 1], [r["score_median"] for r in rows], atol=1e-12)
    nom = next(c for c in ax.collections if c.get_label().startswith("nominal"))
    np.testing.assert_allclose(nom.get_offsets()[:, 1], [r["score"] for r in rows], atol=1e-12)
    assert np.all(nom.get_offsets()[:, 0] < seg[:, 0, 0])  # beside the bar, not on it
    # panel (a): each layout's curves with their band (tests/present/test_plot_bands.py checks the values)
    curves = next(ax for ax in figures[-1].axes if ax.get_title().startswith("(a)"))
    labels = [c.get_label() for c in curves.collections if "drawn rooms" in c.get_label()]
    assert labels == ["best: 10-90 % of 6 drawn rooms", "current: 10-90 % of 6 drawn rooms"]
    # without --uncertainty: no panel (e), nothing drawn as a spread
    res = run(*base, "--plot", tmp_path / "q.png")
    assert res.exit_code == 0, res.output
    assert _spread_panel(figures[-1]) is None
    assert not any("drawn rooms" in c.get_label() for a in figures[-1].axes for c in a.collections)


def test_predict_plot_uncertainty_bands_the_system_panel(tmp_path, monkeypatch):
    import roommodes.cli.predict as cli_predict
    from roommodes.analysis.predict import predict_seats
    from roommodes.analysis.uncertainty import sample_rooms

    seen = []
    real = cli_predict.plot_prediction

    def spy(*args, **kw):
        seen.append(kw)
        return real(*args, **kw)

    monkeypatch.setattr(cli_predict, "plot_prediction", spy)
    from roommodes.io.roomfile import example_rooms

    path = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
    res = run("predict", path, "--uncertainty", "--samples", 5, "--seed", 9, "--points-per-octave", 6,
              "--freq-range", "20,200", "--plot", tmp_path / "a.png")
    assert res.exit_code == 0, res.output
    room = load_room(path)
    f = log_frequencies(20, 200, 6)
    # the same samples and seed as the channels' bands: drawn room i is predict_bands' i-th
    ref = np.array([predict_seats(r, freq_hz=f).system_db for r in sample_rooms(room, 5, 9)])
    np.testing.assert_allclose(seen[0]["system_levels"], ref, atol=1e-9)
    res = run("predict", path, "--points-per-octave", 6, "--freq-range", "20,200", "--plot", tmp_path / "b.png")
    assert res.exit_code == 0, res.output
    assert seen[1]["system"] is not None and seen[1]["system_levels"] is None


def test_map_uncertainty_json_keys_and_plot(tmp_path):
    out = tmp_path / "map.png"
    res = run("map", DEMO, "--freq", 60, "--step", "20cm", "--uncertainty", "--samples", 6, "--seed", 3, "--json",
              "--plot", out)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    nominal = np.array(data["level_db"], dtype=float)
    p10, p50, p90 = (np.array(data[f"level_db_p{q}"], dtype=float) for q in (10, 50, 90))
    assert p10.shape == p50.shape == p90.shape == nominal.shape == (len(data["x_m"]), len(data["y_m"]))
    ok = np.isfinite(p50)
    assert ok.mean() > 0.95
    assert np.all(p10[ok] <= p50[ok]) and np.all(p50[ok] <= p90[ok])
    assert data["uncertainty"]["samples"] == 6 and data["uncertainty"]["seed"] == 3
    assert len(data["uncertainty"]["quietest_m"]) == 6
    pattern = np.array(data["pattern_spread_db"], dtype=float)
    assert pattern.shape == p50.shape and np.all(pattern[ok] >= 0)
    assert data["uncertainty"]["floor_median_db_p10"] <= data["uncertainty"]["floor_median_db_p90"]
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = run("map", DEMO, "--freq", 60, "--step", "20cm", "--uncertainty", "--samples", 6, "--seed", 3).stdout
    assert "the whole floor moves together by" in text and "against the floor's median (the pattern)" in text
    assert "quietest spot of the drawn rooms" in text
    plain = json.loads(run("map", DEMO, "--freq", 60, "--step", "20cm", "--json").stdout)
    assert "level_db_p10" not in plain and "uncertainty" not in plain


@pytest.mark.parametrize("samples", [1, 0, "many"])
def test_map_bad_sample_count_is_one_line(samples):
    res = run("map", DEMO, "--freq", 60, "--uncertainty", "--samples", samples)
    assert res.exit_code == 2
    assert res.stderr.count("\n") == 1 and "--samples" in res.stderr


def test_map_too_many_levels_is_one_line():
    # 5000 drawn rooms of the demo room's 2 cm grid would hold 195 million levels
    res = run("map", DEMO, "--freq", 60, "--step", "2cm", "--uncertainty", "--samples", 5000)
    assert res.exit_code == 2
    assert res.stderr.count("\n") == 1 and "--samples" in res.stderr and "coarser step" in res.stderr


def test_map_spread_is_zero_when_the_room_file_states_no_uncertainty(tmp_path):
    # every sd 0 (absorption_rel stated, so the materials' own ranges do not apply): each drawn
    # room is the file's room, and the 10-90 % spread is zero on every cell
    room = tmp_path / "room.toml"
    room.write_text(open(DEMO, encoding="utf-8").read()
                    + "\n[uncertainty]\nposition_m = 0\nsize_m = 0\nabsorption_rel = 0\ntemperature_c = 0\n",
                    encoding="utf-8")
    res = run("map", room, "--freq", 60, "--step", "25cm", "--uncertainty", "--samples", 3, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    p10, p50, p90 = (np.array(data[f"level_db_p{q}"], dtype=float) for q in (10, 50, 90))
    nominal = np.array(data["level_db"], dtype=float)
    ok = np.isfinite(nominal)
    assert np.max(p90[ok] - p10[ok]) < 1e-4
    assert np.nanmax(np.array(data["pattern_spread_db"], dtype=float)) < 1e-4
    np.testing.assert_allclose(p50[ok], nominal[ok], atol=1e-4)
