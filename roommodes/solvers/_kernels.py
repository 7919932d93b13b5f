"""numba kernels of the image-source solver (nothing else lives here).

Each kernel has a plain-NumPy twin in :mod:`roommodes.solvers.images`
(``_spread_numpy`` and ``_direct_sum_numpy``); tests/test_images.py shows they agree.

The one kernel, :func:`spread_shells`, walks the image lattice of a rectangular room
shell by shell (shell ``n`` holds the images of total reflection order ``n``; Allen &
Berkley 1979) and adds each image's contribution ``A_i / R_i`` to one or more sampled
impulse responses with a truncated Gaussian kernel centred at the image's delay
``R_i / c``: "fast Gaussian gridding" (Greengard & Lee 2004, eqs. 9-11), two ``exp``
calls per image instead of one per tap.

References
----------
.. [1] J. B. Allen, D. A. Berkley, "Image method for efficiently simulating
   small-room acoustics", J. Acoust. Soc. Am. 65(4):943-950, 1979.
.. [2] L. Greengard, J.-Y. Lee, "Accelerating the nonuniform fast Fourier
   transform", SIAM Review 46(3):443-454, 2004.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["spread_shells"]


@njit(cache=True)
def spread_shells(
    axis_d, axis_front, axis_back, beta, axis_amp, angle_dependent,
    n_first, n_last, samples_per_m, inv_4tau, tap_ratio, offset, ir, shell_abs,
):
    """Add image shells ``n_first..n_last`` of one source-receiver pair to impulse responses.

    Parameters
    ----------
    axis_d : float64 (3, O+1, 2)
        Image coordinate minus receiver coordinate along each axis, m, for per-axis
        reflection order ``o`` and branch ``s`` (branch 1 unused at ``o = 0``).
    axis_front, axis_back : int64 (3, O+1, 2)
        Reflections from the wall at 0 and at ``L`` of that axis.
    beta : float64 (K, 6)
        Wall admittances ``1 / zeta`` (0 = rigid), one row per impulse response;
        used when ``angle_dependent``.
    axis_amp : float64 (K, 3, O+1, 2)
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
    ir : float64 (K, Ns)
        Impulse responses, accumulated in place.
    shell_abs : float64 (n_last - n_first + 1,)
        Out: ``max_k sum_{i in shell} |A_ik| / R_i`` per shell.

    Notes
    -----
    Tap ``j`` of an image at ``u = R fs / c = i0 + delta`` samples sits at
    ``i0 + k``, ``k = j - W/2 + 1``, with weight ``exp(-(k - delta)^2 / (4 tau))``.
    Successive weights differ by ``exp(-(2 k + 1) / (4 tau)) exp(delta / (2 tau))``
    (Greengard & Lee 2004, eq. 11).
    """
    n_k = ir.shape[0]
    width = tap_ratio.shape[0] + 1
    k_min = 1 - width // 2
    w = np.empty(width)
    acc = np.empty(n_k)
    amp = np.empty(n_k)
    for n in range(n_first, n_last + 1):
        for kk in range(n_k):
            acc[kk] = 0.0
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
                            # Amplitude A_i (Allen & Berkley 1979, eq. 10 with the
                            # reflection factor of each wall raised to its hit count).
                            if angle_dependent:
                                cx = abs(dx) * inv_r
                                cy = abs(dy) * inv_r
                                cz = abs(dz) * inv_r
                                for kk in range(n_k):
                                    a = 1.0
                                    if ox > 0:
                                        a *= _axis_factor(cx, beta[kk, 0], beta[kk, 1],
                                                          axis_front[0, ox, sx], axis_back[0, ox, sx])
                                    if oy > 0:
                                        a *= _axis_factor(cy, beta[kk, 2], beta[kk, 3],
                                                          axis_front[1, oy, sy], axis_back[1, oy, sy])
                                    if oz > 0:
                                        a *= _axis_factor(cz, beta[kk, 4], beta[kk, 5],
                                                          axis_front[2, oz, sz], axis_back[2, oz, sz])
                                    amp[kk] = a * inv_r
                            else:
                                for kk in range(n_k):
                                    amp[kk] = (axis_amp[kk, 0, ox, sx] * axis_amp[kk, 1, oy, sy]
                                               * axis_amp[kk, 2, oz, sz] * inv_r)
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
                            for kk in range(n_k):
                                b = amp[kk]
                                acc[kk] += abs(b)
                                for j in range(width):
                                    ir[kk, base + j] += b * w[j]
        best = 0.0
        for kk in range(n_k):
            if acc[kk] > best:
                best = acc[kk]
        shell_abs[n - n_first] = best


@njit(cache=True, inline="always")
def _axis_factor(cos_t, beta_front, beta_back, n_front, n_back):
    """``R_front^n_front * R_back^n_back`` with ``R = (cos t - beta) / (cos t + beta)``."""
    rf = (cos_t - beta_front) / (cos_t + beta_front)
    if beta_back == beta_front:
        return rf ** (n_front + n_back)
    rb = (cos_t - beta_back) / (cos_t + beta_back)
    return rf ** n_front * rb ** n_back
