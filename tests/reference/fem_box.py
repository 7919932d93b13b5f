"""Finite-element reference for the sound field in a box with locally reacting walls.

The test suite holds roommodes' solvers to this wave-based solution. It solves the
Helmholtz equation with a point source,

    lap p + k^2 p = -delta(r - r0),      k = 2 pi f / c,

in the box ``0 <= x <= Lx, 0 <= y <= Ly, 0 <= z <= Lz`` with, on each wall w, the
locally reacting boundary condition of a real normalised impedance ``zeta_w``

    dp/dn = -j k beta_w p,               beta_w = 1 / zeta_w,

(n the outward normal, time factor e^{+j w t}; ``zeta = inf`` is a rigid wall). The
Galerkin weak form on the triquadratic Lagrange space (27-node hexahedra, scikit-fem's
``ElementHex2`` on a ``MeshHex``) is

    int grad p . grad v - k^2 int p v + j k sum_w beta_w int_w p v = v(r0).

With this normalisation the free-field solution is ``G = exp(-jkR) / (4 pi R)``;
the functions here return ``H = 4 pi p``, so that ``20 log10|H|`` is the level relative
to the free-field pressure of the same source at 1 m, as everywhere in roommodes.

Two ways to solve the same discrete system are offered:

``method="sparse"``
    scikit-fem assembles the 3-D stiffness, mass and one boundary-mass matrix per wall
    once; each frequency is then a sparse LU solve (SuperLU). Straightforward, but a
    5 x 4 x 2.6 m room meshed for 200 Hz (54 000 unknowns at h = 0.21 m) takes about
    18 s per frequency on one core.
``method="tensor"`` (default)
    On a tensor-product mesh of a box, the triquadratic space is the tensor product of
    1-D quadratic spaces, so every matrix above is a Kronecker sum: ``K = Kx (x) My (x)
    Mz + Mx (x) Ky (x) Mz + Mx (x) My (x) Kz``, and the boundary mass of the wall x = 0
    is ``ex ex^T (x) My (x) Mz`` (ex the nodal vector of the end node). The Robin term
    therefore joins the 1-D stiffness of its own axis, ``Ax = Kx + j k (beta_front
    e0 e0^T + beta_back eN eN^T)``, and the 3-D system matrix is ``Ax (x) My (x) Mz +
    Mx (x) Ay (x) Mz + Mx (x) My (x) Az - k^2 Mx (x) My (x) Mz``. With ``Md = Ld Ld^T``
    (Cholesky) and ``Ld^-1 Ad Ld^-T = Wd diag(lambda_d) Wd^-1`` it is inverted in
    closed form (the fast diagonalisation method of Lynch, Rice & Thomas, 1964):

        r^T A^-1 s = sum_ijl bx_i by_j bz_l ax_i ay_j az_l / (lx_i + ly_j + lz_l - k^2)

    for a load ``s = sx (x) sy (x) sz`` (a point source is one) and a probe ``r = rx (x)
    ry (x) rz``. The 1-D matrices, loads and probes come from scikit-fem
    (``ElementLineP2``, ``Basis.probes``). It gives the same numbers as the sparse
    solve to round-off (tests/test_fem_reference.py checks 1e-10) at a tiny fraction
    of the cost, so meshes can be fine enough that discretisation error is negligible.

References
----------
.. [1] O. C. Zienkiewicz, R. L. Taylor, J. Z. Zhu, The Finite Element Method: Its Basis
   and Fundamentals, 7th ed., Butterworth-Heinemann, 2013 (Galerkin weak form, Robin
   boundary terms, Lagrange hexahedra).
.. [2] T. Gustafsson, G. D. McBain, "scikit-fem: A Python package for finite element
   assembly", J. Open Source Softw. 5(52):2369, 2020.
.. [3] R. E. Lynch, J. R. Rice, D. H. Thomas, "Direct solution of partial difference
   equations by tensor product methods", Numer. Math. 6:185-199, 1964.
.. [4] H. Kuttruff, Room Acoustics, 5th ed., Spon, 2009, ch. 2-3 (locally reacting
   walls, wall admittance, boundary condition of the wave equation).
.. [5] L. E. Kinsler, A. R. Frey, A. B. Coppens, J. V. Sanders, Fundamentals of
   Acoustics, 4th ed., Wiley, 2000, ch. 5 and 10 (Euler's equation, driven pipes).
"""

from __future__ import annotations

import functools

import numpy as np
import scipy.sparse.linalg as spla
from scipy.linalg import solve_triangular
from skfem import (
    Basis,
    BilinearForm,
    ElementHex2,
    ElementLineP2,
    FacetBasis,
    LinearForm,
    MeshHex,
    MeshLine,
    asm,
)
from skfem.helpers import dot, grad

__all__ = [
    "ELEMENTS_PER_WAVELENGTH",
    "MAX_MESH_SIZE_M",
    "WALLS",
    "default_mesh_size",
    "fem_piston_pressure",
    "fem_transfer",
]

WALLS = ("front", "back", "left", "right", "floor", "ceiling")

#: Quadratic elements per wavelength at the highest frequency, used by default. Chosen
#: by the convergence study of ``python tests/reference/agreement_study.py
#: --convergence`` (table in that script's docstring): at 20 per wavelength the level
#: at the receivers stays within 0.016 dB (p90 0.002 dB) of a mesh twice as fine over
#: 20-200 Hz; 16 per wavelength gave up to 0.042 dB, 8.6 (h = 0.2 m) up to 0.38 dB.
ELEMENTS_PER_WAVELENGTH = 20.0

#: Largest default element size, whatever the frequency: the point source's near field
#: and receivers 0.3-0.5 m from it need a few elements between them.
MAX_MESH_SIZE_M = 0.2

# A 1-D eigenvector basis worse conditioned than this would spoil the tensor solution
# (the pencil would be close to defective); the sparse method has no such limit.
_MAX_EIGVEC_CONDITION = 1e8

_SLAB_ELEMENTS = 4_000_000  # complex entries of 1/(lx+ly+lz-k^2) held at once


@BilinearForm
def _laplace(u, v, w):
    return dot(grad(u), grad(v))


@BilinearForm
def _mass(u, v, w):
    return u * v


@LinearForm
def _unit_load(v, w):
    return v


def default_mesh_size(freq_max_hz, speed_of_sound):
    """Element size used when ``h_m`` is not given.

    Parameters
    ----------
    freq_max_hz : float
        Highest frequency of the solve, Hz, > 0.
    speed_of_sound : float
        Speed of sound, m/s, > 0.

    Returns
    -------
    h_m : float
        ``min(c / (f_max * ELEMENTS_PER_WAVELENGTH), MAX_MESH_SIZE_M)``, m.

    Notes
    -----
    Quadratic elements need fewer than linear ones; 8-10 per wavelength is common
    practice for engineering accuracy. 20 was chosen from a convergence study (see
    :data:`ELEMENTS_PER_WAVELENGTH`) for a reference good to a few hundredths of a dB.
    """
    f = float(freq_max_hz)
    c = float(speed_of_sound)
    if not (np.isfinite(f) and f > 0):
        raise ValueError(f"freq_max_hz must be > 0 Hz, got {freq_max_hz!r}")
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"speed_of_sound must be > 0 m/s, got {speed_of_sound!r}")
    return min(c / (f * ELEMENTS_PER_WAVELENGTH), MAX_MESH_SIZE_M)


# ----------------------------------------------------------------------------------
# validation


def _check_size(size_m):
    size = np.asarray(size_m, dtype=float)
    if size.shape != (3,) or not np.all(np.isfinite(size)) or np.any(size <= 0):
        raise ValueError(f"size_m must be three lengths > 0 m (Lx, Ly, Lz), got {size_m!r}")
    return size


def _check_freq(freq_hz):
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"freq_hz must be a 1-D array of frequencies > 0 Hz, got {freq_hz!r}")
    return f


def _check_zeta(zeta, n_freq):
    z = np.asarray(zeta, dtype=float)
    if z.shape == (6,):
        z = np.repeat(z[:, None], n_freq, axis=1)
    if z.shape != (6, n_freq):
        raise ValueError(
            f"zeta must have shape (6,) or (6, {n_freq}) (walls {WALLS}), got shape {z.shape}"
        )
    if np.any(np.isnan(z)) or np.any(z <= 0):
        raise ValueError(f"zeta must be > 0 (np.inf for a rigid wall), got {zeta!r}")
    with np.errstate(divide="ignore"):
        return np.where(np.isinf(z), 0.0, 1.0 / z)  # beta, (6, F)


def _check_points(points_m, size, name):
    p = np.asarray(points_m, dtype=float)
    single = p.ndim == 1
    p = np.atleast_2d(p)
    if p.ndim != 2 or p.shape[1] != 3 or p.shape[0] == 0:
        raise ValueError(f"{name} must have shape (3,) or (n, 3), got shape {np.shape(points_m)}")
    tol = 1e-9 * float(size.max())
    outside = ~np.all((p >= -tol) & (p <= size + tol), axis=1)
    if np.any(outside):
        i = int(np.argmax(outside))
        raise ValueError(
            f"{name} must lie in the box 0 <= x <= {size[0]:g}, 0 <= y <= {size[1]:g}, "
            f"0 <= z <= {size[2]:g} m, got {p[i].tolist()}"
        )
    return np.clip(p, 0.0, size), single


def _element_counts(size, h_m, freq, c):
    if h_m is None:
        h = default_mesh_size(freq.max(), c)
    else:
        h = float(h_m)
        if not (np.isfinite(h) and h > 0):
            raise ValueError(f"h_m must be an element size > 0 m, got {h_m!r}")
    return np.maximum(1, np.ceil(size / h - 1e-9).astype(int))


# ----------------------------------------------------------------------------------
# tensor-product (fast diagonalisation) solver


class _Axis:
    """1-D quadratic-element operators of one axis, congruence-transformed by M = L L^T."""

    def __init__(self, length_m, n_el):
        mesh = MeshLine(np.linspace(0.0, length_m, n_el + 1))
        self.basis = Basis(mesh, ElementLineP2())
        stiff = asm(_laplace, self.basis).toarray()
        mass = asm(_mass, self.basis).toarray()
        x = self.basis.doflocs[0]
        self.lo = int(np.argmin(np.abs(x)))
        self.hi = int(np.argmin(np.abs(x - length_m)))
        chol = np.linalg.cholesky(mass)
        self.linv = solve_triangular(chol, np.eye(len(x)), lower=True)  # L^-1
        self.stiff_t = self.linv @ stiff @ self.linv.T  # L^-1 K L^-T, symmetric
        self.mass = mass
        self.u_lo = self.linv[:, self.lo]  # L^-1 e_lo
        self.u_hi = self.linv[:, self.hi]

    def probes(self, coord_m):
        """Return point-evaluation (= point-source) rows at ``coord_m``, transformed."""
        rows = self.basis.probes(np.asarray(coord_m, dtype=float)[None, :]).toarray()
        return rows @ self.linv.T  # (n, N): (L^-1 r)^T

    def uniform(self):
        """Return the transformed load of a unit load spread over this axis, L^-1 M 1."""
        return (self.linv @ (self.mass @ np.ones(self.mass.shape[0])))[None, :]

    def end(self, which):
        """Return the transformed load of a unit load at one end node, L^-1 e."""
        return (self.u_lo if which == "lo" else self.u_hi)[None, :]

    def eig(self, k, beta_lo, beta_hi):
        """Return eigenvalues, eigenvectors W and W^-1 of L^-1 (K + jk B) L^-T."""
        if beta_lo == 0.0 and beta_hi == 0.0:
            lam, w = np.linalg.eigh(self.stiff_t)
            return lam.astype(complex), w.astype(complex), w.T.astype(complex)
        c = self.stiff_t.astype(complex)
        c += 1j * k * (beta_lo * np.outer(self.u_lo, self.u_lo) + beta_hi * np.outer(self.u_hi, self.u_hi))
        lam, w = np.linalg.eig(c)
        winv = np.linalg.inv(w)
        cond = np.linalg.norm(w, 1) * np.linalg.norm(winv, 1)
        if not cond < _MAX_EIGVEC_CONDITION:
            raise RuntimeError(
                f"1-D eigenvector basis is ill-conditioned (condition {cond:.2e} at k = {k:.4g} 1/m); "
                "use method='sparse'"
            )
        return lam, w, winv


def _tensor_solve(axes, beta, src_loads, rec_rows, freq, c):
    """Return ``r^T A^-1 s`` for per-axis loads and probes, (N, M, F) complex.

    src_loads[d] : (N, n_d) transformed loads; rec_rows[d] : (M, n_d) transformed probes.
    """
    n_src = src_loads[0].shape[0]
    n_rec = rec_rows[0].shape[0]
    out = np.empty((n_src, n_rec, freq.size), dtype=complex)
    for q, f in enumerate(freq):
        k = 2.0 * np.pi * f / c
        lam, pair = [], []
        for d in range(3):
            lam_d, w, winv = axes[d].eig(k, beta[2 * d, q], beta[2 * d + 1, q])
            a = src_loads[d] @ winv.T  # (N, n): W^-1 L^-1 s
            b = rec_rows[d] @ w  # (M, n): r^T L^-T W
            lam.append(lam_d)
            pair.append((a[:, None, :] * b[None, :, :]).reshape(n_src * n_rec, -1))  # (P, n)
        out[:, :, q] = _contract(lam, pair, k).reshape(n_src, n_rec)
    return out


def _contract(lam, pair, k):
    """Return sum_ijl X_pi Y_pj Z_pl / (lx_i + ly_j + lz_l - k^2), in slabs over i."""
    lx, ly, lz = lam
    x, y, z = pair
    nyz = ly.size * lz.size
    step = max(1, _SLAB_ELEMENTS // max(nyz, 1))
    acc = np.zeros(x.shape[0], dtype=complex)
    lyz = (ly[:, None] + lz[None, :] - k * k).ravel()
    for i0 in range(0, lx.size, step):
        inv = 1.0 / (lx[i0:i0 + step, None] + lyz[None, :])  # (s, ny*nz)
        inv = inv.reshape(-1, ly.size, lz.size)
        t = np.einsum("sjl,pl->spj", inv, z, optimize=True)
        t = np.einsum("spj,pj->sp", t, y)
        acc += np.einsum("sp,ps->p", t, x[:, i0:i0 + step])
    return acc


@functools.lru_cache(maxsize=8)
def _axis(length_m, n_el):
    return _Axis(length_m, n_el)


def _axes_for(size, n_el):
    return [_axis(float(size[d]), int(n_el[d])) for d in range(3)]


# ----------------------------------------------------------------------------------
# sparse 3-D solver (scikit-fem assembly, SuperLU)


class _Box3D:
    """scikit-fem's 3-D matrices of the box: stiffness, mass, one boundary mass per wall."""

    def __init__(self, size, n_el):
        mesh = MeshHex.init_tensor(*[np.linspace(0.0, size[d], n_el[d] + 1) for d in range(3)])
        elem = ElementHex2()
        self.basis = Basis(mesh, elem)
        self.stiff = asm(_laplace, self.basis).tocsr()
        self.mass = asm(_mass, self.basis).tocsr()
        tol = 1e-9 * float(size.max())
        self.walls = []
        for d in range(3):
            for x0 in (0.0, float(size[d])):
                facets = mesh.facets_satisfying(lambda x, d=d, x0=x0: np.abs(x[d] - x0) < tol)
                fb = FacetBasis(mesh, elem, facets=facets)
                self.walls.append(asm(_mass, fb).tocsr())
                if d == 0 and x0 == 0.0:
                    self.front_load = asm(_unit_load, fb)  # int_front v dS

    def solve(self, beta, loads, probes, freq, c):
        """Solve for loads (Ndof, N) and read probes (M, Ndof); return (N, M, F)."""
        out = np.empty((loads.shape[1], probes.shape[0], freq.size), dtype=complex)
        for q, f in enumerate(freq):
            k = 2.0 * np.pi * f / c
            a = (self.stiff - k * k * self.mass).astype(complex)
            for w in range(6):
                if beta[w, q] != 0.0:
                    a = a + (1j * k * beta[w, q]) * self.walls[w]
            lu = spla.splu(a.tocsc(), permc_spec="MMD_AT_PLUS_A")
            sol = lu.solve(np.ascontiguousarray(loads))
            out[:, :, q] = (probes @ sol).T
        return out


# ----------------------------------------------------------------------------------
# public functions


def _check_method(method):
    if method not in ("tensor", "sparse"):
        raise ValueError(f"method must be 'tensor' or 'sparse', got {method!r}")


def fem_transfer(size_m, zeta, source_m, receivers_m, freq_hz, speed_of_sound,
                 h_m=None, method="tensor"):
    """Transfer function of a point source in a box with locally reacting walls (FEM).

    Parameters
    ----------
    size_m : array_like, shape (3,)
        Box dimensions (Lx, Ly, Lz), m, > 0.
    zeta : array_like, shape (6,) or (6, F)
        Real normalised specific impedance Z / (rho c) of each wall, > 0, in the order
        ``WALLS`` = (front x=0, back x=Lx, left y=0, right y=Ly, floor z=0, ceiling
        z=Lz); ``np.inf`` is a rigid wall. A (6, F) array gives a value per frequency.
    source_m : array_like, shape (3,) or (N, 3)
        Source position(s), m, inside the closed box.
    receivers_m : array_like, shape (M, 3) or (3,)
        Receiver positions, m, inside the closed box.
    freq_hz : array_like, shape (F,)
        Frequencies, Hz, > 0.
    speed_of_sound : float
        m/s, > 0.
    h_m : float, optional
        Element size, m; each side gets ``ceil(L / h_m)`` equal elements. Default
        :func:`default_mesh_size` of the highest frequency.
    method : {"tensor", "sparse"}
        How the discrete system is solved (same answer; see the module docstring).

    Returns
    -------
    H : ndarray, complex, shape (M, F), or (N, M, F) when ``source_m`` is (N, 3)
        ``4 pi p``: pressure relative to the free-field pressure of the same source
        at 1 m (time factor e^{+j w t}).

    Notes
    -----
    Solves ``lap p + k^2 p = -delta(r - r0)``, ``dp/dn = -j k p / zeta_w`` on wall w,
    with triquadratic (27-node) hexahedra; see the module docstring for the weak form
    and the two solution methods.
    """
    _check_method(method)
    size = _check_size(size_m)
    freq = _check_freq(freq_hz)
    beta = _check_zeta(zeta, freq.size)
    c = float(speed_of_sound)
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"speed_of_sound must be > 0 m/s, got {speed_of_sound!r}")
    src, single_src = _check_points(source_m, size, "source_m")
    rec, _ = _check_points(receivers_m, size, "receivers_m")
    n_el = _element_counts(size, h_m, freq, c)

    if method == "tensor":
        axes = _axes_for(size, n_el)
        src_loads = [axes[d].probes(src[:, d]) for d in range(3)]
        rec_rows = [axes[d].probes(rec[:, d]) for d in range(3)]
        p = _tensor_solve(axes, beta, src_loads, rec_rows, freq, c)
    else:
        box = _Box3D(size, n_el)
        loads = np.stack([box.basis.point_source(s) for s in src], axis=1).astype(complex)
        probes = box.basis.probes(rec.T).tocsr()
        p = box.solve(beta, loads, probes, freq, c)
    h = 4.0 * np.pi * p
    return h[0] if single_src else h


def fem_piston_pressure(size_m, zeta, receivers_m, freq_hz, speed_of_sound,
                        h_m=None, method="tensor"):
    """Pressure in a box whose whole front wall moves as a rigid piston (FEM).

    Parameters
    ----------
    size_m, zeta, receivers_m, freq_hz, speed_of_sound, h_m, method
        As in :func:`fem_transfer`. ``zeta[0]`` (the driven front wall) must be
        ``np.inf``.

    Returns
    -------
    p_rel : ndarray, complex, shape (M, F)
        ``p / (rho c U)``: pressure relative to rho c times the piston's normal velocity
        U (positive into the room).

    Notes
    -----
    Euler's equation ``j w rho u = -grad p`` gives on the piston ``dp/dn = -dp/dx =
    j k rho c U``; the point source of :func:`fem_transfer` is replaced by this Neumann
    load, ``int_front j k v dS`` for ``rho c U = 1``. With the side walls rigid the
    field is a plane wave along x, which the tests compare with the closed form of a
    driven tube terminated by an impedance.
    """
    _check_method(method)
    size = _check_size(size_m)
    freq = _check_freq(freq_hz)
    beta = _check_zeta(zeta, freq.size)
    if np.any(beta[0] != 0.0):
        raise ValueError(f"the driven front wall must be rigid (zeta[0] = inf), got {np.asarray(zeta)[0]!r}")
    c = float(speed_of_sound)
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"speed_of_sound must be > 0 m/s, got {speed_of_sound!r}")
    rec, _ = _check_points(receivers_m, size, "receivers_m")
    n_el = _element_counts(size, h_m, freq, c)
    k = 2.0 * np.pi * freq / c

    if method == "tensor":
        axes = _axes_for(size, n_el)
        src_loads = [axes[0].end("lo"), axes[1].uniform(), axes[2].uniform()]
        rec_rows = [axes[d].probes(rec[:, d]) for d in range(3)]
        p = _tensor_solve(axes, beta, src_loads, rec_rows, freq, c)[0]
    else:
        box = _Box3D(size, n_el)
        loads = box.front_load[:, None].astype(complex)
        probes = box.basis.probes(rec.T).tocsr()
        p = box.solve(beta, loads, probes, freq, c)[0]
    return p * (1j * k)[None, :]
