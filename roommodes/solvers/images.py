"""Image-source solver: the transfer function of a rectangular room as a sum over images.

The pressure at a receiver is a sum over the image sources of the room's mirror
lattice (Allen & Berkley 1979): eight families of images, one per combination of
mirror parities along the three axes, repeated on the lattice of period
``(2 Lx, 2 Ly, 2 Lz)``. With the normalisation ``H = 4 pi G`` used throughout
roommodes (time factor ``e^{+j w t}``),

.. math:: H(f) = \\sum_i A_i \\frac{e^{-j k R_i}}{R_i}, \\qquad k = 2 \\pi f / c,

where ``R_i`` is the image-to-receiver distance and ``A_i`` the product of the
pressure reflection factors of the walls the image's path meets (Allen & Berkley
1979; each wall's factor raised to the number of times it is met).

Reflection factors
------------------
``reflection="impedance"``: every wall is locally reacting with real
normalised impedance ``zeta`` and reflects like an infinite plane wall hit by a plane
wave (Kuttruff, Room Acoustics, ch. 2; see :func:`roommodes.walls.reflection_factor`),

.. math:: R(\\theta) = \\frac{\\zeta \\cos\\theta - 1}{\\zeta \\cos\\theta + 1},

with ``cos(theta) = |d_x| / R_i`` for every reflection of image ``i`` in a wall normal
to x (``d`` the image-to-receiver vector; all x-wall reflections of one image share
the angle, likewise y and z). Exact for one plane wall only in the plane-wave limit;
near grazing the factor tends to -1.

``reflection="energy"`` (default): an angle-independent factor ``R = sqrt(1 - alpha)``,
alpha the random-incidence absorption of the wall
(:func:`roommodes.walls.random_incidence_absorption`, London 1950). This is the
factor general time-domain room simulators use; note that ``(1 + R)^3 < 8``: it gives
less than the +9 dB corner gain of a hard corner. Against the exact solution of the same
box (tests/reference/image_reflection_study.py, the acceptance cases: two rooms, four
absorption sets, 18 pairs, 20-200 Hz) it is the closer of the two, median 0.40 dB and 90th
percentile 1.39 dB against 0.49 and 1.98 dB for the plane-wave factor, and about twice as
fast; the plane-wave factor is the worse approximation for a point source near a wall at
low frequency, where the field is far from a plane wave.

Evaluation (fast and exact to a stated bound)
---------------------------------------------
A direct sum of ``exp(-j k R_i)`` over millions of images at hundreds of frequencies
is slow. Instead each image adds ``A_i / R_i`` to a sampled impulse response through a
truncated Gaussian kernel ``phi(x) = exp(-x^2 / (4 tau))`` (x in samples) centred on its
delay ``R_i fs / c``; the spectrum at any frequency then follows from a direct DFT of the
sampled response divided by the kernel's Fourier transform
``Phi(w) = 2 sqrt(pi tau) exp(-tau w^2)`` (the non-uniform FFT of Dutt & Rokhlin 1993
with the fast Gaussian gridding of Greengard & Lee 2004; by Poisson's summation
formula the DFT equals ``Phi(w) H(f)`` plus aliases ``Phi(w + 2 pi m)``). With
``W = 16`` taps and sampling at ``fs = 8 f_max`` the relative error of every image's
contribution is below :data:`KERNEL_RELATIVE_ERROR` (1e-9), so
``|H_computed - H| <= 1e-9 sum_i |A_i| / R_i`` at every frequency.

Frequency-dependent walls. Images' amplitudes depend on frequency when ``zeta`` does.
One impulse response is accumulated per distinct column of ``zeta`` when there are
few (exact). Otherwise per *anchor* column: the walls' path ``v(f) = ln(1/zeta)`` (six
values per frequency) is cut at its corners (band centres of octave-band data) into
smooth pieces, anchors are placed at most 0.2 apart in path length along each piece,
and ``H`` at any other frequency is the cubic Lagrange interpolation, in path length,
of the four nearest anchor solutions evaluated at that frequency (``H`` depends on
frequency through the phase and through ``zeta``; only the second is interpolated).
Measured against the exact per-frequency sum (one response per distinct column) for
the three example rooms and two synthetic wall sets, orders 40 and 120: at most
0.010 dB, 90 % of frequencies below 0.0001 dB (tests/test_images.py keeps a check).
The K responses are accumulated together (K innermost, vectorised); a call costs about
``1 + K / 3`` (impedance) or ``1 + K / 5`` (energy) times the constant-wall cost
(measured); ``info["impulse_responses"]`` is K, typically 20-40 for octave-band data
over 15-300 Hz.

Truncation order
----------------
Shells of increasing reflection order ``n`` (``4 n^2 + 2`` images each) are added and
the spectrum is checked at orders 8, then every ``max(4, n / 8)`` orders. The
remainder is estimated from the last block of ``B`` orders: its spectrum ``S(f)`` (the
change since the previous check), enveloped by its maximum within ``c / (B L_min)`` Hz
(the spectral detail a block of that path length can carry), times the geometric
series ``2 q^B / (1 - q^B)`` of later blocks, where ``q`` is the slowest decay per order
of any image series (:func:`_slowest_order_ratio`; the axial series of the least
absorbing pair of walls for ordinary walls) and 2 is a safety factor. The sum stops
when the remainder is below ``(1 - 10^(-tol_db / 20)) |H(f)|`` at every frequency, so
the level moves by less than ``tol_db``. Measured on six configurations (alpha 0.1 to
0.3 and mixed walls, both reflection models), the estimate at the worst frequency
exceeded the true remainder (against a sum 60 % longer) by 6 to 15 times, the true
error at the stopping order was 0.001-0.005 dB for ``tol_db = 0.05``, and the stopping
order was 1.3 to 1.7 times the least order that would have met the tolerance.
Checked again (tests/bench/check_image_truncation.py, 45 configurations x 6 draws of source
and receivers: eight rooms from 3.6 x 2.2 x 2.3 to 9 x 6.5 x 3.1 m, uniform alpha 0.1 to 0.6,
mixed walls, both models, against ``tol_db = 0.005``): the true error at the stop was at most
0.39 ``tol_db``. Stopping sooner was tried and kept out: without the safety factor (0.82 of
the images) the worst was 0.57 ``tol_db`` there, and 1.02 ``tol_db`` for one draw of an
earlier run of the same kind (alpha 0.6, 6 x 6 x 2.4 m); checking twice as often costs
more images (1.05-1.07 times), because the envelope's window ``c / (B L_min)`` widens as
the block shrinks. ``max_order`` caps the order; ``info["converged"]`` is
False when the cap is hit first. The sum diverges when a pair of opposite walls is
rigid (``q = 1``): all-rigid rooms raise ``ValueError`` (use the modal solver); rooms
with a rigid pair run to the cap and report ``converged=False``.

Cost
----
``4/3 order^3`` images per pair; ``order`` is about ``20 / alpha`` for 0.05 dB. Energy
model (the default): the images of each source are listed once per block of shells
(positions and reflection products, into one reused buffer; about 4 ns per image) and every
receiver of that source only computes its distances and spreads its taps. A tap is the
degree-5 polynomial, in the offset from its bin centre, of the Gaussian (tables at 256 bins of
the fractional delay; relative error below 1e-14), computed and added in one pass: no
transcendental call and no temporary per image. Each receiver keeps its own truncation order.
Threads (numba): with at least 4 receivers per thread, the receivers of a block run in
parallel, for blocks of at least 2^17 image-receiver pairs per thread (a parallel region
costs about 0.1 ms on an idle machine and milliseconds on a busy one); fewer receivers run on
the calling thread. Splitting one receiver's images among the threads was tried and measured
slower on the shared 2-core machine (2.3 times the wall time of one thread at load 4), so a
single receiver uses one core. The spectra of the convergence checks are small products and
run on one BLAS thread.

Measured (tests/bench/bench.py, demo room, alpha 0.3, 30-150 Hz, 5 interleaved rounds, idle
2-core machine): a whole call with 100 receivers 12.2 ns of CPU per image and pair (24.1
million images, order 68; 293 ms of CPU, 162 ms wall), one receiver 5.8 ms (order 53, 204,000
images; 7.0-7.4 ms before the truncation estimate's envelope and the spectrum's table were
made cheaper, 8.1-8.5 ms before the tap table was aligned). 100 receivers cost 50 times one
receiver in CPU time and 28 in wall time: the cheaper single call raised both ratios from 42-43
and 23-24, while the 100-receiver call itself stayed as fast. The wall time of the
100-receiver call depends on the BLAS's idle workers: spinning for their default ~0.1 s after
each product they took 251 ms (:mod:`roommodes.solvers.threads`). Only sharing lowers the CPU ratio,
and 100 random receivers share little: per image and pair the spreading alone costs about
12 ns on one thread (tests/bench/bench_image_kernel.py): about 4.4 ns for the distance, its
square root, ``1 / R`` and the sample index, and the rest for the 16 taps and their adds. The tap table
must start on a cache line (:func:`_aligned_copy`): 16 bytes off, every vector load of
coefficients spans two lines and the spreading took 1.17 times as long (NumPy's placement
differs between processes, so the old cost did too). With every image's taps from one bin
(a table in L1; not a valid result, a bound) it takes 0.77 times as long, so no table layout
can gain more than about a quarter; smaller tables need higher degrees (more arithmetic).
Measured and not kept (single thread, in isolation): the factorised Gaussian (two scalar
functions of the fractional delay per image, then the taps as powers times constants: 2 to 3
times slower in the versions tried, whose powers numba did not vectorise), two-level tables (an
exponential polynomial per tap from an L1-resident table: within 10 %), the distances of a
block first in a vectorised pass (5 % slower), 4 taps instead of 16 (no faster: the cost is per
image, not per tap) and images sorted by bin (8 % faster spreading before the cost of sorting,
not pursued). Also measured (one thread, order 60, scripts not kept): 8 taps (the compiler left
the 8-wide loop scalar: 2.2 times slower), two or four interleaved runs of images (no change,
so the loop is not held up by one image's taps waiting for the previous one's stores), the
images of 10 receivers spread in chunks of 16,384 that stay in L2 (no change), and the
tap polynomials in float32 (0.84 of the time, about 1e-7 error per image; not built, as it
needs a precision bound and tests of its own). Expansions about a cluster's centre do not pay at this size either: by the usual
truncation rule of multipole expansions (an estimate, not measured here) a field over the whole
room at 150 Hz needs several hundred coefficients per frequency for 1e-9, more work than 100
receivers. The impedance model's factors depend on the receiver's angle, so it walks the
lattice per pair (``spread_shells``, two ``exp`` per image), about 55 ns per image and pair on
one core. First call: numba compiles the kernel once (about 5-9 s), cached on disk afterwards
(about 0.5 s to load). See :func:`image_source_transfer` for measured times.

References
----------
.. [1] J. B. Allen, D. A. Berkley, "Image method for efficiently simulating small-room
   acoustics", J. Acoust. Soc. Am. 65(4):943-950, 1979.
.. [2] H. Kuttruff, Room Acoustics, 5th ed., Spon Press, 2009, ch. 2 (reflection of a
   plane wave by a locally reacting wall of impedance Z: ``R = (Z cos t - rho c) /
   (Z cos t + rho c)``).
.. [3] A. London, "The determination of reverberant sound absorption coefficients from
   acoustic impedance measurements", J. Acoust. Soc. Am. 22(2):263-269, 1950.
.. [4] A. Dutt, V. Rokhlin, "Fast Fourier transforms for nonequispaced data", SIAM J.
   Sci. Comput. 14(6):1368-1393, 1993.
.. [5] L. Greengard, J.-Y. Lee, "Accelerating the nonuniform fast Fourier transform",
   SIAM Review 46(3):443-454, 2004.
"""

from __future__ import annotations

import functools
import itertools
import math

import numba
import numpy as np

from ..model.walls import impedance_table, random_incidence_absorption
from ._kernels import DELAY_BINS, TAP_POWERS, TAPS, lattice_images, spread_images_many, spread_shells, windowed_max
from .threads import blas_threads

__all__ = ["KERNEL_RELATIVE_ERROR", "image_count", "image_source_transfer", "images_up_to",
           "kernel_error_bound"]

REFLECTIONS = ("impedance", "energy")

#: Taps of the Gaussian spreading kernel.
_WIDTH = 16
#: Sampling rate of the internal impulse response over twice the top frequency.
_OVERSAMPLING = 4.0
#: Admittances below this count as rigid when choosing anchors.
_BETA_FLOOR = 1e-6
#: Largest path length (Euclidean, in ln(1/zeta) of the six walls) between two anchors.
_ANCHOR_STEP = 0.2
#: Relative turn of the walls' path between two frequency steps that counts as a corner.
_KINK = 0.05
#: Safety factor on the remainder estimate. Without it the estimate fell short of the
#: true remainder at single frequencies by up to 1.5 times, and the true error reached
#: 1.02 ``tol_db`` in one draw of about 300 (module docstring, "Truncation order").
_SAFETY = 2.0
#: Checks of the truncation come every ``max(_CHECK_MIN_STEP, n / _CHECK_DIV)`` orders.
_CHECK_DIV = 8
_CHECK_MIN_STEP = 4


def _gaussian(width=_WIDTH, oversampling=_OVERSAMPLING):
    """Kernel spread ``tau`` balancing truncation and aliasing (Greengard & Lee 2004).

    Aliasing from the nearest image ``Phi(2 pi - w_max) / Phi(w_max) =
    exp(-4 pi^2 tau (1 - 1 / sigma))`` equals the truncation ``exp(-(W/2)^2 / (4 tau))`` at
    ``tau = W / (8 pi sqrt(1 - 1 / sigma))``.
    """
    return width / (8.0 * math.pi * math.sqrt(1.0 - 1.0 / oversampling))


def _kernel_ft(omega, tau):
    """Fourier transform of ``exp(-x^2 / (4 tau))``: ``2 sqrt(pi tau) exp(-tau w^2)``."""
    return 2.0 * np.sqrt(np.pi * tau) * np.exp(-tau * omega**2)


def kernel_error_bound(width=_WIDTH, oversampling=_OVERSAMPLING):
    """Largest relative error of one image's contribution, over ``0 <= f <= f_max``.

    Sum of the aliased transforms ``Phi(w + 2 pi m)``, ``m != 0``, and of the truncated
    tail ``sum_{|x| >= W/2} phi(x)`` (two sides, unit-spaced), over ``Phi(w)``, maximised
    over ``0 <= w <= pi / sigma``.
    """
    tau = _gaussian(width, oversampling)
    w = np.linspace(0.0, np.pi / oversampling, 201)
    m = np.arange(1, 6)
    alias = (_kernel_ft(w[:, None] + 2 * np.pi * m, tau) + _kernel_ft(w[:, None] - 2 * np.pi * m, tau)).sum(1)
    x = width / 2 + np.arange(0, 40)
    trunc = 2.0 * np.exp(-(x**2) / (4 * tau)).sum()
    return float(np.max((alias + trunc) / _kernel_ft(w, tau)))


#: Bound on the relative error of each image's contribution (see module docstring).
KERNEL_RELATIVE_ERROR = kernel_error_bound()


# ----------------------------------------------------------------------------- geometry
def _axis_images(length_m, source_m, receiver_m, max_order):
    """One axis of the image lattice (Allen & Berkley 1979).

    Returns ``d`` (image coordinate minus receiver coordinate, m), ``front`` and
    ``back`` (reflections from the walls at 0 and ``L``), each of shape
    ``(max_order + 1, 2)`` indexed by the axis order ``o`` and a branch ``s``:

    * ``o = 2m``: images ``+-2 m L + x_s``, ``m`` reflections from each wall;
    * ``o = 2m - 1``: ``2 m L - x_s`` (front ``m - 1``, back ``m``) and
      ``-2 (m - 1) L - x_s`` (front ``m``, back ``m - 1``).

    ``o = 0`` has only branch 0 (the source itself).
    """
    o = np.arange(max_order + 1)
    m_even = o // 2
    m_odd = (o + 1) // 2
    even = o % 2 == 0
    pos = np.empty((max_order + 1, 2))
    front = np.empty((max_order + 1, 2), dtype=np.int64)
    back = np.empty((max_order + 1, 2), dtype=np.int64)
    pos[:, 0] = np.where(even, 2 * m_even * length_m + source_m, 2 * m_odd * length_m - source_m)
    pos[:, 1] = np.where(even, -2 * m_even * length_m + source_m, -2 * (m_odd - 1) * length_m - source_m)
    front[:, 0] = np.where(even, m_even, m_odd - 1)
    back[:, 0] = np.where(even, m_even, m_odd)
    front[:, 1] = np.where(even, m_even, m_odd)
    back[:, 1] = np.where(even, m_even, m_odd - 1)
    # order 0 has a single image; keep branch 1 harmless
    pos[0, 1] = pos[0, 0]
    return pos - receiver_m, front, back


def _lattice_tables(size_m, source_m, receiver_m, max_order):
    d = np.empty((3, max_order + 1, 2))
    front = np.empty((3, max_order + 1, 2), dtype=np.int64)
    back = np.empty((3, max_order + 1, 2), dtype=np.int64)
    for a in range(3):
        d[a], front[a], back[a] = _axis_images(size_m[a], source_m[a], receiver_m[a], max_order)
    return d, front, back


def images_up_to(size_m, source_m, receiver_m, max_order):
    """All images of total reflection order ``<= max_order`` (plain NumPy).

    Parameters
    ----------
    size_m : array_like (3,)
        Room size, m.
    source_m, receiver_m : array_like (3,)
        Positions, m.
    max_order : int
        Largest total reflection order, >= 0.

    Returns
    -------
    d : ndarray (n, 3)
        Image-to-receiver vectors ``image - receiver``, m.
    hits : ndarray (n, 6), int
        Reflections from each wall, order ("front", "back", "left", "right", "floor",
        "ceiling").
    order : ndarray (n,), int
        Total reflection order.
    """
    d_ax, front, back = _lattice_tables(np.asarray(size_m, float), np.asarray(source_m, float),
                                        np.asarray(receiver_m, float), max_order)
    o = np.arange(max_order + 1)
    # flatten (order, branch) per axis, dropping branch 1 at order 0
    keep = np.ones((max_order + 1, 2), bool)
    keep[0, 1] = False
    oo = np.broadcast_to(o[:, None], keep.shape)[keep]
    comps = [(d_ax[a][keep], front[a][keep], back[a][keep]) for a in range(3)]
    ix, iy, iz = np.meshgrid(np.arange(oo.size), np.arange(oo.size), np.arange(oo.size), indexing="ij")
    total = oo[ix] + oo[iy] + oo[iz]
    sel = total <= max_order
    ix, iy, iz, total = ix[sel], iy[sel], iz[sel], total[sel]
    d = np.stack([comps[0][0][ix], comps[1][0][iy], comps[2][0][iz]], axis=1)
    hits = np.stack([comps[0][1][ix], comps[0][2][ix], comps[1][1][iy], comps[1][2][iy],
                     comps[2][1][iz], comps[2][2][iz]], axis=1)
    return d, hits, total


def image_count(max_order):
    """Number of images of order ``<= max_order``: ``1 + sum_{n=1}^{N} (4 n^2 + 2)``."""
    n = int(max_order)
    return 1 + 2 * n * (n + 1) * (2 * n + 1) // 3 + 2 * n


# -------------------------------------------------------------------- reflection factors
def _energy_factor(zeta):
    """Angle-independent ``sqrt(1 - alpha(zeta))``; 1 for a rigid wall."""
    return np.sqrt(1.0 - random_incidence_absorption(zeta))


def _admittance(zeta):
    z = np.asarray(zeta, float)
    with np.errstate(divide="ignore"):
        return np.where(np.isinf(z), 0.0, 1.0 / z)


def _amplitudes_numpy(d, hits, zeta_col, reflection):
    """Reflection products ``A_i`` for one column of six wall impedances (plain NumPy)."""
    if reflection == "energy":
        with np.errstate(divide="ignore"):
            log_r = np.log(_energy_factor(zeta_col))
        return np.exp(np.where(hits > 0, hits * log_r[None, :], 0.0).sum(1))
    dist = np.sqrt((d**2).sum(1))
    beta = _admittance(zeta_col)
    log_a = np.zeros(len(d))
    sign = np.ones(len(d))
    for w in range(6):
        n = hits[:, w]
        m = n > 0
        c = np.abs(d[m, w // 2]) / dist[m]
        r = (c - beta[w]) / (c + beta[w])
        with np.errstate(divide="ignore"):
            log_a[m] += n[m] * np.log(np.abs(r))
        sign[np.flatnonzero(m)[(r < 0) & (n[m] % 2 == 1)]] *= -1.0
    return sign * np.exp(log_a)


def _direct_sum_numpy(size_m, zeta, source_m, receiver_m, freq_hz, speed_of_sound, max_order,
                      reflection="impedance", chunk=20000):
    """Twin of the kernel path: ``sum_i A_i(f) exp(-j k R_i) / R_i`` summed directly.

    Exact for frequency-dependent ``zeta`` (6, F): every frequency uses its own column.
    Cost ``images x F``: only for small orders (tests).
    """
    f = np.asarray(freq_hz, float)
    z = np.broadcast_to(np.asarray(zeta, float).reshape(6, -1), (6, f.size))
    d, hits, _ = images_up_to(size_m, source_m, receiver_m, max_order)
    dist = np.sqrt((d**2).sum(1))
    k = 2 * np.pi * f / speed_of_sound
    cols, inverse = np.unique(z.T, axis=0, return_inverse=True)
    inverse = np.asarray(inverse).reshape(-1)
    h = np.zeros(f.size, complex)
    for c, col in enumerate(cols):
        fi = np.flatnonzero(inverse == c)
        b = _amplitudes_numpy(d, hits, col, reflection) / dist
        for s in range(0, len(d), chunk):
            phase = np.outer(k[fi], dist[s:s + chunk])
            h[fi] += (np.cos(phase) - 1j * np.sin(phase)) @ b[s:s + chunk]
    return h


def _spread_numpy(d, amp, samples_per_m, n_samples, offset, width=_WIDTH, oversampling=_OVERSAMPLING):
    """Twin of the kernel's spreading: ``sum_i b_i exp(-(n - u_i)^2 / (4 tau))`` on W taps.

    ``amp`` (n,) are the amplitudes ``A_i / R_i``; returns the sampled response (n_samples,).
    """
    tau = _gaussian(width, oversampling)
    dist = np.sqrt((d**2).sum(1))
    u = dist * samples_per_m
    i0 = np.floor(u).astype(np.int64)
    k = np.arange(1 - width // 2, width // 2 + 1)
    idx = offset + i0[:, None] + k[None, :]
    w = np.exp(-((k[None, :] - (u - i0)[:, None]) ** 2) / (4 * tau))
    ir = np.zeros(n_samples)
    np.add.at(ir, idx.ravel(), (amp[:, None] * w).ravel())
    return ir


# ---------------------------------------------------------------------------- anchors
def _anchor_columns(zeta, freq_hz):
    """Columns of ``zeta`` (6, F) that get an impulse response, and per-frequency weights.

    Returns ``cols`` (K, 6) impedances and ``weights`` (F, K): ``H(f) = sum_k weights[f, k]
    H_k(f)``, where ``H_k`` is the image sum with the walls of column k. Exact (one-hot
    weights) when there are no more distinct columns than anchors would need.

    Otherwise the walls' path ``v(f) = ln(max(1/zeta, 1e-6))`` (six values per frequency,
    in increasing frequency) is cut at its corners (where the step direction turns by
    more than :data:`_KINK`, e.g. at the band centres of octave-band data) into smooth
    pieces; each piece gets anchors at most :data:`_ANCHOR_STEP` apart in path length
    ``s``, and a frequency inside takes the cubic Lagrange interpolation, in ``s``, of the
    four nearest anchors of its piece (fewer when the piece has fewer).
    """
    n_f = zeta.shape[1]
    distinct, inverse = np.unique(zeta.T, axis=0, return_inverse=True)
    inverse = np.asarray(inverse).reshape(-1)
    if len(distinct) <= 2:
        return _one_hot(distinct, inverse)
    order = np.argsort(freq_hz, kind="stable")
    v = np.log(np.maximum(_admittance(zeta[:, order]), _BETA_FLOOR)).T  # (F, 6)
    step = np.diff(v, axis=0)
    length = np.linalg.norm(step, axis=1)
    s = np.concatenate([[0.0], np.cumsum(length)])
    turn = np.linalg.norm(np.diff(step, axis=0), axis=1)
    scale = np.maximum(length[:-1], length[1:])
    corners = np.flatnonzero((scale > 0) & (turn > _KINK * scale)) + 1
    bounds = np.unique(np.concatenate([[0], corners, [n_f - 1]]))
    z_sorted = zeta[:, order]
    anchor_of = {}  # wall column (as a tuple) -> column of weights
    rows, cols_idx, vals = [], [], []

    def anchor(i):
        return anchor_of.setdefault(tuple(z_sorted[:, i]), len(anchor_of))

    for piece, (p0, p1) in enumerate(itertools.pairwise(bounds)):
        span = s[p1] - s[p0]
        pts = np.arange(p0, p1 + 1)
        todo = pts if piece == 0 else pts[1:]  # a corner belongs to the piece before it
        if span == 0.0:
            k = anchor(p1)
            rows += todo.tolist()
            cols_idx += [k] * len(todo)
            vals += [1.0] * len(todo)
            continue
        m = int(np.ceil(span / _ANCHOR_STEP - 1e-9))
        targets = s[p0] + span * np.arange(m + 1) / m
        nodes = np.unique(p0 + np.abs(s[pts][None, :] - targets[:, None]).argmin(1))
        sn = s[nodes]
        for i in todo:
            j = int(np.clip(np.searchsorted(sn, s[i]) - 2, 0, max(len(nodes) - 4, 0)))
            use = nodes[j:j + 4]
            su = s[use]
            for a, node in enumerate(use):
                others = np.delete(su, a)
                w = float(np.prod((s[i] - others) / (su[a] - others)))
                rows.append(int(i))
                cols_idx.append(anchor(node))
                vals.append(w)
    if len(distinct) <= len(anchor_of):
        return _one_hot(distinct, inverse)
    weights_sorted = np.zeros((n_f, len(anchor_of)))
    np.add.at(weights_sorted, (np.asarray(rows), np.asarray(cols_idx)), np.asarray(vals))
    weights = np.empty_like(weights_sorted)
    weights[order] = weights_sorted
    return np.array(sorted(anchor_of, key=anchor_of.get)), weights


def _one_hot(distinct, inverse):
    weights = np.zeros((len(inverse), len(distinct)))
    weights[np.arange(len(inverse)), inverse] = 1.0
    return distinct, weights


# ------------------------------------------------------------------------------ driver
#: Rows of the fine factor of the spectrum's table (:class:`_Spectrum`).
_FINE = 32


class _Spectrum:
    """DFT of sampled responses at fixed frequencies, divided by the kernel's transform."""

    def __init__(self, freq_hz, fs_hz, tau, offset, speed_of_sound, block=1024):
        self.freq_hz = np.asarray(freq_hz, float)
        self.speed_of_sound = speed_of_sound
        self.omega = 2 * np.pi * np.asarray(freq_hz, float) / fs_hz
        self.offset = offset
        if block % _FINE:
            raise ValueError(f"block must be a multiple of {_FINE}, got {block}")
        self.block = block
        # e^{-j w m} for m = 32 a + b as e^{-j w 32 a} e^{-j w b}: 2 x 32 exponentials per
        # frequency instead of 1024 (a third of a one-receiver call went to this table)
        fine = np.exp(-1j * np.outer(np.arange(_FINE), self.omega))  # (32, F)
        coarse = np.exp(-1j * np.outer(np.arange(0, block, _FINE), self.omega))  # (block / 32, F)
        base = (coarse[:, None, :] * fine[None, :, :]).reshape(block, -1)  # (block, F)
        self.base_re = np.ascontiguousarray(base.real)
        self.base_im = np.ascontiguousarray(base.imag)
        self.scale = 1.0 / _kernel_ft(self.omega, tau)

    def __call__(self, ir, n_used):
        """``sum_m ir[m, :] e^{-j w (m - offset)}`` for ``m < n_used``; shape (F, K)."""
        out = np.zeros((self.omega.size, ir.shape[1]), complex)
        for m0 in range(0, n_used, self.block):
            seg = ir[m0:min(m0 + self.block, n_used)]
            n = seg.shape[0]
            part = self.base_re[:n].T @ seg + 1j * (self.base_im[:n].T @ seg)
            out += part * np.exp(-1j * self.omega * (m0 - self.offset))[:, None]
        return out * self.scale[:, None]


def _slowest_order_ratio(size_m, cols, reflection, n_dir=181):
    """Slowest decay per reflection order of any image series, over anchors and directions.

    Images in direction ``(c_x, c_y, c_z)`` (direction cosines) at distance ``R`` have
    about ``o_a = R c_a / L_a`` reflections on axis ``a``, each with ``|R_a(c_a)|``
    (the mean of ``ln|R|`` of the axis' two walls), so per order their amplitude changes
    by ``exp(sum_a w_a ln|R_a(c_a)| / sum_a w_a)``, ``w_a = c_a / L_a``. Returns the
    largest such factor over a grid of directions of the first octant (for
    angle-independent factors it is the axial one, ``max_a sqrt(R_front R_back)``).
    """
    if reflection == "energy":  # the axial series, no directions needed
        r = _energy_factor(np.asarray(cols, float))  # (K, 6)
        with np.errstate(divide="ignore"):
            ln_axis = 0.5 * (np.log(r[:, 0::2]) + np.log(r[:, 1::2]))
        return float(np.exp(np.max(ln_axis)))
    t = np.linspace(0.0, np.pi / 2, n_dir)
    th, ph = np.meshgrid(t, t, indexing="ij")
    cos = np.stack([np.sin(th) * np.cos(ph), np.sin(th) * np.sin(ph), np.cos(th)])  # (3, n, n)
    cos = np.clip(cos.reshape(3, -1), 0.0, 1.0)
    weight = cos / np.asarray(size_m, float)[:, None]
    best = 0.0
    for col in cols:
        beta = _admittance(col)
        ln_axis = np.empty_like(cos)
        for a in range(3):
            with np.errstate(divide="ignore", invalid="ignore"):
                rf = np.abs((cos[a] - beta[2 * a]) / (cos[a] + beta[2 * a]))
                rb = np.abs((cos[a] - beta[2 * a + 1]) / (cos[a] + beta[2 * a + 1]))
                ln_axis[a] = 0.5 * (np.log(rf) + np.log(rb))
        ln_axis = np.where(weight > 0, ln_axis, 0.0)
        lam = (weight * ln_axis).sum(0) / weight.sum(0)
        best = max(best, float(np.exp(np.nanmax(lam))))
    return best


def _reflection_setup(cols, reflection, max_order):
    """Kernel inputs ``(beta (6, K), axis_amp (3, O+1, 2, K), angle_dependent)`` for the
    anchor columns ``cols`` (K, 6)."""
    n_k = len(cols)
    if reflection == "impedance":
        return np.ascontiguousarray(_admittance(cols).T), np.zeros((3, 1, 2, n_k)), True
    r = _energy_factor(cols)  # (K, 6)
    _, front, back = _axis_images(1.0, 0.5, 0.5, max_order)  # hit counts do not depend on geometry
    axis_amp = np.empty((3, max_order + 1, 2, n_k))
    for a in range(3):
        axis_amp[a] = r[:, 2 * a] ** front[..., None] * r[:, 2 * a + 1] ** back[..., None]
    return np.zeros((6, n_k)), axis_amp, False


def _envelope(values, freq_hz, half_width_hz):
    """``max |values(f')|`` over ``|f' - f| <= half_width_hz``, at each ``f`` (last axis;
    any leading axes are rows treated alike)."""
    order = np.argsort(freq_hz, kind="stable")
    fs = freq_hz[order]
    lo = np.searchsorted(fs, fs - half_width_hz, side="left")
    hi = np.searchsorted(fs, fs + half_width_hz, side="right")
    v = np.abs(values)
    rows = np.ascontiguousarray(v.reshape(-1, v.shape[-1])[:, order])
    env = np.empty_like(rows)
    windowed_max(rows, lo, hi, env)
    out = np.empty_like(env)
    out[:, order] = env
    return out.reshape(v.shape)


def _check_orders(max_order):
    """Orders at which the sum is checked: 8, then steps of
    ``max(_CHECK_MIN_STEP, ceil(n / _CHECK_DIV))``."""
    n = min(8, max_order)
    out = [n]
    while n < max_order:
        n = min(max_order, n + max(_CHECK_MIN_STEP, -(-n // _CHECK_DIV)))
        out.append(n)
    return out


def _remainder(h, h_prev, block, q_shell, freq_hz, c, l_min):
    """Estimated ``|H_true - H|`` from the change ``h - h_prev`` over the last ``block``
    orders (module docstring, "Truncation order"); any leading axes are rows."""
    q = q_shell**block
    growth = np.inf if q >= 1.0 else _SAFETY * q / (1.0 - q)
    # the last block's spectrum, enveloped over its spectral resolution c / (block L_min),
    # times the geometric series of later blocks
    return growth * _envelope(h - h_prev, freq_hz, c / (block * l_min))


def _pair(size_m, source_m, receiver_m, refl, spectrum, weights, samples_per_m, tau,
          q_shell, tol_rel, max_order):
    """Adaptive image sum for one pair.

    Returns ``(H (F,), order, remainder (F,), converged)``; ``remainder`` is the estimated
    ``|H_true - H|`` (see the module docstring, "Truncation order").
    """
    d_ax, front, back = _lattice_tables(size_m, source_m, receiver_m, max_order)
    beta, axis_amp, angle_dependent = refl
    offset = spectrum.offset
    k_idx = np.arange(1 - _WIDTH // 2, _WIDTH // 2)
    tap_ratio = np.exp(-(2.0 * k_idx + 1.0) / (4.0 * tau))
    inv_4tau = 1.0 / (4.0 * tau)
    l_max = float(np.max(size_m))
    l_min = float(np.min(size_m))
    c = spectrum.speed_of_sound

    def needed(n):
        # every image of order <= n lies within sum_a (o_a + 1) L_a <= (n + 3) L_max
        return offset + int((n + 3) * l_max * samples_per_m) + _WIDTH + 2

    ir = np.zeros((needed(min(max_order, 32)), weights.shape[1]))
    h_prev = None
    remainder = np.full(weights.shape[0], np.inf)
    n_prev = -1
    n_used = 0
    for n in _check_orders(max_order):
        if needed(n) > ir.shape[0]:
            ir = np.pad(ir, ((0, max(needed(n), 2 * ir.shape[0]) - ir.shape[0]), (0, 0)))
        last = spread_shells(d_ax, front, back, beta, axis_amp, angle_dependent, n_prev + 1, n,
                             samples_per_m, inv_4tau, tap_ratio, offset, ir)
        n_used = max(n_used, last + 1)
        h = np.sum(weights * spectrum(ir, n_used), axis=1)
        if h_prev is not None:
            remainder = _remainder(h, h_prev, n - n_prev, q_shell, spectrum.freq_hz, c, l_min)
            if np.all(remainder <= tol_rel * np.abs(h)):
                return h, n, remainder, True
        h_prev = h
        n_prev = n
    return h, n_prev, remainder, False


@functools.lru_cache(maxsize=4)
def _tap_tables(tau, n_bins=DELAY_BINS):
    """Tap polynomials of :func:`spread_images_many`, shape (n_bins * TAP_POWERS * TAPS,).

    For the fractional delay ``delta = t_b + e``, ``t_b = (b + 1/2) / n_bins``, tap ``k``
    (``k = -7 .. 8``) of the Gaussian is ``exp(-a (x - e)^2)``, ``x = k - t_b``, ``a = 1 / (4
    tau)``, ``= exp(-a x^2) exp(2 a x e - a e^2)``; the coefficient of ``e^n`` is ``exp(-a x^2)
    sum_{m + 2 l = n} (2 a x)^m / m! (-a)^l / l!`` (the product of the two exponential series),
    kept to ``n = 5``. Cached (read-only).
    """
    t = (np.arange(n_bins) + 0.5) / n_bins
    k = np.arange(1 - TAPS // 2, TAPS // 2 + 1)
    a = 1.0 / (4.0 * tau)
    x = k[None, :] - t[:, None]  # (bin, tap)
    slope = 2.0 * a * x
    coef = np.zeros((n_bins, TAP_POWERS, TAPS))
    for m in range(TAP_POWERS):
        for p in range(0, (TAP_POWERS - 1 - m) // 2 + 1):
            coef[:, m + 2 * p] += slope**m / math.factorial(m) * (-a) ** p / math.factorial(p)
    out = _aligned_copy((coef * np.exp(-a * x**2)[:, None, :]).ravel())
    out.flags.writeable = False
    return out


#: Alignment of the tap tables, bytes (a cache line: each bin's rows then start on one).
_TABLE_ALIGN = 64


def _aligned_copy(values):
    """A copy of the 1-D float64 ``values`` starting on a :data:`_TABLE_ALIGN`-byte boundary.

    The spreading kernel loads each bin's coefficients as whole vectors; from a table that
    NumPy happened to place 16 or 32 bytes off a cache line every such load spans two lines,
    and the kernel measured 13-25 % slower per image (which of the two depended on where the
    allocator put the table, so on the process).
    """
    n = values.size
    buf = np.empty(n + _TABLE_ALIGN // 8)
    start = (-buf.ctypes.data % _TABLE_ALIGN) // 8
    out = buf[start:start + n]
    out[:] = values
    return out


#: Image-receiver pairs per thread below which a block is spread on the calling thread
#: (about 2 ms of work).
_PAIR_IMAGES_PER_THREAD = 1 << 17
#: Fewer receivers than this many per thread are spread on the calling thread (whole
#: receivers per thread would leave threads idle). Splitting one receiver's images among
#: threads was tried and measured slower on the shared 2-core machine (2.3 times the wall
#: time of one thread at load 4, alpha 0.05 to order 300), so a single receiver runs on one.
_RECEIVERS_PER_THREAD = 4
#: Most images listed at once by the shared lattice walk (about 16 MB with one column), with at
#: least :data:`_RECEIVERS_FOR_FULL_BLOCK` receivers; fewer receivers get proportionally smaller
#: blocks, down to 1/16 (1 MB, which stays in the core's cache between listing and spreading:
#: measured 10-20 % faster for one receiver).
_IMAGES_PER_BLOCK = 1 << 19
_RECEIVERS_FOR_FULL_BLOCK = 16


def _shell_blocks(n_first, n_last, limit=_IMAGES_PER_BLOCK):
    """Runs ``(n0, n1)`` of the shells ``n_first..n_last`` of at most ``limit`` images each
    (a single shell may exceed it)."""
    out = []
    n0 = n_first
    while n0 <= n_last:
        n1 = n0
        while n1 < n_last and image_count(n1 + 1) - (image_count(n0 - 1) if n0 > 0 else 0) <= limit:
            n1 += 1
        out.append((n0, n1))
        n0 = n1 + 1
    return out


def _receivers(size_m, source_m, receivers_m, refl, spectrum, weights, samples_per_m, tau,
               q_shell, tol_rel, max_order):
    """Adaptive image sums of one source at many receivers, angle-independent factors.

    The images of each block of shells are listed once (:func:`lattice_images`) and spread
    for every receiver still summing, in parallel (:func:`spread_images_many`). Every
    receiver is checked at the orders of :func:`_pair` with the same remainder estimate and
    stops at the same order as :func:`_pair` would.

    Returns ``(H (R, F), order (R,), remainder (R, F), converged (R,))``.
    """
    beta, axis_amp, angle_dependent = refl
    assert not angle_dependent
    n_rec = len(receivers_m)
    n_f, n_k = weights.shape
    axis_pos = _lattice_tables(size_m, source_m, np.zeros(3), max_order)[0]
    coef = _tap_tables(tau)
    threads = numba.get_num_threads()
    offset = spectrum.offset
    l_max = float(np.max(size_m))
    l_min = float(np.min(size_m))
    c = spectrum.speed_of_sound
    rec = np.ascontiguousarray(receivers_m, dtype=float)

    def needed(n):
        # every image of order <= n lies within sum_a (o_a + 1) L_a <= (n + 3) L_max
        return offset + int((n + 3) * l_max * samples_per_m) + _WIDTH + 2

    ir = np.zeros((n_rec, needed(min(max_order, 32)), n_k))
    pos_buf, amp_buf = np.empty((0, 3)), np.empty((0, n_k))
    last = np.zeros(n_rec, dtype=np.int64)
    h = np.zeros((n_rec, n_f), complex)
    h_prev = np.zeros((n_rec, n_f), complex)
    remainder = np.full((n_rec, n_f), np.inf)
    orders = np.zeros(n_rec, dtype=np.int64)
    ok = np.zeros(n_rec, bool)
    active = np.arange(n_rec)
    n_prev = -1
    for n in _check_orders(max_order):
        if needed(n) > ir.shape[1]:
            ir = np.pad(ir, ((0, 0), (0, max(needed(n), 2 * ir.shape[1]) - ir.shape[1]), (0, 0)))
        at = np.ascontiguousarray(rec[active])
        limit = _IMAGES_PER_BLOCK * min(active.size, _RECEIVERS_FOR_FULL_BLOCK) // _RECEIVERS_FOR_FULL_BLOCK
        for n0, n1 in _shell_blocks(n_prev + 1, n, limit):
            m = image_count(n1) - (image_count(n0 - 1) if n0 > 0 else 0)
            if m > len(pos_buf):
                pos_buf = np.empty((max(m, 2 * len(pos_buf)), 3))
                amp_buf = np.empty((len(pos_buf), n_k))
            lattice_images(axis_pos, axis_amp, n0, n1, pos_buf, amp_buf)
            pos, amp = pos_buf[:m], amp_buf[:m]
            # threads only for enough receivers and blocks with enough work to pay for starting
            # them (a parallel region costs ~0.1 ms on an idle machine, milliseconds on a busy one)
            parallel = (threads > 1 and active.size >= _RECEIVERS_PER_THREAD * threads
                        and len(pos) * active.size >= _PAIR_IMAGES_PER_THREAD * threads)
            spread_images_many(pos, amp, at, active, samples_per_m, coef, offset, ir, last, parallel)
        n_used = int(last[active].max()) + 1
        seg = np.ascontiguousarray(ir[active, :n_used].transpose(1, 0, 2)).reshape(n_used, -1)
        spec = spectrum(seg, n_used).reshape(n_f, active.size, n_k)
        h[active] = np.einsum("fk,fak->af", weights, spec)
        orders[active] = n
        if n_prev >= 0:
            remainder[active] = _remainder(h[active], h_prev[active], n - n_prev, q_shell,
                                           spectrum.freq_hz, c, l_min)
            done = np.all(remainder[active] <= tol_rel * np.abs(h[active]), axis=1)
            ok[active[done]] = True
            active = active[~done]
            if active.size == 0:
                break
        h_prev[active] = h[active]
        n_prev = n
    return h, orders, remainder, ok


# ------------------------------------------------------------------------------ public
def _validate(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, reflection,
              tol_db, max_order):
    size = np.asarray(size_m, dtype=float)
    if size.shape != (3,) or not np.all(np.isfinite(size)) or np.any(size <= 0):
        raise ValueError(f"size_m must be three positive finite lengths in metres, got {size_m!r}")
    f = np.asarray(freq_hz, dtype=float)
    if f.ndim != 1 or f.size == 0 or not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("freq_hz must be a non-empty 1-D array of positive frequencies in Hz")
    z = impedance_table(zeta, f.size)
    c = float(speed_of_sound)
    if not (np.isfinite(c) and c > 0):
        raise ValueError(f"speed_of_sound must be positive and finite (m/s), got {speed_of_sound!r}")
    if reflection not in REFLECTIONS:
        raise ValueError(f"reflection must be one of {', '.join(REFLECTIONS)}, got {reflection!r}")
    if not (np.isfinite(tol_db) and tol_db > 0):
        raise ValueError(f"tol_db must be positive (dB), got {tol_db!r}")
    if int(max_order) != max_order or max_order < 0:
        raise ValueError(f"max_order must be a whole number >= 0, got {max_order!r}")
    pts = []
    for name, p in (("sources_m", sources_m), ("receivers_m", receivers_m)):
        a = np.atleast_2d(np.asarray(p, dtype=float))
        if a.ndim != 2 or a.shape[1] != 3 or a.shape[0] == 0 or not np.all(np.isfinite(a)):
            raise ValueError(f"{name} must be a finite (N, 3) array of positions in metres, got shape {a.shape}")
        bad = np.any((a <= 0) | (a >= size), axis=1)
        if np.any(bad):
            i = int(np.argmax(bad))
            raise ValueError(
                f"{name}[{i}] = ({a[i, 0]:.4g}, {a[i, 1]:.4g}, {a[i, 2]:.4g}) m must lie strictly "
                f"inside the room (0 < x < {size[0]:g}, 0 < y < {size[1]:g}, 0 < z < {size[2]:g} m)"
            )
        pts.append(a)
    src, rec = pts
    gap = np.sqrt(((src[:, None, :] - rec[None, :, :]) ** 2).sum(-1))
    if np.any(gap == 0):
        i, j = np.argwhere(gap == 0)[0]
        raise ValueError(f"sources_m[{i}] and receivers_m[{j}] coincide; the direct sound is infinite there")
    rigid_col = np.all(np.isinf(z), axis=0)
    if np.any(rigid_col):
        raise ValueError(
            "image-source solver needs some absorption: all six walls are rigid (zeta = inf) "
            f"at {f[rigid_col][0]:g} Hz; use the modal solver for rigid rooms"
        )
    return size, z, src, rec, f, c


def image_source_transfer(size_m, zeta, sources_m, receivers_m, freq_hz, speed_of_sound, *,
                          reflection="energy", tol_db=0.05, max_order=400):
    """Transfer functions of a rectangular room by the image-source method.

    Parameters
    ----------
    size_m : array_like (3,)
        Room size ``(Lx, Ly, Lz)``, m, > 0.
    zeta : array_like (6,) or (6, F)
        Real normalised wall impedance ``Z / (rho c)``, > 0, per wall (front x=0, back
        x=Lx, left y=0, right y=Ly, floor z=0, ceiling z=Lz) and optionally per
        frequency; ``np.inf`` is rigid.
    sources_m, receivers_m : array_like (N, 3), (M, 3)
        Positions, m, strictly inside the room; a source may not coincide with a receiver.
    freq_hz : array_like (F,)
        Frequencies, Hz, > 0 (any spacing).
    speed_of_sound : float
        m/s, > 0.
    reflection : {"energy", "impedance"}
        ``sqrt(1 - alpha)`` with the random-incidence absorption ``alpha(zeta)`` (default,
        the closer to the exact solution), or the angle-dependent plane-wave factor from
        ``zeta`` (see the module docstring).
    tol_db : float
        Truncation tolerance, dB, > 0: the estimated remainder of the image sum moves
        the level by less than this at every frequency.
    max_order : int
        Cap on the reflection order, >= 0.

    Returns
    -------
    H : ndarray, complex (N, M, F)
        ``4 pi G``: pressure relative to the free-field pressure of the same source at 1 m.
    info : dict
        ``order`` (largest reflection order used), ``images`` (total images summed over
        all pairs), ``converged`` (every pair met ``tol_db`` before ``max_order``),
        ``reflection``, ``orders`` (N, M), ``remainder_db`` (N, M; level change bound of the
        estimated remainder at the worst frequency), ``impulse_responses`` (number of
        anchor columns K), ``sampling_rate_hz`` and ``kernel_relative_error``.

    Raises
    ------
    ValueError
        On malformed input, points outside the room, or all walls rigid.

    Notes
    -----
    ``H(f) = sum_i A_i exp(-j k R_i) / R_i`` (Allen & Berkley 1979); each image is
    spread onto a sampled impulse response by a 16-tap Gaussian and the spectrum is a
    DFT divided by the kernel's transform (Greengard & Lee 2004); for walls that do not
    vary with frequency the result equals the direct sum within
    ``1e-9 sum_i |A_i| / R_i`` (frequency-dependent walls add the interpolation error
    of the module docstring, measured below 0.01 dB).

    Measured (CPU time of one call, shared 2-core machine at load 3-4, numba cache warm),
    1 pair, 15-300 Hz at 48 points per octave (209 frequencies), room 5.0 x 4.0 x 2.6 m, all
    walls at one random-incidence absorption alpha, ``tol_db=0.05`` (impedance rows at 0.05
    and 0.03 from an earlier version of the same per-pair walk):

    ======  ==========================  ==========================
    alpha   impedance: order, time      energy: order, time
    ======  ==========================  ==========================
    0.45    47, 0.02 s                  41, 0.01 s
    0.3     68, 0.04 s                  60, 0.015 s
    0.1     202, 0.7 s                  202, 0.24 s
    0.05    466, 5-8 s (max_order=500)  466, 2.5 s (max_order=500)
    0.03    749, 31 s (max_order=800)   749, 10 s (max_order=800)
    ======  ==========================  ==========================

    With the default ``max_order=400`` the sum converges down to alpha of about 0.055.
    The first call in a fresh environment compiles the kernel (5-9 s); later processes
    load it from numba's cache (about 0.5 s). Octave-band walls (K = 24-38 anchor columns):
    the demo room converges at order 159 in 0.7 s (K = 26).

    References
    ----------
    See the module docstring.
    """
    size, z, src, rec, f, c = _validate(size_m, zeta, sources_m, receivers_m, freq_hz,
                                        speed_of_sound, reflection, tol_db, max_order)
    max_order = int(max_order)
    cols, weights = _anchor_columns(z, f)
    refl = _reflection_setup(cols, reflection, max_order)
    q_shell = _slowest_order_ratio(size, cols, reflection)

    fs = 2.0 * _OVERSAMPLING * float(np.max(f))
    samples_per_m = fs / c
    tau = _gaussian()
    spectrum = _Spectrum(f, fs, tau, offset=_WIDTH, speed_of_sound=c)
    tol_rel = 1.0 - 10.0 ** (-tol_db / 20.0)

    # every product of this solver (the spectra of the convergence checks) is far below
    # the size at which a second BLAS thread pays (roommodes.solvers.threads)
    with blas_threads(0):
        return _transfer(size, src, rec, f, c, cols, weights, refl, q_shell, samples_per_m, tau,
                         spectrum, tol_rel, max_order, reflection)


def _transfer(size, src, rec, f, c, cols, weights, refl, q_shell, samples_per_m, tau, spectrum, tol_rel,
              max_order, reflection):
    n_src, n_rec = len(src), len(rec)
    h = np.empty((n_src, n_rec, f.size), complex)
    orders = np.zeros((n_src, n_rec), dtype=int)
    rem_db = np.zeros((n_src, n_rec))
    ok = np.ones((n_src, n_rec), bool)
    for i in range(n_src):
        if not refl[2]:  # angle-independent factors: one lattice walk per source
            h[i], orders[i], remainder, ok[i] = _receivers(size, src[i], rec, refl, spectrum, weights,
                                                           samples_per_m, tau, q_shell, tol_rel, max_order)
            ratio = np.max(remainder / np.maximum(np.abs(h[i]), 1e-300), axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                rem_db[i] = np.where(ratio < 1, -20.0 * np.log10(1.0 - np.minimum(ratio, 1.0)), np.inf)
            continue
        for j in range(n_rec):
            hij, order, remainder, conv = _pair(size, src[i], rec[j], refl, spectrum, weights,
                                                samples_per_m, tau, q_shell, tol_rel, max_order)
            h[i, j] = hij
            orders[i, j] = order
            ok[i, j] = conv
            ratio = float(np.max(remainder / np.maximum(np.abs(hij), 1e-300)))
            rem_db[i, j] = -20.0 * np.log10(1.0 - ratio) if ratio < 1 else np.inf
    info = {
        "order": int(orders.max()),
        "images": int(sum(image_count(o) for o in orders.ravel())),
        "converged": bool(ok.all()),
        "reflection": reflection,
        "orders": orders,
        "remainder_db": rem_db,
        "impulse_responses": len(cols),
        "sampling_rate_hz": samples_per_m * c,
        "kernel_relative_error": KERNEL_RELATIVE_ERROR,
    }
    return h, info
