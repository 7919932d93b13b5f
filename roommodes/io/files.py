"""Reading input files safely: regular files only, with a size limit.

Every reader of the package (room files, text curves, WAV files, sweep descriptions) opens
its file through :func:`open_regular`, so that a FIFO, a device such as ``/dev/zero``, a
folder, a symbolic-link loop or a file far larger than its kind ever is, is refused with
the reason before anything is read, instead of blocking or filling the memory.
"""

from __future__ import annotations

import errno
import os
import stat

__all__ = ["InputFileError", "open_regular", "read_regular", "ROOM_FILE_BYTES", "TEXT_FILE_BYTES", "WAV_FILE_BYTES",
           "JSON_FILE_BYTES"]

#: Size limits per kind of input (a room file is a few kB; a text curve some hundred kB).
ROOM_FILE_BYTES = 1 << 20
TEXT_FILE_BYTES = 8 << 20
JSON_FILE_BYTES = 1 << 20
#: 256 MiB: about 23 minutes of 48 kHz stereo 32-bit samples, far more than a sweep recording.
WAV_FILE_BYTES = 256 << 20


class InputFileError(ValueError):
    """An input file that cannot be read; ``str()`` is ``"{path}: {reason}"``."""

    def __init__(self, path, reason):
        self.path = str(path)
        self.reason = reason
        super().__init__(f"{self.path}: {reason}")


def _kind(mode):
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _size_text(n):
    return f"{n / (1 << 20):.0f} MiB" if n >= 1 << 20 else f"{n / 1024:.0f} KiB"


def open_regular(path, what, limit_bytes):
    """Open ``path`` for reading in binary mode if it is a regular file within the limit.

    Parameters
    ----------
    path : str or os.PathLike
    what : str
        What the file should be, for the message (``"room file"``).
    limit_bytes : int
        Largest size accepted.

    Returns
    -------
    file object
        Open in ``"rb"`` mode; the caller closes it.

    Raises
    ------
    InputFileError
        For a missing, unreadable or non-regular file, a symbolic-link loop, or one larger
        than ``limit_bytes``; the message names the file and says why.
    """
    name = os.fspath(path)
    try:
        # O_NONBLOCK: opening a FIFO must not wait for a writer
        fd = os.open(name, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        if exc.errno == errno.ENOENT:
            raise InputFileError(name, f"no such file (the {what})") from None
        if exc.errno == errno.ELOOP:
            raise InputFileError(name, "is a symbolic link that leads round in a loop; point it at the "
                                       f"{what}") from None
        if exc.errno in (errno.EACCES, errno.EPERM):
            raise InputFileError(name, f"cannot be read (permission denied); check the {what}'s permissions") from None
        raise InputFileError(name, f"cannot be opened ({exc.strerror or exc})") from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise InputFileError(name, f"is {_kind(st.st_mode)}, not a file; give the {what}")
        if st.st_size > limit_bytes:
            raise InputFileError(name, f"is {_size_text(st.st_size)}; a {what} is far smaller (limit "
                                       f"{_size_text(limit_bytes)}): is this the right file?")
        if hasattr(os, "set_blocking"):
            os.set_blocking(fd, True)
        return os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise


def read_regular(path, what, limit_bytes):
    """The bytes of ``path``, read through :func:`open_regular` (at most ``limit_bytes``)."""
    with open_regular(path, what, limit_bytes) as fh:
        data = fh.read(limit_bytes + 1)
    if len(data) > limit_bytes:  # the file grew while it was read
        raise InputFileError(path, f"is larger than the limit for a {what} ({_size_text(limit_bytes)})")
    return data
