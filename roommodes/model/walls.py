"""How an absorption coefficient becomes wall behaviour.

Room files give each surface a random-incidence (diffuse-field) energy absorption
coefficient ``alpha``, the number handbook tables list. The solvers need a wall
*impedance*. roommodes models every surface as locally reacting with a real
normalised specific impedance ``zeta = Z / (rho c)`` chosen so that its
random-incidence absorption equals ``alpha``, that is, it inverts London's (1950)
statistical-absorption formula. From ``zeta`` follow, consistently:

* the normalised admittance ``beta = 1 / zeta`` (modal damping, :mod:`roommodes.modes`);
* the plane-wave pressure reflection factor ``R(theta) = (zeta cos(theta) - 1) /
  (zeta cos(theta) + 1)`` (image sources, :mod:`roommodes.solvers.images`);
* the normal-incidence absorption ``4 zeta / (zeta + 1)^2``.

A real impedance can absorb at most ``ALPHA_MAX = 0.9512`` of diffuse sound (at
``zeta = 1.567``); larger coefficients are clipped there with a warning.

References
----------
.. [1] A. London, "The determination of reverberant sound absorption coefficients
   from acoustic impedance measurements", J. Acoust. Soc. Am. 22(2):263-269, 1950.
.. [2] H. Kuttruff, Room Acoustics, 5th ed., Spon, 2009, sec. 2.5 (absorption of
   a locally reacting wall at random incidence, the "Paris formula").
"""

from __future__ import annotations

import functools

import numpy as np

__all__ = [
    "ALPHA_MAX",
    "ZETA_AT_ALPHA_MAX",
    "random_incidence_absorption",
    "impedance_from_absorption",
    "admittance_from_absorption",
    "normal_incidence_absorption",
    "reflection_factor",
    "impedance_table",
]


def random_incidence_absorption(zeta):
    """Random-incidence absorption of a locally reacting wall of real impedance.

    Parameters
    ----------
    zeta : float or array_like
        Real normalised specific impedance Z / (rho c), > 0. ``np.inf`` is a rigid wall.

    Returns
    -------
    alpha : ndarray
        Diffuse-field energy absorption coefficient, 0 <= alpha <= 0.9512.

    Notes
    -----
    Integrating the oblique-incidence absorption ``4 zeta cos(t) / (zeta cos(t) + 1)^2``
    over ``sin(2 t) dt`` from 0 to pi/2 gives London's closed form

    .. math:: \\alpha = \\frac{8}{\\zeta}\\left[1 + \\frac{1}{1+\\zeta}
              - \\frac{2}{\\zeta}\\ln(1+\\zeta)\\right].

    For large ``zeta`` this tends to ``8 / zeta`` (the small-absorption shortcut).
    """
    z = np.asarray(zeta, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = 8.0 / z * (1.0 + 1.0 / (1.0 + z) - 2.0 / z * np.log1p(z))
        # For very large zeta the bracket loses digits to cancellation; there the
        # expansion 8/z + (8 - 16 ln z)/z^2 is exact to O(ln z / z^3).
        big = z > 1e6
        a = np.where(big, 8.0 / z - (16.0 * np.log(z) - 8.0) / z**2, a)
    return np.where(np.isinf(z), 0.0, a)


def _bracket_max():
    # maximum of the London formula, by golden-section search on [0.5, 5] (unimodal there)
    lo, hi = 0.5, 5.0
    g = (np.sqrt(5.0) - 1.0) / 2.0
    for _ in range(80):
        a, b = hi - g * (hi - lo), lo + g * (hi - lo)
        if random_incidence_absorption(a) > random_incidence_absorption(b):
            hi = b
        else:
            lo = a
    z = 0.5 * (lo + hi)
    return float(z), float(random_incidence_absorption(z))


ZETA_AT_ALPHA_MAX, ALPHA_MAX = _bracket_max()


def impedance_from_absorption(alpha):
    """Real normalised impedance whose random-incidence absorption is ``alpha``.

    Parameters
    ----------
    alpha : float or array_like
        Random-incidence energy absorption coefficient, 0 <= alpha < 1. Values above
        :data:`ALPHA_MAX` are clipped to it (a real impedance absorbs no more).

    Returns
    -------
    zeta : ndarray
        Normalised impedance on the stiff branch ``zeta >= 1.567`` (``inf`` for alpha = 0).

    Notes
    -----
    Solved by bisection in ``log(zeta)`` on the monotone branch of London's formula
    (see :func:`random_incidence_absorption`), vectorised over the input.
    """
    a = np.clip(np.asarray(alpha, dtype=float), 0.0, ALPHA_MAX)
    if a.size > _CACHE_MAX_VALUES:
        return _impedance_bisection(a)
    # the same coefficients come back call after call (a room at the same frequencies):
    # the answers for the last few are kept
    return _impedance_cached(a.tobytes(), a.shape).copy()


#: Largest input whose answer :func:`impedance_from_absorption` keeps (6 walls x 4096 frequencies).
_CACHE_MAX_VALUES = 6 * 4096


@functools.lru_cache(maxsize=32)
def _impedance_cached(data, shape):
    """:func:`impedance_from_absorption` of the clipped coefficients ``data`` (bytes of a
    float64 array of ``shape``); read-only."""
    z = _impedance_bisection(np.frombuffer(data, dtype=float).reshape(shape))
    z.flags.writeable = False
    return z


def _impedance_bisection(a):
    """The bisection of :func:`impedance_from_absorption` on clipped coefficients ``a``."""
    # Vectorised bisection in log(zeta) on [zeta_max, 1e12], where alpha falls monotonically:
    # 60 halvings of a 30-wide log interval leave a relative error below 1e-16.
    lo = np.full(a.shape, np.log(ZETA_AT_ALPHA_MAX))
    hi = np.full(a.shape, np.log(1e12))
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        too_absorptive = random_incidence_absorption(np.exp(mid)) > a
        lo = np.where(too_absorptive, mid, lo)
        hi = np.where(too_absorptive, hi, mid)
    z = np.exp(0.5 * (lo + hi))
    z = np.where(a >= ALPHA_MAX, ZETA_AT_ALPHA_MAX, z)
    return np.where(a <= 0.0, np.inf, z)


def admittance_from_absorption(alpha):
    """Real normalised admittance ``beta = 1 / zeta`` for an absorption coefficient.

    Parameters
    ----------
    alpha : float or array_like
        Random-incidence absorption coefficient, 0 <= alpha < 1.

    Returns
    -------
    beta : ndarray
        Normalised specific admittance rho c / Z (0 for a rigid wall).
    """
    return 1.0 / impedance_from_absorption(alpha)


def normal_incidence_absorption(zeta):
    """Normal-incidence absorption ``4 zeta / (zeta + 1)^2`` of a real impedance."""
    z = np.asarray(zeta, dtype=float)
    with np.errstate(invalid="ignore"):
        a = 4.0 * z / (z + 1.0) ** 2
    return np.where(np.isinf(z), 0.0, a)


def reflection_factor(zeta, cos_theta):
    """Plane-wave pressure reflection factor of a locally reacting wall.

    Parameters
    ----------
    zeta : float or array_like
        Real normalised impedance.
    cos_theta : float or array_like
        Cosine of the angle of incidence measured from the wall normal, 0..1.

    Returns
    -------
    R : ndarray
        ``(zeta cos(theta) - 1) / (zeta cos(theta) + 1)``, real, in (-1, 1].
    """
    z = np.asarray(zeta, dtype=float)
    c = np.asarray(cos_theta, dtype=float)
    with np.errstate(invalid="ignore"):
        r = (z * c - 1.0) / (z * c + 1.0)
    return np.where(np.isinf(z), 1.0, r)


def impedance_table(zeta, n_freq, allow_complex=False):
    """Wall impedances as a (6, F) table: ``zeta`` given per wall (6,) or per wall and
    frequency (6, F); ``inf`` for a rigid wall. Real impedances must be positive; with
    ``allow_complex`` a complex impedance must be passive (``Re(zeta) >= 0``) and non-zero.
    Raises ValueError otherwise."""
    z = np.asarray(zeta)
    if not np.issubdtype(z.dtype, np.number):
        raise ValueError(f"zeta must be numeric normalised impedances, got dtype {z.dtype}")
    z = z.astype(complex if allow_complex else float)
    if z.shape == (6,):
        z = np.repeat(z[:, None], n_freq, axis=1)
    if z.shape != (6, n_freq):
        raise ValueError(f"zeta must have shape (6,) or (6, {n_freq}) (walls x frequencies), got {z.shape}")
    if not allow_complex:
        if np.any(np.isnan(z)) or np.any(z <= 0):
            raise ValueError("zeta must be positive normalised impedances (np.inf for a rigid wall)")
        return z
    rigid = np.isinf(z.real) & (z.real > 0)
    fin = z[~rigid]
    if np.any(~np.isfinite(fin)) or np.any(fin == 0) or np.any(fin.real < 0) or np.any(np.isinf(z.imag)):
        raise ValueError("zeta must be finite non-zero impedances with Re(zeta) >= 0 (passive walls), "
                         "or +inf for a rigid wall")
    return z
