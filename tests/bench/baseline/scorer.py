"""The placement search's product paths (``_Scorer.shapes``, ``transfer_block``,
``transfer_layouts``; ``plane_transfer``, the coarse pass's sum by factorisation, as the
``transfer_block`` it replaced) as they were before the modal-kernel work, on the old modal module
(tests/bench/baseline/modal.py). tests/bench/bench.py swaps them into ``_Scorer`` to time
the whole search before and after in the same run; everything else (scoring terms,
constraints, refinement) is the current code. Not part of the package; it holds no check
values (the benchmark's reference is this old code itself, timed beside the new)."""

from __future__ import annotations

import numpy as np

from roommodes.model.room import WALL_MARGIN_M

from . import modal as old_modal


def shapes(self, points):
    p = np.atleast_2d(points)
    tabs = [np.cos(np.pi / self.size[i] * p[:, i:i + 1] * np.arange(self.nmax[i] + 1)) for i in range(3)]
    out = tabs[0][:, self.idx[:, 0]] * tabs[1][:, self.idx[:, 1]]
    out *= tabs[2][:, self.idx[:, 2]]
    return out


def transfer_block(self, src, rec, psi_src=None):
    psi_s = self.shapes(src) if psi_src is None else psi_src
    psi_r = self.shapes(rec)
    h = old_modal.modal_sum_block(psi_s, psi_r, self.weight)
    tail = (4 * np.pi * old_modal.static_green_block(self.size, src, rec)
            - psi_s @ (self.static_weight[:, None] * psi_r.T))
    h += tail[:, :, None]
    self.pair_evaluations += src.shape[0] * rec.shape[0]
    return h


def transfer_layouts(self, vecs, chunk=256):
    v = np.atleast_2d(vecs)
    k = v.shape[0]
    a = self.offsets.shape[0]
    out = np.empty((k, 2, a, self.freq_hz.size), dtype=complex)
    wr = self.weight.view(np.float64)
    for i0 in range(0, k, chunk):
        vi = v[i0:i0 + chunk]
        n = vi.shape[0]
        src = vi[:, :6].reshape(n, 2, 3)
        rec = np.clip(vi[:, None, 6:9] + self.offsets[None], WALL_MARGIN_M, self.size - WALL_MARGIN_M)
        psi_s = self.shapes(src.reshape(-1, 3)).reshape(n, 2, 1, -1)
        psi_r = self.shapes(rec.reshape(-1, 3)).reshape(n, 1, a, -1)
        prod = (psi_s * psi_r).reshape(n * 2 * a, -1)  # (pairs, N)
        h = (prod @ wr).view(np.complex128)
        ss = np.broadcast_to(src[:, :, None, :], (n, 2, a, 3)).reshape(-1, 3)
        rr = np.broadcast_to(rec[:, None, :, :], (n, 2, a, 3)).reshape(-1, 3)
        h += (4 * np.pi * old_modal.static_green_pairs(self.size, ss, rr) - prod @ self.static_weight)[:, None]
        out[i0:i0 + n] = h.reshape(n, 2, a, -1)
    self.pair_evaluations += 2 * a * k
    self.layout_evaluations += k
    return out


def plane_transfer(self, src, rec, src_values, last_axis, psi_src=None):
    return transfer_block(self, src, rec, None if psi_src is None else psi_src(src))
