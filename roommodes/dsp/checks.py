"""Argument checks shared by the package: one normaliser per kind of argument.

Each check returns the normalised value or raises :class:`ValueError` with a message that
names the argument, gives the value it got and says what is allowed, so that a caller's
message reads the same wherever the argument is checked (the command line turns it into
one line on stderr).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["check_number", "check_range", "check_grid", "check_fraction"]


def _fmt(v):
    try:
        return f"{float(v):g}"
    except (TypeError, ValueError):
        return repr(v)


def check_number(name, value, lo=None, hi=None, *, unit="", lo_open=False, hi_open=False, integer=False):
    """A finite number within ``[lo, hi]`` (or open ends), as float (or int).

    Parameters
    ----------
    name : str
        The argument's name as the user knows it (``"max_boost_db"``, ``"--step"``).
    value : object
        What was given.
    lo, hi : float, optional
        Bounds; None for none.
    unit : str
        Unit for the message (``" Hz"``, ``" m"``).
    lo_open, hi_open : bool
        Exclude the bound itself.
    integer : bool
        Require a whole number and return an int.

    Returns
    -------
    float or int

    Raises
    ------
    ValueError
        ``"{name} must be ... , got {value}"``.

    Examples
    --------
    >>> check_number("q", 2, 0.1, 20)
    2.0
    >>> check_number("q", 0, 0.1, 20)
    Traceback (most recent call last):
    ...
    ValueError: q must be 0.1 to 20, got 0
    """
    what = _allowed(lo, hi, unit, lo_open, hi_open, integer)
    try:
        v = float(value)
    except (TypeError, ValueError, OverflowError):
        raise ValueError(f"{name} must be {what}, got {value!r}") from None
    ok = math.isfinite(v)
    if ok and lo is not None:
        ok = v > lo if lo_open else v >= lo
    if ok and hi is not None:
        ok = v < hi if hi_open else v <= hi
    if ok and integer:
        ok = v == int(v)
    if not ok:
        raise ValueError(f"{name} must be {what}, got {_fmt(value)}{unit if math.isfinite(v) else ''}")
    return int(v) if integer else v


def _allowed(lo, hi, unit, lo_open, hi_open, integer):
    kind = "a whole number" if integer else "a number"
    if lo is not None and hi is not None and not (lo_open or hi_open):
        return f"{_fmt(lo)} to {_fmt(hi)}{unit}"
    parts = []
    if lo is not None:
        parts.append(f"{'>' if lo_open else '>='} {_fmt(lo)}{unit}")
    if hi is not None:
        parts.append(f"{'<' if hi_open else '<='} {_fmt(hi)}{unit}")
    return f"{kind} " + " and ".join(parts) if parts else f"a finite {kind[2:]}"


def check_range(name, value, lo=None, hi=None, unit=""):
    """A pair ``(low, high)`` with ``lo < low < high <= hi``, as two floats.

    Parameters
    ----------
    name : str
        The argument's name.
    value : sequence of two numbers
    lo : float, optional
        ``low`` must exceed it.
    hi : float, optional
        ``high`` may not exceed it.
    unit : str
        Unit for the message.

    Returns
    -------
    (float, float)

    Examples
    --------
    >>> check_range("band_hz", (20, 200), lo=0.0, unit=" Hz")
    (20.0, 200.0)
    """
    try:
        a, b = (float(v) for v in value)
    except (TypeError, ValueError, OverflowError):
        raise ValueError(f"{name} must be a pair (low, high), got {value!r}") from None
    ok = np.isfinite(a) and np.isfinite(b) and a < b
    if lo is not None:
        ok = ok and a > lo
    if hi is not None:
        ok = ok and b <= hi
    if not ok:
        rng = "low < high"
        if lo is not None:
            rng = f"{lo:g}{unit} < " + rng
        if hi is not None:
            rng += f" <= {hi:g}{unit}"
        raise ValueError(f"{name} must satisfy {rng}, got ({a:g}, {b:g})")
    return a, b


def check_grid(name, freq_hz, min_size=1):
    """A 1-D array of finite, positive, strictly rising frequencies (Hz)."""
    f = np.atleast_1d(np.asarray(freq_hz, dtype=float))
    if f.ndim != 1 or f.size < min_size:
        raise ValueError(f"{name} must be a 1-D array of at least {min_size} frequencies, got shape {f.shape}")
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        raise ValueError(f"{name} must hold finite frequencies above 0 Hz")
    if f.size > 1 and np.any(np.diff(f) <= 0):
        i = int(np.argmax(np.diff(f) <= 0))
        raise ValueError(f"{name} must rise strictly; it goes from {f[i]:g} to {f[i + 1]:g} Hz at index {i}")
    return f


def check_fraction(name, value, allowed=None, *, zero_ok=False):
    """The ``b`` of 1/b-octave smoothing or bands: a whole number (0 for none if allowed)."""
    if zero_ok and value in (0, None):
        return 0
    if allowed is not None:
        if value not in allowed:
            raise ValueError(f"{name} must be one of {', '.join(str(a) for a in allowed)}, got {value!r}")
        return int(value)
    return check_number(name, value, 1, 96, integer=True)
