"""Solid and fragile peaks and dips (analysis.ensemble.feature_spread) and the report's use of
them.

Sources of the check values: constructed curves whose features are known by construction (a
Gaussian bump in dB on a flat line: its width at half height is 2 sqrt(2 ln 2) sigma,
common practice); the rule solid = found in 90 % of rooms, frequency spread below the width
and level spread below half the prominence is the documented definition
(docs/uncertainty.md), not an outside value.
"""

import numpy as np
import pytest

from roommodes import load_room
from roommodes.analysis.ensemble import MIN_FOUND_FRACTION, feature_bandwidth_hz, feature_spread
from roommodes.analysis.predict import Feature
from roommodes.dsp.response import log_frequencies
from roommodes.io.roomfile import demo_room_path
from roommodes.present.report import build_report

F = log_frequencies(20.0, 200.0, 96)


def _bump(centre_hz, height_db, sigma_oct=0.08):
    return height_db * np.exp(-0.5 * (np.log2(F / centre_hz) / sigma_oct) ** 2)


def test_bandwidth_of_a_known_bump():
    y = _bump(60.0, 10.0)
    i = int(np.argmax(y))
    # half height at +- sqrt(2 ln 2) sigma octaves around the centre
    half = np.sqrt(2 * np.log(2)) * 0.08
    expect = F[i] * (2**half - 2**-half)
    assert feature_bandwidth_hz(F, y, i, 10.0, "peak") == pytest.approx(expect, rel=0.05)
    assert feature_bandwidth_hz(F, -y, i, 10.0, "dip") == pytest.approx(expect, rel=0.05)


def test_a_steady_feature_is_solid_and_a_wandering_one_fragile():
    nominal = _bump(60.0, 10.0) - _bump(120.0, 8.0)
    peak = Feature("peak", 60.0, 10.0, 10.0, ())
    dip = Feature("dip", 120.0, -8.0, 8.0, ())
    rng = np.random.default_rng(1)
    # the peak stays put (0.2 dB level jitter); the dip wanders over +-15 % in frequency
    samples = np.array([_bump(60.0, 10.0 + 0.2 * rng.standard_normal())
                        - _bump(120.0 * (1 + 0.15 * rng.uniform(-1, 1)), 8.0) for _ in range(40)])
    sp = feature_spread(F, nominal, [peak, dip], samples, "left", smoothing=0)
    p, d = sp
    assert p.solid and p.found_fraction == 1.0 and p.freq_spread_hz < 1.0 and p.level_spread_db < 1.0
    assert not d.solid and d.freq_spread_hz > d.bandwidth_hz
    assert "frequency moves" in d.reason() and p.reason() == ""
    # a feature that vanishes in most rooms is fragile whatever its spread
    flat = np.zeros((20, F.size))
    flat[:5] = nominal
    q = feature_spread(F, nominal, [peak], flat, "left", smoothing=0)[0]
    assert q.found_fraction == pytest.approx(0.25) and not q.solid


def test_report_shades_bands_and_lists_solid_and_fragile_features():
    room = load_room(demo_room_path())
    rep = build_report(room, search="off", embed="png", uncertainty={"n_samples": 6, "seed": 3})
    u = rep.values["uncertainty"]
    assert u["samples"] == 6 and u["seed"] == 3 and u["features"]
    for x in u["features"]:
        solid = (x["found_fraction"] >= MIN_FOUND_FRACTION and x["freq_p90_hz"] - x["freq_p10_hz"] < x["bandwidth_hz"]
                 and x["level_p90_db"] - x["level_p10_db"] < 0.5 * x["prominence_db"])
        assert x["solid"] == solid
    assert "solid-fragile" in rep.html and any("peaks and dips are solid" in g for g in rep.glance)
    captions = [f.caption for f in rep.figures if f.name.endswith(("response", "layouts"))]
    assert len(captions) == 2 and all("Shaded: 10-90 % of 6 rooms" in c for c in captions)
    plain = build_report(room, search="off", embed="png")
    assert "uncertainty" not in plain.values and "solid-fragile" not in plain.html
