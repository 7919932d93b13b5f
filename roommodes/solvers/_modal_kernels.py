"""numba kernels of the modal solver (nothing else lives here).

- :func:`shapes_into`: mode shapes ``psi_n(p) = cos_x[p, i_n] cos_y[p, j_n] cos_z[p, l_n]``
  from per-axis cosine tables, in one pass, straight into a C-order block of the dtype the
  product wants (float64 or float32). Same products in the same order as
  :func:`roommodes.model.modes.mode_shapes`, so the float64 values are equal to the last bit.
- :func:`shapes_split_into`: the same for a block of points (two gathers per shape, from
  a per-point table of ``cos_x cos_y``), the resonant modes into a float64 block (a column
  slice: the static term's columns follow), the others into a float32 (or float64) block;
  :func:`shapes_split_into_parallel` on all cores.
- :func:`fold_into`: the modal weights and their fold with the mode shapes of the folded
  points in one pass, written as real pairs straight into the product's operands
  (:func:`fold_into_parallel`: the same on all cores).
- :func:`static_green_pairs_kernel`: the static rigid-wall Green's function of the box for
  many (source, receiver) pairs, each summed as :func:`roommodes.solvers.modal.static_green`
  sums it (a closed-form 1-D Green's function along the axis of largest separation over the
  2-D modes of the other two axes, cut where ``kappa |d| > _STATIC_DECAY``), but with each
  pair's own cutoff and without temporaries; :func:`static_green_pairs_tabled` with the
  per-term constants from tables sorted by ``kappa``, each pair's terms one branch-free
  SIMD loop (:func:`static_green_pairs_tabled_parallel` on all cores).

The parallel kernels split their loop in as many runs as numba has threads (``n_chunks``,
passed in, so that the kernels stay cacheable); each computes what its serial twin does,
so the values are the same to the last bit.

Their NumPy twins are :func:`roommodes.solvers.modal._shapes_numpy` and
:func:`roommodes.solvers.modal.static_green`; tests/solvers/test_modal_kernels.py holds them equal.
"""

from __future__ import annotations

import math

import numpy as np
from numba import get_num_threads, njit, prange

__all__ = ["shapes_into", "shapes_split_into", "shapes_split_into_parallel", "fold_into", "fold_into_parallel", "pair_products_into",
           "static_green_pairs_kernel", "static_green_pairs_tabled", "static_green_pairs_tabled_parallel",
           "exp_neg_into", "COS_TABLE"]

def n_threads():
    """numba's thread count (the ``n_chunks`` of the parallel kernels)."""
    return get_num_threads()


#: Exponent below which an image term of the 1-D Green's function is dropped (e^-40 = 4e-18).
_NEGLIGIBLE_EXP = 40.0


@njit(cache=True)
def shapes_into(cos_x, cos_y, cos_z, ix, iy, iz, out):
    """``out[p, n] = cos_x[p, ix[n]] * cos_y[p, iy[n]] * cos_z[p, iz[n]]``.

    Parameters
    ----------
    cos_x, cos_y, cos_z : float64 (P, n_a)
        ``cos(k_a p_a)`` for the per-axis wavenumbers ``k_a = i pi / L_a``.
    ix, iy, iz : int64 (N,)
        Mode indices per axis.
    out : float64 or float32 (P, N), C order
        Written in place (products formed in float64, rounded once when float32).
    """
    n_pts, n_modes = out.shape
    for p in range(n_pts):
        cx = cos_x[p]
        cy = cos_y[p]
        cz = cos_z[p]
        row = out[p]
        for n in range(n_modes):
            row[n] = cx[ix[n]] * cy[iy[n]] * cz[iz[n]]


@njit(cache=True)
def shapes_split_into(cos_x, cos_y, cos_z, ixy, iz, out_lo, out_hi):
    """:func:`shapes_into` for a block of points, split by mode: modes ``n < n_lo`` into
    ``out_lo`` (P, n_lo), float64, may be a column slice of a wider block), the others into
    ``out_hi`` (P, N - n_lo), float64 or float32, C order).

    ``ixy = ix * n_y + iy`` indexes a per-point table of ``cos_x[p, i] cos_y[p, j]``, so each
    shape takes two gathers and one product; the products are the same, in the same order
    (``(cos_x cos_y) cos_z``), so the values equal :func:`shapes_into`'s to the last bit.
    """
    cxy = np.empty(cos_x.shape[1] * cos_y.shape[1])
    for p in range(out_lo.shape[0]):
        _shape_row(cos_x[p], cos_y[p], cos_z[p], ixy, iz, out_lo[p], out_hi[p], cxy)


@njit(cache=True, parallel=True)
def shapes_split_into_parallel(cos_x, cos_y, cos_z, ixy, iz, out_lo, out_hi, n_chunks):
    """:func:`shapes_split_into` on all cores, the points split in ``n_chunks`` contiguous
    runs (one per thread); the same values."""
    n_pts = out_lo.shape[0]
    n_chunks = max(1, min(n_chunks, n_pts))
    for t in prange(n_chunks):
        cxy = np.empty(cos_x.shape[1] * cos_y.shape[1])
        for p in range(t * n_pts // n_chunks, (t + 1) * n_pts // n_chunks):
            _shape_row(cos_x[p], cos_y[p], cos_z[p], ixy, iz, out_lo[p], out_hi[p], cxy)


@njit(cache=True, inline="always")
def _shape_row(cx, cy, cz, ixy, iz, lo, hi, cxy):
    """One point of :func:`shapes_split_into` (``cxy``: scratch of n_x n_y)."""
    n_y = cy.shape[0]
    for i in range(cx.shape[0]):
        for j in range(n_y):
            cxy[i * n_y + j] = cx[i] * cy[j]
    n_lo = lo.shape[0]
    for n in range(n_lo):
        lo[n] = cxy[ixy[n]] * cz[iz[n]]
    for n in range(hi.shape[0]):
        m = n + n_lo
        hi[n] = cxy[ixy[m]] * cz[iz[m]]


@njit(cache=True, error_model="numpy")
def fold_into(kn2, scale, static_weight, walls, beta, k, psi_fold, out_lo, out_hi):
    """Folded modal weights ``B[n, r, f] = psi_fold[r, n] (W[n, f] - static_weight[n])``.

    ``W[n, f] = scale[n] / (k_n^2 - k_f^2 + j k_f b_n(f))`` with the damping
    ``b_n(f) = sum_w walls[n, w] beta[w, f]`` (the formula of :func:`_weights
    <roommodes.solvers.modal._weights>`, complex division written out), stored as real
    pairs: row ``n`` of ``out_lo`` for ``n < n_lo`` and row ``n - n_lo`` of ``out_hi``
    otherwise, columns ``2 (r F + f)`` (real) and ``2 (r F + f) + 1`` (imaginary).

    Parameters
    ----------
    kn2, scale, static_weight : float64 (N,)
        ``k_n^2``, ``4 pi eps_n / V`` and the static weights (zeros for none).
    walls : float64 (N, 6)
    beta : float64 (6, F)
        Wall admittances ``1 / zeta``.
    k : float64 (F,)
        Wavenumbers, rad/m.
    psi_fold : float64 (R, N)
    out_lo : float64 (n_lo, 2 R F)
    out_hi : float64 or float32 (N - n_lo, 2 R F)
        Written in place (``out_hi`` rounded once when float32).
    """
    n_freq = k.shape[0]
    wr = np.empty(n_freq)
    wi = np.empty(n_freq)
    for n in range(kn2.shape[0]):
        _fold_mode(n, kn2, scale, static_weight, walls, beta, k, psi_fold, out_lo, out_hi, wr, wi)


@njit(cache=True, parallel=True, error_model="numpy")
def fold_into_parallel(kn2, scale, static_weight, walls, beta, k, psi_fold, out_lo, out_hi, n_chunks):
    """:func:`fold_into` on all cores, the modes split in ``n_chunks`` contiguous runs (one
    per thread: ``numba.get_num_threads()``); the same arithmetic, so the same values."""
    n_modes = kn2.shape[0]
    n_freq = k.shape[0]
    n_chunks = max(1, min(n_chunks, n_modes))
    for t in prange(n_chunks):
        wr = np.empty(n_freq)
        wi = np.empty(n_freq)
        for n in range(t * n_modes // n_chunks, (t + 1) * n_modes // n_chunks):
            _fold_mode(n, kn2, scale, static_weight, walls, beta, k, psi_fold, out_lo, out_hi, wr, wi)


@njit(cache=True, inline="always", error_model="numpy")
def _fold_mode(n, kn2, scale, static_weight, walls, beta, k, psi_fold, out_lo, out_hi, wr, wi):
    """Row ``n`` of :func:`fold_into` (``wr``, ``wi``: scratch of F). The loops over
    frequency are innermost and free of branches (NumPy's error model: no division check),
    so they run in SIMD lanes; the arithmetic per element is the formula's, in its order."""
    n_lo = out_lo.shape[0]
    n_freq = k.shape[0]
    for f in range(n_freq):
        wi[f] = 0.0
    for w in range(walls.shape[1]):
        bw = walls[n, w]
        for f in range(n_freq):
            wi[f] += bw * beta[w, f]
    kn2_n = kn2[n]
    sc = scale[n]
    sw = static_weight[n]
    for f in range(n_freq):
        kf = k[f]
        re = kn2_n - kf * kf
        im = wi[f] * kf
        den = re * re + im * im
        wr[f] = sc * re / den - sw
        wi[f] = -sc * im / den
    if n < n_lo:
        _fold_row(out_lo[n], psi_fold, n, wr, wi)
    else:
        _fold_row(out_hi[n - n_lo], psi_fold, n, wr, wi)


@njit(cache=True, inline="always")
def _fold_row(row, psi_fold, n, wr, wi):
    """``row[2 (r F + f) + (0, 1)] = psi_fold[r, n] (wr[f], wi[f])``."""
    n_freq = wr.shape[0]
    for r in range(psi_fold.shape[0]):
        ps = psi_fold[r, n]
        base = 2 * r * n_freq
        for f in range(n_freq):
            row[base + 2 * f] = ps * wr[f]
            row[base + 2 * f + 1] = ps * wi[f]


@njit(cache=True)
def pair_products_into(psi_src, psi_rec, static_weight, out_lo, out_hi, low):
    """Products of mode shapes for every (source, receiver) pair of each group.

    Row ``(k S + s) R + r`` holds ``psi_src[k, s, n] psi_rec[k, r, n]``: modes
    ``n < n_lo`` in ``out_lo`` (float64), the others in ``out_hi`` (float64 or float32,
    rounded once); ``low`` gets the row's static low-mode sum
    ``sum_n psi_src psi_rec static_weight[n]`` in float64.

    Parameters
    ----------
    psi_src : float64 (K, S, N)
    psi_rec : float64 (K, R, N)
    static_weight : float64 (N,)
    out_lo : float64 (K S R, n_lo)
    out_hi : float64 or float32 (K S R, N - n_lo)
    low : float64 (K S R,)
    """
    n_groups, n_src, n_modes = psi_src.shape
    n_rec = psi_rec.shape[1]
    n_lo = out_lo.shape[1]
    for k in range(n_groups):
        for s in range(n_src):
            ps = psi_src[k, s]
            for r in range(n_rec):
                pr = psi_rec[k, r]
                row = (k * n_src + s) * n_rec + r
                lo = out_lo[row]
                hi = out_hi[row]
                acc = 0.0
                for n in range(n_lo):
                    v = ps[n] * pr[n]
                    lo[n] = v
                    acc += v * static_weight[n]
                for n in range(n_lo, n_modes):
                    v = ps[n] * pr[n]
                    hi[n - n_lo] = v
                    acc += v * static_weight[n]
                low[row] = acc


@njit(cache=True)
def _pair_axes(src, rec):
    """The axis ``a`` of largest separation of two points (the first on ties, as np.argmax),
    the other two axes ``b < c``, and the separation along ``a``."""
    a = 0
    da = abs(src[0] - rec[0])
    for k in (1, 2):
        dk = abs(src[k] - rec[k])
        if dk > da:
            a = k
            da = dk
    b = 1 if a == 0 else 0
    c = 1 if a == 2 else 2
    return a, b, c, da


@njit(cache=True)
def static_green_pairs_kernel(size, src, rec, decay, max_index, out):
    """``out[i] = static_green(size, src[i], rec[i])`` for every pair ``i``.

    Parameters
    ----------
    size : float64 (3,)
        Room dimensions, m.
    src, rec : float64 (P, 3)
        Paired points, m.
    decay : float
        Terms are kept while ``kappa <= decay / |d_a|`` (``_STATIC_DECAY``).
    max_index : int
        Cap on the 2-D mode index per axis (``_STATIC_MAX_INDEX``).
    out : float64 (P,)
        Written in place.

    Notes
    -----
    The 1-D Neumann Green's function of ``-d2/dx2 + kappa^2`` on ``[0, L]`` is
    ``(e^{-kappa(h-l)} + e^{-kappa(2L-l-h)} + e^{-kappa(l+h)} + e^{-kappa(2L-h+l)})
    / (2 kappa (1 - e^{-2 kappa L}))`` for ``l <= h`` (the source and its three images in
    the two walls of the axis); an image term whose exponent exceeds 40 is left out (it is
    below 4e-18 of the term, far below the series' own cutoff of ``e^-decay``).
    """
    n_pairs = src.shape[0]
    pi = math.pi
    cos_c = np.empty(max_index + 1)
    for i in range(n_pairs):
        a, b, c, da = _pair_axes(src[i], rec[i])
        sep = max(da, 1e-3)
        kmax = decay / sep
        lb = size[b]
        lc = size[c]
        la = size[a]
        mb = min(int(kmax * lb / pi) + 1, max_index)
        mc = min(int(kmax * lc / pi) + 1, max_index)
        lo = min(src[i, a], rec[i, a])
        hi = max(src[i, a], rec[i, a])
        e1 = hi - lo
        e2 = 2 * la - lo - hi
        e3 = lo + hi
        e4 = 2 * la - hi + lo
        sb, rb, sc, rc = src[i, b], rec[i, b], src[i, c], rec[i, c]
        total = 0.0
        kmax2 = kmax * kmax
        for p in range(mc + 1):
            kc = p * pi / lc
            if kc * kc > kmax2:
                break
            cos_c[p] = math.cos(kc * sc) * math.cos(kc * rc)
        for m in range(mb + 1):
            kb = m * pi / lb
            kb2 = kb * kb
            if kb2 > kmax2:
                break
            cb = math.cos(kb * sb) * math.cos(kb * rb)
            wb = 2.0 if m > 0 else 1.0
            # p up to the disc kappa <= kmax (and the cap)
            for p in range(mc + 1):
                kc = p * pi / lc
                k2 = kb2 + kc * kc
                if k2 > kmax2:
                    break
                w = wb * (2.0 if p > 0 else 1.0) / (lb * lc)
                shape = cb * cos_c[p]
                if k2 == 0.0:
                    g = la / 3.0 - hi + (lo * lo + hi * hi) / (2.0 * la)
                else:
                    kap = math.sqrt(k2)
                    num = math.exp(-kap * e1)
                    if kap * e2 < _NEGLIGIBLE_EXP:
                        num += math.exp(-kap * e2)
                    if kap * e3 < _NEGLIGIBLE_EXP:
                        num += math.exp(-kap * e3)
                    if kap * e4 < _NEGLIGIBLE_EXP:
                        num += math.exp(-kap * e4)
                    den = 2.0 * kap
                    if 2.0 * kap * la < _NEGLIGIBLE_EXP:
                        den *= 1.0 - math.exp(-2.0 * kap * la)
                    g = num / den
                total += w * shape * g
        out[i] = total


@njit(cache=True)
def static_green_pairs_tabled(size, src, rec, decay, kappa, weight_den, qexp, m_idx, p_idx, out):
    """:func:`static_green_pairs_kernel` with the per-term constants read from tables.

    Parameters
    ----------
    size, src, rec, decay, out
        As :func:`static_green_pairs_kernel`.
    kappa, weight_den, qexp : float64 (3, T)
        For the axis ``a`` of the 1-D sum, the 2-D terms ``(m, p)`` of the other two axes
        (``(0, 0)`` left out) sorted by ``kappa``: ``kappa``, ``w / (2 kappa (1 - e^{-2 kappa
        L_a}))`` and ``e^{-2 kappa L_a}``.
    m_idx, p_idx : int64 (3, T)
        Their indices ``m``, ``p`` (at most :data:`COS_TABLE` - 1). Every pair's disc
        ``kappa <= decay / |d_a|`` must lie in the tables.

    Notes
    -----
    A pair's terms are a prefix of its axis' table, summed in one loop without branches
    (:func:`_pair_terms`). With ``X = e^{-kappa (h - l)}``, ``Y = e^{-kappa min(l + h, 2 L -
    l - h)}`` and ``Q = e^{-2 kappa L}`` the four image terms are ``X + Q / X + Y + Q / Y``:
    two exponentials per term. ``kappa (h - l) <= decay`` and ``kappa min(.) <= kappa L``,
    so ``X`` never underflows, and where ``Y`` would (``kappa L > 700``) ``Q`` is 0.
    """
    cos_b = np.empty(COS_TABLE)
    cos_c = np.empty(COS_TABLE)
    for i in range(src.shape[0]):
        out[i] = _tabled_pair(size, src[i], rec[i], decay, kappa, weight_den, qexp, m_idx, p_idx, cos_b, cos_c)


@njit(cache=True, parallel=True)
def static_green_pairs_tabled_parallel(size, src, rec, decay, kappa, weight_den, qexp, m_idx, p_idx, out, n_chunks):
    """:func:`static_green_pairs_tabled` on all cores, the pairs dealt out in turn to
    ``n_chunks`` runs (one per thread; the close pairs, which cost the most, are spread
    evenly); the same arithmetic, so the same values."""
    n_pairs = src.shape[0]
    n_chunks = max(1, min(n_chunks, n_pairs))
    for t in prange(n_chunks):
        cos_b = np.empty(COS_TABLE)
        cos_c = np.empty(COS_TABLE)
        for i in range(t, n_pairs, n_chunks):
            out[i] = _tabled_pair(size, src[i], rec[i], decay, kappa, weight_den, qexp, m_idx, p_idx, cos_b, cos_c)


#: Length of the per-pair cosine tables of :func:`static_green_pairs_tabled` (largest 2-D
#: index + 1 of its tables).
COS_TABLE = 257


@njit(cache=True)
def _tabled_pair(size, s_i, r_i, decay, kappa, weight_den, qexp, m_idx, p_idx, cos_b, cos_c):
    """One pair of :func:`static_green_pairs_tabled` (``cos_b``, ``cos_c``: scratch)."""
    a, b, c, da = _pair_axes(s_i, r_i)
    kmax = decay / max(da, 1e-3)
    lb = size[b]
    lc = size[c]
    la = size[a]
    lo = min(s_i[a], r_i[a])
    hi = max(s_i[a], r_i[a])
    n_terms = np.searchsorted(kappa[a], kmax, side="right")
    # cos(m pi x_s / L) cos(m pi x_r / L) for the indices of the disc
    _cos_products(s_i[b], r_i[b], lb, min(int(kmax * lb / math.pi) + 1, COS_TABLE - 1), cos_b)
    _cos_products(s_i[c], r_i[c], lc, min(int(kmax * lc / math.pi) + 1, COS_TABLE - 1), cos_c)
    # the (0, 0) term: zero-mean 1-D Green's function, weight 1 / (lb lc)
    total = (la / 3.0 - hi + (lo * lo + hi * hi) / (2.0 * la)) / (lb * lc)
    return total + _pair_terms(n_terms, kappa[a], weight_den[a], qexp[a], m_idx[a], p_idx[a], cos_b, cos_c,
                               hi - lo, 2 * la - lo - hi, lo + hi, _POW2)


@njit(cache=True)
def _cos_products(xs, xr, length, n_max, out):
    """``out[m] = cos(m pi xs / L) cos(m pi xr / L)`` for ``m <= n_max``: the cosines by
    rotation (``cos, sin`` of ``(m + 1) t`` from those of ``m t``), taken afresh from the C
    library every :data:`_COS_RESYNC` steps, so that the rotation's round-off (about one ulp
    per step) stays below a few 1e-15."""
    k = math.pi / length
    c1s, s1s = math.cos(k * xs), math.sin(k * xs)
    c1r, s1r = math.cos(k * xr), math.sin(k * xr)
    cs, ss, cr, sr = 1.0, 0.0, 1.0, 0.0
    for m in range(n_max + 1):
        if m % _COS_RESYNC == 0:
            cs, ss = math.cos(m * k * xs), math.sin(m * k * xs)
            cr, sr = math.cos(m * k * xr), math.sin(m * k * xr)
        out[m] = cs * cr
        cs, ss = cs * c1s - ss * s1s, ss * c1s + cs * s1s
        cr, sr = cr * c1r - sr * s1r, sr * c1r + cr * s1r


#: Steps of the cosine rotation of :func:`_cos_products` between fresh values.
_COS_RESYNC = 32


@njit(cache=True, fastmath={"reassoc", "contract"}, error_model="numpy")
def _pair_terms(n_terms, kappa, weight_den, qexp, m_idx, p_idx, cos_b, cos_c, e1, e2, e3, pow2):
    """``sum_t wd_t cos_b[m_t] cos_c[p_t] (X + Q_t / X + Y + Q_t / Y)``, ``X = e^{-kappa_t e1}``,
    ``Y = e^{-kappa_t min(e2, e3)}``, over the first ``n_terms`` terms of one axis' tables. No
    branch and a branch-free exponential (:func:`_exp_neg`), so the loop runs in SIMD
    lanes; the sum is reassociated (round-off of IEEE float64, not the order of the terms)."""
    acc = 0.0
    e_near = min(e2, e3)
    for t in range(n_terms):
        kap = kappa[t]
        q = qexp[t]
        x = _exp_neg(-kap * e1, pow2)
        y = _exp_neg(-kap * e_near, pow2)
        num = x + q / x + y + q / y
        acc += weight_den[t] * cos_b[m_idx[t]] * cos_c[p_idx[t]] * num
    return acc


#: ``2^n`` for n = -1022 ... 0 (index n + 1022), the scale of :func:`_exp_neg`.
_POW2 = 2.0 ** np.arange(-1022, 1, dtype=np.float64)
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_LOG2E = 1.4426950408889634


@njit(cache=True, inline="always", fastmath={"contract"})
def _exp_neg(x, pow2):
    """``e^x`` for ``x <= 0`` without branches or calls (``x < -700`` gives ``e^-700``, 1e-304):
    ``x = r - k ln 2`` with ``|r| <= ln 2 / 2`` (Cody & Waite's two-part ``ln 2``), ``e^r``
    by its Taylor polynomial to degree 12 (truncation below 2e-16) and ``2^-k`` from a table.
    Within 2 ulp of the C library's ``exp`` (tests/solvers/test_modal_kernels.py)."""
    x = x if x > -700.0 else -700.0
    k = np.int64(-x * _LOG2E + 0.5)
    r = (x + k * _LN2_HI) + k * _LN2_LO
    e = 1.0 + r * (1.0 + r * (0.5 + r * (1.0 / 6.0 + r * (1.0 / 24.0 + r * (1.0 / 120.0 + r * (
        1.0 / 720.0 + r * (1.0 / 5040.0 + r * (1.0 / 40320.0 + r * (1.0 / 362880.0 + r * (
            1.0 / 3628800.0 + r * (1.0 / 39916800.0 + r * (1.0 / 479001600.0))))))))))))
    return e * pow2[1022 - k]


@njit(cache=True)
def exp_neg_into(x, out):
    """``out[i] = _exp_neg(x[i])`` (for the tests)."""
    for i in range(x.shape[0]):
        out[i] = _exp_neg(x[i], _POW2)
