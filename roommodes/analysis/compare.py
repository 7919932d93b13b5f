"""Measured against predicted, or one measurement against another.

The pieces, each a plain function:

* :func:`load_measurement` reads one measured curve (an impulse-response WAV, or a
  frequency-response text file) onto a frequency grid; :func:`average_measurements`
  power-averages several of one channel and keeps their spread. These two are the only
  functions here that touch files (the reading edge, like :mod:`roommodes.measure.importers`).
* :func:`predicted_level` is the model's curve for one speaker at one or more microphone
  positions (power-averaged, like the measurements).
* :func:`compare_curves` smooths both curves alike, aligns their levels over a stated band
  (or not, for a calibrated chain), and gives the residual and its error figures.
* :func:`find_features` and :func:`match_features` pair measured peaks and dips with the
  predicted ones (and name the mode or boundary behind each predicted one), reporting the
  frequency ratio of each pair; :func:`interpret` turns a consistent shift into words.
* :func:`compare_to_prediction` and :func:`compare_measurements` run the whole chain.

Level convention: a measured impulse response read from a WAV file has whatever gain the
playback and recording chain had, so its level is only known up to a constant; that is
why comparisons align levels by default.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from ..dsp.bands import band_average_matrix, band_centres, band_fraction_of
from ..dsp.response import Response, align_level, log_frequencies, smooth_db
from ..io.files import WAV_FILE_BYTES, open_regular
from ..io.importers import MeasurementFileError, apply_mic_calibration, average_curves, read_response_text
from ..io.wavio import read_wav
from ..measure.decay import onset_index
from ..measure.deconvolve import frequency_response
from ..model.modes import mode_shapes, room_modes
from ..solvers import DEFAULT_METHOD
from .fit import estimate_effective_size
from .levels import speaker_levels
from .predict import boundary_notches
from .uncertainty import DEFAULT_SAMPLES, DEFAULT_SEED, ensemble_levels

__all__ = [
    "DEFAULT_BAND_HZ",
    "DEFAULT_SMOOTHING",
    "DEFAULT_WINDOW_S",
    "Comparison",
    "ComparisonReport",
    "CurveFeature",
    "FeatureMatch",
    "Measurement",
    "average_measurements",
    "compare_curves",
    "compare_measurements",
    "compare_to_prediction",
    "find_features",
    "interpret",
    "ModelBand",
    "model_band",
    "share_inside",
    "is_wav_file",
    "load_measurement",
    "match_features",
    "predicted_level",
    "speaker_by_name",
]

#: Band (Hz) over which error figures are taken and levels aligned by default.
DEFAULT_BAND_HZ = (20.0, 200.0)
#: Default smoothing: 1/12 octave, in power, on both curves.
DEFAULT_SMOOTHING = 12
#: Default analysis window of an impulse response, s (resolution about 1 Hz).
DEFAULT_WINDOW_S = 1.0
#: Default frequency grid of a comparison: 15-300 Hz, 48 points per octave.
DEFAULT_GRID = (15.0, 300.0, 48)
#: The window starts this long before the impulse response's onset, s.
_PRE_ONSET_S = 0.005

_AXES = ("length", "width", "height")


# ----------------------------------------------------------------------------- reading


#: A measured curve is the package's one curve type, :class:`roommodes.dsp.response.Response`,
#: with its provenance (files, resolution, spread, notes) filled in.
Measurement = Response


def is_wav_file(path):
    """Whether ``path`` starts with a RIFF/RIFX/RF64 WAVE header (False if it cannot be read)."""
    try:
        with open_regular(path, "measurement", WAV_FILE_BYTES) as fh:
            head = fh.read(12)
    except (OSError, ValueError):
        return False
    return len(head) == 12 and head[:4] in (b"RIFF", b"RIFX", b"RF64") and head[8:12] == b"WAVE"


def _grid(freq_hz):
    if freq_hz is None:
        return log_frequencies(*DEFAULT_GRID)
    f = np.asarray(freq_hz, dtype=float)
    if f.ndim != 1 or f.size < 2 or not np.all(np.isfinite(f)) or f[0] <= 0 or np.any(np.diff(f) <= 0):
        raise ValueError("freq_hz must be a rising 1-D grid of two or more positive frequencies in Hz")
    return f


def load_measurement(path, channel=None, window_s=DEFAULT_WINDOW_S, freq_hz=None, *, taper_fraction=0.1,
                     mic_cal=None):
    """Read one measured curve: an impulse-response WAV or a frequency-response text file.

    Parameters
    ----------
    path : str or Path
        A WAV file (recognised by its RIFF/WAVE header) holding an impulse response, or a
        text file of frequency (Hz), level (dB) and optional phase (read by
        :func:`roommodes.measure.importers.read_response_text`).
    channel : int or None
        0-based channel of a multi-channel WAV; None for a mono file. Ignored for text.
    window_s : float
        Length of the analysis window on an impulse response, s, 0.01..60, starting
        5 ms before the onset (the first sample within 20 dB of the peak). The frequency
        resolution it allows is about ``1 / window_s`` Hz; a 5 Hz-wide mode needs
        0.5-1 s. Shortened to the response's length when that is shorter.
    freq_hz : array_like, optional
        Frequencies to evaluate at, Hz, rising; default 15-300 Hz at 48 points per octave.
        A text curve is interpolated linearly in dB against log frequency, and only the
        grid points inside its own range are kept.
    taper_fraction : float
        Fraction of the window faded out by a half-Hann at its end, 0..1.
    mic_cal : Response, optional
        The microphone's calibration: its deviation from flat in dB against frequency
        (:func:`roommodes.io.importers.read_response_text`), subtracted from the measured
        level (:func:`roommodes.io.importers.apply_mic_calibration`; outside its range its
        end values are held, and the notes say so).

    Returns
    -------
    Measurement

    Raises
    ------
    roommodes.measure.importers.MeasurementFileError
        (a ValueError) for anything that cannot be read; the message names the file.

    Notes
    -----
    ``H(f) = sum_k w[k] h[n0 + k] exp(-2 pi j f k / fs)`` evaluated directly at each
    frequency (:func:`roommodes.measure.deconvolve.frequency_response`), ``w`` the window.
    """
    m = _load_raw(path, channel, window_s, freq_hz, taper_fraction)
    if mic_cal is None:
        return m
    return apply_mic_calibration(m, mic_cal, outside="hold")


def _load_raw(path, channel, window_s, freq_hz, taper_fraction):
    p = Path(path)
    name = str(path)
    if not p.exists():
        raise MeasurementFileError("no such file", name)
    if p.is_dir():
        raise MeasurementFileError("is a folder; give a WAV or text measurement file", name)
    f = _grid(freq_hz)
    window_s = float(window_s)
    if not (math.isfinite(window_s) and 0.01 <= window_s <= 60.0):
        raise ValueError(f"window_s must be 0.01..60 s, got {window_s!r}")
    if is_wav_file(p):
        return _load_ir_wav(p, name, channel, window_s, f, taper_fraction)
    if p.suffix.lower() in (".wav", ".wave"):
        raise MeasurementFileError("has a .wav name but no RIFF/WAVE header: not a WAV file", name)
    curve = read_response_text(p)
    b = band_fraction_of(curve.freq_hz)
    if b is not None:  # band levels stay band levels: interpolating them would invent detail
        return Measurement(curve.freq_hz, curve.level_db, p.name, sources=(name,), band_fraction=b,
                           notes=(*curve.notes, f"band data: 1/{b}-octave band levels at the band centres"))
    inside = (f >= curve.freq_hz[0]) & (f <= curve.freq_hz[-1])
    if inside.sum() < 2:
        raise MeasurementFileError(
            f"covers {curve.freq_hz[0]:g}-{curve.freq_hz[-1]:g} Hz, which holds fewer than two points "
            f"of the analysis grid {f[0]:g}-{f[-1]:g} Hz", name)
    fi = f[inside]
    level = np.interp(np.log(fi), np.log(curve.freq_hz), curve.level_db)
    note = (f"interpolated onto {fi.size} points, {fi[0]:.4g}-{fi[-1]:.4g} Hz "
            "(linear in dB against log frequency)")
    notes = (*curve.notes, note)
    return Measurement(fi, level, p.name, sources=(name,), notes=notes)


def _load_ir_wav(p, name, channel, window_s, f, taper_fraction):

    try:
        ir, fs, _info = read_wav(p, channel)
    except ValueError as exc:
        msg = str(exc)
        raise MeasurementFileError(msg.removeprefix(f"{p}: "), name) from None
    if ir.size < 16 or not np.all(np.isfinite(ir)):
        raise MeasurementFileError("holds fewer than 16 samples or non-finite samples; not an impulse response",
                                   name)
    if not np.any(ir):
        raise MeasurementFileError("is silent (all samples zero); not an impulse response", name)
    if f[-1] >= fs / 2:
        raise MeasurementFileError(f"sample rate {fs} Hz is too low for frequencies up to {f[-1]:g} Hz", name)
    start = max(0, onset_index(ir) - round(_PRE_ONSET_S * fs))
    seg = ir[start:]
    n = min(seg.size, round(window_s * fs))
    notes = [(f"impulse response at {fs} Hz, window {n / fs:.3g} s from {start / fs * 1000:.1f} ms "
              f"(resolution about {fs / n:.2g} Hz)")]
    if n < round(window_s * fs):
        notes.append(f"window shortened from {window_s:g} s to the response's remaining {n / fs:.3g} s")
    h = frequency_response(seg[:n], fs, f, None, taper_fraction)
    level = 10.0 * np.log10(np.maximum(np.abs(h) ** 2, 1e-30))
    return Measurement(f, level, p.name, sources=(name,), resolution_hz=fs / n, notes=tuple(notes))


def average_measurements(measurements, mode="power", label=None):
    """Average several measured curves (microphone positions) and keep their spread.

    Parameters
    ----------
    measurements : sequence of Measurement
        One or more curves; a single one is returned unchanged.
    mode : {"power", "db"}
        Mean of ``10**(L/10)`` (default) or of the levels in dB.
    label : str, optional

    Returns
    -------
    Measurement
        On the first curve's grid points that lie inside every curve's range, with
        ``std_db``, ``min_db`` and ``max_db`` (:func:`roommodes.measure.importers.average_curves`).
    """
    ms = list(measurements)
    if not ms:
        raise ValueError("average_measurements needs at least one measurement")
    if len(ms) == 1:
        return ms[0]
    lo = max(m.freq_hz[0] for m in ms)
    hi = min(m.freq_hz[-1] for m in ms)
    grid = ms[0].freq_hz[(ms[0].freq_hz >= lo) & (ms[0].freq_hz <= hi)]
    if grid.size < 2:
        raise ValueError(f"the measurements do not overlap in frequency (common range {lo:g}-{hi:g} Hz)")
    avg = average_curves([m.to_response() for m in ms], mode, freq_hz=grid)
    sources = tuple(s for m in ms for s in m.sources)
    res = [m.resolution_hz for m in ms if m.resolution_hz is not None]
    notes = tuple(n for m in ms for n in m.notes) + (
        f"{mode} average of {len(ms)} curves; spread: standard deviation of their dB levels",)
    bands = {m.band_fraction for m in ms}
    return replace(avg, label=label or f"mean of {len(ms)}", sources=sources, resolution_hz=max(res) if res else None,
                   notes=notes, band_fraction=bands.pop() if len(bands) == 1 else None)


# ----------------------------------------------------------------------------- prediction


def speaker_by_name(room, channel):
    """The speaker of ``room``'s layout called ``channel`` (None: the only one); ValueError otherwise."""
    if room.layout is None:
        raise ValueError(f"{room.source or room.name}: the room file has no [speakers] and [seat]; "
                         "a comparison needs the speaker that was measured")
    names = [s.name for s in room.layout.speakers]
    if channel is None:
        if len(names) == 1:
            return room.layout.speakers[0]
        raise ValueError(f"name the measured speaker (channel): one of {', '.join(names)}")
    for s in room.layout.speakers:
        if s.name == channel:
            return s
    raise ValueError(f"channel '{channel}' is not a speaker of the room file; choose one of {', '.join(names)}")


def predicted_level(room, channel, positions_m, freq_hz, method=DEFAULT_METHOD, include_speaker=True, **options):
    """Predicted level of one speaker, power-averaged over microphone positions.

    Parameters
    ----------
    room : Room
        With a layout naming the speaker.
    channel : str or None
        Speaker name; None when the room has one speaker.
    positions_m : array_like, shape (M, 3) or (3,)
        Microphone positions, m; None for the seat.
    freq_hz : array_like (F,)
    method : {"modal", "image"}
    include_speaker : bool
        Apply the speaker's own low-frequency response (:mod:`roommodes.speaker`).
    **options
        Passed to :func:`roommodes.transfer_function`.

    Returns
    -------
    level_db : ndarray (F,)
        ``10 log10(mean_m |H_m|^2)``, dB re the free-field level at 1 m.
    """
    sp = speaker_by_name(room, channel)
    pos = np.atleast_2d(np.asarray(room.layout.seat_m if positions_m is None else positions_m, dtype=float))
    return speaker_levels(room, [sp], pos, freq_hz, method=method, include_speaker=include_speaker,
                          **options).power_mean_db()[0]


def predicted_band_levels(room, channel, positions_m, centres_hz, fraction, method=DEFAULT_METHOD,
                          points_per_octave=72, **options):
    """Predicted 1/``fraction``-octave band levels at the band centres ``centres_hz``.

    The level on a fine log grid that runs from each band's lower edge to its upper edge
    (:func:`predicted_level`, power-averaged over the positions) is averaged in power over
    each band's IEC 61260-1 edges with equal weight per log frequency
    (:func:`roommodes.dsp.bands.band_average_matrix`): the band level a meter reads with
    pink noise.
    """
    c = np.asarray(centres_hz, dtype=float)
    exact, _, lower, upper = band_centres(int(fraction), float(c.min()) / 1.1, float(c.max()) * 1.1)
    idx = np.abs(np.log(c[:, None] / exact[None, :])).argmin(axis=1)
    lo, hi = lower[idx], upper[idx]
    per_band = max(3, int(np.ceil(points_per_octave / fraction)) + 1)  # edge to edge
    fine = np.unique(np.concatenate([np.geomspace(a, b, per_band) for a, b in zip(lo, hi)]))
    level = predicted_level(room, channel, positions_m, fine, method=method, **options)
    return 10.0 * np.log10(band_average_matrix(fine, lo, hi) @ 10.0 ** (level / 10.0))


# ----------------------------------------------------------------------------- statistics


@dataclass(frozen=True, eq=False)
class Comparison:
    """Two curves smoothed alike, aligned, and their residual.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    measured_db : ndarray (F,)
        The first curve, smoothed, plus ``offset_db``.
    reference_db : ndarray (F,)
        The second curve (prediction, or the other measurement), smoothed.
    difference_db : ndarray (F,)
        ``measured_db - reference_db``.
    offset_db : float
        Level added to the first curve (0 when absolute).
    band_hz : tuple
        Band of the error figures, Hz.
    align_band_hz : tuple or None
        Band of the level alignment; None when absolute.
    smoothing : float
        ``b`` of the 1/b-octave power smoothing (0: none).
    median_abs_diff_db, p90_abs_diff_db, rms_diff_db, mean_diff_db : float
        Of ``difference_db`` over the grid points in ``band_hz``.
    correlation : float
        Pearson correlation of the two smoothed dB curves in ``band_hz``.
    in_band : ndarray of bool (F,)
    """
    freq_hz: np.ndarray
    measured_db: np.ndarray
    reference_db: np.ndarray
    difference_db: np.ndarray
    offset_db: float
    band_hz: tuple
    align_band_hz: tuple | None
    smoothing: float
    median_abs_diff_db: float
    p90_abs_diff_db: float
    rms_diff_db: float
    mean_diff_db: float
    correlation: float
    in_band: np.ndarray


def _check_band(f, band_hz, name):
    lo, hi = (float(v) for v in band_hz)
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise ValueError(f"{name} must be (low, high) in Hz with 0 < low < high, got {band_hz!r}")
    sel = (f >= lo) & (f <= hi)
    if sel.sum() < 3:
        raise ValueError(f"{name} {lo:g}-{hi:g} Hz holds fewer than three points of the common "
                         f"frequency grid ({f[0]:.4g}-{f[-1]:.4g} Hz)")
    return (lo, hi), sel


def compare_curves(freq_hz, measured_db, reference_db, *, band_hz=DEFAULT_BAND_HZ, smoothing=DEFAULT_SMOOTHING,
                   align_band_hz=None, absolute=False):
    """Smooth two curves alike, align their levels, and give the residual's error figures.

    Parameters
    ----------
    freq_hz : array_like (F,)
        Common grid, Hz, rising (log-spaced for equal weight per octave).
    measured_db, reference_db : array_like (F,)
        Levels, dB.
    band_hz : (float, float)
        Band of the error figures, Hz.
    smoothing : float
        ``b`` of the 1/b-octave smoothing in power applied to both curves, 1..48; 0 for none.
    align_band_hz : (float, float), optional
        Band over which the power means are matched; default ``band_hz``.
    absolute : bool
        Do not align (a calibrated chain, or levels already on one reference).

    Returns
    -------
    Comparison

    Notes
    -----
    Alignment adds ``offset = mean_P(reference) - mean_P(measured)`` to the measured curve,
    the power means taken with equal weight per log frequency over the alignment band
    (:func:`roommodes.response.align_level`). The median and 90th percentile of
    ``|difference|`` and the rms are taken over the grid points in the band (on a log
    grid: equal weight per fraction of an octave); the correlation is Pearson's ``r`` of
    the two smoothed dB curves there.
    """
    f = _grid(freq_hz)
    m = np.asarray(measured_db, dtype=float)
    r = np.asarray(reference_db, dtype=float)
    if m.shape != f.shape or r.shape != f.shape:
        raise ValueError(f"levels must have the grid's shape {f.shape}, got {m.shape} and {r.shape}")
    if not (np.all(np.isfinite(m)) and np.all(np.isfinite(r))):
        raise ValueError("levels must be finite numbers in dB")
    band, sel = _check_band(f, band_hz, "band_hz")
    ms = smooth_db(f, m, smoothing)
    rs = smooth_db(f, r, smoothing)
    if absolute:
        offset, abd = 0.0, None
    else:
        abd, _ = _check_band(f, band if align_band_hz is None else align_band_hz, "align_band_hz")
        offset = float(align_level(rs, ms, f, abd))
    ms = ms + offset
    d = ms - rs
    ad = np.abs(d[sel])
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = float(np.corrcoef(ms[sel], rs[sel])[0, 1]) if np.std(ms[sel]) > 0 and np.std(rs[sel]) > 0 else math.nan
    return Comparison(f, ms, rs, d, offset, band, abd, float(smoothing or 0), float(np.median(ad)),
                      float(np.percentile(ad, 90)), float(np.sqrt(np.mean(d[sel] ** 2))), float(np.mean(d[sel])),
                      corr, sel)


# ----------------------------------------------------------------------------- features


@dataclass(frozen=True)
class CurveFeature:
    """A peak or dip of a (smoothed) curve.

    Attributes
    ----------
    kind : str
        ``"peak"`` or ``"dip"``.
    freq_hz, level_db : float
    prominence_db : float
        Height above (depth below) the surrounding curve (scipy.signal.find_peaks).
    width_octaves : float
        Width at half the prominence, in octaves.
    """
    kind: str
    freq_hz: float
    level_db: float
    prominence_db: float
    width_octaves: float


def find_features(freq_hz, level_db, band_hz=DEFAULT_BAND_HZ, min_prominence_db=3.0):
    """Peaks and dips of a curve inside a band, by prominence.

    Parameters
    ----------
    freq_hz : array_like (F,)
        Grid, Hz, rising.
    level_db : array_like (F,)
        The curve (smooth it first: features are taken as they stand).
    band_hz : (float, float)
    min_prominence_db : float
        Smallest prominence kept, dB, > 0.

    Returns
    -------
    list of CurveFeature
        Sorted by frequency.

    Notes
    -----
    Extrema are found by ``scipy.signal.find_peaks`` on the grid (an extremum at either
    end of the grid is not a feature) and refined by a parabola through the three grid
    points around each, in ``(log2 f, dB)``.
    """
    from scipy.signal import find_peaks, peak_widths  # here, not at the top: scipy.signal is slow to import

    f = _grid(freq_hz)
    y = np.asarray(level_db, dtype=float)
    if not min_prominence_db > 0:
        raise ValueError(f"min_prominence_db must be > 0 dB, got {min_prominence_db!r}")
    lo, hi = band_hz
    log2f = np.log2(f)
    out = []
    for kind, sign in (("peak", 1.0), ("dip", -1.0)):
        idx, props = find_peaks(sign * y, prominence=min_prominence_db)
        if idx.size == 0:
            continue
        widths = peak_widths(sign * y, idx, rel_height=0.5, prominence_data=(
            props["prominences"], props["left_bases"], props["right_bases"]))
        left = np.interp(widths[2], np.arange(f.size), log2f)
        right = np.interp(widths[3], np.arange(f.size), log2f)
        # parabolic interpolation of the extremum in (log2 f, dB) between grid points
        y0, y1, y2 = y[idx - 1], y[idx], y[idx + 1]
        den = y0 - 2 * y1 + y2
        delta = np.clip(np.where(den != 0, 0.5 * (y0 - y2) / np.where(den != 0, den, 1.0), 0.0), -0.5, 0.5)
        step = np.where(delta >= 0, log2f[np.minimum(idx + 1, f.size - 1)] - log2f[idx],
                        log2f[idx] - log2f[idx - 1])
        f_top = 2.0 ** (log2f[idx] + delta * step)
        y_top = y1 - 0.25 * (y0 - y2) * delta
        for fi, yi, prom, wl, wr in zip(f_top, y_top, props["prominences"], left, right):
            if lo <= fi <= hi:
                out.append(CurveFeature(kind, float(fi), float(yi), float(prom), float(wr - wl)))
    return sorted(out, key=lambda t: t.freq_hz)


@dataclass(frozen=True)
class FeatureMatch:
    """A measured feature and the reference feature paired with it.

    Either side may be missing (``None``): a measured peak with nothing predicted near it,
    or a predicted one that the measurement does not show.

    Attributes
    ----------
    kind : str
    measured, reference : CurveFeature or None
    ratio : float
        ``measured.freq_hz / reference.freq_hz`` (NaN when unpaired).
    cause : str
        For a predicted feature: the mode or boundary behind it ("" if unknown).
    mode : tuple of int or None
        Indices of the mode behind a predicted peak.
    axis : str or None
        ``"length"``, ``"width"`` or ``"height"`` when that mode is axial.
    """
    kind: str
    measured: CurveFeature | None
    reference: CurveFeature | None
    ratio: float
    cause: str = ""
    mode: tuple | None = None
    axis: str | None = None

    def to_dict(self):
        """JSON-ready values (the ``features`` entries of ``compare --json``)."""
        a, b = self.measured, self.reference
        return {"kind": self.kind, "measured_hz": None if a is None else a.freq_hz,
                "reference_hz": None if b is None else b.freq_hz, "ratio": self.ratio,
                "measured_level_db": None if a is None else a.level_db,
                "reference_level_db": None if b is None else b.level_db,
                "measured_prominence_db": None if a is None else a.prominence_db,
                "reference_prominence_db": None if b is None else b.prominence_db,
                "cause": self.cause, "mode": self.mode, "axis": self.axis}


class _Explainer:
    """Names the mode or boundary most likely behind a predicted feature.

    A peak is put down to the mode within its half-power bandwidth (or 3 %) that couples
    most strongly to the source and the receivers (``|psi(source)| rms(psi(receivers))``);
    a dip to a first boundary notch ``c / 4d`` of the source within 15 %.
    """
    def __init__(self, room, source_m, receivers_m, fmax_hz):

        self.modes = room_modes(room, fmax_hz * 1.25)
        idx = self.modes.indices
        self.psi_s = np.abs(mode_shapes(idx, room.size_m, [source_m])[0])
        self.psi_r = np.sqrt(np.mean(mode_shapes(idx, room.size_m, receivers_m) ** 2, axis=0))
        self.notches = boundary_notches(room, source_m)[:3]

    def __call__(self, feature):
        """``(cause, mode indices or None, axis or None)`` for ``feature``."""
        fp = feature.freq_hz
        ms = self.modes
        if feature.kind == "peak":
            near = np.abs(ms.freq_hz - fp) <= np.maximum(ms.bandwidth_hz, 0.03 * fp)
            coupling = self.psi_s * self.psi_r * near
            if coupling.size and coupling.max() > 0.05:
                j = int(np.argmax(coupling))
                n = tuple(int(v) for v in ms.indices[j])
                axis = _AXES[int(np.flatnonzero(ms.indices[j])[0])] if ms.order[j] == 1 else None
                return f"{ms.kind[j]} mode {n} at {ms.freq_hz[j]:.1f} Hz", n, axis
            return "", None, None
        for wall, d, fn in self.notches:
            if abs(fn - fp) <= 0.15 * fp:
                return f"{wall}-surface cancellation (c/4d = {fn:.0f} Hz, d = {d:.2f} m)", None, None
        return "", None, None


def match_features(measured, reference, *, max_distance_octaves=0.25, room=None, source_m=None,
                   receivers_m=None):
    """Pair measured peaks and dips with reference ones of the same kind, nearest first.

    Parameters
    ----------
    measured, reference : list of CurveFeature
        From :func:`find_features` on the two (identically smoothed) curves.
    max_distance_octaves : float
        Largest frequency distance of a pair, octaves, > 0 (1/4 octave: about 19 %).
    room : Room, optional
        With ``source_m`` and ``receivers_m`` (the reference being a prediction): name the
        mode or the boundary behind each reference feature.
    source_m : array_like (3,)
    receivers_m : array_like (M, 3)

    Returns
    -------
    list of FeatureMatch
        Pairs first, then unpaired measured and unpaired reference features, each by frequency.

    Notes
    -----
    All pairs of the same kind within the distance are sorted by ``|log2(f_m / f_r)|`` and
    taken greedily, each feature at most once. The ratio ``f_m / f_r`` of an axial mode's
    pair is the inverse ratio of the effective and nominal dimension, since an axial mode
    lies at ``n c / (2 L)`` (Rayleigh; Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3).
    """
    if not max_distance_octaves > 0:
        raise ValueError(f"max_distance_octaves must be > 0, got {max_distance_octaves!r}")
    pairs = []
    for i, a in enumerate(measured):
        for j, b in enumerate(reference):
            if a.kind == b.kind:
                d = abs(math.log2(a.freq_hz / b.freq_hz))
                if d <= max_distance_octaves:
                    pairs.append((d, i, j))
    used_m, used_r, taken = set(), set(), []
    for _d, i, j in sorted(pairs):
        if i not in used_m and j not in used_r:
            used_m.add(i)
            used_r.add(j)
            taken.append((i, j))
    explain = None
    if room is not None and source_m is not None and reference:
        rec = np.atleast_2d(np.asarray(source_m if receivers_m is None else receivers_m, dtype=float))
        explain = _Explainer(room, source_m, rec, max(b.freq_hz for b in reference))

    def info(feature):
        return explain(feature) if explain is not None else ("", None, None)

    out = []
    for i, j in sorted(taken, key=lambda t: measured[t[0]].freq_hz):
        a, b = measured[i], reference[j]
        out.append(FeatureMatch(a.kind, a, b, a.freq_hz / b.freq_hz, *info(b)))
    out += [FeatureMatch(a.kind, a, None, math.nan) for i, a in enumerate(measured) if i not in used_m]
    out += [FeatureMatch(b.kind, None, b, math.nan, *info(b)) for j, b in enumerate(reference) if j not in used_r]
    return out


def interpret(matches, comparison=None, room=None, names=("measured", "predicted")):
    """Say in words what a consistent difference between the curves suggests.

    Parameters
    ----------
    matches : list of FeatureMatch
    comparison : Comparison, optional
        For an overall verdict from the error figures.
    room : Room, optional
        For effective dimensions from the axial-mode ratios.
    names : (str, str)
        What the two curves are called ("measured", "predicted").

    Returns
    -------
    tuple of str
        Plain-language statements, most important first.

    Notes
    -----
    Rules (thresholds are common practice, not from a standard):
    * Frequency shift: with at least three paired peaks (else all pairs), a median
      ratio at least 1.5 % from 1 with three quarters or more of the pairs on the same
      side. Lower measured frequencies mean the room behaves larger than the file says:
      a wall that moves (lightweight construction) or an opening (a door left open)
      lets the sound field reach beyond the surfaces; higher ones, smaller (large
      furniture, a wrong dimension). Axial modes along one axis give an effective
      dimension that acts longer when the ratio is below 1 (axial modes at ``n c / 2L``,
      Rayleigh); by how much is left to :func:`roommodes.analysis.fit.estimate_effective_size`,
      the one estimate of the effective dimensions.
    * Damping: paired peaks lower by 2 dB or more (median prominence difference) or
      30 % broader suggest more damping than the surfaces in the file give (more
      absorption, leaky walls); the reverse, less.
    * Overall: median |difference| below 1.5 dB good, below 3 dB fair, else poor.
    """
    a_name, b_name = names
    out = []
    paired = [m for m in matches if m.measured is not None and m.reference is not None]
    peaks = [m for m in paired if m.kind == "peak"]
    use = peaks if len(peaks) >= 3 else paired
    if len(use) >= 2:
        ratios = np.array([m.ratio for m in use])
        med = float(np.median(ratios))
        below = float(np.mean(ratios < 1.0))
        if abs(med - 1.0) >= 0.015 and (below >= 0.75 or below <= 0.25):
            pct = abs(med - 1.0) * 100
            if med < 1:
                out.append(f"{a_name.capitalize()} peaks and dips sit consistently lower in frequency than "
                           f"{b_name} ones (median ratio {med:.3f}, {pct:.1f} % lower): the room behaves as if it "
                           "were larger than the file says. Common causes: an open door or opening, or a "
                           "lightweight wall that moves with the sound; check the dimensions too.")
            else:
                out.append(f"{a_name.capitalize()} peaks and dips sit consistently higher in frequency than "
                           f"{b_name} ones (median ratio {med:.3f}, {pct:.1f} % higher): the room behaves as if it "
                           "were smaller than the file says. Check the dimensions; large furniture or a "
                           "built-in unit can shorten a dimension.")
    if room is not None:
        for ai, axis in enumerate(_AXES):
            rs = [m.ratio for m in paired if m.axis == axis]
            if rs:
                r = float(np.median(rs))
                if abs(r - 1.0) >= 0.015:
                    # the ratio says which way; the figure comes from fit.estimate_effective_size alone
                    way = "longer" if r < 1 else "shorter"
                    out.append(f"{axis.capitalize()} modes: median ratio {r:.3f} over {len(rs)} pair(s): the "
                               f"{axis} acts {way} than the file's {room.size_m[ai]:.2f} m.")
    if peaks:
        dprom = float(np.median([m.measured.prominence_db - m.reference.prominence_db for m in peaks]))
        wr = float(np.median([m.measured.width_octaves / max(m.reference.width_octaves, 1e-6) for m in peaks]))
        more = [t for t, hit in ((f"lower ({dprom:+.1f} dB)", dprom <= -2.0), (f"broader (x{wr:.2f})", wr >= 1.3)) if hit]
        less = [t for t, hit in ((f"higher ({dprom:+.1f} dB)", dprom >= 2.0), (f"narrower (x{wr:.2f})", wr <= 0.75))
                if hit]
        model_why = {
            "more": ("more damping than the surfaces in the file give (more absorption at low frequency, leaky "
                     "walls or doors); `roommodes fit` can estimate it."),
            "less": ("less damping than the surfaces in the file give (the absorption values may be too high at "
                     "low frequency)."),
        }
        for terms, other, word, couples in ((more, less, "more", "less"), (less, more, "less", "more")):
            if terms and not other:
                why = model_why[word] if b_name == "predicted" else (
                    f"the room was {word} damped when the {a_name} curve was measured (or the position couples "
                    f"{couples} to the modes).")
                out.append(f"{a_name.capitalize()} peaks are {' and '.join(terms)} than {b_name} ones: {why}")
    if comparison is not None:
        med = comparison.median_abs_diff_db
        lo, hi = comparison.band_hz
        word = "good" if med < 1.5 else "fair" if med < 3.0 else "poor"
        out.append(f"Agreement over {lo:g}-{hi:g} Hz is {word}: median |difference| {med:.1f} dB, "
                   f"90th percentile {comparison.p90_abs_diff_db:.1f} dB, correlation {comparison.correlation:.2f}.")
        if word == "poor" and b_name == "predicted":
            out.append("Large differences: check the channel, the speaker and microphone positions, the "
                       "dimensions, and that the measurement is not dominated by noise.")
    return tuple(out)


# ----------------------------------------------------------------------------- whole chain


@dataclass(frozen=True, eq=False)
class ComparisonReport:
    """Everything :func:`compare_to_prediction` or :func:`compare_measurements` found.

    Attributes
    ----------
    comparison : Comparison
    matches : list of FeatureMatch
    interpretation : tuple of str
    measured : Measurement
        The (averaged) first curve, unsmoothed, on the common grid.
    reference : Measurement or Response
        The prediction or the second measurement, unsmoothed, on the common grid.
    names : (str, str)
    positions_m : ndarray (M, 3) or None
        Microphone positions the prediction used.
    channel : str or None
    effective : EffectiveSize or None
        The effective dimensions (:func:`roommodes.analysis.fit.estimate_effective_size`),
        when they were estimated.
    """
    comparison: Comparison
    matches: list
    interpretation: tuple
    measured: Measurement
    reference: object
    names: tuple
    positions_m: np.ndarray | None = None
    channel: str | None = None
    effective: object = None

    def to_dict(self):
        """JSON-ready values: the keys of ``compare --json`` (shared/ARCHITECTURE.md)."""
        c, first = self.comparison, self.measured
        spread = None
        if first.std_db is not None:
            spread = np.interp(np.log(c.freq_hz), np.log(first.freq_hz), first.std_db)
        return {
            "frequencies_hz": c.freq_hz, "measured_db": c.measured_db, "reference_db": c.reference_db,
            "difference_db": c.difference_db, "median_abs_diff_db": c.median_abs_diff_db,
            "p90_abs_diff_db": c.p90_abs_diff_db, "rms_diff_db": c.rms_diff_db, "mean_diff_db": c.mean_diff_db,
            "correlation": c.correlation, "offset_db": c.offset_db, "band_hz": c.band_hz,
            "align_band_hz": c.align_band_hz, "resolution_hz": first.resolution_hz, "sources": list(first.sources),
            "band_fraction": first.band_fraction, "spread_db": spread,
            "features": [m.to_dict() for m in self.matches], "interpretation": list(self.interpretation),
            "names": list(self.names),
            "effective_size": None if self.effective is None else self.effective.to_dict(),
        }


def _on_grid(curve, f):
    return np.interp(np.log(f), np.log(curve.freq_hz), curve.level_db)


def _common_grid(a, b):
    lo = max(a.freq_hz[0], b.freq_hz[0])
    hi = min(a.freq_hz[-1], b.freq_hz[-1])
    f = a.freq_hz[(a.freq_hz >= lo) & (a.freq_hz <= hi)]
    if f.size < 3:
        raise ValueError(f"the curves share too little of their frequency range ({lo:g}-{hi:g} Hz)")
    return f


def compare_to_prediction(room, measured, channel=None, positions_m=None, *, band_hz=DEFAULT_BAND_HZ,
                          smoothing=DEFAULT_SMOOTHING, align_band_hz=None, absolute=False, method=DEFAULT_METHOD,
                          min_prominence_db=3.0, max_distance_octaves=0.25, fit_targets=None, **options):
    """Compare a measurement with the model's prediction for the same speaker and position.

    Parameters
    ----------
    room : Room
    measured : Measurement
        One curve, or an average (:func:`average_measurements`).
    channel : str or None
        The measured speaker; None when the room has one.
    positions_m : array_like (M, 3), optional
        Microphone position(s), m; the prediction is power-averaged over them like the
        measurements. Default: the seat.
    band_hz, smoothing, align_band_hz, absolute
        As in :func:`compare_curves`.
    method : {"modal", "image"}
    min_prominence_db, max_distance_octaves
        As in :func:`find_features` and :func:`match_features`.
    fit_targets : sequence of FitTarget, optional
        The measurements behind ``measured``, each with its position: the effective
        dimensions are estimated from them (:func:`roommodes.analysis.fit.estimate_effective_size`,
        with this band, smoothing, solver and ``absolute``), as ``fit`` does. Not for band data.
    **options
        Passed to the solver.

    Returns
    -------
    ComparisonReport
    """
    sp = speaker_by_name(room, channel)
    pos = np.atleast_2d(np.asarray(room.layout.seat_m if positions_m is None else positions_m, dtype=float))
    f = measured.freq_hz
    if measured.band_fraction:
        pred = predicted_band_levels(room, sp.name, pos, f, measured.band_fraction, method=method, **options)
        comp = compare_curves(f, measured.level_db, pred, band_hz=band_hz, smoothing=0,
                              align_band_hz=align_band_hz, absolute=absolute)
        words = [f"These are 1/{measured.band_fraction}-octave band levels: they are compared band by band with "
                 "the prediction integrated into the same bands. Bands are too broad to resolve single modes, so "
                 "no peaks or dips are matched and no effective dimensions are read from them; measure with a "
                 "sweep (roommodes sweep, ir) for that. What band levels can show is the broad balance and, "
                 "through the overall level of the modal region, the mean absorption."]
        ref = Response(f, pred, f"predicted ({method}), in bands", band_fraction=measured.band_fraction)
        return ComparisonReport(comp, (), words, measured, ref, ("measured", "predicted"), pos, sp.name)
    pred = predicted_level(room, sp.name, pos, f, method=method, **options)
    comp = compare_curves(f, measured.level_db, pred, band_hz=band_hz, smoothing=smoothing,
                          align_band_hz=align_band_hz, absolute=absolute)
    fm = find_features(f, comp.measured_db, comp.band_hz, min_prominence_db)
    fr = find_features(f, comp.reference_db, comp.band_hz, min_prominence_db)
    matches = match_features(fm, fr, max_distance_octaves=max_distance_octaves, room=room,
                             source_m=sp.position_m, receivers_m=pos)
    words = interpret(matches, comp, room)
    effective = None
    if fit_targets:
        effective, _ = estimate_effective_size(room, fit_targets, band_hz=band_hz, smoothing=smoothing,
                                               method=method, absolute=absolute)
        words = words + (_effective_words(effective),)
    ref = Response(f, pred, f"predicted ({method})")
    return ComparisonReport(comp, matches, words, measured, ref, ("measured", "predicted"), pos, sp.name, effective)


def _effective_words(eff):
    """One sentence on the effective dimensions (the same figures ``fit`` reports)."""
    parts = []
    for nm, v, v0, se, bound in zip(("length", "width", "height"), eff.size_m, eff.file_size_m, eff.std_error_m,
                                    eff.at_bound):
        moved = f"{(v / v0 - 1) * 100:+.1f} %" + (", at its bound" if bound else "")
        parts.append(f"{nm} {v:.3f} m (file {v0:.3f} m, {moved}, +-{se:.3f} m)")
    return ("Effective dimensions, from the model fitted to these measurements as `roommodes fit` does: "
            + "; ".join(parts) + ".")


def compare_measurements(first, second, *, band_hz=DEFAULT_BAND_HZ, smoothing=DEFAULT_SMOOTHING,
                         align_band_hz=None, absolute=False, min_prominence_db=3.0, max_distance_octaves=0.25):
    """Compare two measurements (left against right, before against after a change).

    Parameters
    ----------
    first, second : Measurement
        The difference is ``first - second``.
    band_hz, smoothing, align_band_hz, absolute, min_prominence_db, max_distance_octaves
        As in :func:`compare_to_prediction`. ``absolute=True`` keeps a level change
        between the two (same chain, same gain).

    Returns
    -------
    ComparisonReport
    """
    f = _common_grid(first, second)
    a = _on_grid(first, f)
    b = _on_grid(second, f)
    comp = compare_curves(f, a, b, band_hz=band_hz, smoothing=smoothing, align_band_hz=align_band_hz,
                          absolute=absolute)
    fm = find_features(f, comp.measured_db, comp.band_hz, min_prominence_db)
    fr = find_features(f, comp.reference_db, comp.band_hz, min_prominence_db)
    matches = match_features(fm, fr, max_distance_octaves=max_distance_octaves)
    names = (first.label or "first", second.label or "second")
    words = interpret(matches, comp, None, names=("first", "second"))
    shown = [Measurement(f, lv, n, sources=m.sources, resolution_hz=m.resolution_hz)
             for lv, n, m in ((a, names[0], first), (b, names[1], second))]
    return ComparisonReport(comp, matches, words, *shown, names)


def share_inside(level_db, low_db, high_db, mask=None):
    """Share (0..1) of the grid points where ``low_db <= level_db <= high_db``.

    ``mask`` (bool, same shape) limits the count to those points, e.g. a comparison's
    ``in_band``.
    """
    x = np.asarray(level_db, dtype=float)
    inside = (x >= np.asarray(low_db, dtype=float)) & (x <= np.asarray(high_db, dtype=float))
    if mask is not None:
        inside = inside[np.asarray(mask, dtype=bool)]
    return float(np.mean(inside)) if inside.size else math.nan


@dataclass(frozen=True, eq=False)
class ModelBand:
    """The 10-90 % band of the predicted curve over drawn rooms, on a comparison's grid.

    Attributes
    ----------
    freq_hz : ndarray (F,)
    level_db_p10, level_db_p50, level_db_p90 : ndarray (F,)
        Percentiles over the drawn rooms of the smoothed (and, in level-aligned mode,
        aligned) predicted curve, dB.
    n_samples, seed : int
    inside_share : float
        Share of the comparison band's grid points where the measured curve lies in the band.
    """

    freq_hz: np.ndarray
    level_db_p10: np.ndarray
    level_db_p50: np.ndarray
    level_db_p90: np.ndarray
    n_samples: int
    seed: int
    inside_share: float

    def to_dict(self):
        """JSON-ready keys (``model_db_p10``/``p50``/``p90`` on the comparison's frequencies)."""
        return {"model_db_p10": self.level_db_p10.tolist(), "model_db_p50": self.level_db_p50.tolist(),
                "model_db_p90": self.level_db_p90.tolist(), "model_band_samples": self.n_samples,
                "model_band_seed": self.seed, "measured_inside_band_share": self.inside_share}


def model_band(room, report, *, n_samples=DEFAULT_SAMPLES, seed=DEFAULT_SEED, method=DEFAULT_METHOD, **options):
    """The predicted curve of a comparison over rooms drawn from ``room.uncertainty``.

    Each drawn room (:func:`roommodes.analysis.uncertainty.ensemble_levels`, at the
    report's speaker and microphone positions, drawn with them) gives the speaker's level
    power-averaged over the positions, smoothed as the comparison smoothed its curves.
    When the comparison aligned levels, each drawn curve is shifted so its power mean over
    the alignment band matches the nominal predicted curve's (the band then shows the
    uncertainty of the shape, as the comparison judges only the shape); with ``absolute``
    the curves are left as they are.

    Parameters
    ----------
    room : Room
    report : ComparisonReport
        From :func:`compare_to_prediction` with the same room; not for band data.
    n_samples, seed : int
    method : str
        The solver; use the comparison's.
    **options
        Passed to the solver.

    Returns
    -------
    ModelBand
    """
    if report.measured.band_fraction:
        raise ValueError("a band of the model over drawn rooms needs a fine-resolution measurement (an impulse "
                         "response or a frequency-response file), not band levels")
    c = report.comparison
    f = c.freq_hz
    names = [s.name for s in room.layout.speakers]
    k = names.index(report.channel)
    lv = ensemble_levels(room, f, points_m=np.atleast_2d(report.positions_m), n_samples=n_samples, seed=seed,
                         method=method, **options)[:, k]
    curves = 10.0 * np.log10(np.mean(10.0 ** (lv / 10.0), axis=1))
    curves = np.array([smooth_db(f, cv, c.smoothing) for cv in curves])
    if c.align_band_hz is not None:
        curves = np.array([cv + align_level(c.reference_db, cv, f, c.align_band_hz) for cv in curves])
    p10, p50, p90 = np.percentile(curves, [10.0, 50.0, 90.0], axis=0)
    return ModelBand(f, p10, p50, p90, int(curves.shape[0]), int(seed),
                     share_inside(c.measured_db, p10, p90, c.in_band))
