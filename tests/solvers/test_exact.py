"""Exact solver for locally reacting walls: roots, 1-D Green's function, limits, symmetry."""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from roommodes.model.walls import impedance_from_absorption
from roommodes.solvers.exact import (
    exact_transfer,
    impedance_green_1d,
    robin_characteristic,
    robin_modes,
    robin_norms,
    robin_root_count,
    robin_roots,
    robin_wavenumbers,
)
from roommodes.solvers.modal import modal_transfer, static_green

SIZE = np.array([5.0, 4.0, 2.6])
C = 343.0

# End parameters a = j k L beta_0, b = j k L beta_L: small, moderate, large (a 5 m axis at
# 300 Hz with beta = 0.64, the largest admittance a real wall of London's law can have,
# gives |a| = 17.6), complex (mass- or spring-like walls) and very large.
AB_CASES = [(1e-3j, 2e-3j), (0.3j, 0.5j), (2j, 1.4j), (10j, 7j), (17.6j, 17.6j), (5 + 5j, 1 - 2j),
            (0.5 - 3j, 3j), (40j, 0.0), (0.0, 0.0)]


# ---------------------------------------------------------------------------------------
# roots of the 1-D Robin problem


def test_rigid_roots_are_m_pi():
    # Rigid ends: X = cos(m pi x / L) (Rayleigh; Morse & Ingard 1968, sec. 9.5).
    u = robin_roots(0.0, 0.0, 12)
    np.testing.assert_allclose(u, np.arange(12) * np.pi, atol=1e-12)


@pytest.mark.parametrize("a,b", AB_CASES)
def test_roots_solve_the_equation_and_none_is_missed_or_doubled(a, b):
    n = 40
    u = robin_roots(a, b, n)
    f, _ = robin_characteristic(u**2, a, b)
    scale = 1.0 + np.abs(u) ** 2 + abs(a * b) + abs(a + b)
    assert np.max(np.abs(f) / scale) < 1e-12  # residual of the transcendental equation
    d = np.abs(u[:, None] - u[None, :]) + np.eye(n) * 1e9
    assert d.min() > 1e-6  # no duplicates
    # argument principle: the roots inside |u| < R are exactly the ones found there, and
    # their number is the rigid count for R between the rigid roots (n - 2) pi and (n - 1) pi
    mags = np.sort(np.abs(u))
    radius = 0.5 * (mags[-2] + mags[-1])
    assert robin_root_count(a, b, radius) == n - 1
    assert np.sum(np.arange(n) * np.pi < radius) == n - 1


def test_roots_tend_to_the_rigid_ones_with_first_order_shift():
    # Small admittance: tan(u) = (a + b) u / (u^2 - a b) gives u_m = m pi + (a + b) / (m pi)
    # and u_0^2 = a + b to first order (perturbation of the rigid problem, computed).
    for eps in (1e-3, 1e-5):
        a, b = 0.7j * eps, 0.4j * eps
        u = robin_roots(a, b, 8)
        m = np.arange(1, 8)
        np.testing.assert_allclose(u[1:], m * np.pi + (a + b) / (m * np.pi), atol=5 * eps**2)
        assert abs(u[0] ** 2 - (a + b)) < 5 * eps**2


def test_roots_broadcast_and_match_scalar_calls():
    a = np.array([0.1j, 3j, 12j])
    b = np.array([0.2j, 1j, 6j])
    u = robin_roots(a, b, 15)
    for i in range(3):
        np.testing.assert_allclose(u[i], robin_roots(a[i], b[i], 15), rtol=1e-12)


@pytest.mark.parametrize("a,b", [(0.3j, 0.5j), (10j, 7j), (5 + 5j, 1 - 2j)])
def test_eigenfunctions_meet_the_end_conditions_and_are_biorthogonal(a, b):
    # X'(0) = A X(0), X'(L) = -B X(L) (impedance conditions dp/dn = -j k beta p with the
    # outward normal, e^{+jwt}; Kuttruff 2009, ch. 2); unconjugated orthogonality of the
    # eigenfunctions of a non-self-adjoint Sturm-Liouville problem (Morse & Ingard 1968,
    # sec. 9.5); N_m against numerical quadrature.
    L = 3.0
    km = robin_roots(a, b, 8) / L
    A, B = a / L, b / L
    x = np.linspace(0.0, L, 20001)
    X = robin_modes(x[:, None], L, km, A)  # (x, m)
    h = 1e-6
    d0 = (robin_modes(h, L, km, A) - robin_modes(-h, L, km, A)) / (2 * h)
    dL = (robin_modes(L + h, L, km, A) - robin_modes(L - h, L, km, A)) / (2 * h)
    np.testing.assert_allclose(d0, A * robin_modes(0.0, L, km, A), rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(dL, -B * robin_modes(L, L, km, A), rtol=1e-6, atol=1e-8)
    wts = np.full(x.size, 2.0)
    wts[1::2] = 4.0
    wts[0] = wts[-1] = 1.0
    gram = (X * (wts * (x[1] - x[0]) / 3.0)[:, None]).T @ X  # Simpson
    norms = robin_norms(L, km, A)
    np.testing.assert_allclose(np.diag(gram), norms, rtol=1e-9)
    off = gram - np.diag(np.diag(gram))
    assert np.max(np.abs(off)) < 1e-9 * np.max(np.abs(norms))


def test_robin_wavenumbers_in_physical_units():
    k = 2 * np.pi * np.array([50.0, 200.0]) / C
    km = robin_wavenumbers(4.0, 0.1, 0.05 + 0.02j, k, 6)
    assert km.shape == (2, 6)
    u = robin_roots(1j * k * 4.0 * 0.1, 1j * k * 4.0 * (0.05 + 0.02j), 6)
    np.testing.assert_allclose(km * 4.0, u, rtol=1e-12)
    # passive walls damp: Im(k_m^2) > 0 with e^{+jwt} (the modal solver's j k b_n)
    assert np.all((km**2).imag > 0)


# ---------------------------------------------------------------------------------------
# the 1-D Green's function with impedance ends


def _ode_green(z, z0, L, kappa2, a0, aL):
    """Direct numerical solution of g'' - kappa^2 g = -delta(z - z0) with g'(0) = a0 g(0),
    g'(L) = -aL g(L): shoot the two homogeneous solutions that meet one end condition
    each, join them with the unit jump of g' (DOP853, complex)."""
    def rhs(t, y):
        return [y[1], kappa2 * y[0]]

    def shoot(start, y0, stop):
        sol = solve_ivp(rhs, (start, stop), y0, method="DOP853", rtol=1e-12, atol=1e-14, dense_output=True)
        return sol.sol

    lo = shoot(0.0, np.array([1.0 + 0j, a0]), L)  # Z_lo
    hi = shoot(L, np.array([1.0 + 0j, -aL]), 0.0)  # Z_hi
    zl, dzl = lo(z0)
    zh, dzh = hi(z0)
    w = zl * dzh - dzl * zh
    zs, zg = min(z, z0), max(z, z0)
    return -lo(zs)[0] * hi(zg)[0] / w


@pytest.mark.parametrize("kappa2,a0,aL", [
    (4.0 + 0.3j, 0.2j, 0.5j),          # evanescent
    (-9.0 + 0.1j, 0.3j, 0.1j),         # propagating, damped
    (-2.0 + 0.0j, 0.0, 0.0),           # rigid ends, propagating
    (1e-12 + 0j, 0.4j, 0.2j),          # kappa ~ 0
    (30.0 + 1j, 1.5 - 0.5j, 0.8 + 2j),  # complex (reactive) ends
])
def test_green_1d_against_direct_ode_solution(kappa2, a0, aL):
    L = 2.7
    for z, z0 in ((0.4, 1.9), (2.2, 0.3), (1.0, 1.05)):
        g = impedance_green_1d(z, z0, L, kappa2, a0, aL)
        ref = _ode_green(z, z0, L, kappa2, a0, aL)
        assert g == pytest.approx(ref, rel=1e-8)


def test_green_1d_against_its_eigenfunction_expansion():
    # g(z, z0) = sum_m Z_m(z) Z_m(z0) / (N_m (k_m^2 + kappa^2)) (Morse & Ingard 1968,
    # sec. 7.2, bi-orthogonal form); the series converges like 1/M^2 for z != z0.
    L, k = 2.6, 2 * np.pi * 120 / C
    b0, bL = 0.15, 0.05 + 0.1j
    a0, aL = 1j * k * b0, 1j * k * bL
    km = robin_wavenumbers(L, b0, bL, k, 3000)
    kappa2 = 1.7 - 0.4j
    z, z0 = 0.7, 1.9
    series = np.sum(robin_modes(z, L, km, a0) * robin_modes(z0, L, km, a0) / (robin_norms(L, km, a0) * (km**2 + kappa2)))
    g = impedance_green_1d(z, z0, L, kappa2, a0, aL)
    assert g == pytest.approx(series, rel=1e-6)


def test_green_1d_rigid_is_the_neumann_function():
    # Rigid ends, kappa real: the closed-form Neumann Green's function of -d2/dz2 + kappa^2
    # (cosh kappa z< cosh kappa (L - z>) / (kappa sinh kappa L); computed).
    L, kap = 3.0, 1.3
    for z, z0 in ((0.5, 2.0), (2.9, 0.1)):
        lo, hi = min(z, z0), max(z, z0)
        ref = np.cosh(kap * lo) * np.cosh(kap * (L - hi)) / (kap * np.sinh(kap * L))
        assert impedance_green_1d(z, z0, L, kap**2, 0.0, 0.0) == pytest.approx(ref, rel=1e-12)


# ---------------------------------------------------------------------------------------
# the 3-D transfer: limits


def test_rigid_limit_matches_the_rigid_modal_sum():
    # All walls rigid: the exact solution is the rigid-mode sum (Kuttruff 2009, sec. 3.2),
    # which the modal solver evaluates (with its static tail; converged at cutoff 3 kHz).
    # Frequencies avoid the rigid resonances, where both are singular.
    f = np.array([23.0, 41.0, 57.5, 88.0, 111.0, 163.0])
    zeta = np.full(6, np.inf)
    s, r = [[0.3, 0.4, 0.35]], [[2.9, 1.7, 1.2]]
    he = exact_transfer(SIZE, zeta, s, r, f, C)
    hm = modal_transfer(SIZE, zeta, s, r, f, C, cutoff_hz=3000.0)
    np.testing.assert_allclose(he, hm, rtol=2e-3)
    # continuity: stiff walls tend to the rigid result
    h_stiff = exact_transfer(SIZE, np.full(6, 1e9), s, r, f, C)
    np.testing.assert_allclose(h_stiff, he, rtol=1e-5)


def test_agrees_with_the_modal_solver_at_low_absorption():
    # alpha = 0.02: the modal solver's perturbation damping (first order in beta) is then
    # accurate; the two must agree closely over 20-200 Hz (common practice: a damped
    # model tends to the rigid-mode one as the walls stiffen).
    f = np.geomspace(20, 200, 97)
    zeta = impedance_from_absorption(np.full(6, 0.02))
    s, r = [[0.3, 0.4, 0.35], [1.1, 2.2, 0.9]], [[2.9, 1.7, 1.2], [4.1, 0.6, 2.0]]
    he = exact_transfer(SIZE, zeta, s, r, f, C)
    hm = modal_transfer(SIZE, zeta, s, r, f, C, cutoff_hz=2000.0)
    dl = np.abs(20 * np.log10(np.abs(he / hm)))
    assert np.median(dl) < 0.01
    assert np.percentile(dl, 90) < 0.05


def test_pressure_chamber_limit():
    # Far below the first mode the field is the (0,0,0) term, G = 1 / (V (j k b0 - k^2)),
    # b0 = sum_w beta_w S_w / V, plus the static rigid Green's function (Kuttruff 2009,
    # sec. 3.4; Morse & Ingard 1968, sec. 9.5); first-order in the small admittance.
    V = np.prod(SIZE)
    s, r = np.array([1.2, 0.8, 0.5]), np.array([3.9, 2.9, 1.8])
    f = np.array([0.5, 1.0, 2.0])
    k = 2 * np.pi * f / C
    gs = static_green(SIZE, s, r)
    for zeta in (np.full(6, np.inf), np.full(6, 200.0)):
        beta = np.where(np.isinf(zeta), 0.0, 1.0 / zeta)
        b0 = np.sum(beta * np.repeat(1.0 / SIZE, 2))
        ref = 4 * np.pi * (1.0 / (V * (1j * k * b0 - k**2)) + gs)
        h = exact_transfer(SIZE, zeta, [s], [r], f, C)[0, 0]
        np.testing.assert_allclose(h, ref, rtol=2e-3)


# ---------------------------------------------------------------------------------------
# symmetry


def test_reciprocity():
    # Swap source and receiver: identical transfer (reciprocity; Morse & Ingard 1968, sec. 7.1).
    f = np.geomspace(20, 250, 40)
    zeta = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.10, 0.05, 0.35]))
    a = np.array([[0.3, 0.4, 0.35], [2.0, 3.5, 2.2]])
    b = np.array([[2.9, 1.7, 1.2], [4.6, 0.2, 0.4], [2.1, 3.4, 2.1]])
    h_ab = exact_transfer(SIZE, zeta, a, b, f, C)
    h_ba = exact_transfer(SIZE, zeta, b, a, f, C)
    np.testing.assert_allclose(h_ab, h_ba.transpose(1, 0, 2), rtol=1e-9)


def test_mirror_symmetry():
    # Mirroring the room about x = Lx/2 swaps the front and back walls: mirrored positions
    # in the mirrored room give the same transfer (geometry; derived). The x axis is the
    # transverse axis of this pair, so the Robin eigenfunctions themselves are mirrored.
    f = np.geomspace(20, 250, 40)
    zeta = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.10, 0.05, 0.35]))
    zeta_m = zeta[[1, 0, 2, 3, 4, 5]]
    s, r = np.array([[1.1, 0.3, 0.5]]), np.array([[1.6, 3.6, 2.2]])
    mir = np.array([SIZE[0], 0, 0])
    sgn = np.array([-1, 1, 1])
    h = exact_transfer(SIZE, zeta, s, r, f, C)
    hm = exact_transfer(SIZE, zeta_m, mir + sgn * s, mir + sgn * r, f, C)
    np.testing.assert_allclose(h, hm, rtol=1e-9)
    # symmetric walls, symmetric pair: left and right speakers give equal magnitudes
    zs = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.25, 0.05, 0.35]))
    left, right = [[0.5, 0.9, 1.1]], [[0.5, SIZE[1] - 0.9, 1.1]]
    seat = [[3.1, SIZE[1] / 2, 1.2]]
    np.testing.assert_allclose(exact_transfer(SIZE, zs, left, seat, f, C),
                               exact_transfer(SIZE, zs, right, seat, f, C), rtol=1e-9)


# ---------------------------------------------------------------------------------------
# boundaries


@pytest.mark.parametrize("d_m", [0.03, 0.3, 0.6])
def test_boundary_gain_near_a_rigid_floor(d_m):
    # Power output relative to free field, W / W0 = -Im H(r0, r0) / k (the reactive near
    # field is real), band-averaged over 150-300 Hz, against Waterhouse (1958, JASA 30(1):4)
    # for one rigid plane, 1 + sin(2kd) / (2kd) (CHECKS.md: formula memory/derived; +3.01 dB
    # as kd -> 0). The other walls absorb (alpha = 0.3) so that their images are weak; what
    # remains of them and of the modal fluctuation is why the tolerance is 0.15 dB (soft).
    size = np.array([5.2, 4.1, 2.7])
    f = np.linspace(150, 300, 301)
    k = 2 * np.pi * f / C
    zeta = impedance_from_absorption(np.full(6, 0.3))
    zeta[4] = np.inf
    s = np.array([[1.9, 1.45, d_m]])
    h = exact_transfer(size, zeta, s, s + [0.01, 0.0, 0.0], f, C)[0, 0]
    gain = 10 * np.log10(np.mean(-h.imag / k))
    ref = 10 * np.log10(np.mean(1 + np.sin(2 * k * d_m) / (2 * k * d_m)))
    assert gain == pytest.approx(ref, abs=0.15)


def test_free_field_normalisation_at_short_range():
    # Near the source every Green's function tends to 1 / (4 pi R) (Morse & Ingard 1968,
    # sec. 7.1), so |H| -> 1 / R: at R = 5 cm mid-room, within a few per cent (the room's
    # field adds about R / (distance to the walls)).
    s = np.array([[2.5, 2.0, 1.3]])
    h = exact_transfer(SIZE, impedance_from_absorption(np.full(6, 0.2)), s, s + [0.05, 0, 0], [60.0], C)
    assert abs(h[0, 0, 0]) * 0.05 == pytest.approx(1.0, abs=0.05)


# ---------------------------------------------------------------------------------------
# truncation rule


def test_convergence_with_tol_db():
    # The truncation bound (module docstring): the error is at most tol_db where the level
    # is not far below the free-field level of the pair; a 1e-6 dB run is the reference.
    f = np.geomspace(20, 300, 60)
    zeta = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.10, 0.05, 0.35]))
    s = np.array([[0.3, 0.4, 0.35], [2.0, 2.0, 1.2]])
    r = np.array([[0.75, 0.6, 0.5], [2.3, 2.2, 1.3]])  # about 0.5 m and 0.37 m from the sources
    ref = exact_transfer(SIZE, zeta, s, r, f, C, tol_db=1e-6)
    errs = []
    for tol in (0.1, 0.01, 0.001):
        h = exact_transfer(SIZE, zeta, s, r, f, C, tol_db=tol)
        err = np.abs(20 * np.log10(np.abs(h / ref)))
        errs.append(err.max())
        assert err.max() <= tol
    assert errs[0] >= errs[1] >= errs[2]


def test_near_pairs_with_static_tail():
    # Pairs closer than near_m along every axis: truncation at near_m plus the rigid
    # static tail, against plain truncation at their own separation with a tight tol.
    f = np.geomspace(20, 300, 30)
    zeta = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.10, 0.05, 0.35]))
    s = np.array([[1.0, 1.5, 1.2], [0.3, 0.3, 0.3]])
    r = np.array([[1.08, 1.55, 1.15], [0.36, 0.25, 0.35]])  # 0.08-0.1 m apart
    ref = exact_transfer(SIZE, zeta, s, r, f, C, tol_db=1e-4, near_m=0.01)
    h = exact_transfer(SIZE, zeta, s, r, f, C)
    err = np.abs(20 * np.log10(np.abs(h / ref)))
    assert err.max() < 0.01


# ---------------------------------------------------------------------------------------
# wall data


def test_complex_and_frequency_dependent_impedance():
    f = np.geomspace(30, 200, 12)
    s, r = [[0.5, 0.9, 1.1]], [[3.1, 2.2, 1.2]]
    base = impedance_from_absorption(np.array([0.15, 0.45, 0.25, 0.10, 0.05, 0.35]))
    zt = base[:, None] * (1.0 + 0.3j * (f / 100.0 - 1.0))[None, :]  # (6, F), complex
    h = exact_transfer(SIZE, zt, s, r, f, C)
    # one frequency at a time: the same answer (the truncation radius follows the highest
    # frequency of a call, so it differs slightly, within tol_db = 0.01 dB, i.e. 1.2e-3)
    for q in (0, 5, 11):
        np.testing.assert_allclose(h[:, :, q], exact_transfer(SIZE, zt[:, q], s, r, f[q:q + 1], C)[:, :, 0], rtol=1e-4)
    # real impedance given as complex: same result
    np.testing.assert_allclose(exact_transfer(SIZE, base.astype(complex), s, r, f, C),
                               exact_transfer(SIZE, base, s, r, f, C), rtol=1e-12)


def test_lossless_reactive_walls_give_a_real_transfer():
    # Purely reactive walls (Re zeta = 0) absorb nothing: the closed room has real
    # eigenvalues and, at a real frequency, a real Green's function (no radiation and no
    # loss; Morse & Ingard 1968, sec. 9.5). A test of the complex branch of the solver.
    f = np.array([37.0, 61.0, 95.0, 140.0])
    zeta = np.array([3j, -5j, 8j, 2j, -4j, 6j])
    h = exact_transfer(SIZE, zeta, [[0.5, 0.9, 1.1]], [[3.1, 2.2, 1.2]], f, C)
    assert np.max(np.abs(h.imag)) < 1e-8 * np.max(np.abs(h.real))


@pytest.mark.parametrize("kwargs,match", [
    (dict(size_m=[5.0, 4.0]), "size_m"),
    (dict(size_m=[5.0, -4.0, 2.6]), "size_m"),
    (dict(zeta=np.full(5, 10.0)), "zeta"),
    (dict(zeta=np.full(6, -10.0)), "zeta"),
    (dict(zeta=np.array([10.0, 10, 10, 10, 10, np.nan])), "zeta"),
    (dict(zeta=np.full(6, -1.0 + 2j)), "zeta"),
    (dict(sources_m=[[6.0, 1.0, 1.0]]), "sources_m"),
    (dict(receivers_m=[[1.0, 1.0]]), "receivers_m"),
    (dict(receivers_m=[[1.0, 1.0, 1.0]]), "coincides"),
    (dict(freq_hz=[50.0, -1.0]), "freq_hz"),
    (dict(speed_of_sound=0.0), "speed_of_sound"),
    (dict(tol_db=0.0), "tol_db"),
    (dict(near_m=-1.0), "near_m"),
])
def test_bad_input_raises(kwargs, match):
    args = dict(size_m=SIZE, zeta=np.full(6, 10.0), sources_m=[[1.0, 1.0, 1.0]], receivers_m=[[3.0, 2.0, 1.5]],
                freq_hz=[50.0], speed_of_sound=C)
    opts = {k: kwargs.pop(k) for k in ("tol_db", "near_m") if k in kwargs}
    args.update(kwargs)
    with pytest.raises(ValueError, match=match):
        exact_transfer(**args, **opts)


def test_dispatch_through_transfer_function():
    import roommodes
    from roommodes.solvers import METHODS, transfer_function

    assert "exact" in METHODS
    room = roommodes.load_room(roommodes.demo_room_path())
    f = np.array([40.0, 80.0])
    h = transfer_function(room, [[0.5, 0.9, 1.1]], [[2.0, 1.7, 1.2]], f, method="exact")
    ref = exact_transfer(room.size_m, room.impedance(f), [[0.5, 0.9, 1.1]], [[2.0, 1.7, 1.2]], f, room.speed_of_sound)
    np.testing.assert_allclose(h, ref, rtol=1e-12)


# ---------------------------------------------------------------------------------------
# neighbour-started roots and the tables kept between calls


@pytest.mark.parametrize("beta", [0.05, 0.3 - 0.2j, 0.64])
def test_roots_from_neighbouring_frequencies_match_full_continuation(beta):
    # A frequency sweep (>= 16 entries) takes the full continuation at every 8th entry and
    # Newton from the neighbours' roots elsewhere; both must land on the same roots, each
    # checked against the rigid-index continuation of robin_roots itself (entry by entry)
    # and the characteristic equation F = 0 (definition, module docstring).
    from roommodes.solvers.exact import _roots_blocks

    k = 2 * np.pi * np.geomspace(15.0, 300.0, 41) / C
    a = 1j * k * SIZE[0] * beta
    b = 1j * k * SIZE[0] * 0.5 * beta
    fast = _roots_blocks([(a, b, 14)])
    # the neighbour start is taken for ordinary walls; for the largest admittance the roots
    # move too far between anchors, the check refuses and robin_roots falls back
    assert (fast is None) == (abs(beta) > 0.5)
    u = robin_roots(a, b, 14)
    for i in (0, 3, 8, 21, 40):
        np.testing.assert_allclose(u[i], robin_roots(a[i], b[i], 14), rtol=1e-11, atol=1e-11)
    f, _ = robin_characteristic(u**2, a[:, None], b[:, None])
    assert np.max(np.abs(f)) < 1e-9 * np.max(np.abs(u) ** 2)


def test_repeated_calls_reuse_tables_and_give_the_same_answer():
    # the second call (tables cached) and a call needing more roots than cached (a closer
    # pair) give what a call with empty caches gives
    from roommodes.solvers import exact as ex

    z = impedance_from_absorption(np.array([0.3, 0.2, 0.4, 0.35, 0.1, 0.5]))
    f = np.geomspace(20.0, 200.0, 30)
    src, far, near = [[1.0, 1.0, 1.0]], [[4.0, 3.0, 2.0]], [[1.3, 1.1, 1.05]]
    ex.clear_caches()
    h1 = exact_transfer(SIZE, z, src, far, f, C)
    assert len(ex._AXIS_CACHE) > 0
    h2 = exact_transfer(SIZE, z, src, far, f, C)
    hn = exact_transfer(SIZE, z, src, near, f, C)
    ex.clear_caches()
    hn_cold = exact_transfer(SIZE, z, src, near, f, C)
    assert np.array_equal(h1, h2)
    np.testing.assert_allclose(hn, hn_cold, rtol=1e-12)
    # the caches stay bounded
    for i in range(40):
        exact_transfer(SIZE, z, src, far, f * (1 + 0.001 * i), C)
    assert len(ex._AXIS_CACHE) <= ex._CACHE_SIZE and len(ex._GROUP_CACHE) <= ex._CACHE_SIZE


def test_factorised_green_function_matches_the_three_exponential_form(monkeypatch):
    # g = phi_0(z<) phi_L(z>) / (2 kappa D) regroups the exponentials of the closed form
    # (module docstring); with the regrouping switched off (_FACTOR_MAX = 0, the
    # three-exponential form for every term) the answer must be the same, also for pairs
    # far apart along a long axis where e^{-2 kappa L} is far below 1e-16
    from roommodes.solvers import exact as ex

    z = impedance_from_absorption(np.array([0.45, 0.3, 0.2, 0.1, 0.35, 0.5]))
    f = np.geomspace(20.0, 200.0, 24)
    src = [[0.3, 1.0, 1.0], [4.9, 3.9, 2.5], [2.0, 2.0, 1.3]]
    rec = [[4.7, 3.0, 2.0], [0.1, 0.2, 0.3], [2.1, 2.05, 1.32]]
    ex.clear_caches()
    h = exact_transfer(SIZE, z, src, rec, f, C)
    monkeypatch.setattr(ex, "_FACTOR_MAX", 0.0)
    ex.clear_caches()
    h3 = exact_transfer(SIZE, z, src, rec, f, C)
    ex.clear_caches()
    np.testing.assert_allclose(h, h3, rtol=1e-10)


def test_the_kept_tables_are_safe_to_share_between_threads():
    # the report runs its placement search on a second thread beside the sections, and both
    # call the exact solver: concurrent calls must neither fail nor mix their answers (a smoke
    # check: a race between the cache's steps is rare under the interpreter lock, so this
    # catches mixed answers and crashes when they happen rather than proving the lock)
    import threading

    from roommodes.solvers import exact as ex

    zeta = np.full(6, 8.0)  # a normalised wall impedance, alpha about 0.4
    src, rcv = np.array([[1.0, 1.0, 1.2]]), np.array([[2.5, 2.0, 1.1]])
    sets = [np.geomspace(20 + i, 200 - i, 30) for i in range(24)]  # more sets than the cache holds

    def call(f):
        return ex.exact_transfer(SIZE, zeta, src, rcv, f, C)[0, 0]

    want = [call(f) for f in sets]
    ex.clear_caches()
    errors, got = [], {}

    def work(offset):
        try:
            for r in range(3):
                for i in range(offset, offset + len(sets)):
                    j = i % len(sets)
                    got[(offset, r, j)] = call(sets[j])
        except Exception as exc:  # noqa: BLE001 - any failure in a thread fails the test
            errors.append(exc)

    threads = [threading.Thread(target=work, args=(k * 5,)) for k in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors
    for (_, _, j), h in got.items():
        np.testing.assert_allclose(h, want[j], rtol=1e-9)
