"""The floor map's interpolated form (``solve_step_m``) against the directly solved map."""

from __future__ import annotations

import numpy as np
import pytest

from roommodes import demo_room_path, load_room
from roommodes.analysis import maps as maps_module
from roommodes.analysis.maps import _cubic_weights, floor_level_map

DEMO = load_room(demo_room_path())


def test_cubic_weights_reproduce_quadratics_and_keep_nodes():
    # Keys 1981, "Cubic convolution interpolation for digital image processing": the a = -1/2
    # kernel with its end condition reproduces polynomials up to degree 2 exactly
    n = 9
    u = np.linspace(0.0, n - 1.0, 53)
    w = _cubic_weights(u, n)
    nodes = np.arange(n, dtype=float)
    for poly in ([1.0], [0.3, -2.0], [1.5, -0.7, 0.05]):
        np.testing.assert_allclose(w @ np.polyval(poly, nodes), np.polyval(poly, u), atol=1e-12)
    # on a node the weights pick that node alone
    np.testing.assert_allclose(_cubic_weights(nodes, n), np.eye(n), atol=1e-12)


def _compare(freq_hz, method):
    calls = []
    real = maps_module.speaker_levels

    def counting(room, speakers, points, *a, **k):
        calls.append(len(points))
        return real(room, speakers, points, *a, **k)

    direct = floor_level_map(DEMO, freq_hz, method=method)
    maps_module.speaker_levels = counting
    try:
        fast = floor_level_map(DEMO, freq_hz, method=method, solve_step_m=0.1)
    finally:
        maps_module.speaker_levels = real
    return direct, fast, sum(calls)


@pytest.mark.parametrize("freq_hz", [82.4, 200.0, 290.0])
def test_interpolated_map_matches_the_solved_map(freq_hz):
    direct, fast, solved_points = _compare(freq_hz, "exact")
    assert fast.level_db.shape == direct.level_db.shape
    np.testing.assert_array_equal(np.isnan(fast.level_db), np.isnan(direct.level_db))
    top = np.nanpercentile(direct.level_db, 99)
    shown = direct.level_db >= top - 30.0  # the figure's colour range (plot_floor_map, range_db 30)
    # tolerance: 0.25 dB, a quarter of the figure's smallest visible colour step
    # (common practice: 1 dB is about the least level change a listener notices)
    err = np.abs(fast.level_db - direct.level_db)
    assert np.nanmax(err[shown]) <= 0.25
    assert fast.seat_level_db == direct.seat_level_db
    assert fast.near_modes == direct.near_modes
    # the point of it: far fewer points go to the solver (2 speakers x 6,244 cells directly)
    assert solved_points < 0.5 * 2 * direct.level_db.size


def test_interpolated_map_with_the_modal_solver():
    direct, fast, _ = _compare(74.6, "modal")
    top = np.nanpercentile(direct.level_db, 99)
    shown = direct.level_db >= top - 30.0
    assert np.nanmax(np.abs(fast.level_db - direct.level_db)[shown]) <= 0.25


def test_solve_step_checked():
    with pytest.raises(ValueError, match="solve step"):
        floor_level_map(DEMO, 60.0, step_m=0.2, solve_step_m=-1.0)
    # too few nodes to gain anything: solved directly, the same map
    a = floor_level_map(DEMO, 60.0, step_m=0.3)
    b = floor_level_map(DEMO, 60.0, step_m=0.3, solve_step_m=0.35)
    np.testing.assert_array_equal(a.level_db, b.level_db)


def test_image_solver_maps_solve_every_cell():
    # its truncated image lattice is not smooth between nodes (measured 1.3 dB off at 60 Hz)
    a = floor_level_map(DEMO, 60.0, step_m=0.3, method="image")
    b = floor_level_map(DEMO, 60.0, step_m=0.3, method="image", solve_step_m=0.6)
    np.testing.assert_array_equal(a.level_db, b.level_db)
