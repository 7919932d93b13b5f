"""``modes --uncertainty``: each mode's 10-90 % frequency range over drawn rooms."""

import json

import numpy as np
from click.testing import CliRunner

from roommodes import demo_room_path, load_room
from roommodes.analysis.uncertainty import sample_rooms
from roommodes.cli import main

DEMO = str(demo_room_path())


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_mode_ranges_are_percentiles_of_independently_computed_frequencies():
    res = run("modes", DEMO, "--json", "--freq-range", "0,120", "--uncertainty", "--samples", "60", "--seed", "7")
    assert res.exit_code == 0
    data = json.loads(res.stdout)
    assert data["uncertainty"] == {"samples": 60, "seed": 7}
    drawn = sample_rooms(load_room(DEMO), 60, 7)
    # c = 331.3 sqrt(1 + T/273.15) (Kinsler et al. 2000, Fundamentals of Acoustics, eq. 5.6.9);
    # f = c/2 sqrt((nx/Lx)^2 + (ny/Ly)^2 + (nz/Lz)^2) (Rayleigh 1896, The Theory of Sound, vol. 2, sect. 267)
    c = np.array([331.3 * np.sqrt(1.0 + d.temperature_c / 273.15) for d in drawn])
    size = np.array([d.size_m for d in drawn])
    assert np.ptp(size[:, 0]) > 0 and np.ptp(c) > 0  # the drawn rooms really differ
    for m in data["modes"]:
        n = np.array(m["indices"], dtype=float)
        f = c / 2 * np.sqrt(np.sum((n / size) ** 2, axis=1))
        assert abs(m["freq_hz_p10"] - np.percentile(f, 10)) < 1e-9
        assert abs(m["freq_hz_p90"] - np.percentile(f, 90)) < 1e-9
        assert m["freq_hz_p10"] < m["freq_hz"] < m["freq_hz_p90"]


def test_nothing_new_without_the_option():
    res = run("modes", DEMO, "--json", "--freq-range", "0,120")
    data = json.loads(res.stdout)
    assert "uncertainty" not in data
    assert not any("freq_hz_p10" in m or "freq_hz_p90" in m for m in data["modes"])
    text = run("modes", DEMO, "--freq-range", "0,120").stdout
    assert "10-90 %" not in text and "drawn rooms" not in text


def test_text_table_gives_the_range(tmp_path):
    res = run("modes", DEMO, "--freq-range", "0,60", "--uncertainty", "--samples", "20",
              "--plot", tmp_path / "m.png")
    assert res.exit_code == 0
    assert "10-90 % of 20 drawn rooms" in res.stdout
    row = next(line for line in res.stdout.splitlines() if line.strip().startswith("(1,0,0)"))
    lo, hi = (float(v) for v in row.split()[-1].split("-"))
    assert lo < 37.3 < hi  # demo room's first axial mode 343.2 / (2 * 4.6) = 37.3 Hz (Rayleigh)
    assert (tmp_path / "m.png").stat().st_size > 0


def test_bad_samples_is_one_line_exit_2():
    res = CliRunner().invoke(main, ["modes", DEMO, "--uncertainty", "--samples", "1"])
    assert res.exit_code == 2
    assert len(res.output.strip().splitlines()) == 1 and "--samples" in res.output


def test_chart_draws_each_range_at_its_percentiles():
    from matplotlib.collections import LineCollection

    from roommodes.analysis.uncertainty import mode_frequency_ranges
    from roommodes.model.modes import room_modes
    from roommodes.present.plots import plot_modes

    room = load_room(DEMO)
    ms = room_modes(room, 80.0)
    p10, p90 = mode_frequency_ranges(room, ms.indices, 30, 3)
    fig = plot_modes(ms, 80.0, freq_ranges=(p10, p90, 30))
    ax = fig.axes[0]
    bars = [seg for c in ax.collections if isinstance(c, LineCollection) for seg in c.get_segments()
            if seg[0][1] == seg[1][1]]  # horizontal segments: the ranges
    drawn = sorted((round(s[0][0], 9), round(s[1][0], 9)) for s in bars)
    assert drawn == sorted(zip(np.round(p10, 9), np.round(p90, 9)))
    assert any(t.get_text() == "10-90 % of 30 drawn rooms" for t in ax.get_legend().get_texts())
    assert not [c for c in plot_modes(ms, 80.0).axes[0].collections
                if any(s[0][1] == s[1][1] for s in c.get_segments())]
