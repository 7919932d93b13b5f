"""From a recorded sweep to impulse responses, distortion figures and diagnostics.

:func:`deconvolve` turns a recording of the signal made by
:func:`roommodes.measure.sweep.exponential_sweep` into the linear impulse response
(IR), the harmonic IRs of orders 2..5, low-frequency distortion per octave band, the
delay, a signal-to-noise figure and a list of :class:`Problem` records saying what
went wrong and what to do about it. :func:`frequency_response` evaluates an IR's
spectrum, windowed, at any frequencies.

Time axis: sample 0 of every returned IR is the first sample of the played file
(or, with a loopback channel, the moment the signal left the playback chain), so
an IR's peak position is the delay from playback to microphone.

References
----------
.. [1] A. Farina, "Simultaneous measurement of impulse response and distortion with
   a swept-sine technique", 108th AES Convention, Paris, 2000, preprint 5093.
.. [2] S. Mueller, P. Massarani, "Transfer-function measurement with sweeps",
   J. Audio Eng. Soc. 49(6):443-471, 2001.
.. [3] A. Novak, L. Simon, P. Lotton, "Synchronized swept-sine: theory, application,
   and implementation", J. Audio Eng. Soc. 63(10):786-798, 2015.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft as sfft

from .signals import band_centres
from .sweep import SweepSpec, inverse_filter, sweep_signal

__all__ = [
    "CLIP_LEVEL",
    "Distortion",
    "IRResult",
    "Problem",
    "RecordingError",
    "check_recording",
    "deconvolve",
    "frequency_response",
    "window_resolution_hz",
]

#: Samples with ``|x| >= CLIP_LEVEL`` (about -0.01 dBFS) count as clipped.
CLIP_LEVEL = 0.999
#: A recording whose peak stays below this (-80 dB re full scale) is called silent.
_SILENT_PEAK = 1e-4
#: A peak below this (-50 dB re full scale) earns a low-level warning.
_LOW_PEAK = 10 ** (-50 / 20)
#: Peak-to-noise ratio below which the recording is taken to hold no sweep (dB).
_NO_SIGNAL_PNR_DB = 20.0
#: Peak-to-noise ratio below which decay analysis is warned about (dB, common practice).
_LOW_PNR_DB = 40.0
#: THD above which a warning suggests lowering the level (percent, common practice).
_HIGH_THD_PERCENT = 10.0
#: Regularisation of the spectral division, relative to the sweep's nominal power.
_BETA = 1e-10
#: Extra regularisation in the skirts, times ``1 - T(f)``: caps the noise gain where the
#: sweep's spectrum collapses outside its band.
_BETA_SKIRT = 1.0
#: Width of the band-limit skirts outside f1 and f2, in units of ``sqrt(f / L)`` Hz.
_SKIRT = 2.0


@dataclass(frozen=True)
class Problem:
    """Something wrong with a recording.

    Attributes
    ----------
    code : str
        Stable identifier: ``sample_rate_mismatch``, ``silent``, ``too_short``,
        ``short_tail``, ``clipping``, ``low_level``, ``started_late``, ``no_signal``,
        ``low_snr``, ``high_distortion``; loopback problems carry a ``loopback_`` prefix.
    message : str
        What was found, with the numbers.
    action : str
        What to do about it.
    fatal : bool
        True when no usable impulse response can come from the recording.
    """

    code: str
    message: str
    action: str
    fatal: bool = False

    def __str__(self):
        return f"{self.message} ({self.action})"


class RecordingError(ValueError):
    """A recording that cannot be deconvolved; ``problems`` lists why."""

    def __init__(self, problems):
        self.problems = tuple(problems)
        fatal = [p for p in self.problems if p.fatal]
        super().__init__("; ".join(str(p) for p in fatal))


@dataclass(frozen=True)
class Distortion:
    """Harmonic distortion per octave band, from the harmonic impulse responses.

    Attributes
    ----------
    orders : tuple of int
        Harmonic orders used (2..5).
    center_hz, lower_hz, upper_hz : ndarray, shape (B,)
        IEC 61260-1 octave bands of the fundamental.
    harmonic_db : ndarray, shape (len(orders), B)
        Level of each harmonic relative to the fundamental, in dB.
    thd_percent, thd_db : ndarray, shape (B,)
        Total harmonic distortion (orders 2..5) as a ratio in percent and in dB.
    noise_db : ndarray, shape (B,)
        The THD figure a noise-only window of the same length reads (NaN when the
        recording has no noise-only part long enough).
    detected : ndarray of bool, shape (B,)
        ``thd_db`` at least 6 dB above ``noise_db``.
    window_s : float
        Length of the windows on the linear and harmonic IRs.
    nominal_hz : ndarray, shape (B,)
        ISO 266 nominal labels of the bands (31.5, 63, 125 ...).
    """

    orders: tuple
    center_hz: np.ndarray
    lower_hz: np.ndarray
    upper_hz: np.ndarray
    harmonic_db: np.ndarray
    thd_percent: np.ndarray
    thd_db: np.ndarray
    noise_db: np.ndarray
    detected: np.ndarray
    window_s: float
    nominal_hz: np.ndarray | None = None


@dataclass(frozen=True)
class IRResult:
    """The result of :func:`deconvolve`.

    Attributes
    ----------
    ir : ndarray, shape (n,)
        Linear impulse response, sample 0 at time zero (see the module docstring), in
        recording units per unit of the emitted signal (a wire reads 1).
    fs_hz : int
        Sample rate in Hz.
    harmonic_orders : tuple of int
    harmonic_irs : ndarray, shape (len(harmonic_orders), n)
        Harmonic IR of each order on the same time axis as ``ir`` (order ``k``'s
        window starts ``L ln k`` before time zero); zero past ``harmonic_lengths_s``.
    harmonic_lengths_s : ndarray
        Usable length of each harmonic IR before the next lower order begins.
    delay_s : float
        Time of the largest absolute sample (read with zero-phase band edges, see
        :func:`deconvolve`).
    onset_s : float
        First time the IR comes within 20 dB of that peak.
    peak_to_noise_db : float
        ``20 log10(peak / noise rms)``, the noise taken from the recording's noise-only
        tail (NaN when the recording stops too soon after the sweep).
    distortion : Distortion or None
    problems : tuple of Problem
        Non-fatal problems (fatal ones raise :class:`RecordingError`).
    loopback_delay_s : float or None
        Delay of the loopback channel (the playback-and-recording chain's latency).
    chain_removed : bool
        Whether the loopback's response was divided out.
    method : str
        ``"division"`` or ``"inverse"``.
    spec : SweepSpec
    """

    ir: np.ndarray
    fs_hz: int
    harmonic_orders: tuple
    harmonic_irs: np.ndarray
    harmonic_lengths_s: np.ndarray
    delay_s: float
    onset_s: float
    peak_to_noise_db: float
    distortion: Distortion | None
    problems: tuple
    loopback_delay_s: float | None
    chain_removed: bool
    method: str
    spec: SweepSpec


def window_resolution_hz(window_s):
    """Frequency resolution an IR window of ``window_s`` seconds allows: about ``1 / window_s``.

    A resonance narrower than this is smeared; a 5 Hz-wide room mode needs 0.5-1 s of
    IR (the reciprocal relation between duration and bandwidth of any signal).
    """
    window_s = float(window_s)
    if not window_s > 0:
        raise ValueError(f"window_s must be > 0 s, got {window_s:g}")
    return 1.0 / window_s


def _dft_at(h, fs_hz, freq_hz, t0_samples=0.0):
    """``sum_k h[k] exp(-2 pi j f (k + t0) / fs)`` at arbitrary frequencies, in chunks."""
    h = np.asarray(h, dtype=float)
    f = np.asarray(freq_hz, dtype=float)
    out = np.empty(f.shape, dtype=complex)
    nz = np.flatnonzero(h)
    if nz.size == 0:
        out[...] = 0
        return out
    k = nz.astype(float) + t0_samples
    hv = h[nz]
    flat_f, flat_o = f.ravel(), out.reshape(-1)
    step = max(1, 2_000_000 // k.size)
    for i in range(0, flat_f.size, step):
        ph = np.outer(flat_f[i:i + step], k) * (-2j * np.pi / fs_hz)
        flat_o[i:i + step] = np.exp(ph) @ hv
    return out


def _taper(n, fraction):
    """Ones with a half-Hann fade-out over the last ``fraction`` of ``n`` samples."""
    w = np.ones(n)
    m = round(fraction * n)
    if m > 0:
        w[-m:] = 0.5 + 0.5 * np.cos(np.pi * (np.arange(m) + 0.5) / m)
    return w


def frequency_response(ir, fs_hz, freq_hz, window_s=None, taper_fraction=0.1):
    """Complex frequency response of an impulse response through a time window.

    Parameters
    ----------
    ir : array_like, shape (n,)
        Impulse response, sample 0 at time zero.
    fs_hz : float
        Sample rate in Hz.
    freq_hz : array_like
        Frequencies in Hz, 0 <= f <= fs/2, any spacing.
    window_s : float or None
        Length of the analysis window from sample 0, in s; None uses the whole IR. The
        resolution it allows is about ``1 / window_s`` Hz (:func:`window_resolution_hz`).
    taper_fraction : float
        Fraction of the window, 0..1, faded out by a half-Hann at its end to soften the
        truncation; default 0.1.

    Returns
    -------
    h : ndarray, complex, shape of ``freq_hz``
        ``H(f) = sum_k w[k] ir[k] exp(-2 pi j f k / fs)``, the DFT evaluated directly at
        each requested frequency (no interpolation). Phase includes the delay.
    """
    ir = np.asarray(ir, dtype=float)
    if ir.ndim != 1 or ir.size == 0:
        raise ValueError(f"ir must be a non-empty 1-D array, got shape {ir.shape}")
    fs_hz = float(fs_hz)
    if not fs_hz > 0:
        raise ValueError(f"fs_hz must be > 0, got {fs_hz:g}")
    f = np.asarray(freq_hz, dtype=float)
    if np.any(~np.isfinite(f)) or np.any(f < 0) or np.any(f > fs_hz / 2):
        raise ValueError(f"frequencies must lie in 0..{fs_hz / 2:g} Hz")
    if not 0 <= taper_fraction <= 1:
        raise ValueError(f"taper_fraction must be 0..1, got {taper_fraction:g}")
    n = ir.size
    if window_s is not None:
        window_resolution_hz(window_s)  # validates > 0
        n = min(n, max(1, round(float(window_s) * fs_hz)))
    return _dft_at(ir[:n] * _taper(n, taper_fraction), fs_hz, f)


def _as_signal(x, name):
    x = np.asarray(x)
    if x.ndim != 1 or x.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D array (one channel), got shape {x.shape}")
    if not np.issubdtype(x.dtype, np.number) or np.iscomplexobj(x):
        raise ValueError(f"{name} must hold real numbers, got dtype {x.dtype}")
    x = x.astype(float)
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{name} contains NaN or infinite samples")
    return x


def _level_problems(x, fs, prefix, what):
    """Clipping, silence and low-level checks shared by recording and loopback."""
    probs = []
    peak = float(np.max(np.abs(x)))
    peak_db = 20 * np.log10(peak) if peak > 0 else -np.inf
    if peak < _SILENT_PEAK:
        probs.append(Problem(
            prefix + "silent",
            f"the {what} is silent (peak {peak_db:.0f} dB re full scale)",
            "check the microphone or cable, the input channel and the input gain; the sweep "
            "must be clearly audible in the recording",
            fatal=True))
        return probs
    clipped = np.flatnonzero(np.abs(x) >= CLIP_LEVEL)
    if clipped.size:
        probs.append(Problem(
            prefix + "clipping",
            f"the {what} is clipped: {clipped.size} samples at or near full scale, the first "
            f"at {clipped[0] / fs:.2f} s",
            "lower the playback volume or the input gain by 6 dB or more and measure again"))
    elif peak < _LOW_PEAK:
        probs.append(Problem(
            prefix + "low_level",
            f"the {what} peaks at only {peak_db:.0f} dB re full scale",
            "raise the input gain (or, within safe listening levels, the playback volume)"))
    return probs


def check_recording(recording, spec, fs_hz=None, ir_length_s=None, loopback=None):
    """Problems visible in a recording before deconvolution.

    Parameters
    ----------
    recording : array_like, shape (n,)
        The microphone channel in full-scale units.
    spec : SweepSpec
        The sweep that was played.
    fs_hz : int or None
        The recording's sample rate, when known (from the WAV header).
    ir_length_s : float or None
        Impulse-response length wanted after the sweep (default: the sweep's trailing
        silence, at least 0.5 s).
    loopback : array_like or None
        Loopback channel, checked for silence and clipping.

    Returns
    -------
    list of Problem
        Fatal and non-fatal problems; empty for a clean recording.
    """
    x = _as_signal(recording, "recording")
    probs = []
    if fs_hz is not None and round(float(fs_hz)) != spec.fs_hz:
        probs.append(Problem(
            "sample_rate_mismatch",
            f"the recording is at {float(fs_hz):g} Hz but the sweep was made at {spec.fs_hz} Hz",
            f"record at {spec.fs_hz} Hz, or make a new sweep at {float(fs_hz):g} Hz; resampling "
            "either file afterwards breaks the timing",
            fatal=True))
    fs = spec.fs_hz
    probs += _level_problems(x, fs, "", "recording")
    end = spec.n_before + spec.n_sweep
    ir_len = _ir_length_samples(spec, ir_length_s)
    if x.size < end:
        probs.append(Problem(
            "too_short",
            f"the recording is {x.size / fs:.2f} s long but the sweep ends "
            f"{end / fs:.2f} s after the start of the played file",
            "start the recorder before playback and stop it only after the trailing silence",
            fatal=True))
    elif x.size < end + ir_len:
        probs.append(Problem(
            "short_tail",
            f"the recording stops {(x.size - end) / fs:.2f} s after the sweep ends; the impulse "
            f"response asked for needs {ir_len / fs:.2f} s",
            f"keep recording at least {ir_len / fs + 0.5:.1f} s after the sweep (a sweep with a "
            "longer trailing silence helps)"))
    if loopback is not None:
        lb = _as_signal(loopback, "loopback")
        if lb.size != x.size:
            raise ValueError(
                f"loopback has {lb.size} samples but the recording has {x.size}; they must be "
                "two channels of one recording")
        probs += _level_problems(lb, fs, "loopback_", "loopback channel")
    return probs


def _ir_length_samples(spec, ir_length_s):
    if ir_length_s is None:
        ir_length_s = max(spec.silence_after_s, 0.5)
    ir_length_s = float(ir_length_s)
    if not (np.isfinite(ir_length_s) and 0.01 <= ir_length_s <= 60):
        raise ValueError(f"ir_length_s must be 0.01..60 s, got {ir_length_s:g}")
    return round(ir_length_s * spec.fs_hz)


def _band_taper(freq_hz, spec):
    """Target band limit ``T(f)``: 1 in [f1, f2], raised-cosine (in log f) skirts outside
    each edge, 0 beyond. Skirt widths follow the sweep's own spectral skirt, whose
    width is about ``sqrt(f / L)`` Hz at an edge frequency ``f`` (stationary phase);
    two of those, and at least a twelfth of an octave."""
    f = np.maximum(freq_hz, 1e-12)
    L = spec.time_constant_s
    out = np.ones_like(f)
    for edge, sign in ((spec.f1_hz, -1), (spec.f2_hz, 1)):
        w_hz = max(_SKIRT * np.sqrt(edge / L), edge * (2 ** (1 / 12) - 1))
        other = edge - w_hz if sign < 0 else edge + w_hz
        other = max(other, edge / 2) if sign < 0 else min(other, spec.fs_hz / 2)
        s = np.clip((np.log(f) - np.log(edge)) / (np.log(other) - np.log(edge)), 0, 1)
        out *= 0.5 + 0.5 * np.cos(np.pi * s)
    return out


def _sweep_power_nominal(spec, freq_hz):
    """``|X(f)|^2 = (fs A / 2)^2 L / f``, the sweep's power spectrum by stationary phase."""
    f = np.maximum(freq_hz, spec.f1_hz * 1e-3)
    return (spec.fs_hz * spec.amplitude / 2) ** 2 * spec.time_constant_s / f


def _division_spectrum(reference_spectrum, spec, f, gain2=1.0):
    """``W = R* T / (|R|^2 + eps)``: regularised division by a reference spectrum ``R``
    (the emitted sweep, or a loopback recording of it with chain power gain ``gain2``),
    band-limited by the taper ``T``; ``eps = (1e-10 + (1 - T)) |X_nominal|^2 gain2``."""
    T = _band_taper(f, spec)
    eps = (_BETA + _BETA_SKIRT * (1.0 - T)) * _sweep_power_nominal(spec, f) * gain2
    return np.conj(reference_spectrum) / (np.abs(reference_spectrum) ** 2 + eps) * T


def _inverse_spectrum(spec, n_fft, method):
    """Spectrum W with ``irfft(rfft(recording) W)`` the deconvolved full buffer."""
    fs = spec.fs_hz
    f = sfft.rfftfreq(n_fft, 1.0 / fs)
    if method == "division":
        return _division_spectrum(sfft.rfft(sweep_signal(spec), n_fft), spec, f)
    G = sfft.rfft(inverse_filter(spec), n_fft)
    shift = spec.n_before + spec.n_sweep - 1  # the pulse of sweep (*) inverse sits here
    return G * np.exp(2j * np.pi * f * shift / fs) * _band_taper(f, spec)


def _minimum_phase_correction(band_limit, n_fft, floor=1e-8):
    """``exp(j (phi_min - arg B))``: turns a band limit ``B`` into the minimum-phase one
    with the same magnitude (real cepstrum, folded; Oppenheim & Schafer 2010, ch. 13,
    memory)."""
    logmag = np.log(np.maximum(np.abs(band_limit), floor))
    c = sfft.irfft(logmag, n_fft)
    fold = np.zeros(n_fft)
    fold[0] = c[0]
    half = (n_fft + 1) // 2
    fold[1:half] = 2 * c[1:half]
    if n_fft % 2 == 0:
        fold[n_fft // 2] = c[n_fft // 2]
    phi = np.imag(sfft.rfft(fold, n_fft))
    return np.exp(1j * (phi - np.angle(band_limit)))


def _octave_distortion(spec, ir, harm, orders, w, noise_seg, band_hz):
    fs = spec.fs_hz
    fc, nominal, lo, hi = band_centres(1, band_hz[0], band_hz[1])
    f_start = spec.f1_hz * np.exp(spec.fade_in_s / spec.time_constant_s)
    f_stop = spec.f2_hz / max(orders)
    taper = _taper(w, 0.2)
    m = sfft.next_fast_len(4 * w, real=True)  # zero padding: 4 bins per 1/w Hz
    nmax = max(orders)
    spec1 = np.abs(sfft.rfft(ir[:w] * taper, m)) ** 2
    specn = [np.abs(sfft.rfft(h[:w] * taper, m)) ** 2 for h in harm]
    specz = np.abs(sfft.rfft(noise_seg * taper, m)) ** 2 if noise_seg is not None else None
    k_all = np.arange(m // 2 // nmax + 1)
    f_k = k_all * fs / m
    keep, rows, thd, noise = [], [], [], []
    for b, (fl, fu) in enumerate(zip(lo, hi)):
        a, z = max(fl, f_start), min(fu, f_stop)
        k = k_all[(f_k >= a) & (f_k <= z)]
        if z <= a * 2 ** (1 / 6) or k.size < 2:  # under a sixth of the band measurable
            continue
        p1 = spec1[k].sum()
        pn = np.array([sn[n * k].sum() for sn, n in zip(specn, orders)])
        keep.append(b)
        rows.append(10 * np.log10(np.maximum(pn, 1e-300) / p1))
        thd.append(np.sqrt(pn.sum() / p1))
        if specz is not None:
            pz = sum(specz[n * k].sum() for n in orders)
            noise.append(10 * np.log10(max(pz, 1e-300) / p1))
        else:
            noise.append(np.nan)
    if not keep:
        return None
    thd = np.array(thd)
    thd_db = 20 * np.log10(np.maximum(thd, 1e-15))
    noise = np.array(noise)
    return Distortion(
        orders=tuple(orders), center_hz=fc[keep], lower_hz=lo[keep], upper_hz=hi[keep],
        harmonic_db=np.array(rows).T, thd_percent=100 * thd, thd_db=thd_db, noise_db=noise,
        detected=np.where(np.isnan(noise), False, thd_db >= noise + 6.0), window_s=w / fs,
        nominal_hz=nominal[keep])


def deconvolve(recording, spec, loopback=None, fs_hz=None, ir_length_s=None,
               method="division", orders=(2, 3, 4, 5), distortion_band_hz=(20.0, 200.0)):
    """Impulse responses, distortion, delay and noise figures from a recorded sweep.

    Parameters
    ----------
    recording : array_like, shape (n,)
        Microphone channel, full-scale units, recorded while the file from
        :func:`~roommodes.measure.sweep.exponential_sweep` played; the recorder must
        start before playback.
    spec : SweepSpec
        Description of the played sweep.
    loopback : array_like, shape (n,), or None
        A channel that recorded the playback signal electrically (output wired back to
        an input). Its response is divided out: timing becomes absolute (time zero =
        the signal leaving the chain) and the chain's frequency response is removed.
    fs_hz : int or None
        The recording's sample rate; a mismatch with ``spec.fs_hz`` is fatal.
    ir_length_s : float or None
        Length of the returned IRs in s, 0.01..60 (default: the sweep's trailing
        silence, at least 0.5 s).
    method : {"division", "inverse"}
        ``"division"`` (default): regularised spectral division by the emitted signal
        (Mueller & Massarani 2001), flat to round-off inside [f1, f2] (see Notes).
        ``"inverse"``: convolution with Farina's inverse filter
        (:func:`~roommodes.measure.sweep.inverse_filter`), whose gain ripples by about
        0.2 dB within an octave of the band edges and more at the edges themselves.
    orders : sequence of int
        Harmonic orders to separate, each 2..5, rising.
    distortion_band_hz : (float, float)
        Range of the octave-band centres for the distortion figures.

    Returns
    -------
    IRResult

    Raises
    ------
    RecordingError (a ValueError)
        For fatal problems: sample-rate mismatch, silence, a recording that ends before
        the sweep does, a response that arrives before time zero (the recorder started
        late) or no sweep found in the recording (peak-to-noise ratio below 20 dB).
    ValueError
        Malformed input (not 1-D, NaN, a loopback of a different length, bad options).

    Notes
    -----
    The recording ``y`` is deconvolved over an FFT length ``N >= len(y) + len(x)``, so
    the linear response lies at times ``t >= 0`` and the harmonic response of order
    ``n`` at ``t = -L ln n`` (wrapped to the buffer's end) (Farina 2000).

    Division: ``H = Y X* T / (|X|^2 + eps)`` with ``X`` the emitted signal's spectrum,
    ``T(f)`` a band limit that is 1 in [f1, f2] and falls to 0 in raised-cosine skirts
    outside each edge (width twice the sweep's own spectral skirt ``sqrt(f / L)`` Hz,
    at least 1/12 octave), and ``eps = (1e-10 + (1 - T)) |X_nom|^2``, ``|X_nom|^2 =
    (fs A / 2)^2 L / f`` the sweep's nominal power spectrum (stationary phase): inside
    the band the division is exact to 1e-10, in the skirts the noise gain stays bounded.
    With a loopback channel its recording ``Y_l`` takes the place of ``X`` (the
    classic two-channel transfer function ``Y / Y_l``).

    The zero-phase band limit ``T`` would ring before time zero (for tens of ms at a
    20 Hz edge), so its phase is replaced by the minimum phase of the same magnitude
    (real cepstrum; Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed.,
    2010, ch. 13, memory): the IR is causal and its magnitude in the band is untouched; its
    phase carries the band edges' minimum phase, which delays the band-limited pulse
    (about 1 ms for a 1 kHz upper edge, tens of microseconds at 20 kHz). Delay and onset
    are therefore read from the zero-phase version, whose pulse is centred on the
    arrival.

    Harmonic IRs are cut out by whole-sample shifts of ``round(L ln n fs)`` (a phase
    error of at most half a sample) and end 5 ms before the next lower order begins.

    Delay: ``delay_s`` is the time of the largest absolute sample of the zero-phase
    band-limited IR; ``onset_s`` is its first sample within 20 dB of that peak (the
    onset rule of ISO 3382-1:2009, Annex A, memory; in a band-limited IR the pulse's
    side lobes can bring it up to about ``2 / f2`` early). Without a loopback both
    include the playback and recording latency.

    Noise: the samples between 75 % and 100 % of the time from the sweep's end to the
    recording's end hold, after deconvolution, only noise if the room has decayed by
    then; ``peak_to_noise_db`` compares the IR's peak with their rms (if the IR still
    rings there the figure is pessimistic).

    Distortion per octave band (IEC 61260-1 octave bands, default centres 31.5-125 Hz):
    with the linear IR ``h1`` and harmonic IRs ``hn`` windowed alike (length: the
    shortest harmonic's usable length, half-Hann fade over the last 20 %),
    ``THD = sqrt(sum_n sum_f |Hn(n f)|^2 / sum_f |H1(f)|^2)``, ``f`` running over the
    bins of a 4-times zero-padded FFT of the windows (``n f`` is then a bin too) in the
    measurable part of the band (above the fade-in, with ``n f`` below f2).
    A harmonic of relative amplitude ``r`` at the fundamental's output gives
    ``|Hn(n f)| / |H1(f)| = r`` (Farina 2000). ``noise_db`` is the same sum with a
    noise-only window in place of the harmonic IRs; where harmonics lie before the
    leading silence they carry less low-frequency noise, so the figure is cautious.

    References
    ----------
    .. [1] A. Farina, AES 108th Convention, 2000, preprint 5093.
    .. [2] S. Mueller, P. Massarani, J. Audio Eng. Soc. 49(6):443-471, 2001.
    .. [3] ISO 3382-1:2009, Acoustics - Measurement of room acoustic parameters -
       Part 1: Performance spaces, Annex A (memory).
    """
    if not isinstance(spec, SweepSpec):
        raise TypeError(f"spec must be a SweepSpec, got {type(spec).__name__}")
    if method not in ("division", "inverse"):
        raise ValueError(f"method must be 'division' or 'inverse', got {method!r}")
    orders = tuple(int(n) for n in orders)
    if not orders or any(n < 2 or n > 5 for n in orders) or list(orders) != sorted(set(orders)):
        raise ValueError(f"orders must be rising whole numbers 2..5, got {orders!r}")
    y = _as_signal(recording, "recording")
    problems = check_recording(y, spec, fs_hz, ir_length_s, loopback)
    if any(p.fatal for p in problems):
        raise RecordingError(problems)
    fs = spec.fs_hz
    n_ir = _ir_length_samples(spec, ir_length_s)
    n_fft = sfft.next_fast_len(y.size + spec.n_total, real=True)
    W = _inverse_spectrum(spec, n_fft, method)
    H = sfft.rfft(y, n_fft) * W
    band_limit = sfft.rfft(sweep_signal(spec), n_fft) * W  # what a wire would give
    loop_delay = None
    shift = 0
    if loopback is not None:
        # the loopback recording becomes the reference: H = Y / Y_loop (regularised)
        lb = _as_signal(loopback, "loopback")
        YL = sfft.rfft(lb, n_fft)
        HL = YL * W
        k = int(np.argmax(np.abs(sfft.irfft(HL, n_fft)[: n_fft // 2])))
        loop_delay = k / fs
        shift = k
        f = sfft.rfftfreq(n_fft, 1.0 / fs)
        inband = (f >= spec.f1_hz) & (f <= spec.f2_hz)
        WL = _division_spectrum(YL, spec, f, gain2=float(np.median(np.abs(HL[inband]) ** 2)))
        H = sfft.rfft(y, n_fft) * WL
        band_limit = YL * WL
    # Timing from the zero-phase band-limited IR (a symmetric band-limited pulse peaks at
    # the arrival); the IR itself gets minimum-phase band edges, which do not ring
    # before time zero but delay the band-limited pulse by their group delay.
    zp = sfft.irfft(H, n_fft)[:n_ir]
    peak_i = int(np.argmax(np.abs(zp)))
    onset_i = int(np.flatnonzero(np.abs(zp) >= np.abs(zp[peak_i]) * 0.1)[0])
    H = H * _minimum_phase_correction(band_limit, n_fft)
    full = sfft.irfft(H, n_fft)
    ir = full[:n_ir].copy()
    peak = float(np.max(np.abs(ir)))
    L = spec.time_constant_s
    n_neg = round(min(0.5 * L * np.log(2), 0.5) * fs)
    if n_neg and np.max(np.abs(full[-n_neg:])) > peak:
        problems.append(Problem(
            "started_late",
            "the response arrives before time zero: the recorder seems to have started after "
            "playback did",
            "start the recorder first, then playback, and record the whole file", fatal=True))
        raise RecordingError(problems)

    # noise-only tail: the last quarter of the time between the sweep's end and the
    # recording's end (in IR time, minus the loopback's shift)
    tail_end = y.size - (spec.n_before + spec.n_sweep) - shift
    noise_seg_all = None
    if tail_end >= int(0.1 * fs):
        noise_seg_all = full[int(0.75 * tail_end):tail_end]
    if noise_seg_all is not None and noise_seg_all.size:
        noise_rms = float(np.sqrt(np.mean(noise_seg_all**2)))
        pnr = float(20 * np.log10(peak / noise_rms)) if noise_rms > 0 else np.inf
    else:
        pnr = np.nan
    if pnr < _NO_SIGNAL_PNR_DB:
        problems.append(Problem(
            "no_signal",
            f"the impulse response rises only {pnr:.0f} dB above the noise: the recording does "
            "not seem to contain this sweep",
            "check that the recorded channel is the measurement microphone, that the sweep "
            "played, and that the recording belongs to this sweep file", fatal=True))
        raise RecordingError(problems)
    if pnr < _LOW_PNR_DB:
        problems.append(Problem(
            "low_snr",
            f"the impulse response is only {pnr:.0f} dB above the noise; decay times will be "
            "unreliable",
            "measure when the room is quieter, raise the level within safe limits, or use a "
            "longer sweep (each doubling of its length adds about 3 dB)"))

    # harmonic impulse responses, each on the linear IR's time axis shifted by L ln n
    s = [0] + [round(L * np.log(n) * fs) for n in orders]
    margin = round(0.005 * fs)
    harm = np.zeros((len(orders), n_ir))
    usable = np.zeros(len(orders), dtype=int)
    idx = np.arange(n_ir)
    for j, n in enumerate(orders):
        s_n = s[j + 1]
        s_lower = round(L * np.log(n - 1) * fs)  # where order n - 1 begins
        u = min(n_ir, s_n - s_lower + onset_i - margin)
        if u <= 0:
            continue
        seg = np.take(full, (idx[:u] - s_n) % n_fft)
        harm[j, :u] = seg * _taper(u, 0.1)
        usable[j] = u
    w = int(usable.min())
    noise_seg = None
    if noise_seg_all is not None and noise_seg_all.size >= w > 0:
        noise_seg = noise_seg_all[-w:]
    dist = None
    if w > int(0.02 * fs):
        dist = _octave_distortion(spec, ir, harm, orders, w, noise_seg,
                                  distortion_band_hz)
    if dist is not None and np.any(dist.thd_percent > _HIGH_THD_PERCENT):
        b = int(np.argmax(dist.thd_percent))
        problems.append(Problem(
            "high_distortion",
            f"harmonic distortion reaches {dist.thd_percent[b]:.1f} % in the octave around "
            f"{dist.nominal_hz[b]:g} Hz",
            "lower the playback level; loudspeakers distort most at low frequencies"))

    return IRResult(
        ir=ir, fs_hz=fs, harmonic_orders=orders, harmonic_irs=harm,
        harmonic_lengths_s=usable / fs, delay_s=peak_i / fs, onset_s=onset_i / fs,
        peak_to_noise_db=pnr, distortion=dist, problems=tuple(problems),
        loopback_delay_s=loop_delay, chain_removed=loopback is not None, method=method,
        spec=spec)
