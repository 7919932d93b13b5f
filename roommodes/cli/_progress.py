"""Progress of the long commands (``place``, ``eq``, ``report``, ``fit``) on stderr.

One status line, shown only once the command has run for :data:`AFTER_S` seconds, rewritten
in place while the work goes on and erased when it ends, so that quick runs print nothing
and the command's own messages stay as they were. It is written only to a terminal: when
stderr goes to a file or a pipe (logs, CI, tests) nothing is shown, unless the environment
variable ``ROOMMODES_PROGRESS=1`` asks for it (then plain lines, one per part, none rewritten);
``ROOMMODES_PROGRESS=0`` turns it off on a terminal too. ``--json`` changes nothing here: the
line goes to stderr, never to stdout, and the commands print their results only after the
line is erased.
"""

from __future__ import annotations

import math
import os
import sys
import threading
import time

__all__ = ["AFTER_S", "Progress", "clear_status"]

#: Seconds a command runs before its progress is shown.
AFTER_S = 2.0

_ACTIVE = []  # the Progress whose line is on the terminal, if any (erased before other messages)


def clear_status():
    """Erase the status line, if one is shown, before another message goes to stderr."""
    for p in list(_ACTIVE):
        p._erase()


def _enabled(stream):
    flag = os.environ.get("ROOMMODES_PROGRESS", "").strip().lower()
    if flag in ("0", "no", "off", "false"):
        return False, False
    try:
        tty = bool(stream.isatty())
    except (AttributeError, ValueError):
        tty = False
    if flag in ("1", "yes", "on", "true"):
        return True, tty
    return tty, tty


class Progress:
    """What a long command is doing, on stderr, after it has run a while.

    Parameters
    ----------
    label : str
        What runs (``"roommodes place"``), the start of the line.
    after_s : float, optional
        Nothing is shown before this many seconds have passed; default :data:`AFTER_S`.
    stream : file, optional
        Where to write; default ``sys.stderr``.
    enabled : bool, optional
        Show progress at all; default: ``stream`` is a terminal, or
        ``ROOMMODES_PROGRESS`` says so.
    live : bool, optional
        Rewrite one line in place (a terminal) rather than print plain lines; default:
        ``stream`` is a terminal.
    clock : callable
        Seconds, monotonic (replaced in tests).
    interval_s : float
        How often the line is refreshed while a part runs; 0 starts no refresh thread
        (the line is then updated only by :meth:`step` and :meth:`fraction`).

    Use as a context manager around the computation only: the line is erased on exit,
    before the command prints its results.
    """

    def __init__(self, label, *, after_s=None, stream=None, enabled=None, live=None, clock=time.monotonic,
                 interval_s=0.5):
        self.label = label
        self.after_s = float(AFTER_S if after_s is None else after_s)
        self.stream = sys.stderr if stream is None else stream
        auto_enabled, auto_live = _enabled(self.stream)
        self.enabled = auto_enabled if enabled is None else bool(enabled)
        self.live = auto_live if live is None else bool(live)
        self.clock = clock
        self.interval_s = float(interval_s)
        self.text = ""
        self.frac = None
        self._start = None
        self._shown = ""  # the text of the live line on the terminal ("" when none)
        self._printed = None  # the last plain line printed
        self._lock = threading.RLock()
        self._stop = threading.Event()
        self._thread = None

    # -- what the command reports
    def step(self, text):
        """The part now running (``"placement search"``); resets the fraction."""
        with self._lock:
            self.text, self.frac = str(text), None
        self.tick()

    def fraction(self, value):
        """How much of the current part is done, 0..1."""
        with self._lock:
            v = float(value)
            self.frac = min(max(v, 0.0), 1.0) if math.isfinite(v) else None
        self.tick()

    # -- drawing
    def status(self):
        """The line as it would be shown now."""
        with self._lock:
            parts = [self.label + ":"]
            if self.text:
                parts.append(self.text)
            if self.frac is not None:
                parts.append(f"{100 * self.frac:.0f} %")
            if self._start is not None:
                parts.append(f"({self.clock() - self._start:.0f} s)")
            return " ".join(parts)

    def tick(self):
        """Show the status if it is due (called on every report and by the refresh thread)."""
        if not self.enabled or self._start is None:
            return
        with self._lock:
            if self.clock() - self._start < self.after_s:
                return
            if self.live:
                line = self.status()
                if line != self._shown:
                    self._write("\r\x1b[K" + line)
                    self._shown = line
                if self not in _ACTIVE:
                    _ACTIVE.append(self)
            else:
                # plain lines: one per part, and per tenth of a part's fraction
                key = (self.text, None if self.frac is None else int(10 * self.frac))
                if key != self._printed:
                    self._printed = key
                    self._write(self.status() + "\n")

    def _write(self, text):
        try:
            self.stream.write(text)
            self.stream.flush()
        except (OSError, ValueError):  # a closed or broken stderr: progress is not worth failing for
            self.enabled = False

    def _erase(self):
        with self._lock:
            if self._shown:
                self._write("\r\x1b[K")
                self._shown = ""

    def _run(self):
        while not self._stop.wait(self.interval_s):
            self.tick()

    def __enter__(self):
        self._start = self.clock()
        if self.enabled and self.interval_s > 0:
            self._thread = threading.Thread(target=self._run, name="roommodes-progress", daemon=True)
            self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
            self._thread = None
        self._erase()
        if self in _ACTIVE:
            _ACTIVE.remove(self)
        return False
