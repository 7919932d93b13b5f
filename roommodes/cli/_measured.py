"""Command-line pieces shared by the commands that read measurements (compare, fit, eq,
report): the measurement options, reading WAV files and measurement files with one-line
errors, and matching each file to its speaker and microphone position."""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

import click
import numpy as np

from ..analysis.compare import is_wav_file, load_measurement, speaker_by_name
from ..analysis.fit import FitTarget
from ..dsp.response import log_frequencies
from ..io.files import WAV_FILE_BYTES, InputFileError, open_regular
from ..io.importers import read_response_text
from ..io.wavio import read_wav
from ..measure.calibration import calibrator_reference, meter_reference
from ..present.units import parse_lengths
from ._util import fail

__all__ = [
    "mic_cal_option",
    "read_mic_cal",
    "wav_channel_option",
    "smoothing_option",
    "window_option",
    "require_file",
    "channel_message",
    "read_wav_or_fail",
    "parse_point",
    "positions",
    "load_measurements",
    "measured_files_options",
    "measurement_specs",
    "load_fit_targets",
    "spl_ref_option",
    "read_spl_ref",
    "with_spl",
    "spl_ref_input",
]


wav_channel_option = click.option(
    "--wav-channel", type=click.IntRange(1, 65535),
    help="Channel of multi-channel WAV files holding the microphone (1 = first).")


smoothing_option = click.option(
    "--smoothing", type=click.IntRange(0, 48), default=12, show_default=True,
    help="Smoothing of both curves, 1/N octave in power (0: none).")


window_option = click.option(
    "--window", "window_s", type=float, default=1.0, show_default=True,
    help="Window on impulse responses, s: the frequency resolution is about 1/window.")


def require_file(path, what):
    """``path`` as a Path if it is a readable regular file; else one line saying why."""
    p = Path(path)
    try:
        open_regular(p, what, WAV_FILE_BYTES).close()
    except InputFileError as exc:
        fail(str(exc))
    return p


def channel_message(msg, path, wav_channel):
    """Restate a WAV channel error with the command line's 1-based channel numbers."""
    m = re.search(r"has (\d+) channel", msg)
    if m is None:
        return msg
    n = int(m.group(1))
    if wav_channel is None:
        return f"{path}: the file has {n} channels; choose the microphone's with --wav-channel N (1..{n})"
    return f"{path}: --wav-channel {wav_channel} does not exist; the file has {n} channel(s) (1..{n})"


def read_wav_or_fail(path, channel_1based, what="recording"):
    """Read one channel of a WAV file; one-line errors naming the file."""

    p = require_file(path, what)
    if not is_wav_file(p):
        fail(f"{p}: not a WAV file (no RIFF/WAVE header); give the {what} as a WAV file")
    try:
        x, fs, info = read_wav(p, None if channel_1based is None else channel_1based - 1)
    except ValueError as exc:
        fail(channel_message(str(exc), p, channel_1based))
    if not np.all(np.isfinite(x)):
        fail(f"{p}: holds non-finite samples (NaN or infinity)")
    return x, fs, info


def parse_point(text, name="--at"):
    """X,Y,Z from the command line: metres, or lengths with units ("185 cm, 145 cm, 1.2 m",
    "6 ft, 4 ft 9 in, 4 ft"), read as everywhere else (:func:`roommodes.present.units.parse_lengths`)."""
    try:
        v = parse_lengths(text, 3)
    except ValueError:
        v = ()
    if len(v) != 3 or not all(np.isfinite(v)):
        fail(f"{name} must be X,Y,Z: metres (1.85,1.45,1.20) or lengths with units (185 cm, 145 cm, 120 cm); "
             f"got '{text}'")
    return tuple(float(x) for x in v)


def positions(room, at, n_files, name="--at"):
    """Microphone positions: one per file, one for all, or the seat."""
    if not at:
        if room.layout is None:
            fail(f"{room.source}: the room file has no [seat]; give the microphone position with {name} X,Y,Z")
        return [tuple(room.layout.seat_m)] * n_files
    pts = [tuple(room.layout.seat_m) if a.strip().lower() == "seat" and room.layout else parse_point(a, name)
           for a in at]
    for p in pts:
        if not room.contains([p])[0]:
            lx, ly, lz = room.size_m
            fail(f"{name} {p[0]:g},{p[1]:g},{p[2]:g} lies outside the room (0 < x < {lx:g}, 0 < y < {ly:g}, "
                 f"0 < z < {lz:g} m)")
    if len(pts) == 1:
        return pts * n_files
    if len(pts) != n_files:
        fail(f"give {name} once (all measurements at one position) or once per measurement file "
             f"({n_files}), got {len(pts)}")
    return pts


def load_measurements(paths, wav_channel, window_s, freq_hz, mic_cal=None, spl_ref=None):
    """Every measurement file, with the microphone calibration (a path or None) removed and,
    with an :class:`~roommodes.measure.calibration.SplReference`, in dB SPL."""
    cal = read_mic_cal(mic_cal)
    out = []
    for p in paths:
        require_file(p, "measurement")
        try:
            m = load_measurement(p, None if wav_channel is None else wav_channel - 1, window_s, freq_hz, mic_cal=cal)
        except ValueError as exc:
            fail(channel_message(str(exc), p, wav_channel))
        out.append(with_spl(m, spl_ref))
    return out


def with_spl(measurement, spl_ref):
    """A measured curve in dB SPL: its dBFS levels plus the SPL of full scale (unchanged without a reference)."""
    if spl_ref is None:
        return measurement
    return replace(measurement, level_db=np.asarray(measurement.level_db) + spl_ref.full_scale_spl_db,
                   notes=(*measurement.notes, f"dB SPL: {spl_ref.describe()}"))


_SPL_REF = re.compile(r"^\s*([0-9]+(?:\.[0-9]*)?)\s*(?:db)?\s*(?:@\s*([0-9]+(?:\.[0-9]*)?)\s*(k?hz)?)?\s*:(.+)$",
                      re.IGNORECASE)


#: The meter form: LEVEL, the meter's weighting, "@noise" or "@LOW-HIGH" (the noise's band, Hz), ":FILE".
_SPL_METER = re.compile(r"^\s*([0-9]+(?:\.[0-9]*)?)\s*(?:db)?\s*\(?\s*([a-z]*)\s*\)?\s*@\s*"
                        r"(noise|([0-9]+(?:\.[0-9]*)?)\s*-\s*([0-9]+(?:\.[0-9]*)?)\s*(?:hz)?)\s*:(.+)$", re.IGNORECASE)

_SPL_REF_FORMS = ("DB@HZ:FILE, a calibrator's level and frequency and its recording through the measurement chain "
                  "(e.g. 94@1000:cal.wav), or DBW@noise:FILE, a sound-level meter's reading with its weighting "
                  "(C or Z) and a recording of `roommodes noise` at the meter (e.g. 82C@noise:pink-seat.wav; "
                  "85Z@30-200:FILE for noise made with --band 30,200)")


def spl_ref_input(text):
    """The recording named by ``--spl-ref`` as a list of one Path (empty when not given or not
    readable as either form), for the list of inputs no output may overwrite."""
    if not text:
        return []
    m = _SPL_METER.match(text)
    if m:
        return [Path(m.group(6).strip())]
    m = _SPL_REF.match(text)
    return [Path(m.group(4).strip())] if m else []


def read_spl_ref(text, wav_channel=None):
    """``--spl-ref`` as an SplReference (None when not given): ``DB@HZ:FILE``, a calibrator
    recording, or ``DBW@noise:FILE`` / ``DBW@LOW-HIGH:FILE``, a meter reading (weighting W,
    C or Z) of noise recorded at the meter."""
    if text is None:
        return None
    meter = _SPL_METER.match(text)
    if meter is not None:
        return _read_meter_ref(text, meter, wav_channel)
    m = _SPL_REF.match(text)
    if m is None:
        fail(f"--spl-ref must be {_SPL_REF_FORMS}; got '{text}'")
    spl = float(m.group(1))
    hz = 1000.0 if m.group(2) is None else float(m.group(2)) * (1000.0 if (m.group(3) or "").lower() == "khz" else 1.0)
    path = m.group(4).strip()
    x, fs, _ = read_wav_or_fail(path, wav_channel, "calibrator recording")
    try:
        return calibrator_reference(x, fs, spl, hz, source=Path(path).name)
    except ValueError as exc:
        fail(f"--spl-ref {text}: {exc}")


def _read_meter_ref(text, m, wav_channel):
    letter = m.group(2).upper()
    if letter not in ("C", "Z"):
        got = f"got '{m.group(2)}'" if letter else "none given"
        why = ("; A-weighting discounts the bass by up to 50 dB: set the meter to C (or Z, flat) and read it again"
               if letter == "A" else "")
        fail(f"--spl-ref {text}: give the meter's weighting after the level, C or Z (e.g. 82C@noise:FILE), "
             f"{got}{why}")
    band = None if m.group(4) is None else (float(m.group(4)), float(m.group(5)))
    path = m.group(6).strip()
    x, fs, _ = read_wav_or_fail(path, wav_channel, "noise recording")
    try:
        return meter_reference(x, fs, float(m.group(1)), letter, band, source=Path(path).name)
    except ValueError as exc:
        fail(f"--spl-ref {text}: {exc}")


def read_mic_cal(path):
    """The ``--mic-cal`` file as a curve (None when not given); one-line errors naming it."""
    if path is None:
        return None
    require_file(path, "microphone calibration")
    try:
        return read_response_text(path)
    except ValueError as exc:
        fail(f"--mic-cal: {exc}")


mic_cal_option = click.option(
    "--mic-cal", "mic_cal", type=click.Path(path_type=Path), metavar="FILE",
    help="Microphone calibration: frequency (Hz) and the microphone's deviation from flat (dB), as text; "
         "subtracted from every measurement.")


spl_ref_option = click.option(
    "--spl-ref", "spl_ref", metavar="DB@HZ:FILE|DBW@noise:FILE",
    help="Absolute level, from a recording made through the same microphone, interface and input gain as "
         "the measurements: of an acoustic calibrator (94@1000:cal.wav, 94 dB SPL at 1 kHz), or of "
         "`roommodes noise` played at the seat (75-85 dB SPL is enough: mind your hearing) while a sound-level meter "
         "beside the microphone reads it "
         "(82C@noise:pink.wav: 82 dB, C-weighted, slow; Z for unweighted; 85Z@30-200:FILE for noise made with "
         "--band 30,200). Levels are then in dB SPL (for impulse responses: per full-scale input at the "
         "playback volume used). Without it, levels are relative and aligned.")


def measured_files_options(f):
    """FILES of one speaker (--channel, --at) and --measure CHANNEL X,Y,Z FILE; for fit and report."""
    f = click.option("--measure", "measure", multiple=True, nargs=3, metavar="CHANNEL X,Y,Z FILE",
                     help="One more measurement with its own speaker and position (repeatable); X,Y,Z may be "
                          "'seat'.")(f)
    f = click.option("--at", multiple=True, metavar="X,Y,Z",
                     help="Microphone position of FILES: metres or lengths with units (185 cm, 145 cm, 120 cm); "
                          "default the seat; once for all or once per file.")(f)
    return click.option("--channel", help="The speaker measured in FILES (a name in the room file).")(f)


def measurement_specs(room, files, channel, at, measure):
    """(speaker name, microphone position, path) of every measurement given on the command line."""

    specs = []
    if files:
        try:
            name = speaker_by_name(room, channel).name
        except ValueError as exc:
            fail(str(exc))
        for p, pos in zip(files, positions(room, at, len(files))):
            specs.append((name, pos, Path(p)))
    elif at or channel:
        fail("--channel and --at describe FILES; with --measure each measurement carries its own")
    for ch, where, p in measure:
        try:
            name = speaker_by_name(room, ch).name
        except ValueError as exc:
            fail(str(exc))
        specs.append((name, positions(room, (where,), 1, "--measure position")[0], Path(p)))
    return specs


def load_fit_targets(specs, wav_channel, window_s, band_hz, points_per_octave, mic_cal, spl_ref=None):
    """The measurements of ``specs`` as fit targets, read on the fit's own grid.

    ``fit`` and ``compare`` (for its effective dimensions) both read their targets here, so
    that the same files give the same numbers to the same fit.

    Returns
    -------
    list of FitTarget, list of Measurement
    """
    grid = log_frequencies(band_hz[0], band_hz[1], points_per_octave)
    meas = load_measurements([s[2] for s in specs], wav_channel, window_s, grid, mic_cal, spl_ref)
    targets = [FitTarget(ch, pos, m.freq_hz, m.level_db, f"{Path(p).name} ({ch})", m.band_fraction)
               for (ch, pos, p), m in zip(specs, meas)]
    return targets, meas
