"""compare --uncertainty: the model curve's 10-90 % band over drawn rooms beside a measurement.

The measurements are invented: text files written from the demo room's own prediction.
"""

import json

import numpy as np
from click.testing import CliRunner
from matplotlib.collections import PolyCollection

from roommodes import demo_room_path, load_room
from roommodes.analysis.compare import (
    Measurement,
    compare_to_prediction,
    model_band,
    predicted_level,
    share_inside,
)
from roommodes.analysis.uncertainty import ensemble_levels
from roommodes.cli import main
from roommodes.dsp.response import align_level, log_frequencies, smooth_db
from roommodes.present.plots_measure import plot_comparison

DEMO = str(demo_room_path())
ROOM = load_room(DEMO)
F = log_frequencies(15, 300, 48)


def run(*args):
    return CliRunner().invoke(main, ["compare", *(str(a) for a in args)], catch_exceptions=False)


def assert_user_error(res, *words):
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, res.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])


def measured_file(tmp_path, shift_db=0.0):
    lv = predicted_level(ROOM, "left", None, F, method="modal") + shift_db
    p = tmp_path / "left.txt"
    p.write_text("\n".join(f"{a:.6f};{b:.5f}" for a, b in zip(F, lv)) + "\n")
    return p


def recomputed_percentiles(comp, seat, n, seed, aligned):
    """The band recomputed here from the drawn rooms' levels (seat, left speaker, modal solver)."""
    lv = ensemble_levels(ROOM, comp.freq_hz, points_m=[seat], n_samples=n, seed=seed, method="modal")[:, 0, 0]
    curves = np.array([smooth_db(comp.freq_hz, c, comp.smoothing) for c in lv])
    if aligned:
        curves = np.array([c + align_level(comp.reference_db, c, comp.freq_hz, comp.align_band_hz) for c in curves])
    return np.percentile(curves, 10, axis=0), np.percentile(curves, 90, axis=0)


def test_share_inside_on_a_constructed_case():
    # five points, three inside [low, high] (edges count as inside), one of them masked out
    level = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    low = np.array([0.5, 1.0, 1.0, 3.5, 3.0])
    high = np.array([2.0, 2.0, 2.0, 4.0, 4.0])
    assert share_inside(level, low, high) == 3 / 5
    assert share_inside(level, low, high, mask=[True, True, False, True, False]) == 1 / 3


def test_plotted_band_is_the_drawn_rooms_percentiles(tmp_path):
    meas = Measurement(F, predicted_level(ROOM, "left", None, F, method="modal"), "m")
    for absolute in (False, True):
        rep = compare_to_prediction(ROOM, meas, "left", band_hz=(20, 200), method="modal", absolute=absolute)
        band = model_band(ROOM, rep, n_samples=12, seed=5, method="modal")
        p10, p90 = recomputed_percentiles(rep.comparison, ROOM.layout.seat_m, 12, 5, not absolute)
        np.testing.assert_allclose(band.level_db_p10, p10, atol=1e-9)
        np.testing.assert_allclose(band.level_db_p90, p90, atol=1e-9)
        assert np.all(band.level_db_p90 - band.level_db_p10 > 0)
        fig = plot_comparison(rep, model_band=band)
        ax = fig.axes[0]
        polys = [c for c in ax.collections if isinstance(c, PolyCollection)
                 and c.get_label() == "model: 10-90 % of 12 drawn rooms"]
        assert len(polys) == 1
        v = polys[0].get_paths()[0].vertices
        for i, fq in enumerate(rep.comparison.freq_hz):
            ys = v[np.isclose(v[:, 0], fq, rtol=0, atol=1e-12), 1]
            assert np.isclose(ys.min(), p10[i], atol=1e-9) and np.isclose(ys.max(), p90[i], atol=1e-9)
        # the measurement is the nominal model: its share inside is the one recomputed here
        c = rep.comparison
        inside = (c.measured_db >= p10) & (c.measured_db <= p90)
        assert band.inside_share == np.mean(inside[c.in_band])


def test_cli_json_text_and_plot(tmp_path):
    m = measured_file(tmp_path)
    out = tmp_path / "cmp.png"
    res = run(DEMO, m, "--channel", "left", "--method", "modal", "--uncertainty", "--samples", 12, "--seed", 5,
              "--json", "--plot", out)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    rep = compare_to_prediction(ROOM, Measurement(np.array(data["frequencies_hz"]),
                                                  np.array(data["measured_db"]) - data["offset_db"], "m"),
                                "left", band_hz=(20, 200), smoothing=data["smoothing_octave_fraction"],
                                method="modal")
    p10, p90 = recomputed_percentiles(rep.comparison, ROOM.layout.seat_m, 12, 5, True)
    np.testing.assert_allclose(data["model_db_p10"], p10, atol=1e-6)
    np.testing.assert_allclose(data["model_db_p90"], p90, atol=1e-6)
    assert len(data["model_db_p50"]) == len(data["frequencies_hz"])
    assert 0 <= data["measured_inside_band_share"] <= 1
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    res = run(DEMO, m, "--channel", "left", "--method", "modal", "--uncertainty", "--samples", 12, "--seed", 5)
    assert res.exit_code == 0, res.output
    assert "inside the model's 10-90 % band at" in res.stdout


def test_nothing_new_without_the_option(tmp_path):
    m = measured_file(tmp_path)
    res = run(DEMO, m, "--channel", "left", "--method", "modal", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert not [k for k in data if k.startswith("model_") or "inside" in k]
    res = run(DEMO, m, "--channel", "left", "--method", "modal")
    assert "drawn rooms" not in res.stdout
    meas = Measurement(F, predicted_level(ROOM, "left", None, F, method="modal"), "m")
    fig = plot_comparison(compare_to_prediction(ROOM, meas, "left", method="modal"))
    assert not [c for c in fig.axes[0].collections if "drawn rooms" in str(c.get_label())]


def test_bad_samples_and_no_room(tmp_path):
    m = measured_file(tmp_path)
    assert_user_error(run(DEMO, m, "--channel", "left", "--uncertainty", "--samples", 1), "--samples")
    assert_user_error(run(DEMO, m, "--channel", "left", "--uncertainty", "--samples", "many"), "--samples")
    assert_user_error(run(m, "--against", m, "--uncertainty"), "--uncertainty", "room file")


# ------------------------------------------------------------------------------- fit


def fit_targets():
    from roommodes.analysis.fit import FitTarget
    return [FitTarget("left", tuple(ROOM.layout.seat_m), F, predicted_level(ROOM, "left", None, F, method="modal"),
                      "left seat")]


def test_fit_before_band_recomputed_and_plotted():
    from roommodes.analysis.fit import before_band, fit_room
    from roommodes.model.room import Uncertainty
    from roommodes.present.plots_measure import plot_fit
    targets = fit_targets()
    res = fit_room(ROOM, targets, method="modal", max_iterations=2)
    # no uncertainty at all: every drawn room is the file's room, so the band collapses onto the
    # fit's own 'before' curve (the alignment is the fit's)
    zero = Uncertainty(0.0, 0.0, 0.0, 0.0)
    flat = before_band(ROOM, res, targets, method="modal", n_samples=3, uncertainty=zero)
    np.testing.assert_allclose(flat[1][0], res.before_db[0], atol=1e-6)
    band = before_band(ROOM, res, targets, method="modal", n_samples=12, seed=5)
    lv = ensemble_levels(ROOM, res.freq_hz, points_m=[ROOM.layout.seat_m], n_samples=12, seed=5, method="modal",
                         cutoff_hz=400.0)[:, 0, 0]  # the fit's modal cutoff: 2 x the band's top, 200 Hz
    curves = np.array([smooth_db(res.freq_hz, c, 12) for c in lv])
    curves = curves - np.mean(curves - res.measured_db[0], axis=1, keepdims=True)
    np.testing.assert_allclose(band[0][0], np.percentile(curves, 10, axis=0), atol=1e-9)
    np.testing.assert_allclose(band[2][0], np.percentile(curves, 90, axis=0), atol=1e-9)
    fig = plot_fit(res, before_band_db=band, n_rooms=12)
    polys = [c for c in fig.axes[0].collections if c.get_label() == "model before: 10-90 % of 12 drawn rooms"]
    assert len(polys) == 1
    v = polys[0].get_paths()[0].vertices
    for i, fq in enumerate(res.freq_hz):
        ys = v[np.isclose(v[:, 0], fq, rtol=0, atol=1e-12), 1]
        assert np.isclose(ys.min(), band[0][0][i], atol=1e-9) and np.isclose(ys.max(), band[2][0][i], atol=1e-9)
    assert not [c for c in plot_fit(res).axes[0].collections if "drawn rooms" in str(c.get_label())]


def test_fit_cli_band_keys_and_bad_samples(tmp_path):
    m = measured_file(tmp_path)
    base = ["fit", DEMO, str(m), "--channel", "left", "--method", "modal"]
    res = CliRunner().invoke(main, base + ["-o", str(tmp_path / "a.toml"), "--json"], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    assert not [k for k in json.loads(res.stdout) if "before_db_p" in k or "inside" in k]
    res = CliRunner().invoke(main, base + ["-o", str(tmp_path / "b.toml"), "--json", "--uncertainty", "--samples",
                                           "6"], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert np.shape(data["before_db_p10"]) == np.shape(data["before_db"])
    assert np.all(np.array(data["before_db_p90"]) >= np.array(data["before_db_p10"]))
    assert 0 <= data["measured_inside_before_band_share"] <= 1
    res = CliRunner().invoke(main, base + ["-o", str(tmp_path / "c.toml"), "--uncertainty", "--samples", "0"])
    assert res.exit_code == 2 and res.stderr.count("\n") == 1 and "--samples" in res.stderr


def test_fit_after_band_recomputed_and_plotted():
    """The 'after' band: rooms drawn around the calibrated room with the uncertainty the fit
    narrowed, at the fitted microphone positions; it collapses onto the 'after' curve without
    uncertainty, equals the recomputed percentiles, and is shaded only when given."""
    from roommodes.analysis.fit import after_band, fit_room
    from roommodes.model.room import Uncertainty
    from roommodes.present.plots_measure import plot_fit
    targets = fit_targets()
    res = fit_room(ROOM, targets, method="modal", max_iterations=2)
    zero = Uncertainty(0.0, 0.0, 0.0, 0.0)
    flat = after_band(res, targets, method="modal", n_samples=3, uncertainty=zero)
    np.testing.assert_allclose(flat[1][0], res.after_db[0], atol=1e-6)
    band = after_band(res, targets, method="modal", n_samples=12, seed=5)
    lv = ensemble_levels(res.room, res.freq_hz, points_m=res.mic_positions_m, n_samples=12, seed=5, method="modal",
                         uncertainty=res.room.uncertainty, cutoff_hz=400.0)[:, 0, 0]  # 2 x the band's top, 200 Hz
    curves = np.array([smooth_db(res.freq_hz, c, 12) for c in lv])
    curves = curves - np.mean(curves - res.measured_db[0], axis=1, keepdims=True)
    np.testing.assert_allclose(band[0][0], np.percentile(curves, 10, axis=0), atol=1e-9)
    np.testing.assert_allclose(band[2][0], np.percentile(curves, 90, axis=0), atol=1e-9)
    fig = plot_fit(res, n_rooms=12, after_band_db=band)
    polys = [c for c in fig.axes[0].collections if c.get_label() == "model after: 10-90 % of 12 drawn rooms"]
    assert len(polys) == 1
    v = polys[0].get_paths()[0].vertices
    for i, fq in enumerate(res.freq_hz):
        ys = v[np.isclose(v[:, 0], fq, rtol=0, atol=1e-12), 1]
        assert np.isclose(ys.min(), band[0][0][i], atol=1e-9) and np.isclose(ys.max(), band[2][0][i], atol=1e-9)
    assert not [c for c in plot_fit(res).axes[0].collections if "model after" in str(c.get_label())]
