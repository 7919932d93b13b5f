"""numba kernels of the image-source solver (nothing else lives here).

Each kernel has a plain-NumPy twin in :mod:`roommodes.solvers.images`
(``_spread_numpy`` and ``_direct_sum_numpy``); tests/test_images.py shows they agree.

The one kernel, :func:`spread_shells`, walks the image lattice of a rectangular room
shell by shell (shell ``n`` holds the images of total reflection order ``n``; Allen &
Berkley 1979) and adds each image's contribution ``A_i / R_i`` to one or more sampled
impulse responses with a truncated Gaussian kernel centred at the image's delay
``R_i / c``: "fast Gaussian gridding" (Greengard & Lee 2004), two ``exp``
calls per image instead of one per tap. It serves one receiver at a time and any
reflection model.

When the reflection factors do not depend on the angle (the energy model) the images of one
source are listed once per block of shells (:func:`lattice_images`, into a reused buffer) and
spread for each receiver (:func:`spread_images` on one thread, :func:`spread_images_many` on
one or more) with each tap a degree-5 polynomial from tables, computed and added in one pass:
no transcendental call and no temporary array per image.

:func:`windowed_max` is the sliding maximum of the truncation estimate.

References
----------
.. [1] J. B. Allen, D. A. Berkley, "Image method for efficiently simulating
   small-room acoustics", J. Acoust. Soc. Am. 65(4):943-950, 1979.
.. [2] L. Greengard, J.-Y. Lee, "Accelerating the nonuniform fast Fourier
   transform", SIAM Review 46(3):443-454, 2004.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = ["lattice_images", "spread_images", "spread_images_many", "spread_shells", "windowed_max"]


@njit(cache=True)
def spread_shells(
    axis_d, axis_front, axis_back, beta, axis_amp, angle_dependent,
    n_first, n_last, samples_per_m, inv_4tau, tap_ratio, offset, ir,
):
    """Add image shells ``n_first..n_last`` of one source-receiver pair to impulse responses.

    Parameters
    ----------
    axis_d : float64 (3, O+1, 2)
        Image coordinate minus receiver coordinate along each axis, m, for per-axis
        reflection order ``o`` and branch ``s`` (branch 1 unused at ``o = 0``).
    axis_front, axis_back : int64 (3, O+1, 2)
        Reflections from the wall at 0 and at ``L`` of that axis.
    beta : float64 (6, K)
        Wall admittances ``1 / zeta`` (0 = rigid), one column per impulse response;
        used when ``angle_dependent``.
    axis_amp : float64 (3, O+1, 2, K)
        Per-axis products of angle-independent reflection factors; used otherwise.
    angle_dependent : bool
        True: ``R = (cos t - beta) / (cos t + beta)`` per reflection, with
        ``cos t = |d_axis| / R_i`` (plane-wave reflection of a locally reacting wall).
    n_first, n_last : int
        Shells to add (inclusive).
    samples_per_m : float
        ``fs / c``, samples per metre of path.
    inv_4tau : float
        ``1 / (4 tau)`` of the Gaussian ``exp(-x^2 / (4 tau))``, x in samples.
    tap_ratio : float64 (W-1,)
        ``exp(-(2 k + 1) / (4 tau))`` for the tap offsets ``k = -W/2+1 .. W/2-1``.
    offset : int
        Index of sample 0 in ``ir`` (so that taps before t = 0 fit).
    ir : float64 (Ns, K)
        Impulse responses (one per column), accumulated in place.

    Returns
    -------
    last : int
        Largest row of ``ir`` written.

    Notes
    -----
    Tap ``j`` of an image at ``u = R fs / c = i0 + delta`` samples sits at
    ``i0 + k``, ``k = j - W/2 + 1``, with weight ``exp(-(k - delta)^2 / (4 tau))``.
    Successive weights differ by ``exp(-(2 k + 1) / (4 tau)) exp(delta / (2 tau))``
    (the factorisation of Greengard & Lee 2004). The K columns are innermost so that the loops
    over them vectorise.
    """
    n_k = ir.shape[1]
    width = tap_ratio.shape[0] + 1
    k_min = 1 - width // 2
    w = np.empty(width)
    amp = np.empty(n_k)
    fac = np.empty(n_k)
    last = 0
    for n in range(n_first, n_last + 1):
        for ox in range(n + 1):
            for oy in range(n - ox + 1):
                oz = n - ox - oy
                nsx = 1 if ox == 0 else 2
                nsy = 1 if oy == 0 else 2
                nsz = 1 if oz == 0 else 2
                for sx in range(nsx):
                    dx = axis_d[0, ox, sx]
                    for sy in range(nsy):
                        dy = axis_d[1, oy, sy]
                        for sz in range(nsz):
                            dz = axis_d[2, oz, sz]
                            r = np.sqrt(dx * dx + dy * dy + dz * dz)
                            inv_r = 1.0 / r
                            # Amplitude A_i / R_i (Allen & Berkley 1979: each
                            # wall's reflection factor raised to its hit count).
                            if n_k == 1:
                                # one column: scalar code (the common, fastest case)
                                a = inv_r
                                if angle_dependent:
                                    if ox > 0:
                                        a *= _axis_factor_1(abs(dx) * inv_r, beta[0, 0], beta[1, 0],
                                                            axis_front[0, ox, sx], axis_back[0, ox, sx])
                                    if oy > 0:
                                        a *= _axis_factor_1(abs(dy) * inv_r, beta[2, 0], beta[3, 0],
                                                            axis_front[1, oy, sy], axis_back[1, oy, sy])
                                    if oz > 0:
                                        a *= _axis_factor_1(abs(dz) * inv_r, beta[4, 0], beta[5, 0],
                                                            axis_front[2, oz, sz], axis_back[2, oz, sz])
                                else:
                                    a *= axis_amp[0, ox, sx, 0] * axis_amp[1, oy, sy, 0] * axis_amp[2, oz, sz, 0]
                                amp[0] = a
                            elif angle_dependent:
                                for kk in range(n_k):
                                    amp[kk] = inv_r
                                if ox > 0:
                                    _axis_factor(abs(dx) * inv_r, beta[0], beta[1],
                                                 axis_front[0, ox, sx], axis_back[0, ox, sx], amp, fac)
                                if oy > 0:
                                    _axis_factor(abs(dy) * inv_r, beta[2], beta[3],
                                                 axis_front[1, oy, sy], axis_back[1, oy, sy], amp, fac)
                                if oz > 0:
                                    _axis_factor(abs(dz) * inv_r, beta[4], beta[5],
                                                 axis_front[2, oz, sz], axis_back[2, oz, sz], amp, fac)
                            else:
                                ax = axis_amp[0, ox, sx]
                                ay = axis_amp[1, oy, sy]
                                az = axis_amp[2, oz, sz]
                                for kk in range(n_k):
                                    amp[kk] = ax[kk] * ay[kk] * az[kk] * inv_r
                            # Gaussian taps (fast Gaussian gridding)
                            u = r * samples_per_m
                            i0 = int(u)
                            delta = u - i0
                            x0 = k_min - delta
                            w[0] = np.exp(-x0 * x0 * inv_4tau)
                            g = np.exp(2.0 * delta * inv_4tau)
                            for j in range(width - 1):
                                w[j + 1] = w[j] * tap_ratio[j] * g
                            base = offset + i0 + k_min
                            last = max(last, base + width - 1)
                            if n_k == 1:
                                a = amp[0]
                                for j in range(width):
                                    ir[base + j, 0] += a * w[j]
                            else:
                                for j in range(width):
                                    row = ir[base + j]
                                    wj = w[j]
                                    for kk in range(n_k):
                                        row[kk] += amp[kk] * wj
    return last


@njit(cache=True, inline="always")
def _axis_factor_1(cos_t, beta_front, beta_back, n_front, n_back):
    """``R_front^n_front R_back^n_back`` with ``R = (cos t - beta) / (cos t + beta)``."""
    rf = (cos_t - beta_front) / (cos_t + beta_front)
    if beta_back == beta_front:
        return rf ** (n_front + n_back)
    rb = (cos_t - beta_back) / (cos_t + beta_back)
    return rf ** n_front * rb ** n_back


@njit(cache=True, inline="always")
def _axis_factor(cos_t, beta_front, beta_back, n_front, n_back, amp, fac):
    """``amp *= R_front^n_front R_back^n_back``, ``R = (cos t - beta) / (cos t + beta)``.

    Vectorised over the K columns; integer powers by repeated squaring.
    """
    n_k = amp.shape[0]
    same = True
    for kk in range(n_k):
        if beta_front[kk] != beta_back[kk]:
            same = False
            break
    if same:
        for kk in range(n_k):
            fac[kk] = (cos_t - beta_front[kk]) / (cos_t + beta_front[kk])
        _mul_power(amp, fac, n_front + n_back)
    else:
        for kk in range(n_k):
            fac[kk] = (cos_t - beta_front[kk]) / (cos_t + beta_front[kk])
        _mul_power(amp, fac, n_front)
        for kk in range(n_k):
            fac[kk] = (cos_t - beta_back[kk]) / (cos_t + beta_back[kk])
        _mul_power(amp, fac, n_back)


@njit(cache=True, inline="always")
def _mul_power(amp, base, e):
    """``amp *= base ** e`` elementwise for an integer ``e >= 0`` (``base`` is overwritten)."""
    n_k = amp.shape[0]
    while e > 0:
        if e & 1:
            for kk in range(n_k):
                amp[kk] *= base[kk]
        e >>= 1
        if e > 0:
            for kk in range(n_k):
                base[kk] *= base[kk]


# ------------------------------------------------------------------ shared lattice walk
#: Taps of the shared-walk kernels (a compile-time constant, so the tap loops vectorise).
TAPS = 16
#: Bins of the fractional delay in the tap tables (:func:`spread_images`).
DELAY_BINS = 256
#: Coefficients of each tap's polynomial in the offset from its bin centre (degree 5).
TAP_POWERS = 6


@njit(cache=True)
def lattice_images(axis_pos, axis_amp, n_first, n_last, pos, amp):
    """Positions and reflection products of the images of total order ``n_first..n_last``.

    Parameters
    ----------
    axis_pos : float64 (3, O+1, 2)
        Image coordinate along each axis, m, by per-axis order ``o`` and branch ``s``
        (branch 1 unused at ``o = 0``).
    axis_amp : float64 (3, O+1, 2, K)
        Per-axis products of angle-independent reflection factors.
    n_first, n_last : int
        Shells, ``0 <= n_first <= n_last <= O``.
    pos : float64 (>= m, 3)
        Filled with the image positions, shell by shell, in the order :func:`spread_shells`
        visits them (a buffer reused between blocks: new memory for every block cost more
        in page faults than the listing itself).
    amp : float64 (>= m, K)
        Filled with the reflection products ``A_i`` (the ``1 / R`` of each receiver is
        applied later).

    Returns
    -------
    m : int
        Number of images written.
    """
    n_k = axis_amp.shape[3]
    i = 0
    for n in range(n_first, n_last + 1):
        for ox in range(n + 1):
            for oy in range(n - ox + 1):
                oz = n - ox - oy
                for sx in range(1 if ox == 0 else 2):
                    for sy in range(1 if oy == 0 else 2):
                        for sz in range(1 if oz == 0 else 2):
                            pos[i, 0] = axis_pos[0, ox, sx]
                            pos[i, 1] = axis_pos[1, oy, sy]
                            pos[i, 2] = axis_pos[2, oz, sz]
                            for kk in range(n_k):
                                amp[i, kk] = axis_amp[0, ox, sx, kk] * axis_amp[1, oy, sy, kk] * axis_amp[2, oz, sz, kk]
                            i += 1
    return i


@njit(cache=True, inline="always")
def _delay_of(pos, i, rx, ry, rz, samples_per_m, n_bins):
    """Distance ``r`` of image ``i`` from the receiver, its whole samples ``i0``, its
    fractional-delay bin ``b`` and the offset ``e`` from the bin's centre (inlined into the
    kernels below, under their own fastmath flags)."""
    dx = pos[i, 0] - rx
    dy = pos[i, 1] - ry
    dz = pos[i, 2] - rz
    r = np.sqrt(dx * dx + dy * dy + dz * dz)
    u = r * samples_per_m
    i0 = int(u)
    delta = u - i0
    b = int(delta * n_bins)  # delta < 1, so b < n_bins
    return r, i0, b, delta - (b + 0.5) / n_bins


@njit(cache=True, fastmath={"contract"})
def _spread_column(pos, amp, i_first, i_last, rx, ry, rz, samples_per_m, coef, offset, out):
    """:func:`_spread_one` for one column (the common case): a contiguous run of taps per image.

    A function of its own: inside one function with the K-column loop, this loop measured
    about 8 % slower per image (fewer values kept in registers). Only fused multiply-adds
    are allowed (``contract``): with free reassociation the compiler multiplied every tap
    by ``A`` and by ``1 / R`` separately (2 % slower)."""
    n_bins = coef.shape[0] // (TAPS * TAP_POWERS)
    k_min = 1 - TAPS // 2
    i_top = -1
    flat = out.reshape(out.size)
    for i in range(i_first, i_last):
        r, i0, b, e = _delay_of(pos, i, rx, ry, rz, samples_per_m, n_bins)
        c = coef[b * TAPS * TAP_POWERS:(b + 1) * TAPS * TAP_POWERS]
        s = amp[i, 0] / r
        o = flat[offset + i0 + k_min:offset + i0 + k_min + TAPS]
        for j in range(TAPS):
            # tap j: its degree-5 polynomial in e (Horner)
            o[j] += s * (c[j] + e * (c[TAPS + j] + e * (c[2 * TAPS + j] + e * (
                c[3 * TAPS + j] + e * (c[4 * TAPS + j] + e * c[5 * TAPS + j])))))
        i_top = max(i_top, i0)
    return offset + i_top + k_min + TAPS - 1 if i_top >= 0 else 0


@njit(cache=True, fastmath=True)
def _spread_columns(pos, amp, i_first, i_last, rx, ry, rz, samples_per_m, coef, offset, out):
    """:func:`_spread_one` for K > 1 columns: the taps of an image once, then added to every
    column (K innermost). ``fastmath`` only lets the compiler reorder and fuse the tap
    arithmetic (rounding)."""
    n_k = out.shape[1]
    n_bins = coef.shape[0] // (TAPS * TAP_POWERS)
    k_min = 1 - TAPS // 2
    i_top = -1
    w = np.empty(TAPS)
    for i in range(i_first, i_last):
        r, i0, b, e = _delay_of(pos, i, rx, ry, rz, samples_per_m, n_bins)
        c = coef[b * TAPS * TAP_POWERS:(b + 1) * TAPS * TAP_POWERS]
        s = 1.0 / r
        for j in range(TAPS):
            w[j] = s * (c[j] + e * (c[TAPS + j] + e * (c[2 * TAPS + j] + e * (
                c[3 * TAPS + j] + e * (c[4 * TAPS + j] + e * c[5 * TAPS + j])))))
        base = offset + i0 + k_min
        for j in range(TAPS):
            row = out[base + j]
            wj = w[j]
            for kk in range(n_k):
                row[kk] += amp[i, kk] * wj
        i_top = max(i_top, i0)
    return offset + i_top + k_min + TAPS - 1 if i_top >= 0 else 0


@njit(cache=True)
def _spread_one(pos, amp, i_first, i_last, rx, ry, rz, samples_per_m, coef, offset, out):
    """Spread the images ``i_first..i_last - 1`` of ``pos``, ``amp`` onto ``out`` (Ns, K) of the
    receiver at ``(rx, ry, rz)``; returns the largest row written (see
    :func:`spread_images_many`). Each tap is computed and added in one pass (no temporary
    array of taps: a store and reload per image cost as much as the arithmetic)."""
    if out.shape[1] == 1:
        return _spread_column(pos, amp, i_first, i_last, rx, ry, rz, samples_per_m, coef, offset, out)
    return _spread_columns(pos, amp, i_first, i_last, rx, ry, rz, samples_per_m, coef, offset, out)


@njit(cache=True)
def spread_images(pos, amp, rx, ry, rz, samples_per_m, coef, offset, out):
    """All images ``pos``, ``amp`` onto ``out`` (Ns, K) of one receiver, on one thread;
    returns the largest row written (see :func:`spread_images_many`)."""
    return _spread_one(pos, amp, 0, pos.shape[0], rx, ry, rz, samples_per_m, coef, offset, out)


@njit(cache=True, parallel=True)
def spread_images_many(pos, amp, receivers, rows, samples_per_m, coef, offset, ir, last, parallel):
    """Add the images ``pos``, ``amp`` of one source to the responses of one or more receivers.

    Parameters
    ----------
    pos, amp : float64 (m, 3), (m, K)
        Image positions and reflection products (:func:`lattice_images`).
    receivers : float64 (A, 3)
        Receiver positions, m.
    rows : int64 (A,)
        Receiver ``a`` accumulates into ``ir[rows[a]]``; ``last[rows[a]]`` is raised to the
        largest row written.
    samples_per_m : float
        ``fs / c``, samples per metre of path.
    coef : float64 (M * 6 * 16,)
        Tap polynomials: ``coef[b, p, j]`` is the coefficient of ``e^p`` of tap ``j`` (offset
        ``k = j - 7``) in fractional-delay bin ``b`` (``delta = (b + 1/2) / M + e``), see
        ``images._tap_tables``.
    offset : int
        Index of sample 0 in each response.
    ir : float64 (R, Ns, K)
        Impulse responses, accumulated in place.
    last : int64 (R,)
    parallel : bool
        Receivers in parallel (numba threads), each on its own rows of ``ir``; False: on the
        calling thread (no parallel region, whose start and end cost more than small blocks
        gain).

    Notes
    -----
    The image at ``u = R fs / c = i0 + delta`` samples adds ``A / R exp(-(k - delta)^2 /
    (4 tau))`` at sample ``i0 + k`` (as :func:`spread_shells`); the Gaussian is the degree-5
    Taylor polynomial in ``e``, ``|e| <= 1 / (2 M)``, about the bin centre (no transcendental
    call per image; relative error of a tap below 1e-14 for ``M = 256``).
    """
    n_rec = receivers.shape[0]
    if not parallel:
        for a in range(n_rec):
            row = rows[a]
            top = _spread_one(pos, amp, 0, pos.shape[0], receivers[a, 0], receivers[a, 1], receivers[a, 2],
                              samples_per_m, coef, offset, ir[row])
            last[row] = max(last[row], top)
        return
    for a in prange(n_rec):
        row = rows[a]
        top = _spread_one(pos, amp, 0, pos.shape[0], receivers[a, 0], receivers[a, 1], receivers[a, 2],
                          samples_per_m, coef, offset, ir[row])
        last[row] = max(last[row], top)


@njit(cache=True)
def windowed_max(values, lo, hi, out):
    """``out[r, i] = max(values[r, lo[i]:hi[i]])`` (every window non-empty).

    The envelope of the truncation estimate (``images._envelope``): a few dozen to a few
    hundred frequencies, windows of a few to a few dozen, so a plain loop beats any
    sparse table built in NumPy calls.
    """
    for r in range(values.shape[0]):
        for i in range(lo.size):
            best = values[r, lo[i]]
            for j in range(lo[i] + 1, hi[i]):
                best = max(best, values[r, j])
            out[r, i] = best
