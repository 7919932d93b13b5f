"""Pink noise for level measurements and fractional-octave band levels of a recording.

Level convention (used throughout :mod:`roommodes.measure`): a level in dBFS is
relative to the rms of a sine whose peak reaches digital full scale (amplitude 1),
so a full-scale sine reads 0 dBFS and a sine of amplitude ``a`` reads
``20 log10(a)`` dBFS. This is the convention of AES17 (memory; AES17-2020, "AES
standard method for digital audio engineering - Measurement of digital audio
equipment", definition of "full scale").

Band centres are the base-10 exact mid-band frequencies of IEC 61260-1:2014,
``f_m = 1000 * G**(x / b)`` (``b`` odd) or ``1000 * G**((2x + 1) / (2b))`` (``b``
even) with ``G = 10**0.3``, band edges ``f_m * G**(+-1 / (2 b))``. Nominal labels
for octave and one-third-octave bands are the ISO 266 preferred numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..dsp.bands import OCTAVE_RATIO_G, band_centres

__all__ = [
    "OCTAVE_RATIO_G",
    "BandLevels",
    "band_centres",
    "band_levels",
    "crest_factor_db",
    "level_dbfs",
    "pink_noise",
]


def _sps():
    from scipy import signal  # on first use, not at import: scipy.signal takes about a second to load

    return signal


_SINE_RMS = 1.0 / np.sqrt(2.0)


def level_dbfs(x):
    """Rms level of a signal in dBFS (a full-scale sine reads 0 dBFS).

    Parameters
    ----------
    x : array_like
        Samples in digital full-scale units (-1..1).

    Returns
    -------
    level_db : float
        ``10 log10(2 mean(x**2))``; ``-inf`` for an all-zero signal.
    """
    x = np.asarray(x, dtype=float)
    ms = float(np.mean(x**2)) if x.size else 0.0
    with np.errstate(divide="ignore"):
        return float(10.0 * np.log10(2.0 * ms))


def crest_factor_db(x):
    """Peak-to-rms ratio ``20 log10(max|x| / rms(x))`` in dB (a sine has 3.01 dB)."""
    x = np.asarray(x, dtype=float)
    rms = np.sqrt(np.mean(x**2))
    if rms == 0:
        raise ValueError("crest factor of an all-zero signal is undefined")
    return float(20.0 * np.log10(np.max(np.abs(x)) / rms))


@dataclass(frozen=True)
class BandLevels:
    """Fractional-octave band levels of a signal.

    Attributes
    ----------
    center_hz, nominal_hz, lower_hz, upper_hz : ndarray
        Exact IEC 61260-1 centres, ISO 266 labels and band edges, in Hz.
    level_db : ndarray
        Band level in dBFS (a full-scale sine in the band reads 0 dB), energy-averaged
        over the analysed part of the signal.
    fraction : int
        ``b`` of the 1/b-octave bands.
    averaging_s : ndarray
        Length of signal averaged in each band (the filter's settling time is skipped).
    """

    center_hz: np.ndarray
    nominal_hz: np.ndarray
    lower_hz: np.ndarray
    upper_hz: np.ndarray
    level_db: np.ndarray
    fraction: int
    averaging_s: np.ndarray


def band_levels(x, fs_hz, fraction=3, f_low_hz=20.0, f_high_hz=20000.0, order=3):
    """Fractional-octave band levels of a recording, averaged over its length.

    Parameters
    ----------
    x : array_like, shape (n,)
        Mono signal in full-scale units.
    fs_hz : float
        Sample rate in Hz, 1000..768000.
    fraction : int
        ``b`` of the 1/b-octave bands (1, 2, 3, 6, 12 or 24); 3 for one-third octaves.
    f_low_hz, f_high_hz : float
        Range of band centres (see :func:`band_centres`). Bands whose upper edge is at or
        above the Nyquist frequency are dropped.
    order : int
        Order of the Butterworth low-pass prototype, 2..8 (a band-pass of twice that
        order); 3 by default.

    Returns
    -------
    BandLevels
        Centres, labels, edges and levels in dBFS.

    Notes
    -----
    Each band is a digital Butterworth band-pass (``scipy.signal.butter`` in
    second-order sections, band edges pre-warped so the digital response is -3.01 dB
    exactly at the IEC band edges). A third-order prototype is a common choice for
    filters meant to meet the IEC 61260-1 class-1 attenuation limits (common
    practice; the limits themselves are not checked here). The band level is
    ``10 log10(2 mean(y**2))`` of the filter output ``y`` after skipping the first
    ``4 / bandwidth`` seconds (the filter's settling time; at most half the signal).

    References
    ----------
    .. [1] IEC 61260-1:2014, Electroacoustics - Octave-band and fractional-octave-band
       filters - Part 1: Specifications.
    .. [2] S. Butterworth, "On the theory of filter amplifiers", Wireless Engineer
       7:536-541, 1930.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 1 or x.size < 2:
        raise ValueError(f"signal must be a 1-D array of at least 2 samples, got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError("signal contains NaN or infinite samples")
    fs_hz = float(fs_hz)
    if not 1000 <= fs_hz <= 768000:
        raise ValueError(f"fs_hz must be 1000..768000 Hz, got {fs_hz:g}")
    if int(order) != order or not 2 <= order <= 8:
        raise ValueError(f"order must be a whole number 2..8, got {order!r}")
    fm, nominal, lo, hi = band_centres(fraction, f_low_hz, f_high_hz)
    ok = hi < fs_hz / 2
    if not np.any(ok):
        raise ValueError(
            f"no band between {f_low_hz:g} and {f_high_hz:g} Hz fits below the Nyquist "
            f"frequency ({fs_hz / 2:g} Hz)"
        )
    fm, nominal, lo, hi = fm[ok], nominal[ok], lo[ok], hi[ok]
    levels = np.empty(fm.size)
    avg_s = np.empty(fm.size)
    for i, (fl, fu) in enumerate(zip(lo, hi)):
        sos = _sps().butter(int(order), [fl, fu], btype="bandpass", fs=fs_hz, output="sos")
        y = _sps().sosfilt(sos, x)
        skip = min(int(np.ceil(4.0 / (fu - fl) * fs_hz)), x.size // 2)
        seg = y[skip:]
        levels[i] = level_dbfs(seg)
        avg_s[i] = seg.size / fs_hz
    return BandLevels(fm, nominal, lo, hi, levels, int(fraction), avg_s)


def _half_hann(n):
    """Rising half of a Hann window, ``n`` samples from 0 toward 1."""
    if n <= 0:
        return np.ones(0)
    return 0.5 - 0.5 * np.cos(np.pi * (np.arange(n) + 0.5) / n)


def pink_noise(
    fs_hz=48000,
    duration_s=30.0,
    level_dbfs_rms=-20.0,
    f_low_hz=20.0,
    f_high_hz=20000.0,
    max_crest_db=12.0,
    fade_s=0.1,
    seed=0,
):
    """Band-limited pink noise with a limited crest factor, deterministic for a seed.

    Parameters
    ----------
    fs_hz : int
        Sample rate in Hz, 8000..384000.
    duration_s : float
        Length in seconds, 1..3600.
    level_dbfs_rms : float
        Rms level in dBFS (a full-scale sine is 0 dBFS), -80..-1; default -20. The peak,
        ``level_dbfs_rms - 3.01 + max_crest_db`` dB re full scale, must stay at or below
        -1 dB re full scale.
    f_low_hz, f_high_hz : float
        Pass band in Hz, ``1 / duration_s <= f_low_hz < f_high_hz < fs_hz / 2``.
    max_crest_db : float
        Largest allowed peak-to-rms ratio, 6..20 dB (Gaussian noise of this length
        would have about 13-15 dB); default 12 dB.
    fade_s : float
        Raised-cosine fade-in and fade-out length in seconds, 0..duration/4.
    seed : int
        Seed of the random phases; the same seed gives the same samples.

    Returns
    -------
    x : ndarray, shape (round(duration_s * fs_hz),)
        The noise in full-scale units.

    Notes
    -----
    The noise is a periodic random-phase multisine: every DFT bin ``k`` with
    ``f_low <= f_k <= f_high`` gets magnitude ``f_k**(-1/2)`` (power falling 3 dB per
    octave, equal power in every fractional-octave band) and a uniformly random
    phase; the other bins are zero, so the band limits are exact. The crest factor is
    then lowered by alternately clipping in time and restoring the magnitude
    spectrum, keeping the new phases (Van der Ouderaa, Schoukens & Renneboog 1988).
    Rms is set over the whole period, before the fades.

    References
    ----------
    .. [1] E. Van der Ouderaa, J. Schoukens, J. Renneboog, "Peak factor minimization
       using a time-frequency domain swapping algorithm", IEEE Trans. Instrum. Meas.
       37(1):145-147, 1988 (memory).
    """
    fs_hz = int(fs_hz) if float(fs_hz) == int(fs_hz) else fs_hz
    if not isinstance(fs_hz, int) or not 8000 <= fs_hz <= 384000:
        raise ValueError(f"fs_hz must be a whole number 8000..384000 Hz, got {fs_hz!r}")
    duration_s = float(duration_s)
    if not 1.0 <= duration_s <= 3600.0:
        raise ValueError(f"duration_s must be 1..3600 s, got {duration_s:g}")
    f_low_hz, f_high_hz = float(f_low_hz), float(f_high_hz)
    if not (1.0 / duration_s <= f_low_hz < f_high_hz < fs_hz / 2):
        raise ValueError(
            f"band must satisfy {1 / duration_s:g} Hz <= f_low_hz < f_high_hz < {fs_hz / 2:g} Hz, "
            f"got {f_low_hz:g}..{f_high_hz:g} Hz"
        )
    max_crest_db = float(max_crest_db)
    if not 6.0 <= max_crest_db <= 20.0:
        raise ValueError(f"max_crest_db must be 6..20 dB, got {max_crest_db:g}")
    level_dbfs_rms = float(level_dbfs_rms)
    peak_db = level_dbfs_rms + 20 * np.log10(_SINE_RMS) + max_crest_db
    if not -80.0 <= level_dbfs_rms <= -1.0 or peak_db > -1.0 + 1e-9:
        raise ValueError(
            f"level_dbfs_rms must be -80..-1 dBFS with peaks at or below -1 dB full scale; "
            f"{level_dbfs_rms:g} dBFS rms with a crest factor up to {max_crest_db:g} dB peaks at "
            f"{peak_db:.1f} dB (lower the level or the crest factor)"
        )
    n = round(duration_s * fs_hz)
    fade_s = float(fade_s)
    if not 0.0 <= fade_s <= duration_s / 4:
        raise ValueError(
            f"fade_s must be 0..{duration_s / 4:g} s (a quarter of the length), got {fade_s:g}")

    rng = np.random.default_rng(seed)
    f = np.fft.rfftfreq(n, 1.0 / fs_hz)
    band = (f >= f_low_hz) & (f <= f_high_hz)
    mag = np.zeros(f.size)
    mag[band] = f[band] ** -0.5
    spec = mag * np.exp(2j * np.pi * rng.random(f.size))
    x = np.fft.irfft(spec, n)
    rms = np.sqrt(np.mean(x**2))
    target = 10 ** (max_crest_db / 20)
    # Clip-and-restore iterations; clip a little below the target so that the
    # magnitude restoration, which regrows the peaks slightly, lands under it.
    clip_at = target * 0.9
    for _ in range(200):
        if np.max(np.abs(x)) <= target * rms:
            break
        xc = np.clip(x, -clip_at * rms, clip_at * rms)
        ph = np.angle(np.fft.rfft(xc))
        x = np.fft.irfft(mag * np.exp(1j * ph), n)
        rms = np.sqrt(np.mean(x**2))
        clip_at *= 0.99
    if np.max(np.abs(x)) > target * rms * (1 + 1e-12):
        raise RuntimeError(  # pragma: no cover - the iteration converges for these ranges
            f"could not bring the crest factor below {max_crest_db:g} dB"
        )
    x *= 10 ** (level_dbfs_rms / 20) * _SINE_RMS / rms
    nf = round(fade_s * fs_hz)
    if nf:
        ramp = _half_hann(nf)
        x[:nf] *= ramp
        x[-nf:] *= ramp[::-1]
    return x
