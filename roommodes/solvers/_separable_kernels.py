"""numba kernel of the separable modal sum (:mod:`roommodes.solvers.separable`; nothing else lives here).

- :func:`pair_sums_into`: the last axis of the sum, ``out[k, s, r, :] = sum_i cx_s[k, s, i]
  cx_r[k, r, i] table[plane(k, s, r), i, :]`` for every (source, receiver) pair of each
  group, written straight into the complex transfer (as real pairs) and the static
  low-mode sum.

- :func:`group_sums_into`: the first axis of the sum, ``out[g, q, :] = sum_{n in g}
  weight[n, q] columns[n, :]`` over the consecutive modes of each group, without the
  (modes x planes x columns) temporary.

- :func:`static_pairs_shared`: the static Green's function of
  :func:`roommodes.solvers._modal_kernels.static_green_pairs_tabled` for pairs sorted into
  groups that share the axis of largest separation and its two coordinates: the image
  terms (the exponentials, most of the cost) are computed once per group, and every pair
  sums them in the same order, so the values are the same to the bit.

Their NumPy twins are :func:`roommodes.solvers.separable._pair_sums_numpy` and
:func:`roommodes.solvers.separable._group_sums_numpy`; tests/solvers/test_separable.py
holds them equal to round-off.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ._modal_kernels import _NEGLIGIBLE_EXP, _pair_axes

__all__ = ["pair_sums_into", "group_sums_into", "static_pairs_shared"]


@njit(cache=True)
def pair_sums_into(cx_src, cx_rec, plane_src, plane_rec, n_plane_rec, table, h, low):
    """``h[k, s, r, c] = sum_i cx_src[k, s, i] cx_rec[k, r, i] table[p, i, c]`` (c < 2F) and
    ``low[k, s, r]`` the same sum of the last column, with
    ``p = plane_src[k, s] n_plane_rec + plane_rec[k, r]``: every (source, receiver) pair
    within each of K groups.

    Parameters
    ----------
    cx_src : float64 (K, S, I)
        Cosines of the last axis at the sources, one per index ``i``.
    cx_rec : float64 (K, R, I)
        The same at the receivers.
    plane_src, plane_rec : int64 (K, S), (K, R)
        Row of each point's coordinates on the other two axes.
    n_plane_rec : int
        Number of receiver rows.
    table : float64 (P, I, 2F + 1)
        The sum over the other two axes' indices (:meth:`SeparableModalSum.table`).
    h : float64 (K, S, R, 2F)
        Out: the complex transfers as real pairs.
    low : float64 (K, S, R)
        Out: the static low-mode sums.
    """
    n_groups, n_src, n_idx = cx_src.shape
    n_rec = cx_rec.shape[1]
    n_col = table.shape[2]
    n_out = h.shape[3]
    acc = np.empty(n_col)
    for k in range(n_groups):
        for s in range(n_src):
            for r in range(n_rec):
                t = table[plane_src[k, s] * n_plane_rec + plane_rec[k, r]]
                acc[:] = 0.0
                for i in range(n_idx):
                    w = cx_src[k, s, i] * cx_rec[k, r, i]
                    for c in range(n_col):
                        acc[c] += w * t[i, c]
                for c in range(n_out):
                    h[k, s, r, c] = acc[c]
                low[k, s, r] = acc[n_col - 1]


@njit(cache=True)
def group_sums_into(weight, columns, start, out):
    """``out[g, q, :] = sum_{n = start[g]}^{start[g + 1] - 1} weight[n, q] columns[n, :]``.

    Parameters
    ----------
    weight : float64 (N, Q)
    columns : float64 (N, K)
    start : int64 (G + 1,)
        First mode of each group, and N at the end.
    out : float64 (G, Q, K)
        Out.
    """
    n_groups = start.size - 1
    n_q, n_k = weight.shape[1], columns.shape[1]
    for g in range(n_groups):
        o = out[g]
        o[:, :] = 0.0
        for n in range(start[g], start[g + 1]):
            col = columns[n]
            for q in range(n_q):
                w = weight[n, q]
                for k in range(n_k):
                    o[q, k] += w * col[k]


@njit(cache=True)
def static_pairs_shared(size, src, rec, decay, kappa, weight_den, qexp, order, group_start, out):
    """:func:`~roommodes.solvers._modal_kernels.static_green_pairs_tabled` with the image
    terms shared within groups.

    Parameters
    ----------
    size, src, rec, decay, kappa, weight_den, qexp, out
        As :func:`~roommodes.solvers._modal_kernels.static_green_pairs_tabled`.
    order : int64 (P,)
        The pairs, group after group.
    group_start : int64 (G + 1,)
        Where each group starts in ``order`` (and P at the end). The pairs of a group have
        the same axis of largest separation ``a`` and the same two coordinates on it.
    """
    pi = math.pi
    n_tab = kappa.shape[1]
    cos_c = np.empty(n_tab)
    # per-point cosines, kept while consecutive pairs share a coordinate
    cs_c, cr_c, cs_b, cr_b = np.empty(n_tab), np.empty(n_tab), np.empty(n_tab), np.empty(n_tab)
    num_t = np.empty((n_tab, n_tab))
    p_stop = np.empty(n_tab, dtype=np.int64)
    for g in range(group_start.size - 1):
        first = order[group_start[g]]
        a, b, c, da = _pair_axes(src[first], rec[first])
        sep = max(da, 1e-3)
        kmax = decay / sep
        lb = size[b]
        lc = size[c]
        la = size[a]
        lo = min(src[first, a], rec[first, a])
        hi = max(src[first, a], rec[first, a])
        e1 = hi - lo
        e2 = 2 * la - lo - hi
        e3 = lo + hi
        kap_t = kappa[a]
        wd_t = weight_den[a]
        q_t = qexp[a]
        mc = min(int(kmax * lc / pi) + 1, n_tab - 1)
        mb = min(int(kmax * lb / pi) + 1, n_tab - 1)
        # the image terms of the group, with the cut-offs of the per-pair loop
        m_stop = mb + 1
        for m in range(mb + 1):
            if kap_t[m, 0] > kmax:
                m_stop = m
                break
            row_k = kap_t[m]
            row_q = q_t[m]
            p_stop[m] = mc + 1
            for p in range(1 if m == 0 else 0, mc + 1):
                kap = row_k[p]
                if kap > kmax:
                    p_stop[m] = p
                    break
                x = math.exp(-kap * e1)
                q = row_q[p]
                num = x + q / x
                if kap * e3 < _NEGLIGIBLE_EXP:
                    y = math.exp(-kap * e3)
                    num += y + q / y
                elif kap * e2 < _NEGLIGIBLE_EXP:
                    num += math.exp(-kap * e2)
                num_t[m, p] = num
        zero = (la / 3.0 - hi + (lo * lo + hi * hi) / (2.0 * la)) / (lb * lc)
        last_sb, last_rb, last_sc, last_rc = math.nan, math.nan, math.nan, math.nan
        for j in range(group_start[g], group_start[g + 1]):
            i = order[j]
            sb, rb, sc, rc = src[i, b], rec[i, b], src[i, c], rec[i, c]
            if sc != last_sc:
                for p in range(mc + 1):
                    cs_c[p] = math.cos(p * pi / lc * sc)
                last_sc = sc
            if rc != last_rc:
                for p in range(mc + 1):
                    cr_c[p] = math.cos(p * pi / lc * rc)
                last_rc = rc
            if sb != last_sb:
                for m in range(m_stop):
                    cs_b[m] = math.cos(m * pi / lb * sb)
                last_sb = sb
            if rb != last_rb:
                for m in range(m_stop):
                    cr_b[m] = math.cos(m * pi / lb * rb)
                last_rb = rb
            for p in range(mc + 1):
                cos_c[p] = cs_c[p] * cr_c[p]
            total = zero
            for m in range(m_stop):
                cb = cs_b[m] * cr_b[m]
                row_w = wd_t[m]
                row_n = num_t[m]
                acc = 0.0
                for p in range(1 if m == 0 else 0, p_stop[m]):
                    acc += cos_c[p] * row_w[p] * row_n[p]
                total += cb * acc
            out[i] = total
