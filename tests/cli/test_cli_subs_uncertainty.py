"""`roommodes subs --uncertainty`: the spread of the chosen settings over drawn rooms, in the
table, the JSON and the plot; nothing new without the option.

No outside check values: the reference is the drawn rooms' percentiles recomputed in the test."""

import json

import pytest
from click.testing import CliRunner

from roommodes.cli import main
from roommodes.io.roomfile import example_rooms

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
KEYS = ("seat_spread_db_p10", "seat_spread_db_p50", "seat_spread_db_p90")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _json(*args):
    res = run("subs", *args, "--json", "--method", "modal")
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def test_json_spread_keys_ordered_reproducible_and_absent_without_the_option(small_room):
    d = _json(small_room, "--uncertainty", "--samples", 10, "--seed", 4)
    plain = _json(small_room)
    assert "uncertainty" not in plain
    for entry, before in zip(d["ranked"], plain["ranked"]):
        assert entry["seat_spread_db_p10"] <= entry["seat_spread_db_p50"] <= entry["seat_spread_db_p90"]
        assert not any(k in before for k in KEYS)
        # the settings stay those found in the nominal room
        assert entry["seat_spread_db"] == pytest.approx(before["seat_spread_db"])
        assert entry["subs"] == before["subs"]
    assert d["uncertainty"]["samples"] == 10 and d["uncertainty"]["seed"] == 4
    # the paired share: #1 never below itself; every share a fraction of the 10 rooms
    assert d["ranked"][0]["spread_below_first_share"] == 0.0
    for entry in d["ranked"] + [d["before"]]:
        assert 0.0 <= entry["spread_below_first_share"] <= 1.0
        assert (entry["spread_below_first_share"] * 10) == pytest.approx(round(entry["spread_below_first_share"] * 10))
    again = _json(small_room, "--uncertainty", "--samples", 10, "--seed", 4)
    assert [[e[k] for k in KEYS] for e in again["ranked"]] == [[e[k] for k in KEYS] for e in d["ranked"]]


def test_text_column_and_plot(small_room, tmp_path):
    out = tmp_path / "s.png"
    res = run("subs", small_room, "--method", "modal", "--uncertainty", "--samples", 8, "--plot", out)
    assert res.exit_code == 0, res.output
    assert "spread, drawn rooms: median (10-90 %)" in res.stdout
    assert "8 rooms drawn from the room file's [uncertainty]" in res.stdout
    assert out.exists()
    plain = run("subs", small_room, "--method", "modal")
    assert "drawn rooms" not in plain.stdout


@pytest.mark.parametrize("args, words", [
    (("--uncertainty", "--samples", "1"), "--samples"),
    (("--uncertainty", "--seed", "-3"), "--seed"),
    (("--uncertainty", "--measured", "sub@middle=x.wav"), "--uncertainty"),
])
def test_bad_values_one_line_exit_2(small_room, args, words):
    res = run("subs", small_room, *args)
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) <= 3 and any(words in ln for ln in lines)  # click's usage line, hint, the error
    assert "Traceback" not in res.output


def test_before_row_shades_the_files_own_settings_over_the_drawn_rooms(small_room, tmp_path, monkeypatch):
    import numpy as np

    import roommodes.cli.subs as cli_subs
    from roommodes import load_room
    from roommodes.analysis.predict import predict_seats
    from roommodes.analysis.uncertainty import draw_subs_rooms

    figs, results = [], []
    real = cli_subs.plot_subs

    def spy(res, *args, **kw):
        results.append(res)
        figs.append(real(res, *args, **kw))
        return figs[-1]

    monkeypatch.setattr(cli_subs, "plot_subs", spy)
    out = run("subs", small_room, "--method", "modal", "--uncertainty", "--samples", 6, "--seed", 7,
              "--plot", tmp_path / "s.png")
    assert out.exit_code == 0, out.output
    res, ax = results[0], figs[0].axes[-2]  # the last row: 'before', its level panel then its plan
    room = load_room(small_room)
    # recomputed here: each drawn room with the file's own subs and settings, summed by predict_seats
    drawn = np.array([predict_seats(draw_subs_rooms(room, [res.before], np.random.default_rng(s))[0],
                                    freq_hz=res.freq_hz, method="modal").system_db
                      for s in np.random.SeedSequence(7).spawn(6)])
    p10, p90 = np.percentile(drawn, [10, 90], axis=0)
    n = len(res.freq_hz)
    shaded = {c.get_gid(): c.get_paths()[0].vertices for c in ax.collections
              if (c.get_gid() or "").startswith("seat-band-")}
    assert len(shaded) == p10.shape[0] >= 2
    for p in range(p10.shape[0]):
        v = shaded[f"seat-band-{p}"]
        assert len(v) == 2 * n + 3  # start, lower edge forwards, end, upper edge backwards, close
        np.testing.assert_allclose(v[1:n + 1, 1], p10[p], atol=1e-6)
        np.testing.assert_allclose(v[n + 2:2 * n + 2, 1][::-1], p90[p], atol=1e-6)
    assert any(t.get_text().startswith("10-90 % of 6 drawn rooms") for t in ax.get_legend().get_texts())
    plain = run("subs", small_room, "--method", "modal", "--plot", tmp_path / "p.png")
    assert plain.exit_code == 0
    assert not [c for c in figs[1].axes[-2].collections if (c.get_gid() or "").startswith("seat-band-")]
