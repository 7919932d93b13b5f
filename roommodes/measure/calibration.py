"""Absolute sound pressure level: a recording of an acoustic calibrator, or of pink noise
read on a sound-level meter at the same point, sets the SPL of digital full scale.

An acoustic calibrator (IEC 60942) fitted over the measurement microphone plays a sine of
stated level, commonly 94 dB SPL (1 Pa rms) or 114 dB SPL at 1 kHz. Recorded through the
same microphone, interface and input gain as the measurements, its level in dBFS fixes the
chain's sensitivity:

    L_fs = L_cal - L_tone

where ``L_fs`` is the SPL at the microphone that would read 0 dBFS (a full-scale sine; the
dBFS convention of :mod:`roommodes.measure.signals`), ``L_cal`` the calibrator's stated
level and ``L_tone`` the recorded tone's level in dBFS. A level ``L`` in dBFS measured with
the same chain is then ``L + L_fs`` dB SPL re 20 uPa.

An impulse response from :func:`roommodes.measure.deconvolve.deconvolve` is the recording
divided by the played signal, so its level ``20 log10 |H(f)|`` is the dBFS a full-scale
sine played at ``f`` would give at the microphone; plus ``L_fs`` it is the SPL a
full-scale input produces at the seat at the playback volume of the measurement.

Without a calibrator, a sound-level meter does the same job with steady broadband noise
(:func:`meter_reference`): the noise is played through a speaker, the meter beside the
measurement microphone reads ``L_meter`` (C- or Z-weighted, time weighting slow), and the
microphone records the same noise through the measurement chain. The recording's level in
dBFS, weighted as the meter was and limited to the noise's band, takes the place of the
tone's level: ``L_fs = L_meter - L_noise``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..io.importers import weighting_db
from .signals import level_dbfs

__all__ = ["SplReference", "calibrator_reference", "meter_reference", "noise_level_dbfs", "tone_level_dbfs"]

#: Calibrator levels accepted, dB SPL (class 1 and 2 calibrators of IEC 60942 play 94, 104,
#: 114 or 124 dB; the range leaves room for others).
CALIBRATOR_SPL_RANGE_DB = (70.0, 140.0)
#: The tone must carry this share of the recording's power (within 1 dB of all of it):
#: otherwise the recording is noise, a wrong file or a calibrator that was not seated.
_TONE_SHARE_DB = 1.0
#: The tone's frequency must lie within this fraction of the stated one.
_FREQ_TOLERANCE = 0.05
#: Meter readings accepted, dB SPL: below 40 dB the room's background noise weighs in; above
#: 130 dB no measurement here needs to go (and hearing is at risk well before).
METER_SPL_RANGE_DB = (40.0, 130.0)
#: Meter weightings the recording can be weighted like (IEC 61672-1: C, and Z = zero weighting).
METER_WEIGHTINGS = ("C", "Z")
#: Shortest noise recording, s: a meter on slow (1 s time constant) needs several seconds to settle.
_NOISE_MIN_S = 5.0
#: Longest stretch of a noise recording analysed, s (its middle).
_NOISE_MAX_S = 60.0
#: Quietest in-band noise recording, dBFS: below it the interface's own noise and hum weigh in.
_NOISE_MIN_DBFS = -60.0
#: Largest typical (median over the 1/3-octave bands) standard deviation of a band's level
#: from one 1 s block to the next, dB: steady noise gives about 0.3-2 dB (less in wider
#: bands), a sweep, music or intermittent sound much more.
_NOISE_STEADY_DB = 3.0
#: Largest share of the in-band power that 1/3 octave around the strongest frequency may hold:
#: a tone holds nearly all; pink noise coloured by a +15 dB room mode in 30-200 Hz about 55 %.
_NOISE_ONE_BAND_SHARE = 0.9
#: Most that the recording may hold outside the noise's band (10 Hz .. 0.45 fs), relative to
#: what it holds in it, dB: more means the noise was played in another band than stated
#: (and the meter, which hears it, would read more than the band's level: 0.2 dB at -13 dB).
_NOISE_OUT_OF_BAND_DB = -13.0


@dataclass(frozen=True)
class SplReference:
    """The SPL of digital full scale for one measurement chain.

    Attributes
    ----------
    full_scale_spl_db : float
        SPL at the microphone that reads 0 dBFS (a full-scale sine), dB re 20 uPa.
    calibrator_spl_db, calibrator_hz : float
        The calibrator's stated level and frequency.
    tone_dbfs : float
        The recorded tone's level, dBFS.
    tone_hz : float
        The tone's frequency found in the recording, Hz.
    source : str
        The calibrator recording's name.
    """

    full_scale_spl_db: float
    calibrator_spl_db: float | None
    calibrator_hz: float | None
    tone_dbfs: float | None
    tone_hz: float | None
    source: str = ""
    #: "calibrator" or "meter" (a meter reading of noise; the calibrator fields are then None).
    kind: str = "calibrator"
    #: The meter's reading, dB SPL, its weighting ("C" or "Z"), the noise's band (Hz) and the
    #: recording's level in that band with that weighting (dBFS).
    meter_spl_db: float | None = None
    weighting: str | None = None
    band_hz: tuple | None = None
    noise_dbfs: float | None = None

    def describe(self):
        """One line for the output."""
        if self.kind == "meter":
            lo, hi = self.band_hz
            return (f"absolute SPL from a meter reading of noise: {self.meter_spl_db:g} dB({self.weighting}) at the "
                    f"microphone, while {self.source} read {self.noise_dbfs:.2f} dBFS ({self.weighting}-weighted, "
                    f"{lo:g}-{hi:g} Hz), so 0 dBFS = {self.full_scale_spl_db:.2f} dB SPL")
        return (f"absolute SPL from the calibrator recording {self.source}: {self.calibrator_spl_db:g} dB SPL at "
                f"{self.calibrator_hz:g} Hz read {self.tone_dbfs:.2f} dBFS, so 0 dBFS = "
                f"{self.full_scale_spl_db:.2f} dB SPL")

    def to_dict(self):
        if self.kind == "meter":
            return {"kind": "meter", "full_scale_spl_db": self.full_scale_spl_db, "meter_spl_db": self.meter_spl_db,
                    "weighting": self.weighting, "band_hz": list(self.band_hz), "noise_dbfs": self.noise_dbfs,
                    "source": self.source}
        return {"kind": "calibrator", "full_scale_spl_db": self.full_scale_spl_db, "calibrator_spl_db": self.calibrator_spl_db,
                "calibrator_hz": self.calibrator_hz, "tone_dbfs": self.tone_dbfs, "tone_hz": self.tone_hz,
                "source": self.source}


def tone_level_dbfs(x, fs_hz, freq_hz):
    """Level of a steady sine near ``freq_hz`` in a recording, and its frequency.

    Parameters
    ----------
    x : array_like (N,)
        The recording, full-scale units.
    fs_hz : float
    freq_hz : float
        The stated tone frequency, Hz.

    Returns
    -------
    level_dbfs : float
        The tone's rms level, dBFS (a full-scale sine is 0 dBFS).
    tone_hz : float
        The frequency of the largest spectral peak above 10 Hz, Hz (the caller checks it
        against ``freq_hz``).
    share_db : float
        The tone's level minus the whole recording's level, dB (0 for a pure tone).

    Notes
    -----
    The first and last 10 % are left out (handling noise when the calibrator is put on
    and taken off), and of a longer recording only the middle 60 s is used. The tone's
    power is the power of the Hann-windowed spectrum within 1/3 octave of the peak, scaled
    by the window's noise bandwidth (Harris, Proc. IEEE 66 (1978) 51, table 1: 1.5 bins for
    Hann), which gives a sine's rms to well within 0.01 dB.
    """
    x = np.asarray(x, dtype=float)
    n0 = x.size // 10
    seg = x[n0:x.size - n0]
    n_max = int(_NOISE_MAX_S * fs_hz)
    if seg.size > n_max:  # bounded work and memory: the middle minute is plenty for a steady tone
        k0 = (seg.size - n_max) // 2
        seg = seg[k0:k0 + n_max]
    seg = seg - np.mean(seg)
    if seg.size < 1024:
        raise ValueError(f"the calibrator recording is too short ({x.size / fs_hz:.2f} s); record at least 2 s")
    w = np.hanning(seg.size)
    spec = np.abs(np.fft.rfft(seg * w)) ** 2
    f = np.fft.rfftfreq(seg.size, 1.0 / fs_hz)
    # power per bin -> mean-square of the signal: sum|X|^2 * 2 / (N * sum w^2)
    scale = 2.0 / (seg.size * np.sum(w**2))
    if not freq_hz < fs_hz / 2:
        raise ValueError(f"the recording's sample rate ({fs_hz:g} Hz) cannot hold a tone at {freq_hz:g} Hz")
    audible = f >= 10.0
    k = int(np.flatnonzero(audible)[np.argmax(spec[audible])])
    tone_hz = float(f[k])
    band = (f >= tone_hz * 2 ** (-1 / 6)) & (f <= tone_hz * 2 ** (1 / 6))
    ms_tone = float(np.sum(spec[band]) * scale)
    if ms_tone <= 0:
        raise ValueError("the calibrator recording is silent")
    level = 10.0 * math.log10(ms_tone / 0.5)
    share = level - level_dbfs(seg)
    return level, tone_hz, share


def calibrator_reference(x, fs_hz, calibrator_spl_db, calibrator_hz=1000.0, source=""):
    """The :class:`SplReference` of a recording of an acoustic calibrator.

    Parameters
    ----------
    x : array_like (N,)
        The recording of the calibrator's tone, full-scale units, made with the same
        microphone, interface and input gain as the measurements.
    fs_hz : float
    calibrator_spl_db : float
        The calibrator's stated level, dB SPL (94 or 114 for most).
    calibrator_hz : float
        Its frequency, Hz (1000 for most).
    source : str
        The recording's name, for messages.

    Raises
    ------
    ValueError
        A level or frequency out of range, a recording whose strongest tone is not near
        the stated frequency, that is not mostly that tone, or that is clipped.
    """
    lo, hi = CALIBRATOR_SPL_RANGE_DB
    if not (math.isfinite(calibrator_spl_db) and lo <= calibrator_spl_db <= hi):
        raise ValueError(f"the calibrator level must be {lo:g}..{hi:g} dB SPL, got {calibrator_spl_db:g}")
    if not (math.isfinite(calibrator_hz) and 20.0 <= calibrator_hz < 0.45 * fs_hz):
        raise ValueError(f"the calibrator frequency must be 20 Hz..{0.45 * fs_hz:g} Hz (0.45 x the recording's "
                         f"sample rate), got {calibrator_hz:g}")
    x = np.asarray(x, dtype=float)
    if np.max(np.abs(x), initial=0.0) >= 0.999:
        raise ValueError(f"{source}: the calibrator recording reaches full scale (clipped); lower the input gain, "
                         "then record the calibrator and the measurements again with that gain")
    level, tone_hz, share = tone_level_dbfs(x, fs_hz, calibrator_hz)
    if abs(tone_hz / calibrator_hz - 1) > _FREQ_TOLERANCE:
        raise ValueError(f"{source}: its strongest tone lies at {tone_hz:.0f} Hz, not near {calibrator_hz:g} Hz; "
                         "give the calibrator's frequency (DB@HZ) or record the calibrator again")
    if share < -_TONE_SHARE_DB:
        raise ValueError(f"{source}: the tone at {tone_hz:.0f} Hz carries only {share:+.1f} dB of the recording's "
                         "level; it is not a steady calibrator tone (is the calibrator seated on the microphone?)")
    return SplReference(calibrator_spl_db - level, float(calibrator_spl_db), float(calibrator_hz), level, tone_hz,
                        source)


def _third_octave_edges(lo_hz, hi_hz):
    """Edges of the base-10 1/3-octave bands (IEC 61260-1) lying wholly in ``lo_hz..hi_hz``."""
    g = 10**0.3
    x = np.arange(-40, 21)
    fm = 1000.0 * g ** (x / 3)
    lower, upper = fm * g ** (-1 / 6), fm * g ** (1 / 6)
    keep = (lower >= lo_hz * 0.999) & (upper <= hi_hz * 1.001)
    return lower[keep], upper[keep]


def noise_level_dbfs(x, fs_hz, band_hz, weighting="C"):
    """Level of steady noise in a recording, weighted as a sound-level meter and limited to a band.

    Parameters
    ----------
    x : array_like (N,)
        The recording, full-scale units.
    fs_hz : float
    band_hz : (float, float)
        The noise's band, Hz.
    weighting : {"C", "Z"}
        The meter's frequency weighting (IEC 61672-1:2013; Z is none).

    Returns
    -------
    level_dbfs : float
        Weighted in-band level, dBFS (a full-scale sine reads 0 dBFS).
    checks : dict
        ``duration_s``, ``block_std_db`` (the median over the 1/3-octave bands of the
        standard deviation of the band's level from one 1 s block to the next),
        ``one_band_share`` (share of the in-band power within 1/3 octave around the
        strongest frequency ``peak_hz``: near 1 for a tone), ``out_of_band_db`` (weighted power in
        10 Hz .. 0.45 fs outside the band, relative to the in-band power).

    Notes
    -----
    The first and last 10 % are left out (the noise starting and stopping), and of a longer
    recording only the middle 60 s is used. The
    rest's periodogram (one DFT of the whole segment, no window; its bins add up to the mean
    square, Parseval) has each bin weighted by ``10**(W(f)/10)``, ``W`` the meter weighting
    (:func:`roommodes.io.importers.weighting_db`), and summed over the band: the power a
    meter with that weighting, averaging over the same time, would see in the band.
    """
    x = np.asarray(x, dtype=float)
    n0 = x.size // 10
    seg = x[n0:x.size - n0]
    n_max = int(_NOISE_MAX_S * fs_hz)
    if seg.size > n_max:  # bounded work and memory: the middle minute is plenty for a level
        k0 = (seg.size - n_max) // 2
        seg = seg[k0:k0 + n_max]
    seg = seg - np.mean(seg)
    # periodogram of the whole segment (no window): by Parseval its bins add up to the
    # segment's mean square exactly, so an unweighted band-limited recording reads its rms
    f = np.fft.rfftfreq(seg.size, 1.0 / fs_hz)
    pw = np.abs(np.fft.rfft(seg)) ** 2 * (2.0 / seg.size**2)
    pw[0] /= 2.0
    if seg.size % 2 == 0:
        pw[-1] /= 2.0
    pos = f > 0
    w = np.zeros_like(f)
    w[pos] = 10 ** (weighting_db(f[pos], weighting) / 10)
    pw = pw * w
    lo, hi = band_hz
    inside = (f >= lo) & (f <= hi)
    ms_in = float(np.sum(pw[inside]))
    level = 10 * math.log10(2 * ms_in) if ms_in > 0 else -math.inf
    outside = (f >= 10.0) & (f <= 0.45 * fs_hz) & ~inside
    ms_out = float(np.sum(pw[outside]))
    out_db = 10 * math.log10(ms_out / ms_in) if ms_in > 0 and ms_out > 0 else -math.inf
    lower, upper = _third_octave_edges(lo, hi)
    share, peak_hz = None, None
    if ms_in > 0:
        k = int(np.flatnonzero(inside)[np.argmax(pw[inside])])
        peak_hz = float(f[k])
        near = inside & (f >= peak_hz * 2 ** (-1 / 6)) & (f <= peak_hz * 2 ** (1 / 6))
        share = float(np.sum(pw[near])) / ms_in
    # steadiness: the level of each 1/3-octave band in 1 s Hann-windowed blocks
    nb = int(round(fs_hz))
    nblk = seg.size // nb
    spread = 0.0
    if nblk >= 3 and lower.size >= 1:
        spec = np.abs(np.fft.rfft(seg[:nblk * nb].reshape(nblk, nb) * np.hanning(nb), axis=1)) ** 2
        fb = np.fft.rfftfreq(nb, 1.0 / fs_hz)
        with np.errstate(divide="ignore"):
            lv = np.stack([10 * np.log10(np.sum(spec[:, (fb >= a) & (fb < b)], axis=1)) for a, b in zip(lower, upper)])
        lv = np.where(np.isfinite(lv), lv, -400.0)
        mean_db = 10 * np.log10(np.mean(10 ** (lv / 10), axis=1) + 1e-300)
        live = mean_db >= np.max(mean_db) - 20.0  # bands the noise fills, not empty ones at the band's edges
        spread = float(np.median(np.std(lv[live], axis=1, ddof=1)))
    return level, {"duration_s": x.size / fs_hz, "block_std_db": spread, "one_band_share": share, "peak_hz": peak_hz,
                   "out_of_band_db": out_db}


def meter_reference(x, fs_hz, meter_spl_db, weighting="C", band_hz=None, source=""):
    """The :class:`SplReference` of a sound-level meter's reading of steady noise.

    Parameters
    ----------
    x : array_like (N,)
        A recording of the noise (``roommodes noise``) made with the measurement microphone
        beside the meter, through the same microphone, interface and input gain as the
        measurements.
    fs_hz : float
    meter_spl_db : float
        The meter's reading, dB SPL, 40..130.
    weighting : {"C", "Z"}
        The meter's frequency weighting (time weighting slow).
    band_hz : (float, float), optional
        The band the noise was played in; default 20 Hz .. 20 kHz (or 0.45 fs if lower), the
        default of ``roommodes noise``.
    source : str
        The recording's name, for messages.

    Raises
    ------
    ValueError
        A reading or weighting out of range; a recording that is clipped, shorter than 5 s,
        quieter than -60 dBFS in the band, not steady, not broadband, or mostly outside the
        band.
    """
    lo_db, hi_db = METER_SPL_RANGE_DB
    if not (math.isfinite(meter_spl_db) and lo_db <= meter_spl_db <= hi_db):
        raise ValueError(f"the meter reading must be {lo_db:g}..{hi_db:g} dB SPL, got {meter_spl_db:g}")
    w = str(weighting).upper()
    if w not in METER_WEIGHTINGS:
        raise ValueError(f"the meter's weighting must be C or Z (zero, flat), got '{weighting}'; A-weighting "
                         "discounts the bass by up to 50 dB, so set the meter to C or Z and read it again")
    if band_hz is None:
        band_hz = (20.0, min(20000.0, 0.45 * fs_hz))
    lo, hi = (float(v) for v in band_hz)
    if not (math.isfinite(lo) and math.isfinite(hi) and 10.0 <= lo and hi >= 2 * lo and hi <= 0.45 * fs_hz):
        raise ValueError(f"the noise's band must span at least an octave within 10 Hz..{0.45 * fs_hz:g} Hz "
                         f"(0.45 x the recording's sample rate), got {lo:g}-{hi:g} Hz")
    x = np.asarray(x, dtype=float)
    if x.size / fs_hz < _NOISE_MIN_S:
        raise ValueError(f"{source}: the noise recording is too short ({x.size / fs_hz:.1f} s); record at least "
                         f"{_NOISE_MIN_S:g} s (10-20 s is better) while the meter settles")
    if np.max(np.abs(x), initial=0.0) >= 0.999:
        raise ValueError(f"{source}: the noise recording reaches full scale (clipped); lower the input gain, "
                         "then record the noise and the measurements again with that gain")
    level, chk = noise_level_dbfs(x, fs_hz, (lo, hi), w)
    if not level >= _NOISE_MIN_DBFS:
        raise ValueError(f"{source}: the noise reads {level:.1f} dBFS in {lo:g}-{hi:g} Hz, too quiet to measure "
                         f"(at least {_NOISE_MIN_DBFS:g} dBFS); raise the input gain or the playback level")
    if chk["out_of_band_db"] > _NOISE_OUT_OF_BAND_DB:
        raise ValueError(f"{source}: the recording holds {chk['out_of_band_db']:+.1f} dB outside {lo:g}-{hi:g} Hz "
                         "relative to inside; give the band the noise was played in (e.g. 85C@30-200:FILE for noise made "
                         "with --band 30,200)")
    if chk["one_band_share"] is not None and chk["one_band_share"] > _NOISE_ONE_BAND_SHARE:
        raise ValueError(f"{source}: 1/3 octave around {chk['peak_hz']:.0f} Hz holds {100 * chk['one_band_share']:.0f} "
                         f"% of the recording's power in {lo:g}-{hi:g} Hz; it is not broadband noise (a tone or a wrong "
                         "file?); record `roommodes noise` played through the speaker")
    if chk["block_std_db"] > _NOISE_STEADY_DB:
        raise ValueError(f"{source}: the recording's band levels vary by {chk['block_std_db']:.1f} dB (standard "
                         "deviation) from second to second; it is not steady noise (a sweep, music or a disturbance?); record "
                         "`roommodes noise` again in a quiet room")
    return SplReference(float(meter_spl_db) - level, None, None, None, None, source, kind="meter",
                        meter_spl_db=float(meter_spl_db), weighting=w, band_hz=(lo, hi), noise_dbfs=level)
