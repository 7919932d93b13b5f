"""Fractional-octave bands of IEC 61260-1 (base 10) with ISO 266 nominal labels: the one
band generator of the package (band levels, graphic-EQ bands, decay bands, labels).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .checks import check_range

__all__ = ["OCTAVE_RATIO_G", "BandSet", "band_centres", "band_label", "iec_bands", "band_fraction_of",
           "band_average_matrix"]

#: Base-10 octave frequency ratio of IEC 61260-1:2014, ``G = 10**(3/10)``.
OCTAVE_RATIO_G = 10.0 ** 0.3

#: ISO 266 preferred numbers (R10 series) naming the 1/3-octave bands of one decade.
_R10 = (1.0, 1.25, 1.6, 2.0, 2.5, 3.15, 4.0, 5.0, 6.3, 8.0)


def _nominal_label(fm, fraction):
    """ISO 266 label of an exact base-10 band centre (octave and 1/3 octave only)."""
    if fraction not in (1, 3):
        return float(f"{fm:.3g}")
    e = np.log10(fm)
    k = int(np.round(e * 10))  # 1/3-octave index in tenths of a decade
    decade, i = divmod(k, 10)
    return float(_R10[i] * 10.0**decade)


def band_centres(fraction=3, f_low_hz=20.0, f_high_hz=20000.0):
    """IEC 61260-1 base-10 fractional-octave bands with centres in a frequency range.

    Parameters
    ----------
    fraction : int
        ``b`` of 1/b-octave bands: 1, 2, 3, 6, 12 or 24.
    f_low_hz, f_high_hz : float
        Range for the band centres in Hz, 0 < low < high. A band is kept when its exact
        centre lies within the range widened by a quarter of a band on each side, so
        ``f_low_hz = 20`` keeps the band labelled 20 Hz (exact centre 19.953 Hz).

    Returns
    -------
    center_hz, nominal_hz, lower_hz, upper_hz : ndarray
        Exact mid-band frequencies, ISO 266 labels (for ``fraction`` 1 and 3; else the
        centre to 3 significant figures) and band-edge frequencies, in Hz.

    Notes
    -----
    ``f_m = 1000 G**(x/b)`` for odd ``b`` and ``1000 G**((2x+1)/(2b))`` for even ``b``,
    edges ``f_m G**(-1/(2b))`` and ``f_m G**(1/(2b))``, ``G = 10**0.3``
    (IEC 61260-1:2014, sec. 5.2-5.4).

    References
    ----------
    .. [1] IEC 61260-1:2014, Electroacoustics - Octave-band and fractional-octave-band
       filters - Part 1: Specifications.
    .. [2] ISO 266:1997, Acoustics - Preferred frequencies.
    """
    if fraction not in (1, 2, 3, 6, 12, 24):
        raise ValueError(f"fraction must be one of 1, 2, 3, 6, 12, 24, got {fraction!r}")
    f_low_hz, f_high_hz = float(f_low_hz), float(f_high_hz)
    if not (np.isfinite(f_low_hz) and np.isfinite(f_high_hz) and 0 < f_low_hz < f_high_hz):
        raise ValueError(
            f"band range must satisfy 0 < f_low_hz < f_high_hz, got {f_low_hz:g}..{f_high_hz:g} Hz"
        )
    b = int(fraction)
    g = OCTAVE_RATIO_G
    tol = g ** (1.0 / (4 * b))
    # band index range from the inverse of the centre formula
    def x_of(f):
        if b % 2:
            return b * np.log(f / 1000.0) / np.log(g)
        return (2 * b * np.log(f / 1000.0) / np.log(g) - 1) / 2
    x = np.arange(int(np.floor(x_of(f_low_hz / tol))), int(np.ceil(x_of(f_high_hz * tol))) + 1)
    fm = 1000.0 * g ** (x / b) if b % 2 else 1000.0 * g ** ((2 * x + 1) / (2 * b))
    keep = (fm >= f_low_hz / tol) & (fm <= f_high_hz * tol)
    fm = fm[keep]
    half = g ** (1.0 / (2 * b))
    nominal = np.array([_nominal_label(f, b) for f in fm])
    return fm, nominal, fm / half, fm * half




@dataclass(frozen=True)
class BandSet:
    """Fractional-octave bands of IEC 61260-1 (base 10) with ISO 266 nominal labels.

    Attributes
    ----------
    fraction : int
        1 for octave bands, 3 for one-third-octave bands.
    index : ndarray of int
        Band number x (x = 0 is 1 kHz).
    exact_hz, lower_hz, upper_hz : ndarray
        Exact midband frequency and band edges, Hz.
    nominal_hz : ndarray
        ISO 266 nominal midband frequency, Hz.
    """

    fraction: int
    index: np.ndarray
    exact_hz: np.ndarray
    lower_hz: np.ndarray
    upper_hz: np.ndarray
    nominal_hz: np.ndarray

    @property
    def labels(self):
        """Nominal frequencies as short labels ("31.5", "1k", "12.5k")."""
        return tuple(band_label(f) for f in self.nominal_hz)

    def __len__(self):
        return int(self.index.size)


def band_label(nominal_hz):
    """Short label of a nominal frequency: 31.5 -> "31.5", 1000 -> "1k", 12500 -> "12.5k"."""
    f = float(nominal_hz)
    if f >= 1000:
        return f"{f / 1000:g}k"
    return f"{f:g}"


def iec_bands(bands="third", fmin_hz=20.0, fmax_hz=20000.0):
    """Base-10 octave or one-third-octave bands with nominal centres in a range.

    Parameters
    ----------
    bands : {"third", "octave"}
    fmin_hz, fmax_hz : float
        Keep bands whose ISO 266 nominal centre lies in ``[fmin_hz, fmax_hz]``.

    Returns
    -------
    BandSet
        20 Hz-20 kHz gives 31 one-third-octave bands (20 ... 20k) or 10 octave bands
        (31.5 ... 16k).

    Notes
    -----
    ``G = 10^(3/10)``, midband ``f_m = 1000 G^(x/b)`` for ``b`` = 1 or 3 (odd ``b``),
    edges ``f_m G^(-1/(2b))`` and ``f_m G^(1/(2b))`` [1]_; x = -12 (one-third octave) gives
    63.096 Hz with edges 56.234 and 70.795 Hz. Nominal values are the ISO 266 R10 series
    (1, 1.25, 1.6, 2, 2.5, 3.15, 4, 5, 6.3, 8 times powers of ten) [2]_.

    References
    ----------
    .. [1] IEC 61260-1:2014, eqs. (1), (3), (4) and (5).
    .. [2] ISO 266:1997, Table 1.
    """
    if bands not in ("third", "octave"):
        raise ValueError(f"bands must be 'third' or 'octave', got {bands!r}")
    lo, hi = check_range("(fmin_hz, fmax_hz)", (fmin_hz, fmax_hz), lo=0.0, unit=" Hz")
    b = 3 if bands == "third" else 1
    widen = OCTAVE_RATIO_G ** (1.0 / b)  # one band more on each side, then keep by nominal centre
    exact, nominal, lower, upper = band_centres(b, lo / widen, hi * widen)
    keep = (nominal >= lo * (1 - 1e-9)) & (nominal <= hi * (1 + 1e-9))
    x = np.rint(b * np.log10(exact[keep] / 1000.0) / 0.3).astype(int)
    return BandSet(b, x, exact[keep], lower[keep], upper[keep], nominal[keep])


def band_fraction_of(freq_hz, tolerance=0.03):
    """The ``b`` of 1/b-octave band data (1 or 3) that ``freq_hz`` lists, or None.

    Band levels (from a sound-level meter or a band analysis of pink noise) are given at
    the IEC 61260-1 band centres, exact or ISO 266 nominal. A grid is taken for band data
    when every frequency lies within ``tolerance`` (relative) of a centre of one
    fraction and consecutive points step by one band; a measured curve on a fine or an
    arbitrary grid gives None.
    """
    f = np.asarray(freq_hz, dtype=float)
    if f.ndim != 1 or f.size < 2 or np.any(~np.isfinite(f)) or np.any(f <= 0) or np.any(np.diff(f) <= 0):
        return None
    for b in (3, 1):
        exact, nominal, _, _ = band_centres(b, float(f[0]) / 1.1, float(f[-1]) * 1.1)
        idx = np.abs(np.log(f[:, None] / exact[None, :])).argmin(axis=1)
        near_exact = np.abs(f / exact[idx] - 1) <= tolerance
        near_nominal = np.abs(f / nominal[idx] - 1) <= tolerance
        if np.all(near_exact | near_nominal) and np.all(np.diff(idx) == 1):
            return b
    return None


def band_average_matrix(freq_hz, lower_hz, upper_hz):
    """Weights (B, F) that average a power quantity on ``freq_hz`` over each band.

    Each band's row weights the grid points inside ``[lower, upper]`` equally in log
    frequency (trapezoid rule), which is the band level pink noise gives: equal energy per
    band, so a flat band reads as its mean level. Raises ValueError for a band holding
    fewer than two grid points (make the grid finer).
    """
    f = np.asarray(freq_hz, dtype=float)
    u = np.log(f)
    rows = []
    for lo, hi in zip(np.atleast_1d(lower_hz), np.atleast_1d(upper_hz)):
        inside = (f >= lo * (1 - 1e-9)) & (f <= hi * (1 + 1e-9))
        if inside.sum() < 2:
            raise ValueError(f"band {lo:.4g}-{hi:.4g} Hz holds fewer than two points of the grid; use a finer grid")
        w = np.zeros(f.size)
        idx = np.flatnonzero(inside)
        du = np.diff(u[idx])
        w[idx[:-1]] += du / 2
        w[idx[1:]] += du / 2
        rows.append(w / w.sum())
    return np.array(rows)
