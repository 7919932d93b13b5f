"""Modal-sum solver: the room's Green's function as a sum over rigid-wall modes.

For a point source at ``r0`` the pressure Green's function of the damped box is

.. math:: G(r, r_0, k) = \\sum_n \\frac{\\psi_n(r)\\,\\psi_n(r_0)}
          {K_n\\,(k_n^2 - k^2 + j k\\,b_n(k))},\\qquad
          K_n = \\frac{V}{\\varepsilon_x\\varepsilon_y\\varepsilon_z},\\quad
          b_n = \\sum_w \\beta_w\\,\\frac{\\varepsilon_{n,w}}{L_w},

(time factor ``e^{+j w t}``; Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.4-3.5;
Morse & Ingard, Theoretical Acoustics, 1968, sec. 9.5). ``eps = 2`` for a non-zero
index and 1 otherwise; ``b_n = 2 delta_n / c`` is the perturbation damping of
:mod:`roommodes.modes`. The ``(0, 0, 0)`` term is kept: it is the pressure rise of a
closed room below its first mode.

Convergence. Far from the source the sum converges quickly, but the singular near
field ``1 / (4 pi R)`` lives in the high-order modes. The modes above the cutoff
``k_N`` are therefore not dropped but replaced by their static limit

.. math:: S_0(r, r_0) = \\sum_{k_n > k_N} \\frac{\\psi_n\\psi_n}{K_n k_n^2}
          = G_s(r, r_0) - \\sum_{0 < k_n \\le k_N} \\frac{\\psi_n\\psi_n}{K_n k_n^2},

where ``G_s`` is the static (Laplace, rigid-wall, zero-mean) Green's function of the
box, summed in closed form along one axis (a 1-D Green's function) over the 2-D modes of
the other two; that series converges exponentially, like ``exp(-kappa |x - x0|)``.
The error left is of order ``(k / k_N)^2`` of the tail; the default cutoff
``k_N = 3 k_max`` keeps it below 0.02 dB for points more than 0.3 m apart (see
tests/test_modal.py for the convergence study).

Normalisation: ``H = 4 pi G``, so ``20 log10 |H|`` is the level relative to the
free-field pressure the same source gives at 1 m.
"""

from __future__ import annotations

import numpy as np

from ..modes import mode_indices, mode_shapes, wall_weights

__all__ = ["modal_transfer", "static_green", "DEFAULT_CUTOFF_FACTOR"]

#: The modal sum runs to ``DEFAULT_CUTOFF_FACTOR`` times the highest frequency asked for.
DEFAULT_CUTOFF_FACTOR = 3.0
#: Terms of the static series are kept while exp(-kappa |d|) > exp(-_STATIC_DECAY).
_STATIC_DECAY = 18.0
#: Cap on the number of 2-D modes per axis in the static series.
_STATIC_MAX_INDEX = 4000


def _as_points(name, pts):
    p = np.atleast_2d(np.asarray(pts, dtype=float))
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"{name} must be an (N, 3) array of positions in metres, got shape {p.shape}")
    return p


def _green_1d_static(x, x0, kappa, length):
    """1-D Neumann Green's function of ``-d2/dx2 + kappa^2`` on [0, L] (zero mean at 0)."""
    lo = np.minimum(x, x0)
    hi = np.maximum(x, x0)
    out = np.empty(np.broadcast(lo, kappa).shape)
    zero = kappa == 0
    # kappa = 0: generalised Green's function with the constant mode removed
    out[zero] = (length / 3.0 - hi + (x**2 + x0**2) / (2.0 * length)) * np.ones_like(out[zero])
    k = kappa[~zero]
    e = np.exp
    num = e(k * (lo - hi)) + e(k * (lo + hi - 2 * length)) + e(-k * (lo + hi)) + e(-k * (2 * length + lo - hi))
    out[~zero] = num / (2.0 * k * (1.0 - e(-2.0 * k * length)))
    return out


def static_green(size_m, source_m, receiver_m):
    """Static rigid-wall Green's function of the box, zero-mean part.

    ``G_s = sum_{n != 0} psi_n(r) psi_n(r0) / (K_n k_n^2)``, summed as a closed-form 1-D
    Green's function along the axis of largest separation times the 2-D modes of the
    other two axes.

    Parameters
    ----------
    size_m : array_like (3,)
    source_m, receiver_m : array_like (3,)
        Two distinct points inside the box, m.

    Returns
    -------
    float
    """
    size = np.asarray(size_m, dtype=float)
    s = np.asarray(source_m, dtype=float)
    r = np.asarray(receiver_m, dtype=float)
    d = np.abs(s - r)
    a = int(np.argmax(d))
    b, c = [i for i in range(3) if i != a]
    sep = max(d[a], 1e-3)
    kmax = _STATIC_DECAY / sep
    mb = min(int(kmax * size[b] / np.pi) + 1, _STATIC_MAX_INDEX)
    mc = min(int(kmax * size[c] / np.pi) + 1, _STATIC_MAX_INDEX)
    m = np.arange(mb + 1)[:, None]
    p = np.arange(mc + 1)[None, :]
    kb = m * np.pi / size[b]
    kc = p * np.pi / size[c]
    kappa = np.sqrt(kb**2 + kc**2)
    weight = (np.where(m > 0, 2.0, 1.0) * np.where(p > 0, 2.0, 1.0)) / (size[b] * size[c])
    shape = np.cos(kb * s[b]) * np.cos(kb * r[b]) * np.cos(kc * s[c]) * np.cos(kc * r[c])
    keep = kappa <= kmax
    g = _green_1d_static(s[a], r[a], kappa[keep], size[a])
    return float(np.sum((weight * shape)[keep] * g))


def modal_transfer(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, *,
                   cutoff_hz=None, static_tail=True):
    """Complex transfer from point sources to receivers by the modal sum.

    Parameters
    ----------
    size_m : array_like (3,)
        Room dimensions (Lx, Ly, Lz), m.
    zeta : array_like (6,) or (6, F)
        Real normalised impedance of each wall (front, back, left, right, floor,
        ceiling), per frequency or constant; ``inf`` is rigid.
    sources_m : array_like (N, 3)
    receivers_m : array_like (M, 3)
        Positions inside the room, m.
    freq_hz : array_like (F,)
        Frequencies, Hz, > 0.
    speed_of_sound : float
        m/s.
    cutoff_hz : float, optional
        Highest mode in the sum; default ``DEFAULT_CUTOFF_FACTOR * max(freq_hz)``.
    static_tail : bool
        Add the static limit of the modes above the cutoff (recommended).

    Returns
    -------
    H : ndarray, complex, shape (N, M, F)
        ``4 pi G``: pressure relative to the free-field pressure at 1 m.
    """
    size = np.asarray(size_m, dtype=float)
    src = _as_points("sources_m", sources_m)
    rec = _as_points("receivers_m", receivers_m)
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    c = float(speed_of_sound)
    if np.any(f <= 0):
        raise ValueError("frequencies must be positive")
    z = np.asarray(zeta, dtype=float)
    if z.shape == (6,):
        z = np.repeat(z[:, None], f.size, axis=1)
    if z.shape != (6, f.size):
        raise ValueError(f"zeta must have shape (6,) or (6, {f.size}), got {z.shape}")
    beta = 1.0 / z  # (6, F), 0 for rigid walls

    fc = DEFAULT_CUTOFF_FACTOR * f.max() if cutoff_hz is None else float(cutoff_hz)
    idx, fn = mode_indices(size, fc, c)
    kn2 = (2 * np.pi * fn / c) ** 2
    k = 2 * np.pi * f / c
    eps = np.prod(np.where(idx != 0, 2.0, 1.0), axis=1)
    damp = wall_weights(idx, size) @ beta  # (N, F)
    denom = kn2[:, None] - k[None, :] ** 2 + 1j * k[None, :] * damp
    weight = (4 * np.pi * eps / np.prod(size))[:, None] / denom  # (N, F)

    psi_s = mode_shapes(idx, size, src)  # (S, N)
    psi_r = mode_shapes(idx, size, rec)  # (M, N)
    out = np.empty((src.shape[0], rec.shape[0], f.size), dtype=complex)
    for j in range(rec.shape[0]):
        out[:, j, :] = (psi_s * psi_r[j]) @ weight

    if static_tail:
        static_w = 4 * np.pi * eps[1:] / np.prod(size) / kn2[1:]
        low = (psi_s[:, 1:] * static_w) @ psi_r[:, 1:].T  # (S, M)
        for i in range(src.shape[0]):
            for j in range(rec.shape[0]):
                full = 4 * np.pi * static_green(size, src[i], rec[j])
                out[i, j, :] += full - low[i, j]
    return out
