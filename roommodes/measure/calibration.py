"""Absolute sound pressure level: a recording of an acoustic calibrator sets the SPL of
digital full scale.

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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .signals import level_dbfs

__all__ = ["SplReference", "calibrator_reference", "tone_level_dbfs"]

#: Calibrator levels accepted, dB SPL (class 1 and 2 calibrators of IEC 60942 play 94, 104,
#: 114 or 124 dB; the range leaves room for others).
CALIBRATOR_SPL_RANGE_DB = (70.0, 140.0)
#: The tone must carry this share of the recording's power (within 1 dB of all of it):
#: otherwise the recording is noise, a wrong file or a calibrator that was not seated.
_TONE_SHARE_DB = 1.0
#: The tone's frequency must lie within this fraction of the stated one.
_FREQ_TOLERANCE = 0.05


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
    calibrator_spl_db: float
    calibrator_hz: float
    tone_dbfs: float
    tone_hz: float
    source: str = ""

    def describe(self):
        """One line for the output."""
        return (f"absolute SPL from the calibrator recording {self.source}: {self.calibrator_spl_db:g} dB SPL at "
                f"{self.calibrator_hz:g} Hz read {self.tone_dbfs:.2f} dBFS, so 0 dBFS = "
                f"{self.full_scale_spl_db:.2f} dB SPL")

    def to_dict(self):
        return {"full_scale_spl_db": self.full_scale_spl_db, "calibrator_spl_db": self.calibrator_spl_db,
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
    and taken off). The tone's power is the power of the Hann-windowed spectrum within
    1/3 octave of the peak, scaled by the window's noise bandwidth (Harris, Proc. IEEE 66
    (1978) 51, table 1: 1.5 bins for Hann), which gives a sine's rms to well within 0.01 dB.
    """
    x = np.asarray(x, dtype=float)
    n0 = x.size // 10
    seg = x[n0:x.size - n0]
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
