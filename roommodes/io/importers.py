"""Reading measured curves: frequency-response text files, microphone calibrations, meter readings.

This is one of the I/O modules: it reads files and text, and everything it cannot read
raises :class:`MeasurementFileError` naming the file, the line and what to do about it.
The arithmetic on the curves it returns (calibration, weighting, averaging) is plain
NumPy and has no I/O.

Text layout accepted
--------------------
One row per frequency: frequency in Hz, level in dB and, optionally, phase in degrees.

* Column separator: comma, semicolon, tab, or runs of spaces. It is worked out per file
  from the data rows, never from a setting.
* Decimal separator: point, or comma (``20,5;-3,2`` or ``20,5<TAB>-3,2``). A comma is
  never read as a decimal separator in a file whose columns are separated by commas,
  except inside double quotes (``"20,5","-3,2"``).
* Blank lines and comment lines (starting with ``#``, ``;``, ``*``, ``//`` or ``%``) are
  skipped anywhere. Lines of text before the first row of numbers (titles, a header
  line, settings) are skipped and kept in the curve's ``notes``.
* Line endings LF, CRLF or CR; UTF-8 (with or without a byte-order mark), UTF-16 with a
  byte-order mark, or a single-byte encoding (read as Latin-1, which only matters in
  text lines).

Refusals (rather than guesses)
------------------------------
* Two readings of the file give different numbers (for example ``20,5,3,2`` with no
  decimal point anywhere: four columns, or two columns with decimal commas).
* More than three columns: which one is the level? Pass ``columns=``.
* A header line names the third column as something other than a phase.
* A header line names the second column as a phase: a file of phase only, or the phase
  before the level.
* A line of text or a row with a different number of columns after the data has
  started (a footer, a typo): it must be deleted or commented out.
* A frequency that is not positive, or that occurs twice. Rows that are merely out of
  order are sorted (the data are unambiguous) and a note says so.
* Fewer than three rows (one for sound-level-meter readings).
"""

from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass, field, replace

import numpy as np

from ..dsp.response import Response, log_frequencies
from .files import TEXT_FILE_BYTES, InputFileError, read_regular

__all__ = [
    "CurveAverage",
    "MeasuredCurve",
    "MeasurementFileError",
    "apply_mic_calibration",
    "average_curves",
    "parse_meter_readings",
    "parse_response_text",
    "read_meter_readings",
    "read_response_text",
    "weighting_db",
]

#: Files larger than this are refused before reading (a text response is kilobytes).
MAX_FILE_BYTES = TEXT_FILE_BYTES

_COMMENT_PREFIXES = ("#", ";", "*", "//", "%")
_NUM_POINT = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]{1,4})?")
_NUM_COMMA = re.compile(r"[+-]?(?:[0-9]+(?:,[0-9]*)?|,[0-9]+)(?:[eE][+-]?[0-9]{1,4})?")
_LINE_BREAK = re.compile(r"\r\n|\r|\n")
_NUMERIC_LOOKING = re.compile(r"[0-9.,;\t +\-eE\"']*[0-9][0-9.,;\t +\-eE\"']*")
#: Largest magnitude accepted as a level in dB (anything larger is not a dB column).
_MAX_ABS_DB = 400.0


class MeasurementFileError(ValueError):
    """A measurement file or text that cannot be read as it stands.

    The message names the file (``source``) and, where it applies, the 1-based line
    number (``line``), says what is wrong and how to fix it.
    """

    def __init__(self, message, source="<text>", line=None):
        self.source = str(source)
        self.line = line
        self.reason = message
        where = f"{self.source}, line {line}" if line is not None else self.source
        super().__init__(f"{where}: {message}")


#: A curve read from a file, and an average of several, are the package's one curve type
#: (:class:`roommodes.dsp.response.Response`): ``sources`` names the file(s), ``notes`` says
#: what was done on the way in, ``phase_deg`` keeps a phase column, and an average carries its
#: spread (``std_db``, ``min_db``, ``max_db``).
MeasuredCurve = Response
CurveAverage = Response


# --------------------------------------------------------------------------- decoding


def _line_of_offset(data, offset):
    """1-based line number of byte ``offset`` in ``data``."""
    head = data[:offset]
    return head.count(b"\n") + (head.count(b"\r") - head.count(b"\r\n")) + 1


def _decode(data, source):
    """Bytes to text: UTF-8 (BOM or not), UTF-16 with BOM, else Latin-1."""
    if data.startswith(b"\xef\xbb\xbf"):
        try:
            return data[3:].decode("utf-8")
        except UnicodeDecodeError as exc:
            raise MeasurementFileError(
                f"the file starts with a UTF-8 byte-order mark but byte {exc.start + 3} is "
                "not UTF-8; re-save it as UTF-8 text",
                source, _line_of_offset(data, exc.start + 3)) from None
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError:
            raise MeasurementFileError(
                "the file starts with a UTF-16 byte-order mark but is not valid UTF-16; "
                "re-save it as UTF-8 text", source) from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        # any byte sequence is valid Latin-1; non-ASCII only occurs in text lines
        return data.decode("latin-1")


def _as_text(text, source):
    if isinstance(text, (bytes, bytearray, memoryview)):
        text = _decode(bytes(text), source)
    elif not isinstance(text, str):
        raise TypeError(f"text must be str or bytes, got {type(text).__name__}")
    text = text.removeprefix("\ufeff")
    nul = text.find("\x00")
    if nul >= 0:
        line = len(_LINE_BREAK.findall(text[:nul])) + 1
        raise MeasurementFileError(
            "contains a NUL character: this looks like a binary file (or UTF-16 without a "
            "byte-order mark); export the measurement as plain text (UTF-8)", source, line)
    return text


def _read_bytes(path):
    name = os.fspath(path)
    try:
        return read_regular(name, "frequency-response text file", MAX_FILE_BYTES), name
    except InputFileError as exc:
        raise MeasurementFileError(exc.reason, name) from None


# --------------------------------------------------------------------------- layouts


@dataclass(frozen=True)
class _Layout:
    delimiter: str | None  # None: runs of whitespace
    decimal: str  # "." or ","

    def describe(self):
        sep = {None: "spaces", "\t": "tabs", ";": "semicolons", ",": "commas"}[self.delimiter]
        dec = "decimal points" if self.decimal == "." else "decimal commas"
        return f"separated by {sep}, with {dec}"


_ALL_LAYOUTS = (
    _Layout("\t", "."), _Layout("\t", ","),
    _Layout(";", "."), _Layout(";", ","),
    _Layout(",", "."), _Layout(",", ","),
    _Layout(None, "."), _Layout(None, ","),
)


def _strip_quotes(s):
    s = s.strip()
    if len(s) >= 2 and s[0] == s[-1] and s[0] in "\"'":
        s = s[1:-1].strip()
    return s


def _split(line, layout):
    if layout.delimiter is None:
        fields = line.split()
    elif '"' in line:
        try:
            fields = next(csv.reader([line], delimiter=layout.delimiter,
                                     skipinitialspace=True), [])
        except (csv.Error, StopIteration):
            return None
    else:
        fields = line.split(layout.delimiter)
    fields = [_strip_quotes(f) for f in fields]
    if len(fields) > 1 and fields[-1] == "":
        fields.pop()  # one trailing separator is common in spreadsheet exports
    return fields


def _numbers(fields, decimal):
    pattern = _NUM_POINT if decimal == "." else _NUM_COMMA
    out = []
    for f in fields:
        if not pattern.fullmatch(f):
            return None
        v = float(f.replace(",", ".")) if decimal == "," else float(f)
        if not math.isfinite(v):
            return None
        out.append(v)
    return out


@dataclass
class _Attempt:
    layout: _Layout
    rows: list = field(default_factory=list)  # (line number, [numbers], raw text)
    preamble: list = field(default_factory=list)  # (line number, raw text)
    failure: tuple | None = None  # (line number, raw text)


def _content_lines(text):
    """(line number, stripped text) of lines that are neither blank nor comments."""
    out = []
    for i, raw in enumerate(_LINE_BREAK.split(text), start=1):
        s = raw.strip()
        if not s or s.startswith(_COMMENT_PREFIXES):
            continue
        out.append((i, s))
    return out


def _try_layout(lines, layout):
    att = _Attempt(layout)
    ncol = None
    for ln, s in lines:
        fields = _split(s, layout)
        nums = _numbers(fields, layout.decimal) if fields and len(fields) >= 2 else None
        if ncol is None:
            if nums is None:
                if _NUMERIC_LOOKING.fullmatch(s):
                    # made only of digits and separators: a data row we cannot read, not text
                    att.failure = (ln, s)
                    return att
                att.preamble.append((ln, s))
                continue
            ncol = len(nums)
        elif nums is None or len(nums) != ncol:
            att.failure = (ln, s)
            return att
        att.rows.append((ln, nums, s))
    return att


def _candidate_layouts(text, delimiter, decimal):
    layouts = []
    for lay in _ALL_LAYOUTS:
        if delimiter is not None:
            want = None if delimiter in (" ", "whitespace", "spaces") else delimiter
            if lay.delimiter != want:
                continue
        elif lay.delimiter is not None and lay.delimiter not in text:
            continue
        if decimal is not None and lay.decimal != decimal:
            continue
        if decimal is None and lay.decimal == "," and "," not in text:
            continue
        layouts.append(lay)
    return layouts


def _short(s, n=60):
    return repr(s if len(s) <= n else s[: n - 3] + "...")


_EXAMPLE = ("lines such as '20.0, -3.5' or '20,0;-3,5' or '20.0<TAB>-3.5<TAB>12.0' "
            "(frequency in Hz, level in dB, optional phase in degrees)")


def _parse_table(text, source, *, delimiter=None, decimal=None):
    """Find the one reading of ``text`` as a table of numbers, or refuse.

    Returns the successful attempt and the layout.
    """
    if delimiter is not None and delimiter not in ("\t", ";", ",", " ", "whitespace", "spaces"):
        raise ValueError(
            f"delimiter must be one of ',', ';', '\\t', ' ' or None, got {delimiter!r}")
    if decimal is not None and decimal not in (".", ","):
        raise ValueError(f"decimal must be '.', ',' or None, got {decimal!r}")
    if delimiter == "," and decimal == ",":
        raise ValueError("delimiter ',' and decimal ',' cannot both hold; use ';' or tab "
                         "between columns when numbers have decimal commas")
    lines = _content_lines(text)
    if not lines:
        raise MeasurementFileError(f"no data found (empty, or only comments); expected {_EXAMPLE}",
                                   source)
    attempts = [_try_layout(lines, lay) for lay in _candidate_layouts(text, delimiter, decimal)]
    good = [a for a in attempts if a.failure is None and a.rows]
    if not good:
        tried = [a for a in attempts if a.rows]
        if not tried:
            stuck = [a.failure for a in attempts if a.failure is not None]
            if stuck:
                ln, s = min(stuck)
                raise MeasurementFileError(
                    f"{_short(s)} looks like a row of numbers but does not read as one in any "
                    "layout (mixed decimal points and decimal commas, or a missing column?); "
                    f"correct it, or delete it. Expected {_EXAMPLE}", source, ln)
            raise MeasurementFileError(
                f"no line reads as a row of two or more numbers; expected {_EXAMPLE}", source)
        best = max(tried, key=lambda a: len(a.rows))
        ln, s = best.failure
        first_ln, first_nums, _ = best.rows[0]
        msg = (f"{_short(s)} does not read as {len(first_nums)} numbers "
               f"{best.layout.describe()}, as the rows from line {first_ln} on do; correct it, "
               "or delete it, or make it a comment by starting it with #")
        if best.layout.delimiter == "," and "." not in "".join(r[2] for r in best.rows):
            msg += (". (If the numbers use decimal commas, the columns must be separated by "
                    "semicolons or tabs, not commas.)")
        raise MeasurementFileError(msg, source, ln)
    # different readings must agree, or we refuse
    ref = good[0]
    for other in good[1:]:
        same = len(other.rows) == len(ref.rows) and all(
            a[0] == b[0] and a[1] == b[1] for a, b in zip(ref.rows, other.rows))
        if not same:
            for a, b in zip(ref.rows, other.rows):
                if a[0] != b[0] or a[1] != b[1]:
                    break
            else:
                a = b = (ref.rows + other.rows)[min(len(ref.rows), len(other.rows)) - 1]
            raise MeasurementFileError(
                f"{_short(a[2])} can be read two ways: {a[1]} ({ref.layout.describe()}) or "
                f"{b[1]} ({other.layout.describe()}); re-save the file with one unambiguous "
                "layout (for example tabs between columns), or pass delimiter= and decimal=",
                source, min(a[0], b[0]))
    att = ref
    ncol = len(att.rows[0][1])
    lay = att.layout
    if (decimal is None and lay.delimiter == "," and ncol in (4, 6)
            and "." not in "".join(r[2] for r in att.rows)
            and not any('"' in r[2] for r in att.rows)):
        ln, _, s = att.rows[0]
        raise MeasurementFileError(
            f"{_short(s)} holds {ncol} comma-separated whole numbers and no number in the "
            f"file has a decimal point: it could be {ncol} columns, or {ncol // 2} columns "
            f"written with decimal commas ({','.join(s.split(',')[:2])} as "
            f"{'.'.join(s.split(',')[:2])}). Separate the columns with semicolons or tabs when "
            "the numbers have decimal commas, or pass decimal='.' if they are whole numbers",
            source, ln)
    return att


def _header_fields(att):
    """The header line's fields when it precedes the data and has as many fields."""
    if not att.preamble:
        return None
    _, s = att.preamble[-1]
    fields = _split(s, att.layout)
    if fields is None or len(fields) != len(att.rows[0][1]):
        return None
    return [f.lower() for f in fields]


_PHASE_WORDS = {"phase", "deg", "degs", "degree", "degrees", "angle", "arg", "rad", "rads",
                "radian", "radians"}


def _is_phase_name(name):
    return "\u00b0" in name or bool(_PHASE_WORDS & set(re.findall(r"[a-z]+", name)))


def _is_radian_name(name):
    words = set(re.findall(r"[a-z]+", name))
    return bool(words & {"rad", "rads", "radian", "radians"}) and not words & {
        "deg", "degs", "degree", "degrees"} and "\u00b0" not in name


def _columns_for(att, source, columns, max_columns):
    """Indices (freq, level, phase or None) and a phase scale factor."""
    ncol = len(att.rows[0][1])
    first_ln, _, first_s = att.rows[0]
    if columns is not None:
        cols = tuple(columns)
        if len(cols) not in (2, 3) or any(
                not isinstance(c, (int, np.integer)) or c < 0 for c in cols):
            raise ValueError(
                f"columns must be 2 or 3 column indices counted from 0, got {columns!r}")
        if max(cols) >= ncol:
            raise MeasurementFileError(
                f"columns={cols} asks for column index {max(cols)} but the rows have {ncol} "
                f"columns (indices 0..{ncol - 1})", source, first_ln)
        if len(cols) == 3 and max_columns < 3:
            raise ValueError("columns must name 2 columns (frequency, reading) here")
        return (cols[0], cols[1], cols[2] if len(cols) == 3 else None), 1.0
    if ncol > max_columns:
        want = ("2 columns (frequency in Hz, reading in dB)" if max_columns == 2 else
                "2 or 3 columns (frequency in Hz, level in dB, optional phase in degrees)")
        raise MeasurementFileError(
            f"{_short(first_s)} has {ncol} columns; expected {want}. Delete the other columns, "
            "or pass columns=(frequency, level[, phase]) as indices counted from 0",
            source, first_ln)
    header = _header_fields(att)
    if header is not None and _is_phase_name(header[1]) and "db" not in header[1]:
        if ncol == 2:
            raise MeasurementFileError(
                f"the header names the second column {header[1]!r}, a phase, and there is no level "
                "column: a phase alone cannot be compared or fitted. Export the magnitude in dB "
                "(frequency, level[, phase])", source, att.preamble[-1][0])
        raise MeasurementFileError(
            f"the header names the second column {header[1]!r}, a phase; the second "
            "column must be the level in dB. Reorder the columns or pass columns=",
            source, att.preamble[-1][0])
    if ncol == 2:
        return (0, 1, None), 1.0
    scale = 1.0
    if header is not None:
        third = header[2]
        if third and not _is_phase_name(third):
            raise MeasurementFileError(
                f"the header names the third column {third!r}, which is not a phase in "
                "degrees; delete that column, or pass columns=(0, 1) to ignore it",
                source, att.preamble[-1][0])
        if _is_radian_name(third):
            scale = 180.0 / math.pi
    return (0, 1, 2), scale


def _build_curve(text, source, *, delimiter, decimal, columns, max_columns, min_points,
                 what):
    att = _parse_table(text, source, delimiter=delimiter, decimal=decimal)
    (ic_f, ic_l, ic_p), phase_scale = _columns_for(att, source, columns, max_columns)
    lines = np.array([r[0] for r in att.rows])
    data = np.array([r[1] for r in att.rows], dtype=float)
    freq = data[:, ic_f]
    level = data[:, ic_l]
    phase = data[:, ic_p] * phase_scale if ic_p is not None else None
    notes = [f"{what}: {len(lines)} rows {att.layout.describe()}"]
    if att.preamble:
        first, last = att.preamble[0][0], att.preamble[-1][0]
        where = f"line {first}" if first == last else f"lines {first}-{last}"
        notes.append(f"skipped {len(att.preamble)} text line(s) before the data ({where})")
    if phase_scale != 1.0:
        notes.append("phase column headed in radians: converted to degrees")
    bad = np.flatnonzero(freq <= 0)
    if bad.size:
        k = bad[0]
        raise MeasurementFileError(
            f"frequency {freq[k]:g} Hz is not positive; frequencies must be in Hz and > 0 "
            "(delete the row, e.g. a 0 Hz DC row)", source, int(lines[k]))
    bad = np.flatnonzero(np.abs(level) > _MAX_ABS_DB)
    if bad.size:
        k = bad[0]
        raise MeasurementFileError(
            f"level {level[k]:g} dB is outside +-{_MAX_ABS_DB:g} dB: is the second column "
            "really a level in dB?", source, int(lines[k]))
    step = np.diff(freq)
    if np.any(step < 0) and np.any(step > 0):
        # a column that falls, then rises (or the reverse) is two curves or a typing error,
        # not a curve in reverse order
        k = int(np.flatnonzero(np.sign(step[1:]) * np.sign(step[:-1]) < 0)[0]) + 1 if step.size > 1 else 0
        raise MeasurementFileError(
            f"the frequency column changes direction at {freq[k]:g} Hz (it {'falls' if step[k] < 0 else 'rises'} "
            f"after {'rising' if step[k] < 0 else 'falling'}); a curve lists its frequencies in one order: is this "
            "two curves in one file?", source, int(lines[k]))
    order = np.argsort(freq, kind="stable")
    if np.any(order != np.arange(order.size)):
        notes.append("rows were in falling frequency order; reversed")
        freq, level, lines = freq[order], level[order], lines[order]
        phase = phase[order] if phase is not None else None
    dup = np.flatnonzero(np.diff(freq) <= 0)
    if dup.size:
        k = dup[0]
        raise MeasurementFileError(
            f"frequency {freq[k]:g} Hz occurs twice (lines {lines[k]} and {lines[k + 1]}); "
            "keep one row per frequency", source, int(max(lines[k], lines[k + 1])))
    if freq.size < min_points:
        raise MeasurementFileError(
            f"only {freq.size} row(s) of data; at least {min_points} are needed", source,
            int(lines[-1]))
    return Response(freq, level, source, sources=(source,), notes=tuple(notes), phase_deg=phase)


# --------------------------------------------------------------------------- public readers


def parse_response_text(text, name="<text>", *, delimiter=None, decimal=None, columns=None):
    """Read a frequency-response table from text.

    Parameters
    ----------
    text : str or bytes
        The file's content. Bytes are decoded as described in the module docstring.
    name : str
        Name used in error messages and as the curve's ``source``.
    delimiter : {None, ",", ";", "\\t", " "}
        Column separator; None (default) works it out. ``" "`` means runs of whitespace.
    decimal : {None, ".", ","}
        Decimal separator; None (default) works it out.
    columns : tuple of int, optional
        Column indices (from 0) of frequency, level and optionally phase, for tables with
        more than three columns or an unrecognised third column.

    Returns
    -------
    MeasuredCurve
        Frequencies strictly rising (sorted if the file was not), levels in dB, phase in
        degrees or None.

    Raises
    ------
    MeasurementFileError
        For anything that cannot be read unambiguously; the message names ``name`` and the
        line, and says how to fix the file.

    Notes
    -----
    Every candidate reading (separator, decimal sign) is tried on the whole file; a reading
    holds when, after any leading text lines, every non-comment line has the same number
    of numeric fields. Readings that hold must give the same numbers, otherwise the file is
    refused as ambiguous.
    """
    text = _as_text(text, name)
    return _build_curve(text, name, delimiter=delimiter, decimal=decimal, columns=columns,
                        max_columns=3, min_points=3, what="frequency response")


def read_response_text(path, *, delimiter=None, decimal=None, columns=None):
    """Read a frequency-response text file; see :func:`parse_response_text`.

    Parameters
    ----------
    path : str or os.PathLike
        The file. Its name appears in every error message and as the curve's ``source``.
    delimiter, decimal, columns
        As in :func:`parse_response_text`.

    Returns
    -------
    MeasuredCurve
    """
    data, name = _read_bytes(path)
    return parse_response_text(data, name, delimiter=delimiter, decimal=decimal,
                               columns=columns)


def apply_mic_calibration(curve, calibration, *, sign="subtract", tolerance_octaves=1 / 6,
                          outside="error"):
    """Correct a measured curve with a microphone calibration curve.

    Parameters
    ----------
    curve : MeasuredCurve
        The measurement.
    calibration : MeasuredCurve
        The calibration, read with :func:`read_response_text` (same text format). Its level
        column is the microphone's deviation from flat, in dB: positive where the
        microphone reads too high.
    sign : {"subtract", "add"}
        ``"subtract"`` (default): corrected = measured - deviation. Use ``"add"`` for a file
        that gives the correction to be added instead of the deviation.
    tolerance_octaves : float
        How far (in octaves, 0..2) the measurement may extend past either end of the
        calibration before it counts as outside; within it the end value is held.
    outside : {"error", "hold"}
        What to do with measurement points further outside the calibration range: raise
        ``ValueError`` (default), or hold the calibration's end values and record that in
        the notes.

    Returns
    -------
    MeasuredCurve
        Same frequencies and phase (a calibration phase, if any, is ignored), corrected
        level, a note naming the calibration and the sign used.

    Notes
    -----
    The calibration is interpolated linearly in dB against log frequency:
    ``d(f) = interp(ln f, ln f_cal, d_cal)``, then ``L_corr = L - d(f)`` (or ``+ d``).
    """
    if sign not in ("subtract", "add"):
        raise ValueError(f"sign must be 'subtract' or 'add', got {sign!r}")
    if outside not in ("error", "hold"):
        raise ValueError(f"outside must be 'error' or 'hold', got {outside!r}")
    tol = float(tolerance_octaves)
    if not (math.isfinite(tol) and 0 <= tol <= 2):
        raise ValueError(f"tolerance_octaves must be 0..2, got {tolerance_octaves!r}")
    f = np.asarray(curve.freq_hz, float)
    fc = np.asarray(calibration.freq_hz, float)
    dc = np.asarray(calibration.level_db, float)
    if fc.size < 2 or np.any(np.diff(fc) <= 0) or fc[0] <= 0:
        raise ValueError("calibration frequencies must be positive, strictly rising, 2 or more")
    lo_ok, hi_ok = fc[0] * 2.0 ** -tol, fc[-1] * 2.0 ** tol
    far = (f < lo_ok) | (f > hi_ok)
    notes = list(curve.notes)
    if far.any() and outside == "error":
        raise ValueError(
            f"the measurement {curve.source} spans {f[0]:g}-{f[-1]:g} Hz but the microphone "
            f"calibration {calibration.source} covers only {fc[0]:g}-{fc[-1]:g} Hz "
            f"({far.sum()} points more than {tol:g} octave outside); use a calibration that "
            "covers the band, or pass outside='hold' to hold its end values")
    held = (f < fc[0]) | (f > fc[-1])
    if held.any():
        notes.append(f"calibration end values held at {held.sum()} point(s) outside "
                     f"{fc[0]:g}-{fc[-1]:g} Hz")
    dev = np.interp(np.log(f), np.log(fc), dc)
    level = curve.level_db - dev if sign == "subtract" else curve.level_db + dev
    notes.append(
        f"microphone calibration {calibration.source} "
        + ("subtracted (file read as the microphone's deviation: corrected = measured - "
           "deviation)" if sign == "subtract" else
           "added (file read as a correction: corrected = measured + correction)"))
    return replace(curve, level_db=level, notes=tuple(notes))


def _weighting_poles():
    """Pole frequencies f1..f4 (Hz) of IEC 61672-1:2013, eqs. for the A and C weightings."""
    fr, f_lo, f_hi = 1000.0, 10**1.5, 10**3.9
    d = math.sqrt(0.5)
    b = (fr**2 + f_lo**2 * f_hi**2 / fr**2 - d * (f_lo**2 + f_hi**2)) / (1 - d)
    c = f_lo**2 * f_hi**2
    root = math.sqrt(b * b - 4 * c)
    f1 = math.sqrt((-b - root) / 2)
    f4 = math.sqrt((-b + root) / 2)
    fa = 10**2.45
    f2 = (3 - math.sqrt(5)) / 2 * fa
    f3 = (3 + math.sqrt(5)) / 2 * fa
    return f1, f2, f3, f4


def weighting_db(freq_hz, weighting="C"):
    """Frequency weighting of IEC 61672-1:2013 in dB.

    Parameters
    ----------
    freq_hz : array_like
        Frequencies in Hz, > 0.
    weighting : {"A", "C", "Z"}
        ``"Z"`` (or None) is zero weighting.

    Returns
    -------
    ndarray
        Weighting in dB, normalised to 0 dB at 1 kHz.

    Notes
    -----
    ``C(f) = 20 log10[f4^2 f^2 / ((f^2 + f1^2)(f^2 + f4^2))] - C1000`` and
    ``A(f) = 20 log10[f4^2 f^4 / ((f^2 + f1^2)(f^2 + f2^2)^0.5 (f^2 + f3^2)^0.5
    (f^2 + f4^2))] - A1000``, with f1 = 20.60 Hz, f2 = 107.7 Hz, f3 = 737.9 Hz,
    f4 = 12194 Hz computed from the standard's defining expressions (fr = 1 kHz,
    fL = 10^1.5 Hz, fH = 10^3.9 Hz, D^2 = 1/2, fA = 10^2.45 Hz). C1000 = -0.062 dB and
    A1000 = -2.000 dB are the values at 1 kHz, computed here.

    References
    ----------
    IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1: Specifications,
    section 5.5 and annex E.
    """
    f = np.asarray(freq_hz, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError("freq_hz must be finite and > 0 for a frequency weighting")
    w = "Z" if weighting is None else str(weighting).upper()
    if w == "Z":
        return np.zeros_like(f)
    f1, f2, f3, f4 = _weighting_poles()

    def c_raw(x):
        return 20 * np.log10(f4**2 * x**2 / ((x**2 + f1**2) * (x**2 + f4**2)))

    def a_raw(x):
        return 20 * np.log10(f4**2 * x**4 / ((x**2 + f1**2) * np.sqrt(x**2 + f2**2)
                                             * np.sqrt(x**2 + f3**2) * (x**2 + f4**2)))

    if w == "C":
        return c_raw(f) - c_raw(1000.0)
    if w == "A":
        return a_raw(f) - a_raw(1000.0)
    raise ValueError(f"weighting must be 'A', 'C' or 'Z', got {weighting!r}")


def parse_meter_readings(text, weighting="C", name="<text>", *, delimiter=None, decimal=None):
    """Sound-level-meter readings at test-tone frequencies, with the weighting removed.

    Parameters
    ----------
    text : str or bytes
        Two columns: test-tone frequency in Hz, meter reading in dB SPL. Same layout rules
        as :func:`parse_response_text`; one row or more.
    weighting : {"C", "A", "Z", None}
        The weighting the meter was set to. ``"C"`` (default) and ``"A"`` are removed;
        ``"Z"`` or None leaves the readings as they are.
    name : str
        Name used in messages and as the curve's ``source``.
    delimiter, decimal
        As in :func:`parse_response_text`.

    Returns
    -------
    MeasuredCurve
        ``level_db = reading - W(f)`` with ``W`` from :func:`weighting_db` (a C-weighted
        meter reads 3.0 dB low at 31.5 Hz, so 3.0 dB is added back there).

    Notes
    -----
    Readings of a pure tone on a weighted meter are the unweighted level plus the
    weighting. Below about 20 Hz (C) or 50 Hz (A) the correction is large and depends on
    the meter meeting the standard's tolerances; a note says so.
    """
    w = "Z" if weighting is None else str(weighting).upper()
    if w not in ("A", "C", "Z"):
        raise ValueError(f"weighting must be 'A', 'C' or 'Z', got {weighting!r}")
    text = _as_text(text, name)
    curve = _build_curve(text, name, delimiter=delimiter, decimal=decimal, columns=None,
                         max_columns=2, min_points=1, what="meter readings")
    notes = list(curve.notes)
    level = curve.level_db - weighting_db(curve.freq_hz, w)
    if w != "Z":
        notes.append(f"{w}-weighting removed (IEC 61672-1:2013)")
        low = 20.0 if w == "C" else 50.0
        if np.any(curve.freq_hz < low):
            notes.append(f"readings below {low:g} Hz carry a large {w}-weighting correction; "
                         "treat them with caution")
    return replace(curve, level_db=level, notes=tuple(notes))


def read_meter_readings(path, weighting="C", *, delimiter=None, decimal=None):
    """Read sound-level-meter readings from a file; see :func:`parse_meter_readings`."""
    data, name = _read_bytes(path)
    return parse_meter_readings(data, weighting, name, delimiter=delimiter, decimal=decimal)


def average_curves(curves, mode="power", *, points_per_octave=48, freq_hz=None):
    """Average measured curves (several microphone positions) and give their spread.

    Parameters
    ----------
    curves : sequence of MeasuredCurve or Response
        Two or more curves (anything with ``freq_hz`` and ``level_db``).
    mode : {"power", "db"}
        ``"power"`` (default): mean of ``10**(L/10)``, back to dB. ``"db"``: mean of the
        levels in dB.
    points_per_octave : int
        Density of the common log grid, 1..1000.
    freq_hz : array_like, optional
        An explicit common grid (Hz, rising); it must lie inside every curve's range.

    Returns
    -------
    Response
        The mean on the common grid, with ``std_db``, ``min_db``, ``max_db`` and the
        ``sources`` of every input curve (its ``count``).

    Notes
    -----
    Each curve is interpolated linearly in dB against log frequency onto the common grid,
    which spans the overlap of all the curves. ``std_db`` is the population standard
    deviation of the levels in dB across curves, ``min_db``/``max_db`` their extremes.
    """
    curves = list(curves)
    if len(curves) < 2:
        raise ValueError(f"average_curves needs at least 2 curves, got {len(curves)}")
    if mode not in ("power", "db"):
        raise ValueError(f"mode must be 'power' or 'db', got {mode!r}")
    fs, ls = [], []
    for i, c in enumerate(curves):
        f = np.asarray(c.freq_hz, float)
        lv = np.asarray(c.level_db, float)
        if f.ndim != 1 or f.size < 2 or f.shape != lv.shape or f[0] <= 0 or np.any(np.diff(f) <= 0):
            raise ValueError(f"curve {i} must have 2 or more positive, strictly rising "
                             "frequencies and as many levels")
        fs.append(f)
        ls.append(lv)
    lo = max(f[0] for f in fs)
    hi = min(f[-1] for f in fs)
    if not lo < hi:
        raise ValueError(f"the curves do not overlap in frequency (common range "
                         f"{lo:g}-{hi:g} Hz is empty)")
    if freq_hz is None:
        grid = log_frequencies(lo, hi, points_per_octave)
    else:
        grid = np.asarray(freq_hz, float)
        if grid.ndim != 1 or grid.size < 1 or np.any(np.diff(grid) <= 0):
            raise ValueError("freq_hz must be a rising 1-D grid")
        if grid[0] < lo * (1 - 1e-12) or grid[-1] > hi * (1 + 1e-12):
            raise ValueError(f"freq_hz spans {grid[0]:g}-{grid[-1]:g} Hz, outside the "
                             f"curves' common range {lo:g}-{hi:g} Hz")
    u = np.log(grid)
    levels = np.array([np.interp(u, np.log(f), lv) for f, lv in zip(fs, ls)])
    if mode == "power":
        mean = 10 * np.log10(np.mean(10 ** (levels / 10), axis=0))
    else:
        mean = levels.mean(axis=0)
    sources = tuple(s for c in curves for s in (getattr(c, "sources", ()) or (getattr(c, "label", ""),)))
    return Response(grid, mean, f"mean of {len(curves)}", sources=sources, std_db=levels.std(axis=0),
                    min_db=levels.min(axis=0), max_db=levels.max(axis=0),
                    notes=(f"{mode} average of {len(curves)} curves",))
