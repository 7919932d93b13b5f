"""numba kernel of the separable modal sum (:mod:`roommodes.solvers.separable`; nothing else lives here).

- :func:`pair_sums_into`: the last axis of the sum, ``out[k, s, r, :] = sum_i cx_s[k, s, i]
  cx_r[k, r, i] table[plane(k, s, r), i, :]`` for every (source, receiver) pair of each
  group, written straight into the complex transfer (as real pairs) and the static
  low-mode sum.

- :func:`group_sums_into`: the first axis of the sum, ``out[g, q, :] = sum_{n in g}
  weight[n, q] columns[n, :]`` over the consecutive modes of each group, without the
  (modes x planes x columns) temporary.

Their NumPy twins are :func:`roommodes.solvers.separable._pair_sums_numpy` and
:func:`roommodes.solvers.separable._group_sums_numpy`; tests/solvers/test_separable.py
holds them equal to round-off.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["pair_sums_into", "group_sums_into"]


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
