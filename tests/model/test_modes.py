"""Mode enumeration and modal damping against handbook tables and closed forms.

Sources of the check values are named beside each test (Handbook for Sound Engineers
Table 6-4, Bies & Hansen, Kuttruff, Schroeder 1996, Rindel 2015).
"""

import numpy as np
import pytest

from roommodes import load_room
from roommodes.model.modes import mode_indices, mode_shapes, room_modes, wall_weights
from roommodes.model.room import WALLS, Room, Surface

FT = 0.3048


def _room(size_m, alpha=0.1, temperature_c=20.0):
    return Room("test", tuple(size_m), tuple(Surface(w, (alpha,)) for w in WALLS), temperature_c)


def test_handbook_axial_table_16x12x8_ft():
    # Handbook for Sound Engineers, 4th ed. (Ballou, 2008), ch. 6, Table 6-4: 16 x 12 x 8 ft at
    # c = 1130 ft/s. Axial modes L: 35.31, 70.63, 105.94; W: 47.08, 94.17, 141.25;
    # H: 70.63, 141.25, 211.88 Hz; 70.63 occurs twice and 141.25 three times.
    idx, f = mode_indices([16, 12, 8], 215.0, 1130.0)
    table = {0: [35.31, 70.63, 105.94], 1: [47.08, 94.17, 141.25], 2: [70.63, 141.25, 211.88]}
    axial = np.count_nonzero(idx, axis=1) == 1
    for axis, want in table.items():
        got = np.sort(f[axial & (idx[:, axis] > 0)])[:3]
        np.testing.assert_allclose(got, want, atol=0.01)
    fa = f[axial]
    assert np.sum(np.isclose(fa, 70.625, atol=0.01)) == 2
    assert np.sum(np.isclose(fa, 141.25, atol=0.01)) == 3


def test_close_pair_23x17x9_ft():
    # Same chapter: 23 x 17 x 9 ft has (4,0,0) at 98.26 Hz and (0,3,0) at 99.71 Hz, and no
    # frequency shared by all three axes (seen, qualitative; numbers computed).
    idx, f = mode_indices([23, 17, 9], 300.0, 1130.0)
    lookup = {tuple(i): fi for i, fi in zip(idx, f)}
    assert lookup[(4, 0, 0)] == pytest.approx(98.26, abs=0.01)
    assert lookup[(0, 3, 0)] == pytest.approx(99.71, abs=0.01)
    ax = [set(np.round(f[(idx[:, a] > 0) & (np.count_nonzero(idx, axis=1) == 1)], 2)) for a in range(3)]
    assert not (ax[0] & ax[1] & ax[2])


def test_enumeration_against_mode_count_formula():
    # Bies & Hansen, Engineering Noise Control, 3rd ed., sec. 7.3.1 (secondary):
    # N(f) = 4 pi V f^3/(3 c^3) + pi S f^2/(4 c^2) + L f/(8 c); 7.0 x 5.18 x 2.74 m gives
    # 21.8 at 100 Hz (22 enumerated) and 124.0 at 200 Hz (123 enumerated).
    size, c = np.array([7.0, 5.18, 2.74]), 343.0
    for fmax, n_formula in ((100.0, 21.8), (200.0, 124.0)):
        idx, _ = mode_indices(size, fmax, c)
        n_enum = len(idx) - 1  # without (0, 0, 0)
        assert abs(n_enum - n_formula) / n_formula < 0.05


def test_mode_shapes_are_cosines():
    # Rayleigh: psi = cos(nx pi x/Lx) cos(ny pi y/Ly) cos(nz pi z/Lz) (Kuttruff 2009, sec. 3.3)
    size = np.array([5.0, 4.0, 2.5])
    idx = np.array([[1, 0, 0], [0, 2, 0], [1, 1, 1]])
    corner = mode_shapes(idx, size, [[0, 0, 0]])[0]
    np.testing.assert_allclose(corner, 1.0)
    centre = mode_shapes(idx, size, [size / 2])[0]
    np.testing.assert_allclose(centre, [0.0, -1.0, 0.0], atol=1e-12)


def test_oblique_modes_decay_at_sabine_rate():
    # With beta -> alpha / 8 (small absorption), an oblique mode's decay constant is Sabine's
    # c A / (8 V) (Kuttruff 2009, sec. 3.5; CHECKS.md, memory, derived).
    alpha = 0.01
    room = _room([5.0, 4.0, 2.6], alpha)
    ms = room_modes(room, 120.0)
    obl = ms.order == 3
    sabine_delta = room.speed_of_sound * alpha * room.total_area_m2 / (8 * room.volume_m3)
    np.testing.assert_allclose(ms.decay_constant[obl], sabine_delta, rtol=0.03)
    # axial modes ring longer than oblique ones (Rindel 2015, Acta Acustica 101:1211, qualitative)
    assert ms.t60_s[ms.order == 1].min() > ms.t60_s[obl].max()


def test_axial_mode_decay_matches_plane_wave_between_two_walls():
    # An axial x-mode between two walls: delta = (c / L) beta (both walls eps = 2, others
    # weight 1 / L_w each). With the side walls rigid it reduces to (c / Lx) beta; compare to
    # the plane-wave decay T = 6 ln10 L / (c (-ln(1 - a_n))) of CHECKS.md in the small-a limit.
    idx = np.array([[1, 0, 0]])
    w = wall_weights(idx, [5.0, 4.0, 2.6])
    np.testing.assert_allclose(w[0], [2 / 5.0, 2 / 5.0, 1 / 4.0, 1 / 4.0, 1 / 2.6, 1 / 2.6])
    beta = 0.002
    c, L = 343.0, 5.0
    delta = 0.5 * c * (w[0, :2] @ [beta, beta])
    a_n = 4 * beta  # normal-incidence absorption 4 zeta/(zeta+1)^2 -> 4 beta for small beta
    t_plane = 6 * np.log(10) * L / (c * -np.log(1 - a_n))
    assert 3 * np.log(10) / delta == pytest.approx(t_plane, rel=0.01)


def test_bandwidth_and_t60_relation():
    # Schroeder 1996, JASA 99(5):3240, eq. 2: B = ln(10^6) / (2 pi T) = 2.19881 / T.
    room = load_room_demo()
    ms = room_modes(room, 200.0)
    np.testing.assert_allclose(ms.bandwidth_hz * ms.t60_s, 2.19881, rtol=1e-5)


def load_room_demo():
    from roommodes import demo_room_path

    return load_room(demo_room_path())


def test_kinds():
    room = _room([4.0, 3.0, 2.5])
    ms = room_modes(room, 100.0)
    for i, k in zip(ms.indices, ms.kind):
        assert k == ("axial", "tangential", "oblique")[np.count_nonzero(i) - 1]
