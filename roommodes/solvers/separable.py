"""The modal sum for points whose coordinates take few values on two of the axes.

A mode shape is a product of one cosine per axis, ``psi_n(p) = c_x(i_n, p_x) c_y(j_n, p_y)
c_z(l_n, p_z)``, so the modal sum of :mod:`roommodes.solvers.modal`

.. math:: H(s, r, f) = \\sum_n \\psi_n(s)\\,\\psi_n(r)\\,W_n(f)

can be taken one axis at a time (sum factorisation): with the modes grouped by their
indices on the first two axes ``a`` (the last one summed) and ``b``,

.. math:: C_{ab}(s_c, r_c) = \\sum_{l} c_c(l, s_c)\\,c_c(l, r_c)\\,W_{abl},\\qquad
          D_a(s_b, s_c, r_b, r_c) = \\sum_b c_b(b, s_b)\\,c_b(b, r_b)\\,C_{ab},\\qquad
          H = \\sum_a c_a(a, s_a)\\,c_a(a, r_a)\\,D_a.

When the sources and receivers lie on few values of ``b`` and ``c`` (a grid of speaker
positions around a seat, say) the table ``D`` is small and shared by all of them, and each
(source, receiver) pair costs one short sum over the indices of axis ``a`` (about 20 in a
small room) instead of one over all modes (about 1,500): the same sum, in float64, in
another order. The static low-mode sum ``sum_n psi psi W_static`` of the static tail rides
along as one more column.
"""

from __future__ import annotations

import numpy as np

__all__ = ["SeparableModalSum", "TABLE_BYTES"]

#: Largest table ``D`` built, bytes; beyond it :meth:`SeparableModalSum.table` returns None.
TABLE_BYTES = 64 * 2**20


def _kernels():
    """The compiled kernel, imported on first use (importing numba costs start-up time)."""
    from . import _separable_kernels

    return _separable_kernels


class SeparableModalSum:
    """The modal sum with weights ``W`` (N, F) and static weights (N,) by sum factorisation.

    Parameters
    ----------
    indices : ndarray of int (N, 3)
        Mode indices (:func:`roommodes.solvers.modal.modal_weights`).
    size_m : array_like (3,)
        Room dimensions, m.
    weight : ndarray, complex (N, F)
        Modal weights.
    static_weight : ndarray (N,)
        Static weights of the low modes (the tail's low-mode sum).
    last_axis : int
        The axis summed last, per pair (the one whose coordinates take the most values).
    """

    def __init__(self, indices, size_m, weight, static_weight, last_axis=0):
        idx = np.asarray(indices, dtype=np.int64)
        self.size = np.asarray(size_m, dtype=float)
        self.axes = (last_axis,) + tuple(a for a in range(3) if a != last_axis)
        a, b, c = self.axes
        order = np.lexsort((idx[:, c], idx[:, b], idx[:, a]))
        w = np.ascontiguousarray(weight, dtype=complex)
        self.n_freq = w.shape[1]
        cols = np.concatenate([w.view(np.float64), np.asarray(static_weight, dtype=float)[:, None]], axis=1)
        self.columns = np.ascontiguousarray(cols[order])  # (N, 2F + 1)
        ia, ib, ic = idx[order, a], idx[order, b], idx[order, c]
        new_ab = np.r_[True, (ia[1:] != ia[:-1]) | (ib[1:] != ib[:-1])]
        self.ab_start = np.flatnonzero(new_ab)
        self.ab_bounds = np.r_[self.ab_start, ia.size].astype(np.int64)
        self.ab_a, self.ab_b = ia[new_ab], ib[new_ab]
        self.mode_c = ic
        new_a = np.r_[True, self.ab_a[1:] != self.ab_a[:-1]]
        self.a_start = np.r_[np.flatnonzero(new_a), self.ab_a.size]
        self.a_index = self.ab_a[new_a]  # the indices of axis a in use
        self._cache = None

    def _cos(self, axis, index, values):
        """``cos(index pi v / L)`` (V, I) of the axis."""
        return np.cos(np.asarray(values, dtype=float)[:, None] * (np.pi / self.size[axis] * index)[None, :])

    def table_bytes(self, n_src_planes, n_rec_planes):
        """Size of the table for that many (b, c) value pairs of sources and receivers, bytes."""
        return 8 * n_src_planes * n_rec_planes * self.a_index.size * self.columns.shape[1]

    def table(self, src_b, src_c, rec_b, rec_c):
        """``D[(s_b, s_c), (r_b, r_c), a, :]`` for every source value ``s_b`` of ``src_b``,
        ``s_c`` of ``src_c`` and every receiver value: shape (Sb Sc, Rb Rc, I, 2F + 1), or
        None when it would exceed :data:`TABLE_BYTES`. The last one built is kept."""
        vals = [np.asarray(v, dtype=float) for v in (src_b, src_c, rec_b, rec_c)]
        key = b"|".join(v.tobytes() for v in vals)
        if self._cache is not None and self._cache[0] == key:
            return self._cache[1]
        sb, sc, rb, rc = vals
        if self.table_bytes(sb.size * sc.size, rb.size * rc.size) > TABLE_BYTES:
            return None
        _, b, c = self.axes
        # axis c: C[ab, (s_c, r_c), :] = sum over the modes of group ab
        pc = (self._cos(c, self.mode_c, sc)[:, :, None] * self._cos(c, self.mode_c, rc).T[None, :, :])  # (Sc, N, Rc)
        pc = pc.transpose(1, 0, 2).reshape(self.mode_c.size, -1)  # (N, Sc Rc)
        big_c = np.empty((self.ab_b.size, pc.shape[1], self.columns.shape[1]))  # (G, Sc Rc, K)
        _kernels().group_sums_into(np.ascontiguousarray(pc), self.columns, self.ab_bounds, big_c)
        # axis b: D[a][(s_b, r_b), (s_c, r_c) K] = sum over the groups ab of a
        pb = (self._cos(b, self.ab_b, sb)[:, :, None] * self._cos(b, self.ab_b, rb).T[None, :, :])  # (Sb, G, Rb)
        pb = pb.transpose(1, 0, 2).reshape(self.ab_b.size, -1)  # (G, Sb Rb)
        n_k = self.columns.shape[1]
        out = np.empty((sb.size, rb.size, sc.size, rc.size, self.a_index.size, n_k))
        flat = big_c.reshape(big_c.shape[0], -1)
        for i in range(self.a_index.size):
            g0, g1 = self.a_start[i], self.a_start[i + 1]
            d = pb[g0:g1].T @ flat[g0:g1]  # (Sb Rb, Sc Rc K)
            out[:, :, :, :, i, :] = d.reshape(sb.size, rb.size, sc.size, rc.size, n_k)
        d = np.ascontiguousarray(out.transpose(0, 2, 1, 3, 4, 5)).reshape(
            sb.size * sc.size, rb.size * rc.size, self.a_index.size, n_k)
        self._cache = (key, d)
        return d

    def transfer(self, src, rec, src_values=None, max_fma=None):
        """Modal sums of every source to every receiver.

        Parameters
        ----------
        src : ndarray (S, 3)
        rec : ndarray (R, 3)
            Positions, m.
        src_values : (array, array), optional
            Sorted values that hold every source coordinate on axes ``b`` and ``c``
            (``self.axes[1:]``); default the sources' own. Passing the same superset for
            many calls lets them share one table.
        max_fma : float, optional
            Give up (return None) when the sum would take more multiply-adds.

        Returns
        -------
        h : ndarray, complex (S, R, F)
            ``sum_n psi_n(s) psi_n(r) W[n, f]``.
        low : ndarray (S, R)
            ``sum_n psi_n(s) psi_n(r) W_static[n]``.
        Or None when the table would be too large (:data:`TABLE_BYTES`) or the sum too long.
        """
        out = self.grouped_transfer(np.atleast_2d(src)[None], np.atleast_2d(rec)[None], src_values, max_fma)
        return None if out is None else (out[0][0], out[1][0])

    def grouped_transfer(self, src, rec, src_values=None, max_fma=None):
        """:meth:`transfer` within each of K groups: sources (K, S, 3) to receivers
        (K, R, 3); returns ``h`` (K, S, R, F) complex and ``low`` (K, S, R), or None."""
        s3 = np.asarray(src, dtype=float)
        r3 = np.asarray(rec, dtype=float)
        n_groups, n_src, n_rec = s3.shape[0], s3.shape[1], r3.shape[1]
        s, r = s3.reshape(-1, 3), r3.reshape(-1, 3)
        a, b, c = self.axes
        if src_values is None:
            src_values = (np.unique(s[:, b]), np.unique(s[:, c]))
        sb, sc = (np.asarray(v, dtype=float) for v in src_values)
        rb, ib_r = np.unique(r[:, b], return_inverse=True)
        rc, ic_r = np.unique(r[:, c], return_inverse=True)
        if max_fma is not None and self.fma(sb.size, sc.size, rb.size, rc.size, s.shape[0] * n_rec) > max_fma:
            return None
        ib_s, ic_s = np.searchsorted(sb, s[:, b]), np.searchsorted(sc, s[:, c])
        if (np.any(ib_s >= sb.size) or np.any(ic_s >= sc.size) or np.any(sb[np.minimum(ib_s, sb.size - 1)] != s[:, b])
                or np.any(sc[np.minimum(ic_s, sc.size - 1)] != s[:, c])):
            raise ValueError("src_values must hold every source coordinate on the table's axes")
        d = self.table(sb, sc, rb, rc)
        if d is None:
            return None
        plane_s = (ib_s * sc.size + ic_s).astype(np.int64).reshape(n_groups, n_src)
        plane_r = (ib_r.ravel() * rc.size + ic_r.ravel()).astype(np.int64).reshape(n_groups, n_rec)
        cx_s = self._cos(a, self.a_index, s[:, a]).reshape(n_groups, n_src, -1)
        cx_r = self._cos(a, self.a_index, r[:, a]).reshape(n_groups, n_rec, -1)
        h = np.empty((n_groups, n_src, n_rec, 2 * self.n_freq))
        low = np.empty((n_groups, n_src, n_rec))
        _kernels().pair_sums_into(cx_s, cx_r, plane_s, plane_r, rb.size * rc.size, d.reshape(-1, *d.shape[2:]), h, low)
        return h.view(np.complex128), low

    def fma(self, n_sb, n_sc, n_rb, n_rc, n_pairs):
        """Multiply-adds of a sum over ``n_pairs`` pairs with a table of that many values
        on the two axes (its build included)."""
        n_k = self.columns.shape[1]
        table = n_k * (self.mode_c.size * n_sc * n_rc + self.ab_b.size * n_sb * n_rb * n_sc * n_rc)
        return table + n_k * self.a_index.size * n_pairs


def _pair_sums_numpy(cx_src, cx_rec, plane_src, plane_rec, n_plane_rec, table, n_out):
    """NumPy twin of :func:`._separable_kernels.pair_sums_into` (returns ``h``, ``low``)."""
    t = table[plane_src[:, :, None] * n_plane_rec + plane_rec[:, None, :]]  # (K, S, R, I, C)
    out = np.einsum("ksi,kri,ksric->ksrc", cx_src, cx_rec, t)
    return out[..., :n_out], out[..., -1]


def _group_sums_numpy(weight, columns, start):
    """NumPy twin of :func:`._separable_kernels.group_sums_into` (returns ``out``)."""
    return np.add.reduceat(weight[:, :, None] * columns[:, None, :], start[:-1], axis=0)
