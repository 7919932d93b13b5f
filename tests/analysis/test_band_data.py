"""Band levels (1/3- or 1/1-octave, from a meter or from `roommodes bands`) handled as band data.

Check values and their sources:
- band centres and edges: IEC 61260-1:2014 eqs. (1)-(5); nominal labels: ISO 266:1997 Table 1;
- the band level of a response under pink noise: equal energy per band, so the level is the
  power mean over the band with equal weight per log frequency (common practice: pink noise
  has equal power per octave, ISO 266 bands are constant-percentage);
- the fit's behaviour is the project's own rule (issue: band data cannot resolve single modes,
  so they can calibrate the absorption but not the dimensions), checked on a synthetic "true"
  room 3 % longer with 1.5 times the absorption, its band levels computed from the exact
  solution of that room.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room, log_frequencies
from roommodes.analysis.compare import (
    Measurement,
    compare_to_prediction,
    load_measurement,
    predicted_band_levels,
    predicted_level,
)
from roommodes.analysis.fit import FitTarget, fit_room
from roommodes.cli import main
from roommodes.dsp.bands import band_average_matrix, band_centres, band_fraction_of
from roommodes.model.room import Surface

ROOM = load_room(demo_room_path())


def _truth(room):
    surfaces = tuple(Surface(s.name, tuple(a * 1.5 for a in s.absorption), s.bands_hz) for s in room.surfaces)
    return replace(room, surfaces=surfaces, size_m=tuple(np.multiply(room.size_m, [1.03, 1.0, 1.0])))


def test_band_grids_are_recognised_and_curves_are_not():
    third = [20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200]  # ISO 266 nominal
    assert band_fraction_of(third) == 3
    assert band_fraction_of(band_centres(3, 20, 200)[0]) == 3  # IEC exact centres
    assert band_fraction_of([31.5, 63, 125, 250]) == 1
    assert band_fraction_of(np.geomspace(20, 200, 60)) is None
    assert band_fraction_of([20, 25, 40, 50]) is None  # a band missing: not a band series
    assert band_fraction_of([21.7, 27.0, 34.1]) is None


def test_band_average_is_the_log_frequency_power_mean():
    f = log_frequencies(10, 400, 96)
    _, _, lo, hi = band_centres(3, 49, 51)
    w = band_average_matrix(f, lo, hi)[0]
    assert w.sum() == pytest.approx(1.0)
    flat = np.full(f.size, 3.0)
    assert w @ flat == pytest.approx(3.0)
    inside = (f >= lo[0]) & (f <= hi[0])
    ramp = np.log(f)  # its log-frequency mean over the band is the log of the geometric centre
    # within half a grid step (ln 2 / 192): the band's ends fall between grid points
    assert w @ ramp == pytest.approx(np.log(np.sqrt(lo[0] * hi[0])), abs=np.log(2) / 192)
    assert np.all(w[~inside] == 0)
    with pytest.raises(ValueError, match="fewer than two points"):
        band_average_matrix(np.array([40.0, 400.0]), lo, hi)


def test_prediction_in_bands_is_the_power_mean_of_the_curve_over_each_band():
    nominal = np.array([40.0, 50.0, 63.0, 80.0, 100.0])
    got = predicted_band_levels(ROOM, "left", [ROOM.layout.seat_m], nominal, 3)
    exact, _, lo, hi = band_centres(3, 35, 110)
    for c, g in zip(nominal, got):
        i = int(np.argmin(np.abs(np.log(exact / c))))
        fine = log_frequencies(lo[i], hi[i], 400)
        p = 10 ** (predicted_level(ROOM, "left", [ROOM.layout.seat_m], fine) / 10)
        ref = 10 * np.log10(np.trapezoid(p, np.log(fine)) / np.log(hi[i] / lo[i]))
        assert g == pytest.approx(ref, abs=0.05)


def test_compare_band_data_band_by_band_without_features():
    nominal = band_centres(3, 20, 200)[1]
    level = predicted_band_levels(ROOM, "left", [ROOM.layout.seat_m], nominal, 3) + 12.0
    rep = compare_to_prediction(ROOM, Measurement(nominal, level, "meter", band_fraction=3), "left")
    assert rep.matches == ()
    assert "band levels" in " ".join(rep.interpretation)
    assert rep.comparison.median_abs_diff_db < 1e-6  # its own bands, level-aligned


def test_fit_from_band_levels_moves_only_the_absorption_the_right_way():
    truth = _truth(ROOM)
    nominal = band_centres(3, 20, 200)[1]
    seat = ROOM.layout.seat_m
    targets = [FitTarget(ch, seat, nominal, predicted_band_levels(truth, ch, [seat], nominal, 3) + 20.0,
                         f"{ch} meter", 3) for ch in ("left", "right")]
    res = fit_room(ROOM, targets)
    kinds = {p.kind for p in res.parameters}
    assert kinds == {"absorption"}  # no dimension, position or roll-off
    assert res.room.size_m == ROOM.size_m
    (p,) = res.parameters
    assert p.value > p.initial * 1.2  # toward the truth's 1.5 x
    assert "band data" in res.message and "dimensions" in res.message
    assert res.error_after["rms_db"] < res.error_before["rms_db"]
    with pytest.raises(ValueError, match="mix band levels and response curves"):
        fit_room(ROOM, [targets[0], replace(targets[1], band_fraction=None)])


def test_band_text_file_end_to_end(tmp_path):
    # the text `roommodes bands -o` writes: exact band centres, level in dBFS
    exact = band_centres(3, 20, 200)[0]
    level = predicted_band_levels(_truth(ROOM), "left", [ROOM.layout.seat_m], exact, 3) - 30.0
    path = tmp_path / "meter.txt"
    path.write_text("# band levels\n# frequency_hz, level_db\n" + "".join(f"{c:.4f}, {v:.3f}\n"
                                                                        for c, v in zip(exact, level)))
    m = load_measurement(path)
    assert m.band_fraction == 3 and m.freq_hz.size == exact.size  # not interpolated onto a fine grid
    res = CliRunner().invoke(main, ["compare", str(demo_room_path()), str(path), "--channel", "left", "--json"])
    assert res.exit_code == 0, res.output
    out = tmp_path / "cal.toml"
    res = CliRunner().invoke(main, ["fit", str(demo_room_path()), str(path), "--channel", "left", "-o", str(out),
                                    "--json"])
    assert res.exit_code == 0, res.output
    assert load_room(out).size_m == ROOM.size_m
