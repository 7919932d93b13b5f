"""Modal-sum solver: convergence, closed forms, reciprocity, symmetry, boundary laws."""

import numpy as np
import pytest

from roommodes.model.modes import mode_indices, mode_shapes
from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers.modal import modal_transfer, static_green

SIZE = np.array([5.0, 4.0, 2.6])
C = 343.0


def _box_truncated_static(size, s, r, n_long=300):
    """Reference: the static modal series sum_{n != 0} psi psi / (K_n k_n^2), summed over a
    box of indices (absolutely convergent ordering) directly from its definition
    (Morse & Ingard 1968, sec. 9.5: the eigenfunction expansion of the Green's function)."""
    nmax = (n_long * size / size.max()).astype(int)
    ax = [np.arange(m + 1) for m in nmax]
    cs = [np.where(a > 0, 2.0, 1.0) * np.cos(a * np.pi * s[i] / size[i]) * np.cos(a * np.pi * r[i] / size[i])
          / size[i] for i, a in enumerate(ax)]
    k2 = [(a * np.pi / size[i]) ** 2 for i, a in enumerate(ax)]
    total = 0.0
    for i in range(len(ax[0])):
        kk = k2[0][i] + k2[1][:, None] + k2[2][None, :]
        tt = cs[0][i] * cs[1][:, None] * cs[2][None, :]
        if i == 0:
            kk[0, 0], tt[0, 0] = 1.0, 0.0
        total += np.sum(tt / kk)
    return total


@pytest.mark.parametrize("s,r", [((0.3, 0.4, 0.35), (2.9, 1.7, 1.2)), ((1.0, 2.0, 1.0), (1.2, 2.7, 1.1))])
def test_static_green_matches_its_eigenfunction_series(s, r):
    s, r = np.array(s), np.array(r)
    ref = _box_truncated_static(SIZE, s, r)
    assert static_green(SIZE, s, r) == pytest.approx(ref, rel=2e-4, abs=2e-6)
    assert static_green(SIZE, s, r) == pytest.approx(static_green(SIZE, r, s), rel=1e-12)


def test_static_green_has_the_free_space_singularity():
    # Near the source the Green's function of any bounded region tends to 1 / (4 pi R)
    # (Morse & Ingard 1968, sec. 7.1).
    s = np.array([2.1, 1.9, 1.3])
    for d in (0.02, 0.01):
        g = static_green(SIZE, s, s + [d, 0, 0])
        assert g * 4 * np.pi * d == pytest.approx(1.0, abs=0.02)


def test_convergence_with_cutoff():
    # The documented rule (cutoff 3 x fmax plus the static tail) against a 10 x fmax sum:
    # well below 0.05 dB for a seat; without the tail a sharp cutoff is far worse.
    f = np.geomspace(20, 200, 97)
    zeta = impedance_from_absorption(np.full(6, 0.2))
    s, r = [0.3, 0.4, 0.35], [2.9, 1.7, 1.2]
    ref = modal_transfer(SIZE, zeta, s, r, f, C, cutoff_hz=2000.0)
    errs = {}
    for fac in (1.5, 3.0):
        for tail in (False, True):
            h = modal_transfer(SIZE, zeta, s, r, f, C, cutoff_hz=fac * 200.0, static_tail=tail)
            errs[fac, tail] = np.abs(20 * np.log10(np.abs(h / ref))).ravel()
    assert np.median(errs[3.0, True]) < 0.005
    assert np.max(errs[3.0, True]) < 0.05
    assert np.median(errs[3.0, False]) > 5 * np.median(errs[3.0, True])
    default = modal_transfer(SIZE, zeta, s, r, f, C)
    assert np.max(np.abs(20 * np.log10(np.abs(default / ref)))) < 0.05


def test_pressure_chamber_limit():
    # Below the first mode a closed rigid room is a pressure chamber: p = rho c^2 Q / (j w V),
    # i.e. G -> -1 / (V k^2) (Kinsler et al., Fundamentals of Acoustics, 4th ed., 2000,
    # sec. 10.2, acoustic compliance of a closed volume). H = 4 pi G.
    # What remains after the compliance term is the frequency-independent static part.
    f = np.array([0.25, 0.5, 1.0])
    k = 2 * np.pi * f / C
    s, r = [1.0, 1.0, 1.0], [4.0, 3.0, 2.0]
    h = modal_transfer(SIZE, np.full(6, np.inf), s, r, f, C)[0, 0]
    np.testing.assert_allclose(h, -4 * np.pi / (np.prod(SIZE) * k**2), rtol=0.002)
    np.testing.assert_allclose(h + 4 * np.pi / (np.prod(SIZE) * k**2), 4 * np.pi * static_green(SIZE, s, r),
                               rtol=0.01)


def test_reciprocity():
    # Helmholtz reciprocity: swapping source and receiver leaves the transfer unchanged
    # (Kuttruff, Room Acoustics, 2009, sec. 3.4; Morse & Ingard 1968, sec. 7.1).
    f = np.geomspace(20, 250, 50)
    zeta = impedance_from_absorption([0.05, 0.3, 0.1, 0.2, 0.15, 0.4])
    a, b = [0.4, 0.7, 1.1], [3.1, 2.6, 1.2]
    np.testing.assert_allclose(modal_transfer(SIZE, zeta, a, b, f, C), modal_transfer(SIZE, zeta, b, a, f, C),
                               rtol=1e-10)


def test_mirror_symmetry_and_mono_sum():
    # Mirror-image speakers in a room symmetric about y = Ly/2, seat on the centre line: equal
    # transfers; the odd width modes (ny odd) are antisymmetric, so they cancel in the mono
    # sum (mode shapes; CHECKS.md "Boundaries", derived).
    f = np.geomspace(20, 200, 80)
    zeta = impedance_from_absorption([0.1, 0.2, 0.15, 0.15, 0.1, 0.3])
    left, right = [0.6, 0.9, 1.1], [0.6, SIZE[1] - 0.9, 1.1]
    seat = [2.2, SIZE[1] / 2, 1.2]
    h = modal_transfer(SIZE, zeta, [left, right], seat, f, C)[:, 0]
    np.testing.assert_allclose(h[0], h[1], rtol=1e-10)
    idx, _ = mode_indices(SIZE, 600.0, C)
    psi = mode_shapes(idx, SIZE, [left, right])
    odd = idx[:, 1] % 2 == 1
    np.testing.assert_allclose(psi[0, odd] + psi[1, odd], 0.0, atol=1e-12)


def test_damped_tends_to_rigid():
    # As absorption goes to zero the damped model tends to the rigid one (at frequencies away
    # from the rigid resonances, where the rigid sum is finite).
    f = np.array([33.0, 41.0, 57.5])
    s, r = [0.5, 0.8, 1.0], [3.0, 2.2, 1.3]
    rigid = modal_transfer(SIZE, np.full(6, np.inf), s, r, f, C)
    prev = None
    for alpha in (1e-2, 1e-3, 1e-4):
        h = modal_transfer(SIZE, impedance_from_absorption(np.full(6, alpha)), s, r, f, C)
        err = np.max(np.abs(h - rigid) / np.abs(rigid))
        if prev is not None:
            assert err < prev / 5
        prev = err
    assert prev < 1e-3


def _band_power(size, src, f, n_receivers=400, seed=1):
    rng = np.random.default_rng(seed)
    rec = rng.uniform(0.05, 0.95, (n_receivers, 3)) * size
    zeta = impedance_from_absorption(np.full(6, 0.1))
    h = modal_transfer(size, zeta, src, rec, f, C)
    return np.mean(np.abs(h) ** 2, axis=(1, 2))


@pytest.mark.slow
def test_waterhouse_boundary_gain():
    # Waterhouse 1958, "Output of a sound source in a reverberation chamber and other
    # reflecting environments", JASA 30(1):4: a source at a rigid corner, edge or wall
    # radiates 8, 4 or 2 times (+9, +6, +3 dB) the power it radiates far from walls. Seen here
    # as the room-averaged mean-square pressure over a band well above the first modes,
    # relative to sources in mid-room (averaged over several mid-room positions).
    f = np.geomspace(250, 400, 60)
    e = 0.01
    mid = np.mean(_band_power(SIZE, [[1.9, 1.6, 1.2], [2.6, 2.3, 1.4], [3.1, 1.8, 1.1]], f))
    gains = {}
    for name, pos in (("corner", [e, e, e]), ("edge", [e, e, 1.3]), ("wall", [e, 1.9, 1.3])):
        gains[name] = 10 * np.log10(_band_power(SIZE, [pos], f)[0] / mid)
    assert gains["corner"] == pytest.approx(9.03, abs=1.2)
    assert gains["edge"] == pytest.approx(6.02, abs=1.2)
    assert gains["wall"] == pytest.approx(3.01, abs=1.2)


@pytest.mark.slow
def test_one_wall_power_law():
    # Waterhouse 1958 (JASA 30(1):4): a source at distance d from one rigid wall radiates
    # W/W0 = 1 + sin(2kd)/(2kd) times its free-field power (the image at 2d). In a room the
    # other walls' images average out when the source's position along them is varied, so
    # the room-averaged mean-square pressure, relative to mid-room sources, should follow the
    # band average of that law (lightly damped room, band well above the first modes).
    size = np.array([6.0, 5.0, 3.2])
    f = np.geomspace(180, 260, 40)
    k = 2 * np.pi * f / C
    rng = np.random.default_rng(7)
    yz = rng.uniform(0.3, 0.7, (6, 2)) * size[1:]
    mid = np.mean(_band_power(size, np.column_stack([rng.uniform(2.0, 4.0, 6), yz]), f))
    for d in (0.05, 0.25, 0.45):
        src = np.column_stack([np.full(6, d), yz])
        got = 10 * np.log10(np.mean(_band_power(size, src, f)) / mid)
        want = 10 * np.log10(np.mean(1 + np.sin(2 * k * d) / (2 * k * d)))
        assert got == pytest.approx(want, abs=0.6), (d, got, want)  # measured: within 0.45 dB
