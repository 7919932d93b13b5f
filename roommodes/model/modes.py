"""Room modes of a rectangular room: frequencies, kinds, shapes and damping.

The rigid-wall modes of a box ``Lx x Ly x Lz`` are

.. math:: f_n = \\frac{c}{2}\\sqrt{(n_x/L_x)^2 + (n_y/L_y)^2 + (n_z/L_z)^2},\\qquad
          \\psi_n = \\cos(n_x\\pi x/L_x)\\cos(n_y\\pi y/L_y)\\cos(n_z\\pi z/L_z)

(Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3). A mode is *axial* when one index
is non-zero, *tangential* with two and *oblique* with three. Index ``(0, 0, 0)`` is the
uniform "pressure-chamber" term, kept by the solvers.

Damping: each surface is a locally reacting wall of small real normalised admittance
``beta`` (see :mod:`roommodes.walls`). First-order perturbation of the rigid modes
(Kuttruff 2009, sec. 3.5; Morse & Ingard, Theoretical Acoustics, 1968, sec. 9.5) gives
the modal decay constant

.. math:: \\delta_n = \\frac{c}{2}\\sum_w \\beta_w\\,\\frac{\\varepsilon_{n,w}}{L_w},

with ``L_w`` the room dimension normal to wall ``w`` and ``eps = 2`` when the mode's
index along that axis is non-zero (the wall lies on a pressure maximum of the mode's
standing wave along that axis) and 1 otherwise. With ``beta = alpha / 8`` this is ``c/(16V) sum eps S alpha``;
an oblique mode then decays at Sabine's rate ``c A / (8 V)``. The decay time is
``T60 = 3 ln(10) / delta`` and the half-power bandwidth ``delta / pi``.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

__all__ = [
    "ModeSet",
    "KINDS",
    "mode_indices",
    "mode_frequencies",
    "mode_shapes",
    "wall_weights",
    "room_modes",
]

#: Most index triples :func:`mode_indices` examines (the box around the sphere of modes,
#: 6 / pi times the mode count): 8 million triples take about 0.4 GB while they are sorted.
MAX_MODE_CANDIDATES = 8_000_000

#: Mode kinds by number of non-zero indices (0 is the uniform term).
KINDS = ("uniform", "axial", "tangential", "oblique")


def mode_indices(size_m, fmax_hz, speed_of_sound):
    """All index triples whose rigid-wall frequency is at most ``fmax_hz``.

    Parameters
    ----------
    size_m : array_like, shape (3,)
        Room dimensions (Lx, Ly, Lz), m.
    fmax_hz : float
        Highest mode frequency, Hz.
    speed_of_sound : float
        m/s.

    Returns
    -------
    indices : ndarray of int, shape (N, 3)
        Sorted by frequency (ties by index), starting with (0, 0, 0).
    freq_hz : ndarray, shape (N,)
    """
    size = np.asarray(size_m, dtype=float)
    c = float(speed_of_sound)
    nmax = np.floor(2.0 * fmax_hz * size / c).astype(int)
    candidates = int(np.prod(nmax + 1.0))
    if candidates > MAX_MODE_CANDIDATES:
        # Weyl's estimate of the count, (4 pi / 3) V (f / c)^3, for the message
        n_est = 4.0 * np.pi / 3.0 * np.prod(size) * (fmax_hz / c) ** 3
        raise ValueError(f"a {size[0]:g} x {size[1]:g} x {size[2]:g} m room has about {n_est:.3g} modes up to "
                         f"{fmax_hz:g} Hz; roommodes handles about {MAX_MODE_CANDIDATES * np.pi / 6:.2g} at most "
                         f"(up to about {fmax_hz * (MAX_MODE_CANDIDATES / candidates) ** (1 / 3):.0f} Hz in this room): "
                         "lower the top frequency")
    nx, ny, nz = np.meshgrid(*(np.arange(m + 1) for m in nmax), indexing="ij")
    idx = np.stack([nx.ravel(), ny.ravel(), nz.ravel()], axis=1)
    f = mode_frequencies(idx, size, c)
    keep = f <= fmax_hz * (1 + 1e-12)
    idx, f = idx[keep], f[keep]
    order = np.lexsort((idx[:, 2], idx[:, 1], idx[:, 0], np.round(f, 9)))
    return idx[order], f[order]


def mode_frequencies(indices, size_m, speed_of_sound):
    """Rigid-wall frequency (Hz) of each index triple in ``indices`` (N, 3)."""
    k = np.asarray(indices, dtype=float) / np.asarray(size_m, dtype=float)
    return 0.5 * float(speed_of_sound) * np.sqrt(np.sum(k**2, axis=-1))


def mode_shapes(indices, size_m, points_m):
    """Mode shapes ``psi_n`` at points: array (P, N), values in [-1, 1].

    Computed from one table of ``cos(n pi x / L)`` per axis (indices up to the largest
    in use), so the cost is three gathers and two products per value, not three cosines.
    """
    p = np.atleast_2d(np.asarray(points_m, dtype=float))
    idx = np.asarray(indices, dtype=int).reshape(-1, 3)
    size = np.asarray(size_m, dtype=float)
    out = None
    for a in range(3):
        n = np.arange(idx[:, a].max(initial=0) + 1)
        table = np.cos(p[:, a, None] * (np.pi * n / size[a]))  # (P, nmax + 1)
        col = table[:, idx[:, a]]
        out = col if out is None else out * col
    return out


def wall_weights(indices, size_m):
    """(N, 6) weights ``eps_{n,w} / L_w`` (1/m) of each wall in a mode's damping.

    ``delta_n = (c / 2) * wall_weights @ beta`` for wall admittances ``beta`` (6,).
    """
    idx = np.asarray(indices)
    size = np.asarray(size_m, dtype=float)
    eps = np.where(idx != 0, 2.0, 1.0) / size  # (N, 3)
    return np.repeat(eps, 2, axis=1)  # front, back, left, right, floor, ceiling


@dataclass(frozen=True)
class ModeSet:
    """The modes of a room up to a frequency, with their damping.

    Attributes
    ----------
    indices : ndarray of int, shape (N, 3)
    freq_hz : ndarray, shape (N,)
        Rigid-wall frequencies.
    decay_constant : ndarray, shape (N,)
        ``delta_n`` (1/s) with the wall absorption taken at each mode's frequency.
    """

    indices: np.ndarray
    freq_hz: np.ndarray
    decay_constant: np.ndarray

    # order, kind, t60_s and bandwidth_hz are computed once, on first use, and kept: a table
    # printed row by row reads them once per row

    @functools.cached_property
    def order(self):
        """Number of non-zero indices: 0 uniform, 1 axial, 2 tangential, 3 oblique."""
        return np.count_nonzero(self.indices, axis=1)

    @functools.cached_property
    def kind(self):
        """Kind names (:data:`KINDS`) of every mode."""
        return np.array(KINDS)[self.order]

    @functools.cached_property
    def t60_s(self):
        """Modal decay time ``3 ln 10 / delta`` (s); inf for an undamped mode."""
        with np.errstate(divide="ignore"):
            return 3.0 * np.log(10.0) / self.decay_constant

    @functools.cached_property
    def bandwidth_hz(self):
        """Half-power bandwidth ``delta / pi`` (Hz)."""
        return self.decay_constant / np.pi

    def __len__(self):
        return len(self.freq_hz)


def room_modes(room, fmax_hz=300.0, include_uniform=False):
    """The modes of ``room`` up to ``fmax_hz`` with perturbation damping.

    Parameters
    ----------
    room : Room
    fmax_hz : float
        Highest mode frequency, Hz.
    include_uniform : bool
        Keep the (0, 0, 0) term (it has no frequency of its own; the solvers use it).

    Returns
    -------
    ModeSet
    """
    if not 0 < fmax_hz <= 5000:
        raise ValueError(f"mode frequency limit must be 0 < f <= 5000 Hz, got {fmax_hz:g} Hz")
    c = room.speed_of_sound
    idx, f = mode_indices(room.size_m, fmax_hz, c)
    if not include_uniform:
        idx, f = idx[1:], f[1:]
    beta = 1.0 / room.impedance(np.maximum(f, 1.0))  # (6, N) at each mode's own frequency
    delta = 0.5 * c * np.einsum("nw,wn->n", wall_weights(idx, room.size_m), beta)
    return ModeSet(idx, f, delta)
