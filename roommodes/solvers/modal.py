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

import functools
import threading

import numpy as np

from ..model.modes import mode_indices, mode_shapes, wall_weights
from ..model.walls import impedance_table
from .threads import blas_threads, spare_cores


def _kernels():
    """The compiled kernels (:mod:`._modal_kernels`), imported on first use: importing numba
    costs about 0.15 s, which a prediction on the exact solver (no close pairs) never needs."""
    from . import _modal_kernels

    return _modal_kernels

__all__ = ["modal_transfer", "modal_transfer_direct", "static_green", "DEFAULT_CUTOFF_FACTOR",
           "modal_weights", "modal_sum_block", "static_green_pairs", "static_green_block", "static_tail_term",
           "block_sizes", "BLOCK_BYTES", "PRECISIONS", "SINGLE_MIN_FLOP", "RESONANT_FACTOR",
           "mode_shape_block", "resonant_count", "split_product", "grouped_pair_sum"]

#: The modal sum runs to ``DEFAULT_CUTOFF_FACTOR`` times the highest frequency asked for.
DEFAULT_CUTOFF_FACTOR = 3.0
#: Terms of the static series are kept while exp(-kappa |d|) > exp(-_STATIC_DECAY).
_STATIC_DECAY = 18.0
#: Cap on the number of 2-D modes per axis in the static series.
_STATIC_MAX_INDEX = 4000
#: Memory budget of one block of :func:`modal_transfer` (mode shapes of a block of points,
#: folded weights, the block's product), bytes. Any number of points runs in blocks of it.
BLOCK_BYTES = 96 * 2**20
#: ``precision`` values of :func:`modal_transfer` and :func:`modal_sum_block`.
PRECISIONS = ("auto", "double", "single")
#: With ``precision="auto"`` a product of at least this many floating-point operations
#: runs in single precision (below it the product is too small for the gain to show).
SINGLE_MIN_FLOP = 2e7
#: In single precision the modes up to ``RESONANT_FACTOR`` times the highest frequency (the
#: resonant, largest terms) stay float64; with it the level error stays below 5e-4 dB even
#: in notches 60 dB deep (without it, 1e-2 dB there).
RESONANT_FACTOR = 1.5


def _as_points(name, pts):
    p = np.atleast_2d(np.asarray(pts, dtype=float))
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"{name} must be an (N, 3) array of positions in metres, got shape {p.shape}")
    return p


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
    g = _g1d(min(s[a], r[a]), max(s[a], r[a]), kappa[keep], size[a])
    return float(np.sum((weight * shape)[keep] * g))


def modal_transfer_direct(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, *,
                          cutoff_hz=None, static_tail=True):
    """The modal sum evaluated term by term: one receiver and one pair at a time.

    Same arguments and result as :func:`modal_transfer`; slower, and written to be read
    next to the formula in the module docstring. Tests hold the fast form to it.
    """
    size = np.asarray(size_m, dtype=float)
    src = _as_points("sources_m", sources_m)
    rec = _as_points("receivers_m", receivers_m)
    idx, weight, static_w = modal_weights(size, zeta, freq_hz, speed_of_sound, cutoff_hz=cutoff_hz)
    psi_s = mode_shapes(idx, size, src)  # (S, N)
    psi_r = mode_shapes(idx, size, rec)  # (M, N)
    out = np.empty((src.shape[0], rec.shape[0], weight.shape[1]), dtype=complex)
    for j in range(rec.shape[0]):
        out[:, j, :] = (psi_s * psi_r[j]) @ weight
    if static_tail:
        low = (psi_s * static_w) @ psi_r.T  # (S, M): the static limit of the modes kept
        for i in range(src.shape[0]):
            for j in range(rec.shape[0]):
                out[i, j, :] += 4 * np.pi * static_green(size, src[i], rec[j]) - low[i, j]
    return out


# ---------------------------------------------------------------------------------------
# Batched evaluation: the same modal sum written as matrix products, for many sources and
# receivers at once (placement search). Results equal modal_transfer's to round-off.
# ---------------------------------------------------------------------------------------

#: Largest temporary array (elements) the batched functions build at once.
_BATCH_ELEMENTS = 8_000_000


def modal_weights(size_m, zeta, freq_hz, speed_of_sound, *, cutoff_hz=None):
    """The frequency part of the modal sum: ``H = psi_s^T diag(.) psi_r`` factors.

    ``H(r_s, r_r, f) = sum_n psi_n(r_s) psi_n(r_r) W[n, f] + T(r_s, r_r)``, where
    ``W[n, f] = 4 pi eps_n / (V (k_n^2 - k^2 + j k b_n))`` is the modal weight and ``T``
    the static tail (:func:`static_tail_term`). Same modes, damping and cutoff as
    :func:`modal_transfer`.

    Parameters
    ----------
    size_m : array_like (3,)
        Room dimensions, m.
    zeta : array_like (6,) or (6, F)
        Real normalised wall impedances (``inf`` rigid).
    freq_hz : array_like (F,)
        Frequencies, Hz, > 0.
    speed_of_sound : float
        m/s.
    cutoff_hz : float, optional
        Highest mode in the sum; default ``DEFAULT_CUTOFF_FACTOR * max(freq_hz)``.

    Returns
    -------
    indices : ndarray of int (N, 3)
        Mode indices, starting with (0, 0, 0).
    weight : ndarray, complex (N, F)
        ``W[n, f]`` (normalised as ``H = 4 pi G``).
    static_weight : ndarray (N,)
        ``4 pi eps_n / (V k_n^2)``, the static limit of ``W``; 0 for the (0, 0, 0) term.

    Notes
    -----
    Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.4-3.5 (see the module docstring).
    """
    size = np.asarray(size_m, dtype=float)
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    c = float(speed_of_sound)
    if f.ndim != 1 or np.any(~np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("freq_hz must be a 1-D array of positive frequencies in Hz")
    z = impedance_table(zeta, f.size)
    fc = DEFAULT_CUTOFF_FACTOR * f.max() if cutoff_hz is None else float(cutoff_hz)
    table = _mode_table(tuple(size.tolist()), fc, c)
    weight = _weights(table, z, 2 * np.pi * f / c)
    return table.indices.copy(), weight, table.static_weight.copy()


class _ModeTable:
    """The frequency-independent part of the modal sum for one room, cutoff and speed of
    sound: indices (N, 3), ``k_n^2``, wall weights (N, 6), ``4 pi eps_n / V`` and the static
    weights ``4 pi eps_n / (V k_n^2)`` (0 for the (0, 0, 0) term). Arrays are read-only."""

    def __init__(self, size, fc, c):
        idx, fn = mode_indices(size, fc, c)
        self.indices = idx
        self.kn2 = (2 * np.pi * fn / c) ** 2
        eps = np.prod(np.where(idx != 0, 2.0, 1.0), axis=1)
        self.walls = np.ascontiguousarray(wall_weights(idx, size))
        self.scale = 4 * np.pi * eps / np.prod(size)
        sw = np.zeros(idx.shape[0])
        sw[1:] = 4 * np.pi * eps[1:] / np.prod(size) / self.kn2[1:]
        self.static_weight = sw
        # per-axis wavenumbers n pi / L of the indices in use, for the shape tables
        self.axis_k = [np.pi * np.arange(idx[:, a].max(initial=0) + 1) / size[a] for a in range(3)]
        self.indices_by_axis = [np.ascontiguousarray(idx[:, a], dtype=np.int64) for a in range(3)]
        # (x, y) index pairs into a per-point table of cos_x cos_y (n_x by n_y, row major)
        self.indices_xy = self.indices_by_axis[0] * self.axis_k[1].size + self.indices_by_axis[1]
        for arr in (self.indices, self.kn2, self.walls, self.scale, self.static_weight, *self.axis_k,
                    *self.indices_by_axis, self.indices_xy):
            arr.flags.writeable = False

    def modes_below(self, k):
        """How many modes (they are sorted by frequency) have ``k_n <= k``."""
        return int(np.searchsorted(self.kn2, k * k, side="right"))


@functools.lru_cache(maxsize=16)
def _mode_table(size, fc, c):
    """Cached :class:`_ModeTable` (the key is plain floats: size tuple, cutoff, c)."""
    return _ModeTable(np.asarray(size, dtype=float), fc, c)


def _weights(table, z, k):
    """Modal weights ``W[n, f]`` (N, F) complex: the formula's arithmetic
    (``scale / (k_n^2 - k^2 + j k b_n)``), with the temporaries written in place. The block
    loop of :func:`modal_transfer` forms them fused with the fold
    (:func:`._modal_kernels.fold_into`); tests hold the two equal."""
    damp = table.walls @ (1.0 / z)  # (N, F)
    damp *= k
    w = np.empty(damp.shape, dtype=complex)
    w.real = table.kn2[:, None] - (k * k)[None, :]
    w.imag = damp
    np.divide(table.scale[:, None], w, out=w)
    return w


def _shapes(table, size, points, dtype=np.float64, start=0, stop=None, cos=None):
    """Mode shapes (P, N) in C order of ``dtype`` (modes ``start:stop`` of the table): per-axis
    cosine tables (``cos``, from :func:`_cos_tables`, when already computed) and one fused
    gather-and-multiply pass (:func:`._modal_kernels.shapes_into`); the float64 values equal
    :func:`roommodes.model.modes.mode_shapes`' to the last bit."""
    cos = _cos_tables(table, points) if cos is None else cos
    idx = [i[start:stop] for i in table.indices_by_axis]
    out = np.empty((cos[0].shape[0], idx[0].shape[0]), dtype=dtype)
    _kernels().shapes_into(cos[0], cos[1], cos[2], idx[0], idx[1], idx[2], out)
    return out


def _cos_tables(table, points):
    """``cos(k_a p_a)`` (P, n_a) for the three axes."""
    p = np.asarray(points, dtype=float)
    return [np.cos(p[:, a, None] * table.axis_k[a]) for a in range(3)]


def _shapes_numpy(table, size, points):
    """NumPy twin of :func:`_shapes` (three gathers), for the tests."""
    p = np.asarray(points, dtype=float)
    idx = table.indices
    out = np.empty((p.shape[0], idx.shape[0]))
    for a in range(3):
        cos = np.cos(p[:, a, None] * table.axis_k[a])  # (P, n_a)
        if a == 0:
            np.take(cos, idx[:, 0], axis=1, out=out)
        else:
            out *= np.take(cos, idx[:, a], axis=1)
    return out


def _single(precision, flop):
    """Whether a product of ``flop`` operations runs in single precision."""
    if precision not in PRECISIONS:
        raise ValueError(f"precision must be one of {', '.join(PRECISIONS)}, got {precision!r}")
    return precision == "single" or (precision == "auto" and flop >= SINGLE_MIN_FLOP)


def mode_shape_block(indices, size_m, points_m, dtype=np.float64):
    """Mode shapes (P, N) in C order, from per-axis cosine tables in one compiled pass.

    Equal to :func:`roommodes.model.modes.mode_shapes` to the last bit in float64; with
    ``dtype=np.float32`` the same values rounded once.
    """
    size = np.asarray(size_m, dtype=float)
    p = np.atleast_2d(np.asarray(points_m, dtype=float))
    idx = np.asarray(indices)
    cols = [np.ascontiguousarray(idx[:, a], dtype=np.int64) for a in range(3)]
    cos = [np.cos(p[:, a, None] * (np.pi / size[a] * np.arange(cols[a].max(initial=0) + 1))) for a in range(3)]
    out = np.empty((p.shape[0], idx.shape[0]), dtype=dtype)
    _kernels().shapes_into(cos[0], cos[1], cos[2], cols[0], cols[1], cols[2], out)
    return out


def resonant_count(indices, size_m, speed_of_sound, fmax_hz):
    """How many of the modes (sorted by frequency, as :func:`modal_weights` gives them)
    lie at or below ``RESONANT_FACTOR * fmax_hz``: the ones single precision keeps in float64."""
    k = np.pi * np.asarray(indices, dtype=float) / np.asarray(size_m, dtype=float)
    kmax = 2 * np.pi * RESONANT_FACTOR * float(fmax_hz) / float(speed_of_sound)
    return int(np.count_nonzero(np.sum(k * k, axis=1) <= kmax * kmax))


def split_product(a, b, n_double=0, single=True):
    """``a @ b`` (float64 result) with the first ``n_double`` inner indices in float64 and
    the rest, when ``single``, in float32 (each operand rounded once).

    Parameters
    ----------
    a : ndarray (M, N)
    b : ndarray (N, K)
    n_double : int
        Leading inner indices (the resonant modes) kept in float64.
    single : bool
        False: the whole product in float64.
    """
    if not single or n_double >= a.shape[1]:
        return np.asarray(a, dtype=float) @ np.asarray(b, dtype=float)
    hi = np.ascontiguousarray(a[:, n_double:], dtype=np.float32) @ np.ascontiguousarray(b[n_double:],
                                                                                       dtype=np.float32)
    if n_double <= 0:
        return hi.astype(np.float64)
    res = np.asarray(a[:, :n_double], dtype=float) @ np.asarray(b[:n_double], dtype=float)
    res += hi
    return res


def grouped_pair_sum(psi_src, psi_rec, weight, static_weight, *, precision="auto", n_double=0):
    """The modal sum for every (source, receiver) pair within each of K groups.

    ``H[k, s, r, f] = sum_n psi_src[k, s, n] psi_rec[k, r, n] W[n, f]`` as one real GEMM of
    the pair products (formed in one compiled pass, split by precision as in
    :func:`modal_sum_block`), and the pairs' static low-mode sums
    ``sum_n psi_src psi_rec static_weight[n]`` (float64).

    Parameters
    ----------
    psi_src : ndarray (K, S, N)
    psi_rec : ndarray (K, R, N)
    weight : ndarray, complex (N, F)
    static_weight : ndarray (N,)
    precision, n_double
        As :func:`modal_sum_block`.

    Returns
    -------
    h : ndarray, complex (K, S, R, F)
    low : ndarray (K, S, R)
    """
    ps = np.ascontiguousarray(psi_src, dtype=float)
    pr = np.ascontiguousarray(psi_rec, dtype=float)
    n_groups, n_src, n_modes = ps.shape
    n_rec, n_freq = pr.shape[1], weight.shape[1]
    rows = n_groups * n_src * n_rec
    flop = 4.0 * rows * n_modes * n_freq
    single = _single(precision, flop)
    n_lo = min(max(int(n_double), 0), n_modes) if single else n_modes
    wr = np.ascontiguousarray(weight, dtype=complex).view(np.float64)  # (N, 2F)
    out_lo = np.empty((rows, n_lo))
    out_hi = np.empty((rows, n_modes - n_lo), dtype=np.float32 if single else np.float64)
    low = np.empty(rows)
    _kernels().pair_products_into(ps, pr, np.ascontiguousarray(static_weight, dtype=float), out_lo, out_hi, low)
    with blas_threads(flop):
        h = out_lo @ wr[:n_lo]
        if n_lo < n_modes:
            h += out_hi @ wr[n_lo:].astype(out_hi.dtype)
    return (h.view(np.complex128).reshape(n_groups, n_src, n_rec, n_freq),
            low.reshape(n_groups, n_src, n_rec))


def modal_sum_block(psi_src, psi_rec, weight, *, precision="double", n_double=0):
    """``H[s, r, f] = sum_n psi_src[s, n] psi_rec[r, n] weight[n, f]`` as one real GEMM.

    The smaller of the two point sets is folded into the weights
    (``B[n, (r, f)] = psi_rec[r, n] W[n, f]``), and the other multiplies it as a real
    (points x N) by (N x 2 R F) matrix product (complex numbers viewed as pairs of reals).

    Parameters
    ----------
    psi_src : ndarray (S, N)
        Mode shapes at the sources (:func:`roommodes.modes.mode_shapes`).
    psi_rec : ndarray (R, N)
        Mode shapes at the receivers.
    weight : ndarray, complex (N, F)
        Modal weights (:func:`modal_weights`).
    precision : {"double", "single", "auto"}
        "single": the modes from ``n_double`` on multiply in float32 (shapes and folded
        weights rounded once; the fold itself is formed in float64). "auto": single from
        :data:`SINGLE_MIN_FLOP` operations on.
    n_double : int
        Leading modes kept in float64 in single precision; with
        :func:`resonant_count` modes the error is that of :func:`modal_transfer`'s single
        precision (5e-4 dB).

    Returns
    -------
    ndarray, complex (S, R, F)
    """
    a = np.ascontiguousarray(psi_src)
    b = np.ascontiguousarray(psi_rec)
    w = np.ascontiguousarray(weight, dtype=complex)
    swap = a.shape[0] < b.shape[0]
    if swap:
        a, b = b, a
    n_rows, n_modes = a.shape
    n_fold, n_freq = b.shape[0], w.shape[1]
    flop = 4.0 * n_rows * n_modes * n_fold * n_freq
    single = _single(precision, flop)
    out = np.empty((n_rows, n_fold, n_freq), dtype=complex)
    chunk = max(1, _BATCH_ELEMENTS // max(1, 2 * n_modes * n_freq))
    for j0 in range(0, n_fold, chunk):
        j1 = min(n_fold, j0 + chunk)
        fold = np.empty((n_modes, j1 - j0, n_freq), dtype=complex)
        np.multiply(b[j0:j1].T[:, :, None], w[:, None, :], out=fold)
        with blas_threads(flop):
            res = split_product(a, fold.view(np.float64).reshape(n_modes, -1), n_double, single)
        out[:, j0:j1, :] = res.view(np.complex128).reshape(n_rows, j1 - j0, n_freq)
    return out.transpose(1, 0, 2) if swap else out


def _terms_2d(kmax, lb, lc):
    """The 2-D modes (m, p) of the two transverse axes (lengths lb, lc) with ``kappa <= kmax``:
    their indices, ``kappa = pi sqrt((m/lb)^2 + (p/lc)^2)`` and weights ``eps_m eps_p / (lb lc)``."""
    mb = min(int(kmax * lb / np.pi) + 1, _STATIC_MAX_INDEX)
    mc = min(int(kmax * lc / np.pi) + 1, _STATIC_MAX_INDEX)
    m, p = np.meshgrid(np.arange(mb + 1), np.arange(mc + 1), indexing="ij")
    kappa = np.pi * np.sqrt((m / lb) ** 2 + (p / lc) ** 2)
    keep = kappa <= kmax
    weight = np.where(m > 0, 2.0, 1.0) * np.where(p > 0, 2.0, 1.0) / (lb * lc)
    return m[keep], p[keep], kappa[keep], weight[keep]


def static_green_pairs(size_m, sources_m, receivers_m):
    """:func:`static_green` for many (source, receiver) pairs.

    Each pair is summed as :func:`static_green` sums it (along its axis of largest
    separation, with its own cutoff), in one compiled loop without temporaries
    (:func:`._modal_kernels.static_green_pairs_kernel`); the values equal
    :func:`static_green`'s to round-off.

    Parameters
    ----------
    size_m : array_like (3,)
    sources_m, receivers_m : array_like (P, 3)
        Paired points inside the box, m.

    Returns
    -------
    ndarray (P,)
    """
    size = np.ascontiguousarray(size_m, dtype=float)
    s = np.ascontiguousarray(np.atleast_2d(np.asarray(sources_m, dtype=float)))
    r = np.ascontiguousarray(np.atleast_2d(np.asarray(receivers_m, dtype=float)))
    if s.shape != r.shape or s.ndim != 2 or s.shape[1] != 3:
        raise ValueError(f"sources_m and receivers_m must both be (P, 3), got {s.shape} and {r.shape}")
    out = np.empty(s.shape[0])
    d = np.abs(s - r)
    kmax = _STATIC_DECAY / np.maximum(d.max(axis=1), 1e-3)
    # pairs whose 2-D terms fit the cached tables take the tabled kernel, the others (points
    # closer than about 0.1 m) the kernel that computes every term's constants itself
    fits = kmax * size.max() / np.pi + 1 <= _STATIC_TABLE_INDEX
    # many pairs on all cores, a few on one (starting the threads would cost more)
    kern = _kernels()
    if fits.all():
        _tabled(kern, size, s, r, out)
        return out
    far, near = np.flatnonzero(fits), np.flatnonzero(~fits)
    if far.size:
        part = np.empty(far.size)
        _tabled(kern, size, s[far], r[far], part)
        out[far] = part
    part = np.empty(near.size)
    _kernels().static_green_pairs_kernel(size, s[near], r[near], _STATIC_DECAY, _STATIC_MAX_INDEX, part)
    out[near] = part
    return out


def _tabled(kern, size, s, r, out):
    """The tabled static kernel, on all cores for many pairs (when cores are spare)."""
    tables = _static_tables(tuple(size.tolist()))
    if s.shape[0] >= _PARALLEL_MIN_PAIRS and spare_cores():
        kern.static_green_pairs_tabled_parallel(size, s, r, _STATIC_DECAY, *tables, out, kern.n_threads())
    else:
        kern.static_green_pairs_tabled(size, s, r, _STATIC_DECAY, *tables, out)


#: Calls with at least this many points (pairs, rows of a block) run their compiled loops
#: on all cores when the machine has cores to spare (:func:`.threads.spare_cores`); below
#: it one core is faster than starting the threads.
_PARALLEL_MIN_POINTS = 64
#: The static pairs run on all cores from this many pairs (about 2 ms on one core).
_PARALLEL_MIN_PAIRS = 8192
#: The fused weights-and-fold pass runs on all cores from this many (mode, frequency) terms.
_PARALLEL_MIN_TERMS = 32_768

#: Largest 2-D index of the cached tables of :func:`static_green_pairs` (pairs more than
#: about 18 L / (pi 256), 0.1 m in a 4.6 m room, apart use them).
_STATIC_TABLE_INDEX = 256


@functools.lru_cache(maxsize=4)
def _static_tables(size):
    """Per-axis tables of :func:`._modal_kernels.static_green_pairs_tabled`: for the 1-D sum
    along axis ``a``, the 2-D terms (m, p) of the other two axes with m, p <= 256 and
    ``kappa > 0``, sorted by ``kappa`` (so that a pair's disc ``kappa <= kmax`` is a prefix):
    ``kappa``, ``w / (2 kappa (1 - e^{-2 kappa L_a}))``, ``e^{-2 kappa L_a}``, m and p, each (3, T)."""
    n = _STATIC_TABLE_INDEX + 1
    m, p = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    m, p = m.ravel()[1:], p.ravel()[1:]  # without (0, 0)
    cols = [[], [], [], [], []]
    for a in range(3):
        b, c = [i for i in range(3) if i != a]
        lb, lc, la = size[b], size[c], size[a]
        k = np.pi * np.sqrt((m / lb) ** 2 + (p / lc) ** 2)
        order = np.argsort(k, kind="stable")
        k = k[order]
        w = (np.where(m > 0, 2.0, 1.0) * np.where(p > 0, 2.0, 1.0))[order] / (lb * lc)
        for col, arr in zip(cols, (k, w / (2.0 * k * -np.expm1(-2.0 * k * la)), np.exp(-2.0 * k * la), m[order],
                                   p[order])):
            col.append(arr)
    tables = tuple(np.ascontiguousarray(np.stack(col)) for col in cols)
    for arr in tables:
        arr.flags.writeable = False
    return tables


def _g1d(lo, hi, kappa, length):
    """1-D Neumann Green's function of ``-d2/dx2 + kappa^2`` on [0, L], broadcast over
    ``lo <= hi`` (P, 1) and ``kappa`` (K,); the kappa = 0 column is the zero-mean form."""
    k = np.where(kappa > 0, kappa, 1.0)
    num = (np.exp(k * (lo - hi)) + np.exp(k * (lo + hi - 2 * length)) + np.exp(-k * (lo + hi))
           + np.exp(-k * (2 * length + lo - hi)))
    g = num / (2.0 * k * (1.0 - np.exp(-2.0 * k * length)))
    zero = length / 3.0 - hi + (lo**2 + hi**2) / (2.0 * length)
    return np.where(kappa > 0, g, zero)


def static_green_block(size_m, sources_m, receivers_m, min_gap_m=0.3):
    """:func:`static_green` for every source and every receiver, shape (S, R).

    When, along some axis, every source lies on one side of every receiver (at least
    ``min_gap_m`` apart), the closed-form 1-D Green's function factorises,
    ``cosh(kappa x_<) (e^{-kappa x_>} + e^{kappa (x_> - 2L)}) / (kappa (1 - e^{-2 kappa L}))``,
    and the whole block is one matrix product over the 2-D modes of the other two axes.
    Otherwise every pair is summed separately (:func:`static_green_pairs`).

    Parameters
    ----------
    size_m : array_like (3,)
    sources_m : array_like (S, 3)
    receivers_m : array_like (R, 3)
    min_gap_m : float
        Smallest separation for the factorised form, m.

    Returns
    -------
    ndarray (S, R)
    """
    size = np.asarray(size_m, dtype=float)
    s = np.atleast_2d(np.asarray(sources_m, dtype=float))
    r = np.atleast_2d(np.asarray(receivers_m, dtype=float))
    gaps = np.maximum(r.min(axis=0) - s.max(axis=0), s.min(axis=0) - r.max(axis=0))  # (3,)
    a = int(np.argmax(gaps))
    if gaps[a] < min_gap_m:
        ss = np.repeat(s, r.shape[0], axis=0)
        rr = np.tile(r, (s.shape[0], 1))
        return static_green_pairs(size, ss, rr).reshape(s.shape[0], r.shape[0])
    b, c = [i for i in range(3) if i != a]
    src_low = s[:, a].max() < r[:, a].min()
    low, high = (s, r) if src_low else (r, s)
    length = size[a]
    # the points of the larger set are binned by their own gap to the other set (bins a
    # factor 1.5 wide), so that each bin keeps only the 2-D terms its closest point needs
    big_is_low = low.shape[0] >= high.shape[0]
    gap_each = (high[:, a].min() - low[:, a]) if big_is_low else (high[:, a] - low[:, a].max())
    bins = np.floor(np.log(np.maximum(gap_each, min_gap_m)) / np.log(1.5)).astype(int)
    g = np.empty((low.shape[0], high.shape[0]))
    for key in np.unique(bins):
        part = bins == key
        lo_pts, hi_pts = (low[part], high) if big_is_low else (low, high[part])
        gap = hi_pts[:, a].min() - lo_pts[:, a].max()
        m, p, kappa, w = _terms_2d(_STATIC_DECAY / gap, size[b], size[c])
        pos = kappa > 0
        m, p, kp, wp = m[pos], p[pos], kappa[pos], w[pos]
        kb, kc = np.arange(m.max() + 1) * np.pi / size[b], np.arange(p.max() + 1) * np.pi / size[c]
        mid = 0.5 * (lo_pts[:, a].max() + hi_pts[:, a].min())  # scaling point keeps every factor <= 2
        lo_x, hi_x = lo_pts[:, a][:, None], hi_pts[:, a][:, None]
        # transverse shapes from per-axis cosine tables (one cosine per index, not per term)
        u = (np.cos(kb * lo_pts[:, b][:, None])[:, m] * np.cos(kc * lo_pts[:, c][:, None])[:, p]
             * (wp * 0.5) * (np.exp(kp * (lo_x - mid)) + np.exp(-kp * (lo_x + mid))))
        v = (np.cos(kb * hi_pts[:, b][:, None])[:, m] * np.cos(kc * hi_pts[:, c][:, None])[:, p]
             * (np.exp(kp * (mid - hi_x)) + np.exp(kp * (hi_x + mid - 2 * length)))
             / (kp * (1.0 - np.exp(-2.0 * kp * length))))
        gb = u @ v.T  # (low, high)
        w0 = w[~pos][0]  # the (0, 0) term: zero-mean 1-D Green's function
        gb += w0 * (length / 3.0 - hi_x.T + (lo_x**2 + hi_x.T**2) / (2.0 * length))
        if big_is_low:
            g[part] = gb
        else:
            g[:, part] = gb
    return g if src_low else g.T


def static_tail_term(size_m, sources_m, receivers_m, indices, static_weight, *, pairs=False,
                     shapes=None):
    """The static limit of the modes above the cutoff, ``4 pi G_s - sum psi psi W_static``.

    Parameters
    ----------
    size_m : array_like (3,)
    sources_m, receivers_m : array_like (S, 3) and (R, 3), or both (P, 3) when ``pairs``
    indices, static_weight : from :func:`modal_weights`
    pairs : bool
        Paired points (result (P,)) instead of every source with every receiver (S, R).
    shapes : (ndarray, ndarray), optional
        Mode shapes of ``indices`` at the sources and receivers, when already computed.

    Returns
    -------
    ndarray (S, R) or (P,)
        Real, frequency independent; add it to every frequency of the modal sum.
    """
    size = np.asarray(size_m, dtype=float)
    if shapes is None:
        shapes = (mode_shapes(indices, size, sources_m), mode_shapes(indices, size, receivers_m))
    psi_s, psi_r = shapes[0][:, 1:], shapes[1][:, 1:]
    sw = np.asarray(static_weight, dtype=float)[1:]
    if pairs:
        return 4 * np.pi * static_green_pairs(size, sources_m, receivers_m) - np.sum(psi_s * sw * psi_r, axis=1)
    return 4 * np.pi * static_green_block(size, sources_m, receivers_m) - (psi_s * sw) @ psi_r.T


def modal_transfer(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, *,
                   cutoff_hz=None, static_tail=True, precision="auto"):
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
    precision : {"auto", "double", "single"}
        Arithmetic of the modal product. "single": the modes above ``RESONANT_FACTOR``
        times the highest frequency (7/8 of them at the default cutoff) multiply in float32
        (shapes and folded weights rounded once; the weights with the static limit of the
        kept modes subtracted are formed in float64), the resonant modes below it and the
        closed-form static term stay float64. The level differs from "double" by at most
        5e-4 dB (bound tested on an absorbent, a typical and a nearly rigid room, notches
        included: tests/solvers/test_modal_kernels.py). "auto" (default): single for
        products of :data:`SINGLE_MIN_FLOP` operations or more (many points; the product's
        time halves), double below (one prediction gains nothing).

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
    if f.ndim != 1 or np.any(~np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("freq_hz must be a 1-D array of positive frequencies in Hz")
    z = impedance_table(zeta, f.size)
    fc = DEFAULT_CUTOFF_FACTOR * f.max() if cutoff_hz is None else float(cutoff_hz)
    table = _mode_table(tuple(size.tolist()), fc, c)
    k = 2 * np.pi * f / c
    h = np.empty((src.shape[0], rec.shape[0], f.size), dtype=complex)
    # The smaller point set is folded into the weights; the larger one multiplies the fold
    # as a real (rows x N) by (N x 2 R F) product. With the static tail the static limit of
    # the modes kept is subtracted from the weights (W - W_static) inside the same product,
    # and the closed-form static Green's function is added per block.
    swap = src.shape[0] < rec.shape[0]
    rows, folds = (rec, src) if swap else (src, rec)
    hv = h.transpose(1, 0, 2) if swap else h
    # the static Green's function of every pair at once (rows x folds reals, less than the
    # result), so that its series does not depend on the blocks
    with blas_threads(0):  # its small products on one thread
        gs_all = 4 * np.pi * static_green_block(size, rows, folds) if static_tail else None
    n_modes = table.indices.shape[0]
    flop = 4.0 * rows.shape[0] * folds.shape[0] * f.size * n_modes
    _blocks(table, size, rows, folds, hv, gs_all, z, k, _single(precision, flop))
    return h


def _blocks(table, size, rows, folds, hv, gs_all, z, k, single):
    """The block loop of :func:`modal_transfer`: writes ``hv`` (rows, folds, F) in place.

    Per block of rows, one real product ``[psi_lo | gs] @ [fold_lo ; E]`` in float64 (the
    resonant modes, and the closed-form static term ``gs`` of each (row, folded point) as
    one extra column per folded point, ``E`` its unit pattern on the real parts), plus
    ``psi_hi @ fold_hi`` in float32 for the other modes in single precision. The float64
    product is written straight into the result when the block is contiguous there.
    """
    static_tail = gs_all is not None
    n_freq = k.size
    n_modes = table.indices.shape[0]
    # single precision: the resonant modes (up to RESONANT_FACTOR f_max, the large terms)
    # stay float64, the rest (1 - 1 / 8 of them at the default cutoff) go float32
    n_lo = table.modes_below(RESONANT_FACTOR * k.max()) if single else n_modes
    n_hi = n_modes - n_lo
    rb, gb, fb = block_sizes(rows.shape[0], folds.shape[0], n_freq, n_modes)
    beta = np.ascontiguousarray(1.0 / z)
    sw = table.static_weight if static_tail else np.zeros(n_modes)
    n_gs = gb if static_tail else 0  # static columns of a block
    kern = _kernels()
    iz = table.indices_by_axis[2]
    lo_buf = _work("shapes_lo", (rb, n_lo + n_gs), np.float64)
    hi_buf = _work("shapes_hi", (rb, n_hi), np.float32 if single else np.float64)
    for r0 in range(0, rows.shape[0], rb):
        r1 = min(r0 + rb, rows.shape[0])
        nr = r1 - r0
        cos = _cos_tables(table, rows[r0:r1])
        psi_lo, psi_hi = lo_buf[:nr], hi_buf[:nr]
        if nr >= _PARALLEL_MIN_POINTS and spare_cores():
            kern.shapes_split_into_parallel(*cos, table.indices_xy, iz, psi_lo[:, :n_lo], psi_hi, kern.n_threads())
        else:
            kern.shapes_split_into(*cos, table.indices_xy, iz, psi_lo[:, :n_lo], psi_hi)
        for g0 in range(0, folds.shape[0], gb):
            g1 = min(g0 + gb, folds.shape[0])
            ng = g1 - g0
            psi_fold = _shapes(table, size, folds[g0:g1])
            a_lo = psi_lo[:, :n_lo + ng] if static_tail else psi_lo
            if static_tail:
                a_lo[:, n_lo:] = gs_all[r0:r1, g0:g1]
            for f0 in range(0, n_freq, fb):
                f1 = min(f0 + fb, n_freq)
                nf = f1 - f0
                # weights and fold in one pass, as real pairs (N, 2 R F): the resonant modes
                # in float64, the others rounded once to float32 (W - W_static formed in
                # float64 first); below them the unit rows of the static columns
                cols = 2 * ng * nf
                fold_lo = _work("fold_lo", (a_lo.shape[1], cols), np.float64)
                fold_hi = _work("fold_hi", (n_hi, cols), hi_buf.dtype)
                args = (table.kn2, table.scale, sw, table.walls, beta[:, f0:f1], k[f0:f1], psi_fold,
                        fold_lo[:n_lo], fold_hi)
                if n_modes * nf >= _PARALLEL_MIN_TERMS and spare_cores():
                    kern.fold_into_parallel(*args, kern.n_threads())
                else:
                    kern.fold_into(*args)
                if static_tail:
                    unit = fold_lo[n_lo:]
                    unit[...] = 0.0
                    for g in range(ng):
                        unit[g, 2 * g * nf:2 * (g + 1) * nf:2] = 1.0
                out = hv[r0:r1, g0:g1, f0:f1]
                direct = out.flags.c_contiguous
                res = out.view(np.float64).reshape(nr, cols) if direct else np.empty((nr, cols))
                # the thread count measured best for the block product's size
                with blas_threads(2.0 * nr * (n_modes + n_gs) * cols):
                    np.matmul(a_lo, fold_lo, out=res)  # (rows, 2 R F) real
                    if n_hi:
                        res += np.matmul(psi_hi, fold_hi, out=_work("product_hi", (nr, cols), hi_buf.dtype))
                if not direct:
                    out[...] = res.view(np.complex128).reshape(nr, ng, nf)


#: Work buffers of :func:`modal_transfer` (shapes, folds, the float32 product) are kept
#: between calls, per thread, while together they hold at most this many bytes: a fresh
#: buffer of a few MB costs a page fault per 4 kB on first touch (2,500 faults, several ms,
#: per call of the 2,000-source case without them).
WORK_KEEP_BYTES = 32 * 2**20
_work_local = threading.local()


def _work(slot, shape, dtype):
    """An uninitialised C-order array ``shape`` of ``dtype`` for the work buffer ``slot``:
    a view of this thread's kept buffer when it is large enough, else a new one (kept when
    the thread's kept buffers stay within :data:`WORK_KEEP_BYTES`)."""
    dtype = np.dtype(dtype)
    n = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    kept = getattr(_work_local, "buffers", None)
    if kept is None:
        kept = _work_local.buffers = {}
    buf = kept.get(slot)
    if buf is None or buf.nbytes < n:
        kept.pop(slot, None)
        buf = np.empty(max(n, 1), dtype=np.uint8)
        if n + sum(b.nbytes for b in kept.values()) <= WORK_KEEP_BYTES:
            kept[slot] = buf
    return buf[:n].view(dtype).reshape(shape)


def block_sizes(n_rows, n_fold, n_freq, n_modes, budget_bytes=None):
    """Block sizes ``(rows, folded points, frequencies)`` of :func:`modal_transfer`.

    Half of the budget (default :data:`BLOCK_BYTES`) goes to the folded weights
    (``16 N R F`` bytes plus the ``(N, F)`` weights), half to a block of rows (``8 (N + R)``
    bytes of shapes and static columns and ``16 R F`` of product per row), so that a call's temporaries stay within
    about the budget for any number of points.
    """
    half = (BLOCK_BYTES if budget_bytes is None else budget_bytes) // 2
    n = max(int(n_modes), 1)
    fb = max(1, min(n_freq, half // (32 * n)))
    gb = max(1, min(n_fold, half // (16 * n * fb) - 1))
    rb = max(1, min(n_rows, half // (8 * (n + gb) + 16 * gb * fb)))
    return rb, gb, fb
