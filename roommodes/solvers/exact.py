"""Exact frequency-domain solver for a rectangular room with locally reacting walls.

At a fixed frequency the Helmholtz problem of the box separates, whatever the
(complex, frequency-dependent) wall impedances. Along each axis the eigenfunctions of

.. math:: X'' + k_x^2 X = 0 \\ \\text{on}\\ [0, L],\\qquad
          X'(0) = +j k \\beta_0 X(0),\\qquad X'(L) = -j k \\beta_L X(L)

(time factor ``e^{+j w t}``, ``beta = 1 / zeta`` the normalised wall admittance; these
are ``dp/dn = -j k beta p`` with ``n`` the outward normal) are

.. math:: X_m(x) = \\cos(k_m x) + A_0\\, x\\,\\operatorname{sinc}(k_m x),\\qquad
          A_0 = j k \\beta_0,\\quad \\operatorname{sinc}(u) = \\sin(u)/u,

with complex ``k_m = u_m / L``, the roots of the characteristic function

.. math:: F(w) = (w - a b)\\,\\operatorname{sinc}(u) - (a + b)\\cos(u) = 0,\\qquad
          w = u^2,\\ a = j k L \\beta_0,\\ b = j k L \\beta_L,

an entire function of ``w`` whose zeros are ``(m pi)^2`` for rigid ends. The problem is
not self-adjoint: the ``X_m`` are orthogonal under the *unconjugated* product, with
``N_m = int_0^L X_m^2 dx``. The Green's function of ``lap p + k^2 p = -delta`` is

.. math:: G(r, r_0) = \\sum_{m,n} \\frac{X_m(x) X_m(x_0)\\,Y_n(y) Y_n(y_0)}{N_m N_n}
          \\,g_{mn}(z, z_0),

where ``g_mn`` is the closed-form 1-D Green's function of ``g'' - kappa^2 g = -delta``
with the impedance ends of the third axis and ``kappa^2 = k_m^2 + k_n^2 - k^2``
(:func:`impedance_green_1d`). Its terms decay like ``exp(-Re kappa |z - z0|)``, so each
source-receiver pair is summed with the axis of its largest separation as the third
axis (Morse & Ingard 1968, sec. 9.4-9.5; Kuttruff 2009, ch. 3). The result is
``H = 4 pi G``, the modal solver's normalisation.

Truncation rule. A pair whose largest separation is ``d`` keeps the transverse indices
``m < k_t L_b / pi + 2``, ``n < k_t L_c / pi + 2`` (the rectangle around the disc of
radius ``k_t``), with

.. math:: k_t = \\sqrt{k_{max}^2 + (\\Lambda / d)^2},\\qquad
          \\Lambda = \\ln(16\\sqrt{3} / \\varepsilon),\\quad
          \\varepsilon = 10^{tol\\_db / 20} - 1.

Bound: the dropped terms have ``Re kappa >= Lambda / d``; with ``|X_m X_m / N_m| <= 2 / L``
and ``|g| <= 2 exp(-kappa d) / kappa`` for high orders, and the lattice density
``L_b L_c / pi^2``, their sum is at most ``(4 / pi) exp(-Lambda) / d`` in ``G``, so
``|dH| <= 16 exp(-Lambda) / d <= eps / R`` (``R <= sqrt(3) d`` the pair's distance). The
error is thus at most ``eps`` times the free-field transfer of the pair, i.e. below
``tol_db`` wherever the room's level is not below the free-field level at that distance
(it can exceed it inside deep interference nulls). Pairs closer than ``near_m`` along
every axis are truncated at ``d = near_m`` and get the rigid static tail instead: the
terms outside the rectangle are replaced by their rigid-wall, zero-frequency values,
summed in closed form (:func:`roommodes.solvers.modal.static_green_pairs`). That
replacement errs by a fraction of order ``k^2 / k_t^2 + |beta| k / k_t`` of the tail;
measured, a few thousandths of a dB at the defaults (tests/test_exact.py).

References
----------
.. [1] P. M. Morse, K. U. Ingard, Theoretical Acoustics, McGraw-Hill, 1968,
   sec. 9.4-9.5 (rooms with locally reacting walls, separable at a fixed frequency).
.. [2] H. Kuttruff, Room Acoustics, 5th ed., Spon, 2009, ch. 3.
"""

from __future__ import annotations

import threading

import numpy as np

from ..model.walls import impedance_table
from .modal import _g1d, static_green_pairs

__all__ = [
    "exact_transfer",
    "robin_roots",
    "robin_wavenumbers",
    "robin_characteristic",
    "robin_root_count",
    "robin_modes",
    "robin_norms",
    "impedance_green_1d",
    "truncation_wavenumber",
    "DEFAULT_TOL_DB",
    "DEFAULT_NEAR_M",
    "clear_caches",
]

#: Default accuracy target of the truncation rule, dB (see the module docstring).
DEFAULT_TOL_DB = 0.01
#: Pairs closer than this along every axis get the static tail, m.
DEFAULT_NEAR_M = 0.2
#: Constant of the truncation bound ``|dH| <= _BOUND_C exp(-Lambda) / R``.
_BOUND_C = 16.0 * np.sqrt(3.0)
#: Largest complex temporary (elements) built at once.
_BLOCK_ELEMENTS = 2_000_000
#: Continuation step: largest expected root displacement per step, in u = k L units.
_STEP_U = 0.25
_MAX_STEPS = 2000


# ---------------------------------------------------------------------------------------
# entire functions of w = u^2


def _sin_cos(u):
    """``sin(u), cos(u)`` of complex ``u`` from one complex exponential (``|Im u|`` small here)."""
    e = np.exp(1j * u)
    ie = 1.0 / e
    return (e - ie) * -0.5j, (e + ie) * 0.5


def _sinc(u):
    """``sin(u) / u`` for complex ``u`` (series near 0)."""
    small = np.abs(u) < 1e-3
    us = np.where(small, 1.0, u)
    u2 = u * u
    return np.where(small, 1.0 - u2 / 6.0 + u2 * u2 / 120.0, np.sin(us) / us)


def _series(u2, coeffs):
    out = np.zeros_like(u2)
    for c in coeffs[::-1]:
        out = out * u2 + c
    return out


# (sinc(u) - cos(u)) / u^2 = sum_{n>=1} (-1)^(n+1) 2n u^(2n-2) / (2n+1)!
_Q_COEF = [(-1) ** (n + 1) * 2 * n / float(np.prod(np.arange(1, 2 * n + 2))) for n in range(1, 8)]
# (1 - sinc(2u)) / (2 u^2) = sum_{n>=1} (-1)^(n+1) 2^(2n-1) u^(2n-2) / (2n+1)!
_P_COEF = [(-1) ** (n + 1) * 2.0 ** (2 * n - 1) / float(np.prod(np.arange(1, 2 * n + 2))) for n in range(1, 9)]
# sinc(u) = sum_{n>=0} (-1)^n u^(2n) / (2n+1)!  (used with the _Q_COEF series, |u| < 0.5)
_S_COEF = [(-1) ** n / float(np.prod(np.arange(1, 2 * n + 2))) for n in range(0, 9)]


def _q(u):
    """``(sinc(u) - cos(u)) / u^2``, entire in ``u^2``."""
    u2 = u * u
    small = np.abs(u) < 0.5
    us2 = np.where(small, 1.0, u2)
    us = np.where(small, 1.0, u)
    return np.where(small, _series(u2, _Q_COEF), (np.sin(us) / us - np.cos(us)) / us2)


def _p(u):
    """``(1 - sinc(2u)) / (2 u^2)``, entire in ``u^2``."""
    u2 = u * u
    small = np.abs(u) < 0.5
    us = np.where(small, 1.0, u)
    return np.where(small, _series(u2, _P_COEF), (1.0 - np.sin(2 * us) / (2 * us)) / (2 * us * us))


def _scq(w):
    """``sinc(u), cos(u), q(u)`` at ``u = sqrt(w)`` from one complex exponential, with the
    series of the entire functions where ``|u| < 0.5`` (same values as :func:`_sinc`,
    ``np.cos`` and :func:`_q`)."""
    u = np.sqrt(w)
    sn, c = _sin_cos(u)
    small = np.abs(u) < 0.5
    if not small.any():
        s = sn / u
        return s, c, (s - c) / w
    ub = np.where(small, 1.0, u)
    s = sn / ub
    q = (s - c) / (ub * ub)
    w_s = w[small]
    s[small] = _series(w_s, _S_COEF)
    q[small] = _series(w_s, _Q_COEF)
    return s, c, q


def _fdf(w, a, b):
    """``F``, ``dF/dw``, ``sinc u`` and ``cos u`` (see :func:`robin_characteristic`)."""
    s, c, q = _scq(w)
    wab = w - a * b
    f = wab * s - (a + b) * c
    df = s - 0.5 * wab * q + 0.5 * (a + b) * s
    return f, df, s, c


def robin_characteristic(w, a, b):
    """Characteristic function of the 1-D Robin problem and its derivative in ``w``.

    Parameters
    ----------
    w : complex array_like
        ``w = u^2 = (k_x L)^2``.
    a, b : complex array_like
        Dimensionless end parameters ``a = j k L beta_0``, ``b = j k L beta_L``.

    Returns
    -------
    F, dF_dw : complex ndarrays
        ``F(w) = (w - a b) sinc(u) - (a + b) cos(u)`` and its derivative.

    Notes
    -----
    ``F`` is ``-W / L`` for the Wronskian-type quantity ``W = -b X(L) - L X'(L)`` of the
    solution ``X(xi) = cos(u xi) + a xi sinc(u xi)`` that meets the end condition at 0
    (``xi = x / L``); ``F = 0`` is the condition at ``xi = 1``. With
    ``d sinc / dw = -q / 2`` and ``d cos / dw = -sinc / 2`` (``q = (sinc - cos) / u^2``):
    ``dF/dw = sinc - (w - a b) q / 2 + (a + b) sinc / 2``.
    """
    f, df, _, _ = _fdf(np.asarray(w, dtype=complex), a, b)
    return f, df


def robin_roots(a, b, n, *, step_u=_STEP_U):
    """The first ``n`` roots ``u_m = k_m L`` of the 1-D Robin problem, by continuation.

    Parameters
    ----------
    a, b : complex array_like, broadcastable to a common shape ``S``
        ``a = j k L beta_0`` and ``b = j k L beta_L`` (dimensionless).
    n : int
        Number of roots, >= 1.
    step_u : float
        Largest expected root displacement per continuation step.

    Returns
    -------
    u : complex ndarray, shape ``S + (n,)``
        Roots ordered by their rigid index ``m`` (``u_m -> m pi`` as ``a, b -> 0``),
        ``Re u >= 0``.

    Raises
    ------
    RuntimeError
        If Newton's method does not converge or two roots coincide (a missed root).

    Notes
    -----
    Each root is followed from ``w = (m pi)^2`` along ``a(t) = t a, b(t) = t b``,
    ``t: 0 -> 1``, with an Euler predictor ``dw/dt = -F_t / F_w`` and three Newton
    corrections per step, then Newton to convergence at ``t = 1``. The number of steps
    per root grows with its expected displacement, ``(|a| + |b|) / (m pi)`` (``m >= 1``)
    or ``sqrt(|a| + |b|)`` (``m = 0``). Zeros of an entire function move continuously
    and none enter from infinity for bounded ``a, b``, so following all ``n`` misses
    none unless two paths merge: that is checked (no two roots within ``1e-7``), and a
    failed check is retried with steps four times smaller.
    """
    a = np.asarray(a, dtype=complex)
    b = np.asarray(b, dtype=complex)
    shape = np.broadcast_shapes(a.shape, b.shape)
    n = int(n)
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")
    a1 = np.broadcast_to(a, shape)[..., None] * np.ones(n)
    b1 = np.broadcast_to(b, shape)[..., None] * np.ones(n)
    m = np.broadcast_to(np.arange(n, dtype=float), a1.shape)
    if len(shape) == 1 and shape[0] >= 2 * _ANCHOR_EVERY:
        # fast path: full continuation at every _ANCHOR_EVERY-th entry only; the others
        # start from the roots of the nearest such entry (a neighbouring frequency) and
        # follow the straight path between the two (a, b), with steps sized as above
        u = _from_anchors(a1, b1, m, step_u)
        if u is not None:
            return u
    for attempt in range(3):
        w, ok = _track(a1.ravel(), b1.ravel(), m.ravel(), step_u / 4.0**attempt)
        u = np.sqrt(w).reshape(a1.shape)
        if ok and not _has_duplicates(u):
            return u
    raise RuntimeError("Robin root continuation failed (non-convergence or merged roots)")


#: Spacing of the entries that get the full continuation in :func:`robin_roots` (1-D input).
_ANCHOR_EVERY = 8


def _from_anchors(a1, b1, m, step_u):
    """Roots (S, n) by continuation from the roots of nearby entries; None if the checks fail."""
    out = _roots_blocks([(a1[:, 0], b1[:, 0], a1.shape[1])], step_u)
    return None if out is None else out[0]


def _roots_blocks(blocks, step_u=_STEP_U):
    """Roots of several 1-D tables at once: ``blocks`` is a list of ``(a (S,), b (S,), n)``;
    returns a list of ``u`` (S, n), or None if a check fails (the caller then falls back to
    :func:`robin_roots`). Entries ``0, E, 2E, ...`` and the last (``E = _ANCHOR_EVERY``) get
    the full continuation from the rigid roots; every other entry starts from the roots of
    the nearest of those and follows the straight path between the two ``(a, b)``, with
    steps sized by the same displacement rule. All tables share two vectorised passes."""
    full, part, meta = [], [], []
    for a, b, n in blocks:
        n_s = a.shape[0]
        anchors = np.unique(np.r_[np.arange(0, n_s, _ANCHOR_EVERY), n_s - 1])
        rest = np.setdiff1d(np.arange(n_s), anchors)
        mm = np.arange(n, dtype=float)
        full.append((np.repeat(a[anchors], n), np.repeat(b[anchors], n), np.tile(mm, anchors.size)))
        meta.append((n_s, n, anchors, rest))
    w_full, ok = _track(*(np.concatenate(x) for x in zip(*full)), step_u)
    if not ok:
        return None
    w_anchor, i0 = [], 0
    for (_n_s, n, anchors, rest), (a, b, _) in zip(meta, blocks):
        wa = w_full[i0:i0 + anchors.size * n].reshape(anchors.size, n)
        i0 += anchors.size * n
        w_anchor.append(wa)  # checked for merged roots with the whole table below
        # start: linear interpolation, in the entry index, of the bracketing anchors' roots
        hi = np.searchsorted(anchors, rest)
        t = ((rest - anchors[hi - 1]) / (anchors[hi] - anchors[hi - 1]))[:, None]
        guess = (1.0 - t) * wa[hi - 1] + t * wa[hi]
        part.append((np.repeat(a[rest], n), np.repeat(b[rest], n), guess.ravel()))
    a_r, b_r, w0 = (np.concatenate(x) for x in zip(*part))
    w_part, ok = _newton(w0, a_r, b_r)
    # Newton must stay near its start (no jump to another root); else the caller falls back
    if not ok or np.any(np.abs(np.sqrt(w_part) - np.sqrt(w0)) > step_u):
        return None
    out, i0 = [], 0
    for (n_s, n, anchors, rest), wa in zip(meta, w_anchor):
        w = np.empty((n_s, n), dtype=complex)
        w[anchors] = wa
        w[rest] = w_part[i0:i0 + rest.size * n].reshape(rest.size, n)
        i0 += rest.size * n
        u = np.sqrt(w)
        if _has_duplicates(u):
            return None
        out.append(u)
    return out


def _newton(w, a, b, iterations=30):
    """Newton's method on ``F(w) = 0`` to ``|dw| <= 1e-13 (1 + |w|)`` (flat arrays); returns
    the roots and a success flag."""
    w = np.array(w, dtype=complex)
    ok = np.zeros(w.shape, dtype=bool)
    for _ in range(iterations):
        idx = np.flatnonzero(~ok)
        if idx.size == 0:
            break
        f, df, _, _ = _fdf(w[idx], a[idx], b[idx])
        dw = f / df
        w[idx] -= dw
        ok[idx] = np.abs(dw) <= 1e-13 * (1.0 + np.abs(w[idx]))
    return w, bool(np.all(ok) and np.all(np.isfinite(w)))


def _has_duplicates(u):
    if u.shape[-1] < 2:
        return False
    ur = u.reshape(-1, u.shape[-1])
    order = np.argsort(ur.real + 1e-3 * ur.imag, axis=1)
    us = np.take_along_axis(ur, order, axis=1)
    gap = np.abs(np.diff(us, axis=1))
    # also compare with the neighbour two places on (sorting by real part can interleave)
    gap2 = np.abs(us[:, 2:] - us[:, :-2]) if us.shape[1] > 2 else np.full((us.shape[0], 1), np.inf)
    scale = 1.0 + np.abs(us)
    return bool(np.any(gap < 1e-7 * scale[:, 1:]) or np.any(gap2 < 1e-7 * scale[:, 2:]))


def _track(a, b, m, step_u, w0=None, a0=None, b0=None):
    """Follow each root (flat arrays) along ``a(t) = a0 + t (a - a0)`` (likewise ``b``),
    ``t: 0 -> 1``, from ``w0`` (default: the rigid roots ``(m pi)^2`` at ``a0 = b0 = 0``);
    return w and a success flag."""
    if w0 is None:
        w0 = (m * np.pi) ** 2 + 0j
        a0 = np.zeros_like(a)
        b0 = np.zeros_like(b)
    da, db = a - a0, b - b0
    mag = np.abs(da) + np.abs(db)
    disp = np.where(m > 0, mag / (np.pi * np.maximum(m, 1.0)), np.sqrt(mag))
    steps = np.clip(np.ceil(disp / step_u), 1, _MAX_STEPS).astype(int)
    steps = np.where(mag == 0, 0, steps)
    order = np.argsort(-steps, kind="stable")  # most steps first: the active set is a prefix
    a_s, b_s, st = a[order], b[order], steps[order]
    a0_s, b0_s, da_s, db_s = a0[order], b0[order], da[order], db[order]
    w = np.array(w0[order], dtype=complex)
    dt = np.where(st > 0, 1.0 / np.maximum(st, 1), 0.0)
    n_active = np.searchsorted(-st, -np.arange(1, st.max(initial=0) + 1), side="right")
    for j in range(st.max(initial=0)):
        p = n_active[j]
        sl = slice(0, p)
        t0 = j * dt[sl]
        ww = w[sl]
        da_j, db_j = da_s[sl], db_s[sl]
        at, bt = a0_s[sl] + t0 * da_j, b0_s[sl] + t0 * db_j
        # Euler predictor in t: F_t = (-b s - c) da + (-a s - c) db
        f, df, sw, cw = _fdf(ww, at, bt)
        ft = -(bt * sw + cw) * da_j - (at * sw + cw) * db_j
        ww = ww - dt[sl] * ft / df
        t1 = t0 + dt[sl]
        at, bt = a0_s[sl] + t1 * da_j, b0_s[sl] + t1 * db_j
        for _ in range(3):
            f, df, _, _ = _fdf(ww, at, bt)
            ww = ww - f / df
        w[sl] = ww
    # polish at t = 1
    w, good = _newton(w, a_s, b_s)
    out = np.empty_like(w)
    out[order] = w
    return out, good


def robin_root_count(a, b, radius, samples=None):
    """Number of roots with ``|u| < radius``, by the argument principle (a check).

    Parameters
    ----------
    a, b : complex
        End parameters as in :func:`robin_roots`.
    radius : float
        Radius in ``u`` (the contour is ``|w| = radius^2``); must not pass through a root.
    samples : int, optional
        Points on the contour; default grows with ``radius`` and is doubled until no
        phase step exceeds pi/4.

    Returns
    -------
    int
        Winding number of ``F`` around ``|w| = radius^2``.
    """
    ns = int(samples or max(512, 64 * int(radius)))
    for _ in range(12):
        theta = np.linspace(0.0, 2 * np.pi, ns + 1)
        w = radius**2 * np.exp(1j * theta)
        f, _ = robin_characteristic(w, a, b)
        dphi = np.angle(f[1:] / f[:-1])
        if np.max(np.abs(dphi)) < np.pi / 4:
            return int(np.rint(np.sum(dphi) / (2 * np.pi)))
        ns *= 2
    raise RuntimeError("argument-principle count did not resolve the phase")


def robin_wavenumbers(length_m, beta_lo, beta_hi, k, n):
    """Complex axial wavenumbers ``k_m`` of one axis with impedance ends.

    Parameters
    ----------
    length_m : float
        Axis length L, m.
    beta_lo, beta_hi : complex array_like
        Normalised admittances ``1 / zeta`` of the walls at 0 and at L (0 = rigid).
    k : array_like
        Wavenumber ``2 pi f / c``, 1/m, broadcast with the admittances.
    n : int
        Number of wavenumbers.

    Returns
    -------
    k_m : complex ndarray, shape ``broadcast + (n,)``
        Roots of ``X'' + k_m^2 X = 0``, ``X'(0) = j k beta_lo X(0)``,
        ``X'(L) = -j k beta_hi X(L)``, ordered by rigid index (``k_m -> m pi / L``).
    """
    L = float(length_m)
    k = np.asarray(k, dtype=float)
    a = 1j * k * L * np.asarray(beta_lo, dtype=complex)
    b = 1j * k * L * np.asarray(beta_hi, dtype=complex)
    return robin_roots(a, b, n) / L


def robin_modes(x_m, length_m, k_m, a_lo):
    """Eigenfunctions ``X_m(x) = cos(k_m x) + A x sinc(k_m x)`` (``X(0) = 1``).

    Parameters
    ----------
    x_m : array_like
        Positions, m, broadcast against ``k_m``.
    length_m : float
        Axis length, m (unused; kept for symmetry with :func:`robin_norms`).
    k_m : complex array_like
        Wavenumbers from :func:`robin_wavenumbers`.
    a_lo : complex array_like
        ``A = j k beta_lo``, 1/m, broadcast against ``k_m``.
    """
    arg = k_m * x_m
    return np.cos(arg) + a_lo * x_m * _sinc(arg)


def _modes(x_m, k_m, a_lo):
    """:func:`robin_modes` at points ``x_m`` (P,) for ``k_m`` (F, m): shape (P, F, m), with
    one complex exponential per value (``x sinc(k x) = sin(k x) / k``)."""
    x = x_m[:, None, None]
    sn, c = _sin_cos(k_m * x)
    kz = k_m == 0
    if kz.any():
        return c + a_lo * np.where(kz, x, sn / np.where(kz, 1.0, k_m))
    return c + a_lo * (sn / k_m)


def _modes_of(x_m, k_m, a_lo):
    """:func:`_modes` computed at the distinct values of ``x_m`` only and gathered back
    (the pairs of a call share their points: a few sources, a few receivers)."""
    u, inv = np.unique(x_m, return_inverse=True)
    if u.size == x_m.size:
        return _modes(x_m, k_m, a_lo)
    return _modes(u, k_m, a_lo)[inv.ravel()]


def robin_norms(length_m, k_m, a_lo):
    """Unconjugated norms ``N_m = int_0^L X_m^2 dx`` (closed form).

    ``N = L [(1 + sinc 2u) / 2 + a sinc^2 u + a^2 (1 - sinc 2u) / (2 u^2)]`` with
    ``u = k_m L`` and ``a = A L``.
    """
    L = float(length_m)
    u = k_m * L
    a = a_lo * L
    return L * (0.5 * (1.0 + _sinc(2 * u)) + a * _sinc(u) ** 2 + a * a * _p(u))


def impedance_green_1d(z_m, z0_m, length_m, kappa2, a_lo, a_hi):
    """1-D Green's function of ``g'' - kappa^2 g = -delta(z - z0)`` with impedance ends.

    Parameters
    ----------
    z_m, z0_m : array_like
        Receiver and source coordinates on [0, L], m (broadcast).
    length_m : float
        L, m.
    kappa2 : complex array_like
        ``kappa^2 = k_x^2 + k_y^2 - k^2`` (``-kz^2``), 1/m^2.
    a_lo, a_hi : complex array_like
        ``A = j k beta`` of the ends at 0 and L, 1/m: ``g'(0) = A_lo g(0)``,
        ``g'(L) = -A_hi g(L)``.

    Returns
    -------
    g : complex ndarray

    Notes
    -----
    With ``kappa = sqrt(kappa^2)`` (``Re kappa >= 0``), the plane-wave reflection factor
    ``R = (kappa - A) / (kappa + A)`` of each end and ``z<, z>`` the smaller and larger
    coordinate, the multiple-reflection sum is

    ``g = e^{-kappa (z> - z<)} [1 + R_0 e^{-2 kappa z<}] [1 + R_L e^{-2 kappa (L - z>)}]
    / (2 kappa [1 - R_0 R_L e^{-2 kappa L}])``,

    evaluated here with the denominators of ``R`` cleared and ``expm1`` so that no
    exponential grows and small ``kappa`` loses no digits (at ``kappa = 0`` it is
    ``(1 + A_0 z<)(1 + A_L (L - z>)) / (A_0 + A_L + A_0 A_L L)``). Rigid ends give
    the Neumann function of the modal solver's static tail.
    """
    L = float(length_m)
    kap = np.sqrt(np.asarray(kappa2, dtype=complex))
    kap = np.where(np.abs(kap) * L < 1e-7, 1e-7 / L, kap)
    z = np.asarray(z_m, dtype=float)
    z0 = np.asarray(z0_m, dtype=float)
    lo = np.minimum(z, z0)
    hi = np.maximum(z, z0)
    return _g_core(kap, lo, hi, L, a_lo, a_hi)


def _g_core(kap, lo, hi, L, a0, aL, inv=None):
    """The formula of :func:`impedance_green_1d`; ``inv = 1 / (2 kappa D)`` may be given
    (it depends on ``kappa`` only, not on the points)."""
    if inv is None:
        inv = _g_inv(kap, L, a0, aL)
    # Per-point factors with exp rather than expm1 (half the cost): 1 - e loses absolute
    # digits only, and kappa L >= 1e-7 keeps the relative error below about 1e-9.
    e0 = np.exp(-2.0 * kap * lo)
    eL = np.exp(-2.0 * kap * (L - hi))
    ed = np.exp(-kap * (hi - lo))
    n0 = kap * (1.0 + e0) + a0 * (1.0 - e0)
    nL = kap * (1.0 + eL) + aL * (1.0 - eL)
    return ed * n0 * nL * inv


def _g_inv(kap, L, a0, aL, emD=None):
    """``1 / (2 kappa D)``, ``D = (kappa + A_0)(kappa + A_L) - (kappa - A_0)(kappa - A_L) e^{-2 kappa L}``
    (``emD = expm1(-2 kappa L)`` may be given)."""
    if emD is None:
        emD = np.expm1(-2.0 * kap * L)
    den = -(kap * kap + a0 * aL) * emD + kap * (a0 + aL) * (2.0 + emD)
    return 1.0 / (2.0 * kap * den)


# ---------------------------------------------------------------------------------------
# the 3-D transfer


def _phi_lo(kap, z, a0):
    """``(kappa + A_0) e^{kappa z} + (kappa - A_0) e^{-kappa z}`` at the points ``z`` (U,):
    the solution that meets the end condition at 0, shape ``(U,) + kap.shape``."""
    e = np.exp(kap * z.reshape((-1,) + (1,) * kap.ndim))
    return (kap + a0) * e + (kap - a0) / e


def _phi_hi(kap, z, aL, e2L):
    """``(kappa + A_L) e^{-kappa z} + (kappa - A_L) e^{-2 kappa L} e^{kappa z}``: the solution
    that meets the end condition at ``L`` (``e2L = e^{-2 kappa L}``)."""
    e = np.exp(-kap * z.reshape((-1,) + (1,) * kap.ndim))
    return (kap + aL) * e + (kap - aL) * e2L / e


#: Largest ``Re kappa L`` for the factorised form ``g = inv phi_lo(z<) phi_hi(z>)``: its
#: factors grow like ``e^{Re kappa L}`` and must stay far from overflow (``e^600 ~ 1e260``).
_FACTOR_MAX = 600.0
#: Entries of each cache of per-axis tables (they depend on the room and the frequencies only).
_CACHE_SIZE = 16
_AXIS_CACHE: dict = {}
_GROUP_CACHE: dict = {}


#: The caches are shared by threads (the report runs its placement search beside its sections).
_CACHE_LOCK = threading.Lock()


def _cache_put(cache, key, value):
    with _CACHE_LOCK:
        if key in cache:
            cache.pop(key)
        elif len(cache) >= _CACHE_SIZE:
            cache.pop(next(iter(cache)))  # the least recently used entry
        cache[key] = value
    return value


def _cache_get(cache, key):
    with _CACHE_LOCK:
        value = cache.pop(key, None)
        if value is not None:
            cache[key] = value  # now the most recently used
    return value


def clear_caches():
    """Empty the tables :func:`exact_transfer` keeps between calls (root and kernel tables
    per room and frequency set; at most 16 of each, least recently used dropped first)."""
    with _CACHE_LOCK:
        _AXIS_CACHE.clear()
        _GROUP_CACHE.clear()


def _axis_tables(size, beta, k, amp, need):
    """Wavenumbers ``k_m`` (F, >= need[d]) and norms of each axis ``d`` with ``need[d] > 0``.

    Taken from the cache when an entry for the same axis, walls and frequencies holds at
    least ``need[d]`` roots (roots are followed one by one, so the first ``n`` of a longer
    table are the ``n``-root answer); the missing axes are solved together."""
    kax, nax = [None] * 3, [None] * 3
    keys, todo = [None] * 3, []
    for d in range(3):
        if need[d] == 0:
            continue
        keys[d] = (float(size[d]), beta[2 * d].tobytes(), beta[2 * d + 1].tobytes(), k.tobytes())
        hit = _cache_get(_AXIS_CACHE, keys[d])
        if hit is not None and hit[0].shape[1] >= need[d]:
            kax[d], nax[d] = hit
        else:
            todo.append(d)
    if not todo:
        return kax, nax
    ab = [(1j * k * size[d] * beta[2 * d], 1j * k * size[d] * beta[2 * d + 1], int(need[d])) for d in todo]
    roots = _roots_blocks(ab) if k.size >= 2 * _ANCHOR_EVERY else None
    if roots is None:
        roots = [robin_roots(a, b, n) for a, b, n in ab]
    for d, u in zip(todo, roots):
        km = u / size[d]
        nm = robin_norms(size[d], km, amp[2 * d][:, None])
        km.setflags(write=False)
        nm.setflags(write=False)
        kax[d], nax[d] = _cache_put(_AXIS_CACHE, keys[d], (km, nm))
    return kax, nax


def _group_table(key, kb, kc, k, L, a0, aL):
    """``kappa``, ``1 / (2 kappa D)`` and ``e^{-2 kappa L}`` on the (F, mb, mc) grid of
    transverse wavenumbers, and whether the factorised form may be used (cached)."""
    hit = _cache_get(_GROUP_CACHE, key)
    if hit is not None:
        return hit
    kap = np.sqrt(kb[:, :, None] ** 2 + kc[:, None, :] ** 2 - (k * k)[:, None, None])
    kap = np.where(np.abs(kap) * L < 1e-7, 1e-7 / L, kap)
    emD = np.expm1(-2.0 * kap * L)
    inv = _g_inv(kap, L, a0, aL, emD)
    factor_ok = bool(np.max(kap.real) * L <= _FACTOR_MAX)
    e2L = np.exp(-2.0 * kap * L)  # not 1 + emD: that loses e^{-2 kappa L} once it is below 1e-16
    for x in (kap, inv, e2L):
        x.setflags(write=False)
    return _cache_put(_GROUP_CACHE, key, (kap, inv, e2L, factor_ok))




def truncation_wavenumber(sep_m, k_max, tol_db=DEFAULT_TOL_DB):
    """Radius ``k_t`` of the transverse wavenumbers kept for a largest separation ``sep_m``.

    ``k_t = sqrt(k_max^2 + (Lambda / sep)^2)``, ``Lambda = ln(16 sqrt(3) / eps)``,
    ``eps = 10^(tol_db / 20) - 1`` (the bound in the module docstring).
    """
    eps = 10.0 ** (float(tol_db) / 20.0) - 1.0
    lam = np.log(_BOUND_C / eps)
    return np.sqrt(float(k_max) ** 2 + (lam / np.asarray(sep_m, dtype=float)) ** 2)


def _admittance(zeta, n_freq):
    """Wall admittances (6, F) complex from impedances (6,) or (6, F); checks passivity."""
    z = impedance_table(zeta, n_freq, allow_complex=True)
    rigid = np.isinf(z.real)
    beta = np.zeros(z.shape, dtype=complex)
    beta[~rigid] = 1.0 / z[~rigid]
    return beta


def _points(name, pts, size):
    p = np.atleast_2d(np.asarray(pts, dtype=float))
    if p.ndim != 2 or p.shape[1] != 3 or p.shape[0] == 0 or not np.all(np.isfinite(p)):
        raise ValueError(f"{name} must be finite (N, 3) positions in metres, got shape {np.shape(pts)}")
    bad = ~np.all((p >= 0) & (p <= size), axis=1)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise ValueError(f"{name}[{i}] = {p[i].tolist()} m lies outside the room 0..{size.tolist()} m")
    return p


def exact_transfer(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, *,
                   tol_db=DEFAULT_TOL_DB, near_m=DEFAULT_NEAR_M):
    """Complex transfer from point sources to receivers, exact for locally reacting walls.

    Parameters
    ----------
    size_m : array_like (3,)
        Room dimensions (Lx, Ly, Lz), m, > 0.
    zeta : array_like (6,) or (6, F), real or complex
        Normalised specific impedance ``Z / (rho c)`` of each wall (front x=0, back x=Lx,
        left y=0, right y=Ly, floor z=0, ceiling z=Lz), per frequency or constant;
        ``Re zeta >= 0``; ``np.inf`` is rigid.
    sources_m : array_like (N, 3)
    receivers_m : array_like (M, 3)
        Positions inside the room, m. A source may not coincide with a receiver.
    freq_hz : array_like (F,)
        Frequencies, Hz, > 0.
    speed_of_sound : float
        m/s, > 0.
    tol_db : float
        Accuracy target of the truncation rule, dB, > 0 (module docstring).
    near_m : float
        Pairs closer than this along every axis are truncated as if this far apart and
        get the rigid static tail, m, > 0.

    Returns
    -------
    H : ndarray, complex, shape (N, M, F)
        ``4 pi G``: pressure relative to the free-field pressure of the same source at
        1 m (time factor ``e^{+j w t}``), as :func:`roommodes.solvers.modal.modal_transfer`.

    Raises
    ------
    ValueError
        For a bad argument (named in the message).

    Notes
    -----
    Robin eigenfunctions on the two axes across each pair's largest separation and the
    closed-form 1-D impedance Green's function along it; see the module docstring for
    the equations, the truncation rule and its bound.

    References
    ----------
    Morse & Ingard, Theoretical Acoustics, 1968, sec. 9.4-9.5; Kuttruff, Room
    Acoustics, 5th ed., 2009, ch. 3.

    Examples
    --------
    >>> import numpy as np
    >>> from roommodes.solvers.exact import exact_transfer
    >>> h = exact_transfer([5.0, 4.0, 2.6], np.full(6, 20.0), [[1.0, 1.0, 1.0]],
    ...                    [[3.0, 2.5, 1.2]], [50.0, 60.0], 343.0)
    >>> h.shape
    (1, 1, 2)
    """
    size = np.asarray(size_m, dtype=float)
    if size.shape != (3,) or not np.all(np.isfinite(size)) or np.any(size <= 0):
        raise ValueError(f"size_m must be three lengths > 0 m, got {size_m!r}")
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"freq_hz must be a 1-D array of frequencies > 0 Hz, got {freq_hz!r}")
    c = float(speed_of_sound)
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"speed_of_sound must be > 0 m/s, got {speed_of_sound!r}")
    if not (np.isfinite(tol_db) and tol_db > 0):
        raise ValueError(f"tol_db must be > 0 dB, got {tol_db!r}")
    if not (np.isfinite(near_m) and near_m > 0):
        raise ValueError(f"near_m must be > 0 m, got {near_m!r}")
    beta = _admittance(zeta, f.size)
    src = _points("sources_m", sources_m, size)
    rec = _points("receivers_m", receivers_m, size)
    k = 2 * np.pi * f / c
    kmax = float(k.max())
    amp = 1j * k[None, :] * beta  # (6, F): A = j k beta of each wall

    ns, nr = src.shape[0], rec.shape[0]
    si, ri = np.divmod(np.arange(ns * nr), nr)
    sep = np.abs(src[si] - rec[ri])  # (P, 3)
    axis = np.argmax(sep, axis=1)
    dmax = sep[np.arange(sep.shape[0]), axis]
    if np.any(dmax == 0):
        i = int(np.argmax(dmax == 0))
        raise ValueError(f"sources_m[{si[i]}] coincides with receivers_m[{ri[i]}]; the transfer is singular there")
    deff = np.maximum(dmax, near_m)
    # bins of effective separation (a factor 1.5 wide): one truncation per bin and axis
    bins = np.floor(np.log(deff) / np.log(1.5)).astype(int)
    groups = []
    need = np.zeros(3, dtype=int)
    for a in range(3):
        for key in np.unique(bins[axis == a]):
            sel = np.flatnonzero((axis == a) & (bins == key))
            kt = float(truncation_wavenumber(deff[sel].min(), kmax, tol_db))
            tb, tc = [i for i in range(3) if i != a]
            mb = int(kt * size[tb] / np.pi) + 2
            mc = int(kt * size[tc] / np.pi) + 2
            need[tb] = max(need[tb], mb)
            need[tc] = max(need[tc], mc)
            groups.append((a, tb, tc, mb, mc, sel))

    # axial wavenumbers, one set per axis and frequency (cached per room and frequencies)
    kax, nax = _axis_tables(size, beta, k, amp, need)

    out = np.empty((ns * nr, f.size), dtype=complex)
    room_key = (size.tobytes(), beta.tobytes(), k.tobytes())
    for a, tb, tc, mb, mc, sel in groups:
        kb, kc = kax[tb][:, :mb], kax[tc][:, :mc]
        a0 = amp[2 * a][:, None, None]
        aL = amp[2 * a + 1][:, None, None]
        ab = amp[2 * tb][:, None]
        ac = amp[2 * tc][:, None]
        nb, nc = nax[tb][:, :mb], nax[tc][:, :mc]
        kap, inv, e2L, factor_ok = _group_table(room_key + (a, mb, mc), kb, kc, k, size[a], a0, aL)
        chunk = max(1, _BLOCK_ELEMENTS // (f.size * mb * mc))
        for p0 in range(0, sel.size, chunk):
            part = sel[p0:p0 + chunk]
            s, r = src[si[part]], rec[ri[part]]
            # transverse mode products X(s) X(r) / N, (P, F, m)
            xb = (_modes_of(s[:, tb], kb, ab) * _modes_of(r[:, tb], kb, ab)) / nb
            xc = (_modes_of(s[:, tc], kc, ac) * _modes_of(r[:, tc], kc, ac)) / nc
            lo = np.minimum(s[:, a], r[:, a])
            hi = np.maximum(s[:, a], r[:, a])
            if factor_ok:
                # g = inv phi_lo(z<) phi_hi(z>): each distinct coordinate costs one exp
                ulo, ilo = np.unique(lo, return_inverse=True)
                uhi, ihi = np.unique(hi, return_inverse=True)
                g = _phi_lo(kap, ulo, a0)[ilo.ravel()]
                g *= _phi_hi(kap, uhi, aL, e2L)[ihi.ravel()]
                g *= inv
            else:
                g = _g_core(kap, lo[:, None, None, None], hi[:, None, None, None], size[a], a0, aL, inv)
            t = np.einsum("pfmn,pfn->pfm", g, xc)
            out[part] = 4 * np.pi * np.einsum("pfm,pfm->pf", t, xb)
        near = sel[dmax[sel] < near_m]
        if near.size:
            out[near] += _static_tail(size, src[si[near]], rec[ri[near]], a, tb, tc, mb, mc)[:, None]
    return out.reshape(ns, nr, f.size)


def _static_tail(size, s, r, a, tb, tc, mb, mc):
    """``4 pi`` times the rigid static Green's function minus its terms ``m < mb, n < mc``
    summed along axis ``a`` (the same terms the exact sum keeps): the static value of the
    terms it drops."""
    full = static_green_pairs(size, s, r)
    m = np.arange(mb)
    n = np.arange(mc)
    km = m * np.pi / size[tb]
    kn = n * np.pi / size[tc]
    kap = np.sqrt(km[:, None] ** 2 + kn[None, :] ** 2).ravel()
    w = (np.where(m > 0, 2.0, 1.0)[:, None] * np.where(n > 0, 2.0, 1.0)[None, :]).ravel() / (size[tb] * size[tc])
    cb = np.cos(km * s[:, tb, None]) * np.cos(km * r[:, tb, None])  # (P, mb)
    cc = np.cos(kn * s[:, tc, None]) * np.cos(kn * r[:, tc, None])
    shape = (cb[:, :, None] * cc[:, None, :]).reshape(s.shape[0], -1)
    lo = np.minimum(s[:, a], r[:, a])[:, None]
    hi = np.maximum(s[:, a], r[:, a])[:, None]
    kept = np.sum(shape * w * _g1d(lo, hi, kap, size[a]), axis=1)
    return 4 * np.pi * (full - kept)
