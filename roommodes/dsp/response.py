"""Frequency responses: grids, levels, fractional-octave smoothing, level alignment.

A :class:`Response` is a frequency axis with a complex transfer or a level in dB and
a label. Everything here is a pure function over arrays.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

__all__ = [
    "Response",
    "log_frequencies",
    "level_db",
    "smooth_fractional_octave",
    "fractional_octave_edges",
    "align_level",
]

#: Smallest power the dB conversions return instead of -inf (-300 dB).
_TINY = 1e-30


def log_frequencies(fmin_hz=15.0, fmax_hz=300.0, points_per_octave=48):
    """Log-spaced frequency grid from ``fmin_hz`` to ``fmax_hz`` inclusive.

    Parameters
    ----------
    fmin_hz, fmax_hz : float
        Band edges in Hz, 0 < fmin_hz < fmax_hz.
    points_per_octave : int
        Grid density, 1..1000 points per octave.

    Returns
    -------
    freq_hz : ndarray
        ``fmin_hz * 2**(k / points_per_octave)``, with the last point set to ``fmax_hz``
        when it does not fall on the grid.
    """
    fmin_hz, fmax_hz = float(fmin_hz), float(fmax_hz)
    if not (np.isfinite(fmin_hz) and np.isfinite(fmax_hz) and 0 < fmin_hz < fmax_hz):
        raise ValueError(
            f"frequency range must satisfy 0 < low < high, got {fmin_hz:g}..{fmax_hz:g} Hz"
        )
    ppo = int(points_per_octave)
    if not 1 <= ppo <= 1000 or ppo != points_per_octave:
        raise ValueError(f"points per octave must be a whole number 1..1000, got {points_per_octave}")
    n = int(np.floor(np.log2(fmax_hz / fmin_hz) * ppo + 1e-9))
    f = fmin_hz * 2.0 ** (np.arange(n + 1) / ppo)
    if fmax_hz - f[-1] > 1e-9 * fmax_hz:
        f = np.append(f, fmax_hz)
    return f


def level_db(h):
    """``20 log10 |h|`` with a floor at -300 dB instead of ``-inf``."""
    return 10.0 * np.log10(np.maximum(np.abs(h) ** 2, _TINY))


def fractional_octave_edges(center_hz, fraction):
    """Edges of the ``1/fraction``-octave window centred (geometrically) at ``center_hz``.

    Returns ``(center * 2**(-1/(2 b)), center * 2**(1/(2 b)))`` with ``b = fraction``;
    1/3 octave at 50 Hz gives 44.545 .. 56.123 Hz.
    """
    c = np.asarray(center_hz, dtype=float)
    half = 2.0 ** (1.0 / (2.0 * fraction))
    return c / half, c * half


def smooth_fractional_octave(freq_hz, power, fraction):
    """Fractional-octave smoothing of a power quantity on any rising frequency grid.

    Parameters
    ----------
    freq_hz : array_like, shape (F,)
        Strictly rising frequencies in Hz, > 0.
    power : array_like, shape (..., F)
        A power-like quantity (``|H|**2``), smoothed along the last axis. To smooth a
        level in dB, pass ``10**(level_db/10)`` and convert back.
    fraction : float
        ``b`` of a 1/b-octave window, 1 <= b <= 48; ``0`` or ``None`` returns the input.

    Returns
    -------
    smoothed : ndarray, shape (..., F)
        At each frequency ``f`` the mean of ``power`` over
        ``[f 2**(-1/(2b)), f 2**(1/(2b))]`` with uniform weight in log frequency (the
        trapezoid rule on the given grid), windows truncated at the ends of the grid.

    Notes
    -----
    Averaging power, not dB, is common practice for room responses. A rectangular
    window in log frequency is the simplest of the fractional-octave windows compared
    by Hatziantoniou & Mourjopoulos (2000), J. Audio Eng. Soc. 48(4):259.
    """
    f = np.asarray(freq_hz, dtype=float)
    p = np.asarray(power, dtype=float)
    if not fraction:
        return p.copy()
    if not 1 <= fraction <= 48:
        raise ValueError(f"smoothing must be 1/1 to 1/48 octave, got 1/{fraction:g}")
    if f.ndim != 1 or f.size < 2 or np.any(np.diff(f) <= 0) or f[0] <= 0:
        raise ValueError("frequencies must be positive and strictly rising")
    u = np.log(f)
    # cumulative integral of power over ln f (trapezoid), then window means by differences
    seg = 0.5 * (p[..., 1:] + p[..., :-1]) * np.diff(u)
    cum = np.concatenate([np.zeros(p.shape[:-1] + (1,)), np.cumsum(seg, axis=-1)], axis=-1)
    half = np.log(2.0) / (2.0 * fraction)
    lo = np.clip(u - half, u[0], u[-1])
    hi = np.clip(u + half, u[0], u[-1])

    def cum_at(x):
        # piecewise-quadratic exact integral of the piecewise-linear power up to x
        i = np.clip(np.searchsorted(u, x, side="right") - 1, 0, u.size - 2)
        t = x - u[i]
        du = u[i + 1] - u[i]
        p0 = p[..., i]
        p1 = p[..., i + 1]
        return cum[..., i] + p0 * t + 0.5 * (p1 - p0) * t**2 / du

    width = hi - lo
    out = (cum_at(hi) - cum_at(lo)) / np.where(width > 0, width, 1.0)
    return np.where(width > 0, out, p)


def smooth_db(freq_hz, level_db, fraction):
    """Fractional-octave power smoothing of a level in dB (the one used for every curve).

    ``10 log10(smooth(10^(L/10)))`` with :func:`smooth_fractional_octave`, floored at
    -300 dB; ``fraction`` 0 or None returns a copy of the level.
    """
    level = np.asarray(level_db, dtype=float)
    if not fraction:
        return level.copy()
    return 10.0 * np.log10(np.maximum(smooth_fractional_octave(freq_hz, 10.0 ** (level / 10.0), fraction), _TINY))


def align_level(level_db_a, level_db_b, freq_hz, band_hz):
    """Offset (dB) to add to ``level_db_b`` so its power mean over ``band_hz`` matches ``a``.

    The mean is taken in power with uniform weight in log frequency over the grid points
    inside ``band_hz = (low, high)``.
    """
    f = np.asarray(freq_hz, dtype=float)
    sel = (f >= band_hz[0]) & (f <= band_hz[1])
    if sel.sum() < 2:
        raise ValueError(
            f"level-alignment band {band_hz[0]:g}-{band_hz[1]:g} Hz holds fewer than two "
            f"grid points ({f[0]:g}-{f[-1]:g} Hz)"
        )

    def mean_db(level):
        pw = 10 ** (np.asarray(level)[..., sel] / 10)
        return 10 * np.log10(np.trapezoid(pw, np.log(f[sel]), axis=-1) / np.ptp(np.log(f[sel])))

    return mean_db(level_db_a) - mean_db(level_db_b)


@dataclass(frozen=True, eq=False)
class Response:
    """A level on a frequency grid, measured or predicted, with where it came from.

    The package's one curve type: a prediction at a point, a measured curve read from a
    file, an average of several microphone positions (with its spread).

    Attributes
    ----------
    freq_hz : ndarray, shape (F,)
        Frequencies in Hz.
    level_db : ndarray, shape (F,)
        Level in dB (see the level reference in docs/methods.md; a measurement carries
        whatever reference its chain gave).
    label : str
        Free text naming the curve ("left", "measured at seat").
    transfer : ndarray or None
        Complex transfer, when known (a prediction or an impulse response).
    valid : ndarray of bool or None
        Per frequency, whether the model behind the curve is trustworthy there.
    sources : tuple of str
        The file(s) behind a measured curve (several for an average).
    resolution_hz : float or None
        For a curve from an impulse response, about ``1 / window`` (Hz).
    std_db, min_db, max_db : ndarray or None
        For an average of several curves: the population standard deviation of their dB
        levels, and the lowest and highest level, at each frequency.
    notes : tuple of str
        What was done on the way in (layout detected, window, calibration, averaging).
    phase_deg : ndarray or None
        Phase in degrees as a measurement file gave it.
    band_fraction : int or None
        ``b`` when the levels are 1/b-octave band levels at the band centres (a meter or
        a band analysis of pink noise), None for a curve on a frequency grid.
    """

    freq_hz: np.ndarray
    level_db: np.ndarray
    label: str = ""
    transfer: np.ndarray | None = None
    valid: np.ndarray | None = field(default=None)
    sources: tuple = ()
    resolution_hz: float | None = None
    std_db: np.ndarray | None = None
    min_db: np.ndarray | None = None
    max_db: np.ndarray | None = None
    notes: tuple = ()
    phase_deg: np.ndarray | None = None
    band_fraction: int | None = None

    @property
    def source(self):
        """The first file behind the curve, or its label."""
        return self.sources[0] if self.sources else self.label

    @property
    def count(self):
        """Number of curves averaged into this one (1 for a single curve)."""
        return max(1, len(self.sources))

    def to_response(self, label=None):
        """The curve itself (relabelled when ``label`` is given)."""
        return self if label is None else replace(self, label=label)

    @classmethod
    def from_transfer(cls, freq_hz, transfer, label="", valid=None):
        """Build a response from a complex transfer function."""
        h = np.asarray(transfer)
        return cls(np.asarray(freq_hz, float), level_db(h), label, h, valid)

    def smoothed(self, fraction):
        """The level smoothed in power over ``1/fraction`` octave (transfer dropped)."""
        return Response(self.freq_hz, smooth_db(self.freq_hz, self.level_db, fraction), self.label,
                        None, self.valid, self.sources, self.resolution_hz, notes=self.notes)
