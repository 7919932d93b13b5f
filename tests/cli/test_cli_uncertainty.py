"""``--uncertainty`` on the commands: the JSON keys of docs/ and shared/ARCHITECTURE.md, the
numbers of the API, and bad options as one line. Source of the check values: none from
outside; the command's numbers are held to the library's (tests/analysis/test_uncertainty.py
checks those against coverage on random rooms)."""

import json

import numpy as np
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
