"""Decay analysis of measured impulse responses.

Schroeder backward integration with noise-floor handling, early decay time and
reverberation times per octave or 1/3-octave band, decay times of single low-frequency
modes, and the cumulative spectral decay (waterfall). Pure functions over NumPy arrays:
no file I/O, no printing.

Time zero of every analysis is the onset of the impulse response (the first sample
within 20 dB of the largest, :func:`onset_index`) unless said otherwise.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..dsp.response import log_frequencies
from .signals import OCTAVE_RATIO_G, band_centres

__all__ = [
    "DecayCurve",
    "DecayRangeWarning",
    "ModalDecay",
    "NoiseEstimate",
    "ReverberationTimes",
    "SpectralDecay",
    "band_sos",
    "cumulative_spectral_decay",
    "estimate_noise_lundeby",
    "find_modal_peaks",
    "fit_decay_time",
    "modal_decay_times",
    "onset_index",
    "reverberation_times",
    "schroeder_integral",
]


def _signal():
    from scipy import signal  # on first use, not at import: scipy.signal takes about a second to load

    return signal


#: ln(10^6) / (2 pi): half-power bandwidth (Hz) times T60 (s) of one exponentially decaying mode.
MODE_BANDWIDTH_T60 = math.log(1e6) / (2 * math.pi)

#: Decay range (dB) needed above the noise for each quantity: the bottom of the
#: evaluation range at least 10 dB above the noise (ISO 3382-1:2009, secondary).
REQUIRED_RANGE_DB = {"edt": 20.0, "t20": 35.0, "t30": 45.0}

#: Evaluation ranges on the Schroeder curve, dB (ISO 3382-1:2009).
EVALUATION_RANGES_DB = {"edt": (0.0, -10.0), "t20": (-5.0, -25.0), "t30": (-5.0, -35.0)}


class DecayRangeWarning(UserWarning):
    """A decay parameter was asked for where the decay range above the noise is too small."""


@dataclass(frozen=True)
class NoiseEstimate:
    """Noise floor and crossover point of an impulse response (Lundeby et al. 1995).

    Attributes
    ----------
    crossover_s : float
        Time where the late decay line meets the noise level, s from the first sample
        (clipped to the length of the response).
    noise_power : float
        Mean square of the noise (units of the response squared).
    late_level_db : float
        Late decay line at t = 0 in dB re 1 (mean square per sample).
    late_slope_db_per_s : float
        Slope of the late decay line, dB/s (negative).
    interval_s : float
        Averaging interval used in the last iteration, s.
    iterations : int
        Iterations of the crossover search made.
    converged : bool
        Whether the crossover moved less than one interval in the last iteration and a
        decay of at least 10 dB above the noise was found.
    """

    crossover_s: float
    noise_power: float
    late_level_db: float
    late_slope_db_per_s: float
    interval_s: float
    iterations: int
    converged: bool


@dataclass(frozen=True, eq=False)
class DecayCurve:
    """A Schroeder energy decay curve.

    Attributes
    ----------
    time_s : ndarray, shape (N,)
        Sample times from the first sample of the analysed response, s.
    level_db : ndarray, shape (N,)
        Energy decay curve, dB re its value at t = 0; NaN after the truncation point.
    truncation_s : float
        Where the integration was truncated (the end for ``method="none"``), s.
    tail_energy : float
        Energy added for the truncated part (0 for ``"truncate"`` and ``"none"``).
    decay_range_db : float
        Decay range above the noise: ``10 log10(E_total / E_tail)`` at the estimated
        crossover point, with the tail energy from the late decay line (the level the
        Lundeby-compensated curve reaches at the crossover); NaN without a noise estimate.
    noise : NoiseEstimate or None
        The noise estimate used (None when ``truncate_s`` was given with ``"truncate"``).
    method : str
        ``"subtract"``, ``"lundeby"``, ``"truncate"`` or ``"none"``.
    """

    time_s: np.ndarray
    level_db: np.ndarray
    truncation_s: float
    tail_energy: float
    decay_range_db: float
    noise: NoiseEstimate | None
    method: str


@dataclass(frozen=True, eq=False)
class ReverberationTimes:
    """EDT, T20 and T30 per band.

    Attributes
    ----------
    center_hz : ndarray, shape (B,)
        Exact band centres (IEC 61260-1 base 10), Hz; NaN for the broadband result.
    nominal_hz : ndarray, shape (B,)
        ISO 266 nominal centres (31.5, 63, 125 ...); NaN for broadband.
    edt_s, t20_s, t30_s : ndarray, shape (B,)
        Decay times in s (60 dB over the fitted slope); NaN where the curve does not
        reach the evaluation range.
    edt_r, t20_r, t30_r : ndarray, shape (B,)
        Correlation coefficients of the linear fits (close to -1 for a straight decay).
    decay_range_db : ndarray, shape (B,)
        Decay range above the noise per band, dB.
    crossover_s : ndarray, shape (B,)
        Truncation point per band, s after the onset.
    edt_ok, t20_ok, t30_ok : ndarray of bool, shape (B,)
        False where the decay range is below :data:`REQUIRED_RANGE_DB` or the fit failed.
    flags : tuple of tuple of str
        Per band, plain-language warnings (range too small, filter ringing).
    filtering : str
        ``"forward"`` or ``"reverse"``.
    method : str
        Noise handling used for the Schroeder curves.
    """

    center_hz: np.ndarray
    nominal_hz: np.ndarray
    edt_s: np.ndarray
    t20_s: np.ndarray
    t30_s: np.ndarray
    edt_r: np.ndarray
    t20_r: np.ndarray
    t30_r: np.ndarray
    decay_range_db: np.ndarray
    crossover_s: np.ndarray
    edt_ok: np.ndarray
    t20_ok: np.ndarray
    t30_ok: np.ndarray
    flags: tuple = field(default=())
    filtering: str = "forward"
    method: str = "subtract"

    @property
    def curvature_percent(self):
        """``100 (T30 / T20 - 1)``: how far the decay bends (ISO 3382-2:2008, annex B)."""
        return 100.0 * (self.t30_s / self.t20_s - 1.0)


@dataclass(frozen=True, eq=False)
class ModalDecay:
    """Decay times of single low-frequency modes.

    Attributes
    ----------
    freq_hz : ndarray, shape (M,)
        Centre frequencies analysed, Hz.
    t60_s : ndarray, shape (M,)
        Decay time (60 dB) of the narrow-band envelope, s; NaN when not measurable.
    q : ndarray, shape (M,)
        Quality factor ``f / B`` with ``B = ln(10^6) / (2 pi T60)`` the half-power bandwidth.
    filter_bandwidth_hz : ndarray, shape (M,)
        -3 dB width of the analysis filter, Hz.
    decay_range_db : ndarray, shape (M,)
        Decay range above the noise in the filtered band, dB.
    r : ndarray, shape (M,)
        Correlation coefficient of the fit.
    ok : ndarray of bool, shape (M,)
    flags : tuple of tuple of str
    """

    freq_hz: np.ndarray
    t60_s: np.ndarray
    q: np.ndarray
    filter_bandwidth_hz: np.ndarray
    decay_range_db: np.ndarray
    r: np.ndarray
    ok: np.ndarray
    flags: tuple = field(default=())


@dataclass(frozen=True, eq=False)
class SpectralDecay:
    """Cumulative spectral decay: levels of successively later windowed slices.

    Attributes
    ----------
    time_s : ndarray, shape (T,)
        Start of each slice after the onset, s.
    freq_hz : ndarray, shape (F,)
        Frequencies, Hz.
    level_db : ndarray, shape (T, F)
        Level of each slice, dB re the largest level of the first slice (or re 1 when
        not normalised).
    window_s : float
        Slice length, s (frequency resolution about ``1 / window_s``).
    """

    time_s: np.ndarray
    freq_hz: np.ndarray
    level_db: np.ndarray
    window_s: float


# --------------------------------------------------------------------------- helpers


def _check_ir(ir, fs, min_samples=16):
    h = np.asarray(ir, dtype=float)
    if h.ndim != 1:
        raise ValueError(f"ir must be a 1-D array of samples, got shape {h.shape}")
    if h.size < min_samples:
        raise ValueError(f"ir must hold at least {min_samples} samples, got {h.size}")
    if not np.all(np.isfinite(h)):
        raise ValueError("ir holds NaN or infinite samples")
    if not np.any(h):
        raise ValueError("ir is all zeros")
    fs = float(fs)
    if not (math.isfinite(fs) and 1.0 <= fs <= 1e6):
        raise ValueError(f"fs (sampling rate) must be 1 Hz..1 MHz, got {fs!r}")
    return h, fs


def onset_index(ir, threshold_db=-20.0):
    """Index of the first sample whose square is within ``threshold_db`` of the largest.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response.
    threshold_db : float
        Negative, -60..-1 dB; -20 dB by default.

    Returns
    -------
    int

    Notes
    -----
    The start of the impulse response is where the signal first rises significantly above
    the background, at least 20 dB below the maximum (ISO 3382-1:2009, annex A;
    secondary).
    """
    h = np.asarray(ir, dtype=float)
    if not -60.0 <= threshold_db <= -1.0:
        raise ValueError(f"threshold_db must be -60..-1 dB, got {threshold_db!r}")
    p = h * h
    peak = p.max()
    if not peak > 0:
        raise ValueError("ir is all zeros")
    return int(np.argmax(p >= peak * 10 ** (threshold_db / 10)))


def _block_levels(p, n_int, floor):
    nblk = p.size // n_int
    e = p[: nblk * n_int].reshape(nblk, n_int).mean(axis=1)
    t_samples = (np.arange(nblk) + 0.5) * n_int
    return t_samples, 10 * np.log10(np.maximum(e, floor))


def _line_fit(x, y):
    """Least-squares line ``y = a + b x``; returns (a, b, r)."""
    xm, ym = x.mean(), y.mean()
    dx, dy = x - xm, y - ym
    sxx, syy = float(dx @ dx), float(dy @ dy)
    if sxx == 0:
        return float("nan"), float("nan"), float("nan")
    b = float(dx @ dy) / sxx
    r = float(dx @ dy) / math.sqrt(sxx * syy) if syy > 0 else float("nan")
    return ym - b * xm, b, r


def estimate_noise_lundeby(ir, fs, *, initial_interval_s=0.010, intervals_per_10db=5,
                           noise_margin_db=5.0, late_range_db=20.0, max_iterations=10):
    """Noise floor and crossover point by the iterative method of Lundeby et al. (1995).

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response (broadband or one band), starting at or before its onset.
    fs : float
        Sampling rate, Hz.
    initial_interval_s : float
        First averaging interval, 1-100 ms (the paper suggests 10-50 ms).
    intervals_per_10db : int
        Averaging intervals per 10 dB of decay after the first pass, 3..10.
    noise_margin_db : float
        How far above the noise the decay fits stop, and how far below the crossover the
        noise is measured, 1-20 dB (the paper: 5-10 dB).
    late_range_db : float
        Decay range used for the late-decay fit, 5-40 dB (the paper: 10-20 dB).
    max_iterations : int
        Cap on the crossover iterations, 1..50.

    Returns
    -------
    NoiseEstimate

    Notes
    -----
    Steps, all on the squared response ``p = h^2``:

    1. Average ``p`` over intervals of ``initial_interval_s`` and take dB.
    2. Noise: mean of ``p`` over the last 10 % of the response.
    3. Fit a line to the interval levels from the largest one down to the last interval
       more than ``noise_margin_db`` + 5 dB above the noise.
    4. Crossover: where that line meets the noise level.
    5. New interval length: ``intervals_per_10db`` intervals per 10 dB of the fitted
       decay; recompute the interval levels.
    6. Noise: mean of ``p`` from ``noise_margin_db`` of decay after the crossover to
       the end, but over at least the last 10 % of the response.
    7. Late decay: fit a line to the intervals between ``noise_margin_db`` and
       ``noise_margin_db + late_range_db`` above the noise, after subtracting the noise
       power from each interval's mean (our refinement: without it the noise flattens
       the bottom of the range and the slope comes out about 6 % shallow).
    8. New crossover where the late line meets the noise; repeat 6-8 until it moves by
       less than one interval.

    References
    ----------
    A. Lundeby, T. E. Vigran, H. Bietz, M. Vorlaender, "Uncertainties of measurements in
    room acoustics", Acustica 81 (1995) 344-355, sec. 4 (method as recalled; the steps
    above are the ones implemented here).
    """
    h, fs = _check_ir(ir, fs)
    if not 0.001 <= initial_interval_s <= 0.1:
        raise ValueError(f"initial_interval_s must be 1-100 ms, got {initial_interval_s!r}")
    if not 3 <= intervals_per_10db <= 10:
        raise ValueError(f"intervals_per_10db must be 3..10, got {intervals_per_10db!r}")
    if not 1.0 <= noise_margin_db <= 20.0:
        raise ValueError(f"noise_margin_db must be 1-20 dB, got {noise_margin_db!r}")
    if not 5.0 <= late_range_db <= 40.0:
        raise ValueError(f"late_range_db must be 5-40 dB, got {late_range_db!r}")
    if not 1 <= int(max_iterations) <= 50:
        raise ValueError(f"max_iterations must be 1..50, got {max_iterations!r}")
    p = h * h
    n = p.size
    floor = p.max() * 1e-30  # 300 dB below the peak stands in for silence
    t_end = n / fs

    def noise_from(i_start):
        i_start = int(min(max(i_start, 0), int(0.9 * n)))
        return max(float(p[i_start:].mean()), floor)

    # 1-2
    n_int = max(1, round(initial_interval_s * fs))
    n_int = min(n_int, max(1, n // 10))
    t_blk, lev = _block_levels(p, n_int, floor)
    noise = noise_from(int(0.9 * n))
    noise_db = 10 * math.log10(noise)
    imax = int(np.argmax(lev))
    # 3
    above = lev[imax:] > noise_db + noise_margin_db + 5.0
    stop = imax + (int(np.argmin(above)) if not above.all() else above.size)
    if stop - imax < 2:
        return NoiseEstimate(t_end, noise, float(lev[imax]), float("nan"), n_int / fs, 0, False)
    a, b, _ = _line_fit(t_blk[imax:stop] / fs, lev[imax:stop])
    if not b < 0:
        return NoiseEstimate(t_end, noise, float(lev[imax]), float("nan"), n_int / fs, 0, False)
    # 4
    tc = (noise_db - a) / b
    converged = False
    it = 0
    for it in range(1, int(max_iterations) + 1):  # noqa: B007 (the count is reported after the loop)
        # 5
        n_int = max(1, round(10.0 / (-b) / intervals_per_10db * fs))
        n_int = min(n_int, max(1, n // 10))
        t_blk, lev = _block_levels(p, n_int, floor)
        # 6
        t_noise = tc + noise_margin_db / (-b)
        noise = noise_from(round(t_noise * fs))
        noise_db = 10 * math.log10(noise)
        # 7
        imax = int(np.argmax(lev))
        seg = lev[imax:]
        lo_db = noise_db + noise_margin_db
        hi_db = lo_db + late_range_db
        below_lo = np.flatnonzero(seg < lo_db)
        end = imax + (int(below_lo[0]) if below_lo.size else seg.size)
        start_rel = np.flatnonzero(seg[: end - imax] <= hi_db)
        start = imax + (int(start_rel[0]) if start_rel.size else end - imax)
        if end - start < 2:
            # less than two intervals between the margin and the top: use what decays
            start = imax
        if end - start < 2:
            break
        # fit the decay with the noise power taken out of each interval, so the noise
        # near the bottom of the range does not flatten the line
        sub = 10 * np.log10(np.maximum(10 ** (lev[start:end] / 10) - noise, floor))
        a_new, b_new, _ = _line_fit(t_blk[start:end] / fs, sub)
        if not b_new < 0:
            break
        a, b = a_new, b_new
        # 8
        tc_new = (noise_db - a) / b
        moved = abs(tc_new - tc)
        tc = tc_new
        if moved < n_int / fs:
            converged = True
            break
    return NoiseEstimate(float(min(max(tc, 0.0), t_end)), float(noise), float(a), float(b),
                         n_int / fs, it, converged)


def schroeder_integral(ir, fs, *, method="subtract", truncate_s=None, noise=None):
    """Energy decay curve by Schroeder backward integration, with noise handling.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response from its onset (earlier samples only add their energy).
    fs : float
        Sampling rate, Hz.
    method : {"subtract", "lundeby", "truncate", "none"}
        ``"lundeby"``: integrate up to the crossover point of
        :func:`estimate_noise_lundeby` and add the energy of its late decay line beyond
        it (Lundeby et al. 1995). ``"subtract"`` (default): the same, and the estimated
        noise power is subtracted from every squared sample before integrating.
        ``"truncate"``: truncation at the crossover, no added tail. ``"none"``:
        integrate the whole response, noise and all.
    truncate_s : float, optional
        Truncate here instead of at the estimated crossover (s from the first sample).
    noise : NoiseEstimate, optional
        A noise estimate to reuse instead of computing one.

    Returns
    -------
    DecayCurve

    Notes
    -----
    ``E(t) = int_t^{t_c} (h^2(tau) - N) dtau + C`` (Schroeder 1965, eq. 1, truncated at
    ``t_c``; ``N`` the noise power, 0 except for ``"subtract"``), evaluated as a reversed
    cumulative sum, ``level_db = 10 log10(E(t) / E(0))``; points where ``E <= 0`` are
    NaN. With a late decay line ``L(t) = a + b t`` (dB, mean square per sample) the tail
    correction is the geometric sum ``C = sum_{n >= n_c} 10^{(a + b n / fs)/10}``
    (Lundeby et al. 1995). Subtracting the noise power before integrating follows
    W. T. Chu, "Comparison of reverberation measurements using Schroeder's impulse
    method and decay-curve averaging method", J. Acoust. Soc. Am. 63 (1978) 1444
    (memory). On an exponential decay with its noise floor 50 dB down, truncation and
    tail alone leave T30 about 1 % long (the noise before ``t_c`` lifts the end of the
    curve); with the subtraction the error is about 0.1 %.

    References
    ----------
    M. R. Schroeder, "New method of measuring reverberation time", J. Acoust. Soc. Am. 37
    (1965) 409-412. A. Lundeby et al., Acustica 81 (1995) 344-355.
    """
    h, fs = _check_ir(ir, fs)
    if method not in ("subtract", "lundeby", "truncate", "none"):
        raise ValueError(f"method must be 'subtract', 'lundeby', 'truncate' or 'none', "
                         f"got {method!r}")
    n = h.size
    p = h * h
    if noise is None and (method != "truncate" or truncate_s is None):
        noise = estimate_noise_lundeby(h, fs)
    if method == "none":
        if truncate_s is not None:
            raise ValueError("truncate_s needs method='truncate' or 'lundeby', not 'none'")
        n_c, tail = n, 0.0
    else:
        t_c = noise.crossover_s if truncate_s is None else float(truncate_s)
        if not (math.isfinite(t_c) and 0 < t_c <= n / fs):
            raise ValueError(f"truncate_s must be within the response (0..{n / fs:g} s), "
                             f"got {t_c!r}")
        n_c = max(2, min(n, round(t_c * fs)))
        tail = _tail_energy(noise, n_c, fs) if method in ("lundeby", "subtract") else 0.0
    subtract = (method == "subtract" and noise is not None
                and np.isfinite(noise.late_slope_db_per_s))
    pc = p[:n_c] - noise.noise_power if subtract else p[:n_c]
    energy = np.full(n, np.nan)
    energy[:n_c] = np.cumsum(pc[::-1])[::-1] + tail
    total = energy[0]
    if not total > 0:
        raise ValueError("ir has no energy before the truncation point")
    energy[energy <= 0] = np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        level = 10 * np.log10(energy / total)
    if noise is not None:
        # decay range at the estimated crossover, whatever truncation the curve used
        n_l = max(2, min(n, round(noise.crossover_s * fs)))
        tail_l = _tail_energy(noise, n_l, fs)
        rng = float(10 * math.log10((p[:n_l].sum() + tail_l) / tail_l)) if tail_l > 0 \
            else float("nan")
    else:
        rng = float("nan")
    return DecayCurve(np.arange(n) / fs, level, n_c / fs, float(tail), rng, noise, method)


def _tail_energy(noise, n_c, fs):
    """Energy of the late decay line from sample ``n_c`` on (geometric sum)."""
    if noise is None or not np.isfinite(noise.late_slope_db_per_s):
        return 0.0
    a, b = noise.late_level_db, noise.late_slope_db_per_s
    ratio = 10 ** (b / (10 * fs))
    return float(10 ** ((a + b * n_c / fs) / 10) / (1 - ratio))


def fit_decay_time(curve, fs, range_db):
    """Decay time from a linear fit to an energy decay curve over a level range.

    Parameters
    ----------
    curve : DecayCurve or array_like
        The Schroeder curve (``level_db``, dB re its start).
    fs : float
        Sampling rate, Hz.
    range_db : tuple of float
        ``(upper, lower)`` evaluation limits in dB, ``0 >= upper > lower``; e.g.
        ``(-5, -35)`` for T30.

    Returns
    -------
    t_s : float
        ``-60 / slope`` in s, NaN when the curve does not reach ``lower``.
    r : float
        Correlation coefficient of the fit.

    Notes
    -----
    Least-squares line through every sample from the first one at or below ``upper``
    to the first one at or below ``lower`` (ISO 3382-1:2009, sec. 5.3.3; secondary).
    """
    level = np.asarray(curve.level_db if isinstance(curve, DecayCurve) else curve, float)
    hi, lo = float(range_db[0]), float(range_db[1])
    if not 0.0 >= hi > lo:
        raise ValueError(
            f"range_db must be (upper, lower) with 0 >= upper > lower, got {range_db!r}")
    valid = np.isfinite(level)
    i_hi = np.flatnonzero(valid & (level <= hi + 1e-9))
    i_lo = np.flatnonzero(valid & (level <= lo))
    if i_hi.size == 0 or i_lo.size == 0:
        return float("nan"), float("nan")
    i0, i1 = int(i_hi[0]), int(i_lo[0])
    if i1 - i0 < 2:
        return float("nan"), float("nan")
    x = np.arange(i0, i1 + 1) / float(fs)
    _, b, r = _line_fit(x, level[i0: i1 + 1])
    if not b < 0:
        return float("nan"), r
    return -60.0 / b, r


# --------------------------------------------------------------------------- bands


def band_sos(center_hz, fs, fraction=1, order=3):
    """Butterworth band-pass filter for one octave or 1/3-octave band, as SOS.

    Parameters
    ----------
    center_hz : float
        Exact band centre, Hz.
    fs : float
        Sampling rate, Hz; the upper edge must lie below fs / 2.
    fraction : float
        Bandwidth 1/fraction octave (1 or 3 for standard bands).
    order : int
        Butterworth order per band edge, 1..8 (the band-pass has twice as many poles).

    Returns
    -------
    ndarray, shape (order, 6)
        ``scipy.signal.butter(order, [f_lo, f_hi], "bandpass", fs=fs, output="sos")`` with
        base-10 edges ``f_m G^(-1/(2b))`` and ``f_m G^(1/(2b))``, ``G = 10^0.3``; -3.01 dB
        at both edges.

    Notes
    -----
    Order 3 per edge (6 poles) is common practice for octave and 1/3-octave analysis
    filters; it is not verified here against the IEC 61260-1 class 1 tolerance mask.
    """
    fc = float(center_hz)
    b = float(fraction)
    if not (math.isfinite(b) and 0.5 <= b <= 96):
        raise ValueError(f"fraction must be 0.5..96, got {fraction!r}")
    if not 1 <= int(order) <= 8:
        raise ValueError(f"order must be 1..8, got {order!r}")
    half = OCTAVE_RATIO_G ** (1 / (2 * b))
    lo, hi = fc / half, fc * half
    if not (fc > 0 and hi < fs / 2):
        raise ValueError(f"band {fc:g} Hz (edges {lo:.4g}-{hi:.4g} Hz) must lie below "
                         f"fs / 2 = {fs / 2:g} Hz")
    return _signal().butter(int(order), [lo, hi], btype="bandpass", fs=fs, output="sos")


def _filter(sos, h, reverse):
    if reverse:
        return _signal().sosfilt(sos, h[::-1])[::-1]
    return _signal().sosfilt(sos, h)


# --------------------------------------------------------------------------- reverberation


def reverberation_times(ir, fs, *, bands="octave", freq_range_hz=(63.0, 4000.0),
                        method="subtract", filtering="forward", order=3, warn=True):
    """EDT, T20 and T30 per octave or 1/3-octave band from an impulse response.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response (room response to a unit impulse), any delay before the onset.
    fs : float
        Sampling rate, Hz.
    bands : {"octave", "third", None}
        Band set; None analyses the broadband response.
    freq_range_hz : tuple of float
        Bands whose centres lie in this range (within a quarter band;
        :func:`roommodes.measure.signals.band_centres`), Hz.
    method : {"subtract", "lundeby", "truncate", "none"}
        Noise handling of the Schroeder curves (:func:`schroeder_integral`).
    filtering : {"forward", "reverse"}
        ``"reverse"`` filters the time-reversed response and reverses the result, which
        moves the filter's own ringing before the onset (common practice for short
        low-frequency decays; Jacobsen & Rindel 1987, memory).
    order : int
        Butterworth order per band edge (:func:`band_sos`).
    warn : bool
        Emit a :class:`DecayRangeWarning` naming the bands whose range is too small.

    Returns
    -------
    ReverberationTimes

    Notes
    -----
    Each band is filtered over the whole response, cut at the broadband onset
    (:func:`onset_index`), Schroeder-integrated and fitted over the ISO 3382-1 ranges:
    EDT 0 to -10 dB, T20 -5 to -25 dB, T30 -5 to -35 dB, ``T = -60 / slope``. A value is
    flagged when the decay range above the noise is below 20 / 35 / 45 dB, and when the
    band filter may have shaped the decay: bandwidth times T20 below 16 (forward) or 4
    (reverse) (Jacobsen & Rindel 1987; memory).

    References
    ----------
    ISO 3382-1:2009, Acoustics - Measurement of room acoustic parameters - Part 1:
    Performance spaces, sec. 5.3 and annex A (secondary). M. R. Schroeder, J. Acoust. Soc.
    Am. 37 (1965) 409. A. Lundeby et al., Acustica 81 (1995) 344. F. Jacobsen and J. H.
    Rindel, "Time reversed decay measurements", J. Sound Vib. 117 (1987) 187 (memory).
    """
    h, fs = _check_ir(ir, fs, min_samples=64)
    if filtering not in ("forward", "reverse"):
        raise ValueError(f"filtering must be 'forward' or 'reverse', got {filtering!r}")
    if bands is None:
        centers = np.array([np.nan])
        nominal = np.array([np.nan])
        fraction = None
    elif bands in ("octave", "third"):
        fraction = 1 if bands == "octave" else 3
        centers, nominal, _, upper = band_centres(fraction, *freq_range_hz)
        if centers.size == 0:
            raise ValueError(f"no {bands} band lies in freq_range_hz {freq_range_hz!r}")
        too_high = upper >= fs / 2
        if too_high.any():
            raise ValueError(
                f"bands from {nominal[too_high][0]:g} Hz reach above fs / 2 = {fs / 2:g} Hz; "
                "lower the top of freq_range_hz")
    else:
        raise ValueError(f"bands must be 'octave', 'third' or None, got {bands!r}")
    n0 = onset_index(h)
    nb = centers.size
    out = {k: np.full(nb, np.nan) for k in
           ("edt_s", "t20_s", "t30_s", "edt_r", "t20_r", "t30_r", "decay_range_db",
            "crossover_s")}
    ok = {k: np.zeros(nb, bool) for k in ("edt", "t20", "t30")}
    flags = []
    for i in range(nb):
        notes = []
        if fraction is None:
            hb = h[n0:]
            bw = None
        else:
            sos = band_sos(centers[i], fs, fraction, order)
            hb = _filter(sos, h, filtering == "reverse")[n0:]
            half = OCTAVE_RATIO_G ** (1 / (2 * fraction))
            bw = centers[i] * (half - 1 / half)
        label = "broadband" if fraction is None else f"{nominal[i]:g} Hz"
        if hb.size < 64 or not np.any(hb):
            flags.append((f"{label}: no signal in this band",))
            continue
        curve = schroeder_integral(hb, fs, method=method)
        out["decay_range_db"][i] = curve.decay_range_db
        out["crossover_s"][i] = curve.truncation_s
        for key in ("edt", "t20", "t30"):
            t, r = fit_decay_time(curve, fs, EVALUATION_RANGES_DB[key])
            out[f"{key}_s"][i], out[f"{key}_r"][i] = t, r
            need = REQUIRED_RANGE_DB[key]
            enough = np.isfinite(curve.decay_range_db) and curve.decay_range_db >= need
            ok[key][i] = bool(np.isfinite(t) and enough)
            if not enough:
                notes.append(f"{label}: {key.upper()} needs {need:g} dB of decay above the "
                             f"noise, only {curve.decay_range_db:.1f} dB available")
            elif not np.isfinite(t):
                notes.append(f"{label}: the decay curve does not reach "
                             f"{EVALUATION_RANGES_DB[key][1]:g} dB; no {key.upper()}")
        t_ref = out["t20_s"][i] if np.isfinite(out["t20_s"][i]) else out["edt_s"][i]
        if bw is not None and np.isfinite(t_ref):
            limit = 16.0 if filtering == "forward" else 4.0
            if bw * t_ref < limit:
                notes.append(f"{label}: bandwidth x decay time = {bw * t_ref:.1f} < {limit:g}: "
                             "the band filter may distort the decay"
                             + ("; time-reversed filtering reduces that (decay --filtering reverse)" if filtering == "forward"
                                else ""))
        flags.append(tuple(notes))
    result = ReverberationTimes(
        centers, nominal, out["edt_s"], out["t20_s"], out["t30_s"], out["edt_r"],
        out["t20_r"], out["t30_r"], out["decay_range_db"], out["crossover_s"], ok["edt"],
        ok["t20"], ok["t30"], tuple(flags), filtering, method)
    if warn:
        bad = [m for f in flags for m in f if "needs" in m]
        if bad:
            warnings.warn(DecayRangeWarning("decay range too small: " + "; ".join(bad)),
                          stacklevel=2)
    return result


# --------------------------------------------------------------------------- modes


def find_modal_peaks(ir, fs, freq_range_hz=(15.0, 200.0), count=5, min_prominence_db=3.0):
    """The strongest peaks of the magnitude spectrum of an impulse response.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response.
    fs : float
        Sampling rate, Hz.
    freq_range_hz : tuple of float
        (low, high) search range, Hz.
    count : int
        How many peaks to return at most, 1..100.
    min_prominence_db : float
        Smallest prominence of a peak, dB (``scipy.signal.find_peaks``).

    Returns
    -------
    freq_hz, level_db : ndarray
        Peak frequencies (parabolic interpolation on the dB spectrum, zero-padded to
        0.1 Hz bins or finer) and levels, strongest first.
    """
    h, fs = _check_ir(ir, fs)
    lo, hi = float(freq_range_hz[0]), float(freq_range_hz[1])
    if not (0 < lo < hi < fs / 2):
        raise ValueError(f"freq_range_hz must satisfy 0 < low < high < fs/2, got {freq_range_hz!r}")
    if not 1 <= int(count) <= 100:
        raise ValueError(f"count must be 1..100, got {count!r}")
    nfft = 1 << math.ceil(math.log2(max(h.size, fs / 0.1)))
    spec = np.abs(np.fft.rfft(h, nfft))
    level = 20 * np.log10(np.maximum(spec, spec.max() * 1e-15))
    df = fs / nfft
    i_lo, i_hi = math.floor(lo / df), math.ceil(hi / df) + 1
    seg = level[i_lo:i_hi]
    peaks, _ = _signal().find_peaks(seg, prominence=min_prominence_db)
    peaks = peaks[(peaks > 0) & (peaks < seg.size - 1)]
    if peaks.size == 0:
        return np.array([]), np.array([])
    peaks = peaks[np.argsort(seg[peaks])[::-1][: int(count)]]
    y0, y1, y2 = seg[peaks - 1], seg[peaks], seg[peaks + 1]
    den = y0 - 2 * y1 + y2
    delta = np.where(den != 0, 0.5 * (y0 - y2) / np.where(den != 0, den, 1), 0.0)
    freq = (i_lo + peaks + delta) * df
    lev = y1 - 0.25 * (y0 - y2) * delta
    return freq, lev


def modal_decay_times(ir, fs, freqs_hz=None, *, bandwidth_hz=None, fraction=6.0,
                      freq_range_hz=(15.0, 200.0), count=5, order=2, filtering="reverse",
                      fit_range_db=(-5.0, -25.0)):
    """Decay times of single low-frequency modes from narrow-band envelopes.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response.
    fs : float
        Sampling rate, Hz.
    freqs_hz : array_like, optional
        Mode frequencies to analyse, Hz. Default: the ``count`` strongest spectral peaks
        in ``freq_range_hz`` (:func:`find_modal_peaks`).
    bandwidth_hz : float, optional
        -3 dB width of the analysis filter, Hz (edges ``f -+ B/2``). Overrides ``fraction``.
    fraction : float
        Otherwise a 1/fraction-octave filter around each frequency, 1..48 (1/6 octave by
        default: 5.2 Hz at 45 Hz).
    freq_range_hz, count
        Peak search when ``freqs_hz`` is not given.
    order : int
        Butterworth order per band edge, 1..8.
    filtering : {"reverse", "forward"}
        ``"reverse"`` (default) filters the time-reversed response, so the filter's own
        ringing does not lengthen decays shorter than it (Jacobsen & Rindel 1987, memory).
    fit_range_db : tuple of float
        Evaluation range on the band's Schroeder curve, dB.

    Returns
    -------
    ModalDecay

    Notes
    -----
    A single mode rings as ``p(t) ~ exp(-delta t) cos(w_d t + phi)`` with
    ``delta = 3 ln10 / T60 = 6.908 / T60`` (Kuttruff, Room Acoustics, ch. 3; memory), so
    its squared envelope falls linearly in dB at ``-60 / T60`` dB/s and so does its
    Schroeder curve. The narrow-band response is Schroeder-integrated with the Lundeby
    noise handling (``method="subtract"``) and fitted over ``fit_range_db``. Neighbouring
    modes inside the filter beat with the analysed one and bend the curve; the fit's ``r``
    shows it. The mode's half-power bandwidth is ``B = ln(10^6) / (2 pi T60)`` (Schroeder
    1996, JASA 99(5):3240, eq. 2) and ``Q = f / B``.
    """
    h, fs = _check_ir(ir, fs, min_samples=64)
    if filtering not in ("forward", "reverse"):
        raise ValueError(f"filtering must be 'forward' or 'reverse', got {filtering!r}")
    if freqs_hz is None:
        freqs, _ = find_modal_peaks(h, fs, freq_range_hz, count)
    else:
        freqs = np.atleast_1d(np.asarray(freqs_hz, dtype=float))
    if (freqs.ndim != 1 or not np.all(np.isfinite(freqs)) or np.any(freqs <= 0)
            or np.any(freqs >= fs / 2)):
        raise ValueError(f"freqs_hz must be frequencies in 0..fs/2 = {fs / 2:g} Hz")
    if bandwidth_hz is not None and not (np.isfinite(bandwidth_hz) and bandwidth_hz > 0):
        raise ValueError(f"bandwidth_hz must be > 0, got {bandwidth_hz!r}")
    if bandwidth_hz is None and not 1 <= fraction <= 48:
        raise ValueError(f"fraction must be 1..48, got {fraction!r}")
    if not 1 <= int(order) <= 8:
        raise ValueError(f"order must be 1..8, got {order!r}")
    hi_db, lo_db = float(fit_range_db[0]), float(fit_range_db[1])
    if not 0 >= hi_db > lo_db >= -60:
        raise ValueError(f"fit_range_db must be (upper, lower), 0 >= upper > lower >= -60, "
                         f"got {fit_range_db!r}")
    n0 = onset_index(h)
    m = freqs.size
    t60 = np.full(m, np.nan)
    bw = np.full(m, np.nan)
    rng = np.full(m, np.nan)
    rr = np.full(m, np.nan)
    ok = np.zeros(m, bool)
    flags = []
    need = -lo_db + 10.0
    for i, f0 in enumerate(freqs):
        if bandwidth_hz is not None:
            lo, hi = f0 - bandwidth_hz / 2, f0 + bandwidth_hz / 2
        else:
            half = 2 ** (1 / (2 * fraction))
            lo, hi = f0 / half, f0 * half
        notes = []
        if lo <= 0 or hi >= fs / 2:
            flags.append(((f"{f0:.1f} Hz: the analysis band {lo:.1f}-{hi:.1f} Hz does not fit "
                          "between 0 and fs/2"),))
            continue
        bw[i] = hi - lo
        sos = _signal().butter(int(order), [lo, hi], btype="bandpass", fs=fs, output="sos")
        hb = _filter(sos, h, filtering == "reverse")[n0:]
        curve = schroeder_integral(hb, fs, method="subtract")
        rng[i] = curve.decay_range_db
        t60[i], rr[i] = fit_decay_time(curve, fs, (hi_db, lo_db))
        enough = np.isfinite(rng[i]) and rng[i] >= need
        ok[i] = bool(enough and np.isfinite(t60[i]))
        if not enough:
            notes.append(f"{f0:.1f} Hz: fit needs {need:g} dB of decay above the noise, "
                         f"only {rng[i]:.1f} dB available")
        if filtering == "forward" and np.isfinite(t60[i]) and bw[i] * t60[i] < 16:
            notes.append(f"{f0:.1f} Hz: bandwidth x T60 = {bw[i] * t60[i]:.1f} < 16: the "
                         "filter may distort the decay; time-reversed filtering reduces that")
        flags.append(tuple(notes))
    q = freqs * t60 / MODE_BANDWIDTH_T60
    return ModalDecay(freqs, t60, q, bw, rng, rr, ok, tuple(flags))


# --------------------------------------------------------------------------- waterfall


def cumulative_spectral_decay(ir, fs, freqs_hz=None, times_s=None, *, window_s=0.3,
                              rise_s=0.0, taper_fraction=0.5, normalize=True):
    """Cumulative spectral decay (waterfall): spectra of successively later slices.

    Parameters
    ----------
    ir : array_like, shape (N,)
        Impulse response.
    fs : float
        Sampling rate, Hz.
    freqs_hz : array_like, optional
        Frequencies, Hz, below fs/2; default 15-300 Hz at 24 points per octave.
    times_s : array_like, optional
        Slice start times after the onset, s, >= 0; default 0 to 0.5 s in 20 ms steps.
    window_s : float
        Slice length, s (frequency resolution about ``1 / window_s``), 1 ms..10 s.
    rise_s : float
        Raised-cosine fade-in at the start of each slice, s (0: abrupt start).
    taper_fraction : float
        Fraction of the slice, at its end, covered by a falling half-Hann taper, 0..1.
    normalize : bool
        Levels in dB re the largest level of the first slice (default), else re 1.

    Returns
    -------
    SpectralDecay

    Notes
    -----
    Slice ``k`` is ``x_k(n) = h(n_0 + n_k + n) w(n)``, ``0 <= n < N``, with ``n_0`` the
    onset, ``n_k = round(t_k fs)`` and ``w`` the window above; its level is
    ``20 log10 |sum_n x_k(n) exp(-j 2 pi f n / fs)|`` evaluated directly at each
    requested frequency. Berman & Fincham integrated from each start time to the end of
    the record; a slice of fixed length keeps the resolution the same in every slice.

    References
    ----------
    J. M. Berman and L. R. Fincham, "The application of digital techniques to the
    measurement of loudspeakers", J. Audio Eng. Soc. 25(6) (1977) 370 (memory).
    """
    h, fs = _check_ir(ir, fs)
    if freqs_hz is None:
        freqs = log_frequencies(15.0, min(300.0, 0.45 * fs), 24)
    else:
        freqs = np.atleast_1d(np.asarray(freqs_hz, dtype=float))
    if freqs.ndim != 1 or freqs.size == 0 or not np.all(np.isfinite(freqs)) or \
            np.any(freqs < 0) or np.any(freqs >= fs / 2):
        raise ValueError(f"freqs_hz must be frequencies in 0..fs/2 = {fs / 2:g} Hz")
    times = np.arange(0.0, 0.5 + 1e-9, 0.02) if times_s is None else \
        np.atleast_1d(np.asarray(times_s, dtype=float))
    if times.ndim != 1 or times.size == 0 or not np.all(np.isfinite(times)) or np.any(times < 0):
        raise ValueError("times_s must be one or more times >= 0 s")
    if not (math.isfinite(window_s) and 0.001 <= window_s <= 10.0):
        raise ValueError(f"window_s must be 1 ms..10 s, got {window_s!r}")
    if not (math.isfinite(rise_s) and 0.0 <= rise_s < window_s):
        raise ValueError(f"rise_s must be 0 <= rise_s < window_s, got {rise_s!r}")
    if not 0.0 <= taper_fraction <= 1.0:
        raise ValueError(f"taper_fraction must be 0..1, got {taper_fraction!r}")
    n0 = onset_index(h)
    n_win = max(2, round(window_s * fs))
    w = np.ones(n_win)
    n_rise = round(rise_s * fs)
    if n_rise > 0:
        w[:n_rise] = 0.5 - 0.5 * np.cos(np.pi * (np.arange(n_rise) + 0.5) / n_rise)
    n_tap = round(taper_fraction * n_win)
    if n_tap > 0:
        w[n_win - n_tap:] *= 0.5 + 0.5 * np.cos(np.pi * (np.arange(n_tap) + 0.5) / n_tap)
    starts = n0 + np.round(times * fs).astype(int)
    padded = np.concatenate([h, np.zeros(max(0, int(starts.max()) + n_win - h.size))])
    slices = padded[starts[:, None] + np.arange(n_win)[None, :]] * w[None, :]
    out = np.empty((times.size, freqs.size))
    chunk = max(1, int(1_000_000 // n_win))  # basis matrices of at most 16 MB
    nn = np.arange(n_win) / fs
    for j in range(0, freqs.size, chunk):
        basis = np.exp(-2j * np.pi * np.outer(nn, freqs[j: j + chunk]))
        spec = slices @ basis
        out[:, j: j + chunk] = np.abs(spec)
    level = 20 * np.log10(np.maximum(out, 1e-300))
    if normalize:
        ref = level[0].max()
        if not np.isfinite(ref) or ref <= -290:
            raise ValueError("the first slice holds no energy at the requested frequencies")
        level = level - ref
    return SpectralDecay(times, freqs, level, n_win / fs)
