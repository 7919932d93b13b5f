"""numba kernel of the separable modal sum (:mod:`roommodes.solvers.separable`; nothing else lives here).

- :func:`pair_sums_into`: the last axis of the sum, ``out[s, r, :] = sum_i cx_s[s, i]
  cx_r[r, i] table[plane(s, r), i, :]`` for every (source, receiver) pair, written straight
  into the complex transfer (as real pairs) and the static low-mode sum.

Its NumPy twin is :func:`roommodes.solvers.separable._pair_sums_numpy`;
tests/solvers/test_separable.py holds them equal to round-off.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["pair_sums_into"]


@njit(cache=True)
def pair_sums_into(cx_src, cx_rec, plane_src, plane_rec, n_plane_rec, table, h, low):
    """``h[s, r, c] = sum_i cx_src[s, i] cx_rec[r, i] table[p, i, c]`` (c < 2F) and
    ``low[s, r]`` the same sum of the last column, with ``p = plane_src[s] n_plane_rec + plane_rec[r]``.

    Parameters
    ----------
    cx_src : float64 (S, I)
        Cosines of the last axis at the sources, one per index ``i``.
    cx_rec : float64 (R, I)
        The same at the receivers.
    plane_src, plane_rec : int64 (S,), (R,)
        Row of each point's coordinates on the other two axes.
    n_plane_rec : int
        Number of receiver rows.
    table : float64 (P, I, 2F + 1)
        The sum over the other two axes' indices (:meth:`SeparableModalSum.table`).
    h : float64 (S, R, 2F)
        Out: the complex transfers as real pairs.
    low : float64 (S, R)
        Out: the static low-mode sums.
    """
    n_src, n_idx = cx_src.shape
    n_rec = cx_rec.shape[0]
    n_col = table.shape[2]
    n_out = h.shape[2]
    acc = np.empty(n_col)
    for s in range(n_src):
        for r in range(n_rec):
            t = table[plane_src[s] * n_plane_rec + plane_rec[r]]
            acc[:] = 0.0
            for i in range(n_idx):
                w = cx_src[s, i] * cx_rec[r, i]
                for c in range(n_col):
                    acc[c] += w * t[i, c]
            for c in range(n_out):
                h[s, r, c] = acc[c]
            low[s, r] = acc[n_col - 1]
