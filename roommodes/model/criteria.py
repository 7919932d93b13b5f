"""Room summary figures: reverberation, transition frequency, mode counts, proportions.

Every function here is pure and works on plain numbers or NumPy arrays. The
reverberation formulas take surface areas and absorption coefficients in any one
length unit (metres by default); ``speed_of_sound`` must be given in the same unit
per second.

The proportion checks return a :class:`Check`: a name, a pass/fail flag, a one-line
reason written for the user, and the numbers behind the verdict. They are rules of
thumb for choosing or judging a rectangular room, not predictions of how it sounds.

References
----------
.. [1] H. Kuttruff, Room Acoustics, 5th ed., Spon, 2009, ch. 5 (Sabine's and
   Eyring's reverberation formulas).
.. [2] M. R. Schroeder, "The 'Schroeder frequency' revisited", J. Acoust. Soc. Am.
   99(5):3240-3241, 1996, eqs. 1 and 2.
.. [3] D. A. Bies, C. H. Hansen, Engineering Noise Control, 3rd ed., Spon, 2003,
   sec. 7.3.1 (number of room modes below a frequency).
.. [4] R. Walker, "Optimum dimension ratios for studios, control rooms and
   listening rooms", BBC Research Department Report RD 1993/8, 1993; the same
   proportion rule appears in ITU-R BS.1116.
.. [5] O. J. Bonello, "A new criterion for the distribution of normal room modes",
   J. Audio Eng. Soc. 29(9):597, 1981; summarised in G. Ballou (ed.), Handbook
   for Sound Engineers, 4th ed., Focal Press, 2008, p. 133.
.. [6] IEC 61260-1:2014, Electroacoustics - Octave-band and fractional-octave-band
   filters - Part 1: Specifications (base-10 band centres and edges).
.. [7] EBU Tech 3276, Listening conditions for the assessment of sound programme
   material (the reverberation target for listening rooms; recalled from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from itertools import combinations

import numpy as np

__all__ = [
    "SPEED_OF_SOUND",
    "Check",
    "sabine_rt60",
    "eyring_rt60",
    "schroeder_frequency",
    "modal_bandwidth_hz",
    "rt60_from_modal_bandwidth",
    "decay_constant",
    "rt60_from_decay_constant",
    "mode_q_factor",
    "mode_count_estimate",
    "proportion_rule_check",
    "integer_ratio_check",
    "third_octave_bands",
    "bonello_checks",
    "note_name",
    "listening_room_rt_target",
]

#: Speed of sound in air at 20 C, m/s (the package default).
SPEED_OF_SOUND = 343.0

# 3 ln 10 = ln(10**3) = 6.9078: a 60 dB energy decay is a factor 1000 in amplitude.
_LN_1E3 = 3.0 * math.log(10.0)


# --------------------------------------------------------------------------- helpers


def _positive_scalar(name, value, unit=""):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number > 0{unit}, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise ValueError(f"{name} must be a finite number > 0{unit}, got {value!r}")
    return v


def _positive_array(name, value, unit=""):
    a = np.asarray(value, dtype=float)
    if a.size == 0 or not np.all(np.isfinite(a)) or np.any(a <= 0):
        raise ValueError(f"{name} must hold finite values > 0{unit}, got {value!r}")
    return a


def _size3(size_m):
    s = np.asarray(size_m, dtype=float)
    if s.shape != (3,) or not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise ValueError(
            f"size_m must be three positive lengths [Lx, Ly, Lz] in metres, got {size_m!r}"
        )
    return s


def _as_output(x):
    x = np.asarray(x, dtype=float)
    return float(x) if x.ndim == 0 else x


def _absorption_inputs(volume_m3, area_m2, alpha, speed_of_sound):
    v = _positive_scalar("volume_m3", volume_m3, " (room volume)")
    c = _positive_scalar("speed_of_sound", speed_of_sound, " (length unit per second)")
    s = np.asarray(area_m2, dtype=float)
    if s.ndim != 1 or s.size == 0 or not np.all(np.isfinite(s)) or np.any(s < 0):
        raise ValueError(
            f"area_m2 must be a 1-D array of surface areas >= 0 (one per surface), got {area_m2!r}"
        )
    if s.sum() <= 0:
        raise ValueError("area_m2 must have a positive total surface area, got all zeros")
    a = np.asarray(alpha, dtype=float)
    if a.ndim not in (1, 2) or a.shape[0] != s.size:
        raise ValueError(
            f"alpha must have shape ({s.size},) or ({s.size}, bands) to match area_m2, "
            f"got shape {a.shape}"
        )
    if not np.all(np.isfinite(a)) or np.any(a < 0) or np.any(a > 1):
        bad = a[~((a >= 0) & (a <= 1))]
        raise ValueError(
            f"alpha must lie in 0..1 (random-incidence absorption), got {bad.ravel()[:3]}"
        )
    return v, s, a, c


# --------------------------------------------------------------------------- reverberation


def sabine_rt60(volume_m3, area_m2, alpha, speed_of_sound=SPEED_OF_SOUND):
    """Reverberation time from Sabine's formula.

    Parameters
    ----------
    volume_m3 : float
        Room volume, > 0 (m^3, or the cube of whatever length unit ``area_m2`` uses).
    area_m2 : array_like, shape (S,)
        Area of each surface, >= 0 (for a box S = 6, in the wall order front, back,
        left, right, floor, ceiling).
    alpha : array_like, shape (S,) or (S, B)
        Random-incidence absorption coefficient of each surface, 0..1, optionally per
        frequency band.
    speed_of_sound : float
        Speed of sound in the same length unit per second, > 0 (default 343 m/s).

    Returns
    -------
    rt60_s : float or ndarray, shape (B,)
        Time for a 60 dB decay of the diffuse field, in seconds.

    Raises
    ------
    ValueError
        For non-positive volume, mismatched shapes, alpha outside 0..1 or a room
        without absorption.

    Notes
    -----
    .. math:: T = \\frac{24 \\ln 10}{c} \\frac{V}{A}, \\qquad A = \\sum_i S_i \\alpha_i

    ``24 ln 10 / c`` is 0.1611 s/m at 343 m/s (0.0489 s/ft at 1130 ft/s; handbooks in
    feet round it to 0.049). Sabine's formula assumes a diffuse field and small
    absorption; it over-estimates ``T`` in very absorbent rooms.

    References
    ----------
    W. C. Sabine, Collected Papers on Acoustics, 1922; Kuttruff, Room Acoustics,
    5th ed. (2009), ch. 5 (chapter recalled from memory).
    """
    v, s, a, c = _absorption_inputs(volume_m3, area_m2, alpha, speed_of_sound)
    total = np.tensordot(s, a, axes=(0, 0))
    if np.any(total <= 0):
        raise ValueError("total absorption S*alpha must be > 0 in every band (got 0)")
    return _as_output(24.0 * math.log(10.0) * v / (c * total))


def eyring_rt60(volume_m3, area_m2, alpha, speed_of_sound=SPEED_OF_SOUND):
    """Reverberation time from Eyring's formula.

    Parameters
    ----------
    volume_m3, area_m2, alpha, speed_of_sound
        As for :func:`sabine_rt60`.

    Returns
    -------
    rt60_s : float or ndarray, shape (B,)
        Reverberation time in seconds (0 when the mean absorption is 1).

    Notes
    -----
    .. math:: T = \\frac{24 \\ln 10}{c} \\frac{V}{-S \\ln(1 - \\bar\\alpha)},
              \\qquad \\bar\\alpha = \\frac{\\sum_i S_i \\alpha_i}{S}, \\; S = \\sum_i S_i

    For small ``alpha`` it tends to Sabine's value from below.

    References
    ----------
    C. F. Eyring, "Reverberation time in 'dead' rooms", J. Acoust. Soc. Am.
    1(2):217-241, 1930; Kuttruff, Room Acoustics, 5th ed. (2009), ch. 5.
    """
    v, s, a, c = _absorption_inputs(volume_m3, area_m2, alpha, speed_of_sound)
    total_area = s.sum()
    mean_alpha = np.tensordot(s, a, axes=(0, 0)) / total_area
    if np.any(mean_alpha <= 0):
        raise ValueError("mean absorption must be > 0 in every band (got 0)")
    with np.errstate(divide="ignore"):
        neg_log = -np.log1p(-mean_alpha)
    return _as_output(24.0 * math.log(10.0) * v / (c * total_area * neg_log))


# --------------------------------------------------------------------------- damping figures


def schroeder_frequency(rt60_s, volume_m3):
    """Schroeder's transition frequency between modal and diffuse behaviour.

    Parameters
    ----------
    rt60_s : float or array_like
        Reverberation time in seconds, > 0.
    volume_m3 : float or array_like
        Room volume in m^3, > 0.

    Returns
    -------
    freq_hz : float or ndarray
        ``2000 sqrt(T / V)`` in Hz.

    Notes
    -----
    Above this frequency about three modes overlap within one modal half-power
    bandwidth, and the response is better described statistically.

    References
    ----------
    Schroeder (1996), J. Acoust. Soc. Am. 99(5):3240, eq. 1.
    """
    t = _positive_array("rt60_s", rt60_s, " s")
    v = _positive_array("volume_m3", volume_m3, " m^3")
    return _as_output(2000.0 * np.sqrt(t / v))


def modal_bandwidth_hz(rt60_s):
    """Half-power (-3 dB) bandwidth of a mode that decays with time constant ``rt60_s``.

    Parameters
    ----------
    rt60_s : float or array_like
        Reverberation (60 dB decay) time of the mode in seconds, > 0.

    Returns
    -------
    bandwidth_hz : float or ndarray
        ``ln(10**6) / (2 pi T) = 2.19881 / T`` in Hz.

    Notes
    -----
    A mode whose pressure decays as ``exp(-delta t)`` has the resonance curve
    ``1 / (w^2 - w_n^2 - 2 j delta w_n)`` whose half-power width is ``2 delta`` in
    rad/s, i.e. ``delta / pi`` in Hz; with ``delta = 3 ln 10 / T`` this is the
    formula above.

    References
    ----------
    Schroeder (1996), J. Acoust. Soc. Am. 99(5):3240, eq. 2.
    """
    t = _positive_array("rt60_s", rt60_s, " s")
    return _as_output(math.log(1e6) / (2.0 * math.pi * t))


def rt60_from_modal_bandwidth(bandwidth_hz):
    """Decay time of a mode with half-power bandwidth ``bandwidth_hz`` (inverse of
    :func:`modal_bandwidth_hz`): ``T = ln(10**6) / (2 pi B)`` seconds."""
    b = _positive_array("bandwidth_hz", bandwidth_hz, " Hz")
    return _as_output(math.log(1e6) / (2.0 * math.pi * b))


def decay_constant(rt60_s):
    """Amplitude decay constant ``delta`` (1/s) for a 60 dB decay time ``rt60_s``.

    Parameters
    ----------
    rt60_s : float or array_like
        Decay time in seconds, > 0.

    Returns
    -------
    delta_per_s : float or ndarray
        ``3 ln 10 / T = 6.9078 / T`` in 1/s: the pressure decays as ``exp(-delta t)``,
        so the energy falls 60 dB (a factor 10**6) in ``T``.

    References
    ----------
    Schroeder (1996), J. Acoust. Soc. Am. 99(5):3240; Kuttruff, Room Acoustics,
    5th ed. (2009), ch. 3.
    """
    t = _positive_array("rt60_s", rt60_s, " s")
    return _as_output(_LN_1E3 / t)


def rt60_from_decay_constant(delta_per_s):
    """60 dB decay time for an amplitude decay constant (inverse of
    :func:`decay_constant`): ``T = 3 ln 10 / delta`` seconds."""
    d = _positive_array("delta_per_s", delta_per_s, " 1/s")
    return _as_output(_LN_1E3 / d)


def mode_q_factor(freq_hz, rt60_s):
    """Quality factor ``Q = f / B`` of a mode at ``freq_hz`` with decay time ``rt60_s``.

    Parameters
    ----------
    freq_hz : float or array_like
        Mode frequency in Hz, > 0.
    rt60_s : float or array_like
        Decay time of the mode in seconds, > 0.

    Returns
    -------
    q : float or ndarray
        ``f T / 2.19881`` (dimensionless), with ``B`` from :func:`modal_bandwidth_hz`.

    References
    ----------
    Schroeder (1996) eq. 2 for ``B``. Avis, Fazenda & Davies, J. Audio Eng. Soc.
    55(7/8), 2007, found modes with Q below about 16 hard to hear at low frequency.
    """
    f = _positive_array("freq_hz", freq_hz, " Hz")
    return _as_output(f / modal_bandwidth_hz(rt60_s))


# --------------------------------------------------------------------------- mode count


def mode_count_estimate(freq_hz, size_m, speed_of_sound=SPEED_OF_SOUND):
    """Asymptotic number of rigid-wall modes of a box with frequency up to ``freq_hz``.

    Parameters
    ----------
    freq_hz : float or array_like
        Upper frequency in Hz, >= 0.
    size_m : array_like, shape (3,)
        Room size ``[Lx, Ly, Lz]`` in metres, each > 0.
    speed_of_sound : float
        In m/s, > 0.

    Returns
    -------
    count : float or ndarray
        Expected number of modes with eigenfrequency <= ``freq_hz``.

    Notes
    -----
    .. math:: N(f) = \\frac{4 \\pi V f^3}{3 c^3} + \\frac{\\pi S f^2}{4 c^2}
              + \\frac{L f}{8 c}

    with ``V`` the volume, ``S`` the total surface area and ``L = 4 (Lx + Ly + Lz)`` the
    total edge length. The first term counts lattice points in an eighth of a sphere;
    the other two add the modes on its bounding planes and axes.

    References
    ----------
    Bies & Hansen, Engineering Noise Control, 3rd ed. (2003), sec. 7.3.1; Kuttruff,
    Room Acoustics, 5th ed. (2009), ch. 3.
    """
    lx, ly, lz = _size3(size_m)
    c = _positive_scalar("speed_of_sound", speed_of_sound, " m/s")
    f = np.asarray(freq_hz, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f < 0):
        raise ValueError(f"freq_hz must be finite and >= 0, got {freq_hz!r}")
    volume = lx * ly * lz
    surface = 2.0 * (lx * ly + lx * lz + ly * lz)
    edges = 4.0 * (lx + ly + lz)
    n = (
        4.0 * math.pi * volume * f**3 / (3.0 * c**3)
        + math.pi * surface * f**2 / (4.0 * c**2)
        + edges * f / (8.0 * c)
    )
    return _as_output(n)


# --------------------------------------------------------------------------- proportion checks


@dataclass(frozen=True)
class Check:
    """The verdict of one room criterion.

    Attributes
    ----------
    name : str
        Short identifier of the criterion (``"proportion-rule"``, ...).
    passed : bool
        Whether the room meets it.
    reason : str
        One line, for the user, saying why.
    value : dict
        The numbers behind the verdict (ratios, band counts, offending pairs).
    """

    name: str
    passed: bool
    reason: str
    value: dict = field(default_factory=dict)


def proportion_rule_check(size_m):
    """Check the room against the BBC / ITU-R BS.1116 proportion rule.

    Parameters
    ----------
    size_m : array_like, shape (3,)
        ``[Lx, Ly, Lz]`` in metres; ``Lz`` is the height.

    Returns
    -------
    Check
        ``name = "proportion-rule"``; ``value`` holds ``l_over_h``, ``w_over_h``,
        ``lower`` (1.1 w/h) and ``upper`` (4.5 w/h - 4).

    Notes
    -----
    With ``h`` the height, ``l`` the larger and ``w`` the smaller floor dimension:

    .. math:: 1.1 \\frac{w}{h} \\le \\frac{l}{h} \\le 4.5 \\frac{w}{h} - 4,
              \\qquad \\frac{l}{h} < 3, \\qquad \\frac{w}{h} < 3

    The height is taken as the reference whatever its size, because the rule was
    derived for rooms whose height is their smallest dimension; for a room taller
    than it is wide the rule is outside its intended range and the check says so.
    A cube fails (``l/h = 1 < 1.1``): its modes coincide on all three axes.

    References
    ----------
    Walker, BBC RD 1993/8; ITU-R BS.1116 (adoption recalled from memory; secondary).
    """
    lx, ly, h = _size3(size_m)
    length, w = max(lx, ly), min(lx, ly)
    lh, wh = float(length / h), float(w / h)
    lower, upper = 1.1 * wh, 4.5 * wh - 4.0
    value = {"l_over_h": lh, "w_over_h": wh, "lower": lower, "upper": upper}
    problems = []
    if upper < lower:
        # 1.1 w/h > 4.5 w/h - 4 when w/h < 4/3.4 = 1.176: no length can satisfy both
        problems.append(
            f"width/height {wh:.2f} is below {4 / 3.4:.2f}, so no length meets "
            "1.1 w/h <= l/h <= 4.5 w/h - 4 (ceiling too high for the width)"
        )
    elif lh < lower:
        problems.append(
            f"length/height {lh:.2f} is below 1.1 x width/height = {lower:.2f} "
            "(floor plan too close to square)"
        )
    elif lh > upper:
        problems.append(
            f"length/height {lh:.2f} is above 4.5 x width/height - 4 = {upper:.2f} "
            "(room too long for its width)"
        )
    if lh >= 3:
        problems.append(f"length/height {lh:.2f} is not below 3")
    if wh >= 3:
        problems.append(f"width/height {wh:.2f} is not below 3")
    note = "" if h <= w else "; note: the room is taller than it is wide, outside the rule's range"
    if problems:
        return Check("proportion-rule", False, "Fails: " + "; ".join(problems) + note, value)
    return Check(
        "proportion-rule",
        True,
        f"Passes: length/height {lh:.2f} lies between {lower:.2f} and {upper:.2f}, "
        f"and both ratios are below 3{note}",
        value,
    )


def integer_ratio_check(size_m, tolerance=0.05):
    """Flag room dimensions whose ratio is close to a whole number.

    Parameters
    ----------
    size_m : array_like, shape (3,)
        ``[Lx, Ly, Lz]`` in metres.
    tolerance : float
        Relative distance to the nearest whole number counted as "close",
        0 < tolerance < 0.5 (default 5 %).

    Returns
    -------
    Check
        ``name = "integer-ratios"``; ``value["ratios"]`` maps ``"Lx/Ly"``-style keys
        (larger over smaller) to the ratio, ``value["close"]`` lists the offending keys.

    Notes
    -----
    For each pair the ratio ``r >= 1`` of the larger to the smaller dimension is
    compared with its nearest integer ``n``; the pair is flagged when
    ``|r - n| <= tolerance * n``. Dimensions in a whole-number ratio share axial
    mode frequencies (the ``k``-th mode of one equals the ``n k``-th of the other),
    so those frequencies are reinforced. Equal dimensions (``n = 1``) are flagged too.
    The 5 % margin is common practice (no single source).
    """
    s = _size3(size_m)
    tol = float(tolerance)
    if not (math.isfinite(tol) and 0 < tol < 0.5):
        raise ValueError(f"tolerance must be in 0 < tolerance < 0.5, got {tolerance!r}")
    labels = ("Lx", "Ly", "Lz")
    ratios, close = {}, []
    for i, j in combinations(range(3), 2):
        big, small = (i, j) if s[i] >= s[j] else (j, i)
        key = f"{labels[big]}/{labels[small]}"
        r = float(s[big] / s[small])
        n = max(1, round(r))
        ratios[key] = r
        if abs(r - n) <= tol * n:
            close.append(key)
    value = {"ratios": ratios, "close": close, "tolerance": tol}
    if close:
        parts = [f"{k} = {ratios[k]:.2f}" for k in close]
        return Check(
            "integer-ratios",
            False,
            f"Fails: {', '.join(parts)} within {tol:.0%} of a whole number "
            "(axial modes of those dimensions coincide)",
            value,
        )
    return Check(
        "integer-ratios",
        True,
        f"Passes: no ratio of two dimensions is within {tol:.0%} of a whole number",
        value,
    )


def third_octave_bands(fmin_hz, fmax_hz):
    """IEC 61260-1 base-10 one-third-octave bands with centres in ``[fmin_hz, fmax_hz]``.

    Parameters
    ----------
    fmin_hz, fmax_hz : float
        Range of band centres in Hz, 0 < fmin_hz <= fmax_hz. A centre within 2 % of a
        limit counts as inside, so nominal values (200 Hz for 199.53 Hz) work.

    Returns
    -------
    center_hz, lower_hz, upper_hz : ndarray
        Exact mid-band frequencies ``1000 G**(x/3)``, ``G = 10**0.3``, and band edges
        ``center * G**(-1/6)``, ``center * G**(1/6)``.

    References
    ----------
    IEC 61260-1:2014 (base-10 system, G = 10**0.3).
    """
    lo = _positive_scalar("fmin_hz", fmin_hz, " Hz")
    hi = _positive_scalar("fmax_hz", fmax_hz, " Hz")
    if lo > hi:
        raise ValueError(f"fmin_hz must not exceed fmax_hz, got {lo:g} > {hi:g} Hz")
    g = 10.0**0.3
    x_lo = math.ceil(3.0 * math.log(lo / 1.02 / 1000.0, g))
    x_hi = math.floor(3.0 * math.log(hi * 1.02 / 1000.0, g))
    x = np.arange(x_lo, x_hi + 1)
    center = 1000.0 * g ** (x / 3.0)
    return center, center * g ** (-1.0 / 6.0), center * g ** (1.0 / 6.0)


def bonello_checks(mode_freqs_hz, coincidence_tol=0.005, fmax_hz=200.0):
    """Bonello's two criteria on the distribution of modes over 1/3-octave bands.

    Parameters
    ----------
    mode_freqs_hz : array_like, shape (M,)
        Frequencies of *all* modes of the room in Hz, each listed once per mode (a
        degenerate pair appears twice). The list must reach the upper edge of the last
        band (about 224 Hz for the default ``fmax_hz``). Values <= 0 (the uniform
        pressure term) are ignored.
    coincidence_tol : float
        Two modes "coincide" when their frequencies differ by at most this fraction of
        their mean, 0 <= coincidence_tol < 0.1 (default 0.5 %).
    fmax_hz : float
        Centre of the last band examined (default 200 Hz).

    Returns
    -------
    density, coincidence : Check
        ``"bonello-density"``: the number of modes per band never decreases from one
        band to the next, over the bands from the first one holding a mode up to the
        band centred at ``fmax_hz``. ``"bonello-coincidence"``: no two modes coincide in
        a band holding fewer than 5 modes. ``value`` holds the band centres, counts and
        the offending bands or pairs.

    Raises
    ------
    ValueError
        For negative or non-finite frequencies, a list that stops short of the last
        band, or a tolerance out of range.

    Notes
    -----
    Bands are the IEC 61260-1 base-10 one-third-octave bands; a mode exactly on an
    edge belongs to the upper band. What counts as coincident is not fixed by the
    criterion: the default 0.5 % is our choice and the verdict of the second check
    can change with it (treat it as a soft criterion). Exact coincidences, as in a
    room with two equal dimensions or an integer ratio, fail at any tolerance.

    References
    ----------
    Bonello, J. Audio Eng. Soc. 29(9):597, 1981; Ballou (ed.), Handbook for Sound
    Engineers, 4th ed. (2008), p. 133.
    """
    f = np.asarray(mode_freqs_hz, dtype=float).ravel()
    if not np.all(np.isfinite(f)) or np.any(f < 0):
        raise ValueError("mode_freqs_hz must hold finite frequencies >= 0 Hz")
    tol = float(coincidence_tol)
    if not (math.isfinite(tol) and 0 <= tol < 0.1):
        raise ValueError(f"coincidence_tol must be in 0..0.1 (a fraction), got {coincidence_tol!r}")
    f = np.sort(f[f > 0])
    if f.size == 0:
        raise ValueError("mode_freqs_hz holds no mode above 0 Hz")
    fmax = _positive_scalar("fmax_hz", fmax_hz, " Hz")
    # start one band low enough that the band holding the lowest mode is included
    centers, lowers, uppers = third_octave_bands(min(f[0] / 10.0 ** 0.05, fmax), fmax)
    if f[-1] < uppers[-1]:
        raise ValueError(
            f"mode_freqs_hz must list every mode up to {uppers[-1]:.1f} Hz (the top of the "
            f"{centers[-1]:.0f} Hz band), but stops at {f[-1]:.1f} Hz"
        )
    counts = np.array(
        [np.count_nonzero((f >= lo) & (f < hi)) for lo, hi in zip(lowers, uppers)]
    )
    first = int(np.argmax(counts > 0)) if np.any(counts > 0) else len(counts)
    centers, lowers, uppers, counts = (
        centers[first:], lowers[first:], uppers[first:], counts[first:]
    )
    band_list = [float(c) for c in centers]
    count_list = [int(n) for n in counts]

    drops = [
        (band_list[i], band_list[i + 1], count_list[i], count_list[i + 1])
        for i in range(len(count_list) - 1)
        if count_list[i + 1] < count_list[i]
    ]
    density_value = {"band_center_hz": band_list, "count": count_list, "drops": drops}
    if drops:
        b0, b1, n0, n1 = drops[0]
        more = f" (and {len(drops) - 1} more)" if len(drops) > 1 else ""
        density = Check(
            "bonello-density",
            False,
            f"Fails: the {b1:.0f} Hz third-octave band holds {n1} mode(s), fewer than "
            f"the {n0} in the {b0:.0f} Hz band below it{more}",
            density_value,
        )
    else:
        density = Check(
            "bonello-density",
            True,
            f"Passes: the mode count per third-octave band never falls from "
            f"{band_list[0]:.0f} Hz to {band_list[-1]:.0f} Hz" if band_list else
            "Passes: no modes below the last band",
            density_value,
        )

    pairs = []
    for c, lo, hi, n in zip(centers, lowers, uppers, counts):
        if n >= 5 or n < 2:
            continue
        fb = f[(f >= lo) & (f < hi)]
        for a, b in combinations(fb, 2):
            if abs(b - a) <= tol * 0.5 * (a + b):
                pairs.append((float(c), float(a), float(b)))
    coinc_value = {"pairs": pairs, "tolerance": tol}
    if pairs:
        c, a, b = pairs[0]
        more = f" (and {len(pairs) - 1} more)" if len(pairs) > 1 else ""
        coincidence = Check(
            "bonello-coincidence",
            False,
            f"Fails: modes at {a:.1f} and {b:.1f} Hz coincide (within {tol:.1%}) in the "
            f"{c:.0f} Hz band, which holds fewer than 5 modes{more}",
            coinc_value,
        )
    else:
        coincidence = Check(
            "bonello-coincidence",
            True,
            f"Passes: no two modes within {tol:.1%} of each other in any third-octave "
            "band holding fewer than 5 modes",
            coinc_value,
        )
    return density, coincidence


# --------------------------------------------------------------------------- small helpers

_NOTE_NAMES = ("C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B")


def note_name(freq_hz, a4_hz=440.0):
    """Nearest equal-tempered note to ``freq_hz`` with the offset in cents.

    Parameters
    ----------
    freq_hz : float
        Frequency in Hz, > 0.
    a4_hz : float
        Tuning reference for A4 in Hz, > 0 (default 440 Hz).

    Returns
    -------
    str
        Scientific pitch notation with sharps and the offset rounded to whole cents,
        e.g. ``"A4 +0 c"``, ``"C#1 +33 c"``, ``"D2 -12 c"``. The offset lies in
        -50..+49 cents (a frequency exactly between two notes takes the upper one).

    Notes
    -----
    With ``m = 69 + 12 log2(f / f_A4)`` (A4 = 69, C4 = 60), the note is the nearest
    integer ``k`` to ``m``, its octave ``k // 12 - 1`` and the offset ``100 (m - k)``.
    """
    f = _positive_scalar("freq_hz", freq_hz, " Hz")
    ref = _positive_scalar("a4_hz", a4_hz, " Hz")
    m = 69.0 + 12.0 * math.log2(f / ref)
    k = math.floor(m + 0.5)
    cents = math.floor(100.0 * (m - k) + 0.5)
    if cents == 50:  # rounding pushed the offset onto the next note
        k, cents = k + 1, -50
    return f"{_NOTE_NAMES[k % 12]}{k // 12 - 1} {cents:+d} c"


def listening_room_rt_target(volume_m3):
    """Nominal reverberation time for a listening room of volume ``volume_m3``.

    Parameters
    ----------
    volume_m3 : float or array_like
        Room volume in m^3, > 0.

    Returns
    -------
    rt60_s : float or ndarray
        ``0.25 (V / 100 m^3)**(1/3)`` seconds.

    Notes
    -----
    The recommendation asks for the mean over 200 Hz-4 kHz to lie within about
    +-0.05 s of this value. A reference figure, not a requirement of roommodes.

    References
    ----------
    EBU Tech 3276; ITU-R BS.1116 (recalled from memory; corroborated by a
    secondary source).
    """
    v = _positive_array("volume_m3", volume_m3, " m^3")
    return _as_output(0.25 * np.cbrt(v / 100.0))
