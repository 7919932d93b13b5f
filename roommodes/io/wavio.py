"""Reading WAV files into full-scale float arrays, and writing them atomically.

Reading goes through :func:`scipy.io.wavfile.read`, which handles integer PCM of any
depth (24-bit included: it returns such data left-justified in int32), IEEE float
(32 and 64 bit), WAVE_FORMAT_EXTENSIBLE headers and big-endian RIFX files. Integer
samples are scaled by ``2**(bits-1)`` of their container so that full scale reads as
-1..1 (8-bit PCM is unsigned, centred on 128).

Writing is done here (scipy cannot write 24-bit PCM): a plain RIFF/WAVE file with a
``fmt `` chunk (format 1, PCM, or 3, IEEE float, which also gets a ``fact`` chunk)
and a ``data`` chunk, little-endian, interleaved, padded to an even length. The file
is written to a temporary file in the same folder and moved into place with
:func:`os.replace`, so a reader never sees a half-written file.

References
----------
.. [1] IBM Corporation and Microsoft Corporation, "Multimedia Programming Interface
   and Data Specifications 1.0", 1991 (RIFF, WAVE ``fmt `` and ``data`` chunks).
"""

from __future__ import annotations

import os
import struct
import tempfile
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.io import wavfile

from .files import WAV_FILE_BYTES, InputFileError, open_regular

__all__ = ["SUBTYPES", "MIN_RATE_HZ", "MAX_RATE_HZ", "WavInfo", "read_wav", "write_wav_atomic"]

#: Sample rates read: a recording of the low frequencies needs 1 kHz at least, and the
#: rates of audio interfaces stop at 768 kHz.
MIN_RATE_HZ = 1000
MAX_RATE_HZ = 768000

#: Sample formats :func:`write_wav_atomic` writes: name -> (format tag, bits per sample).
SUBTYPES = {
    "pcm16": (1, 16),
    "pcm24": (1, 24),
    "pcm32": (1, 32),
    "float32": (3, 32),
    "float64": (3, 64),
}


@dataclass(frozen=True)
class WavInfo:
    """What :func:`read_wav` found in a file.

    Attributes
    ----------
    path : str
    fs_hz : int
        Sample rate in Hz.
    n_channels : int
        Channels in the file.
    n_frames : int
        Samples per channel.
    subtype : str
        ``"pcm8"``, ``"pcm16"``, ``"pcm24"``, ``"pcm32"``, ``"float32"``, ``"float64"`` (or
        ``"pcmN"`` for another integer depth).
    channel : int or None
        The channel returned (0-based), None for a mono file.
    """

    path: str
    fs_hz: int
    n_channels: int
    n_frames: int
    subtype: str
    channel: int | None

    @property
    def duration_s(self):
        """Length in s."""
        return self.n_frames / self.fs_hz


def _read_format(path):
    """Format tag and bits per sample from the ``fmt `` chunk (None if not found)."""
    with open(path, "rb") as fh:
        head = fh.read(12)
        if len(head) < 12 or head[:4] not in (b"RIFF", b"RIFX", b"RF64") or head[8:12] != b"WAVE":
            return None
        endian = ">" if head[:4] == b"RIFX" else "<"
        for _ in range(64):  # a fmt chunk comes early; do not walk a broken file forever
            ch = fh.read(8)
            if len(ch) < 8:
                return None
            cid, size = ch[:4], struct.unpack(endian + "I", ch[4:])[0]
            if cid == b"fmt ":
                body = fh.read(min(size, 40))
                if len(body) < 16:
                    return None
                tag, _, _, _, _, bits = struct.unpack(endian + "HHIIHH", body[:16])
                if tag == 0xFFFE and len(body) >= 26:  # WAVE_FORMAT_EXTENSIBLE: sub-format GUID
                    tag = struct.unpack(endian + "H", body[24:26])[0]
                return tag, bits
            fh.seek(size + (size & 1), 1)
    return None


def read_wav(path, channel=None):
    """Read one channel of a WAV file as float64 in full-scale units.

    Parameters
    ----------
    path : str or os.PathLike
        The WAV file.
    channel : int or None
        0-based channel to return. None is allowed only for a mono file.

    Returns
    -------
    data : ndarray, float64, shape (n_frames,)
        Samples, full scale -1..1 for PCM (float files are returned as stored, and may
        exceed 1).
    fs_hz : int
        Sample rate in Hz.
    info : WavInfo

    Raises
    ------
    ValueError
        Not a readable WAV file, or the channel does not exist (the message names the
        file).
    """
    p = Path(path)
    try:
        with open_regular(p, "WAV file", WAV_FILE_BYTES) as fh, warnings.catch_warnings():
            # chunks scipy does not interpret (LIST, bext, ...) are harmless here
            warnings.simplefilter("ignore", wavfile.WavFileWarning)
            fs, raw = wavfile.read(fh)
    except InputFileError:
        raise
    except (ValueError, EOFError, struct.error, OSError, IndexError) as exc:
        raise ValueError(f"{p}: not a readable WAV file ({exc})") from None
    except UnboundLocalError:  # the reader found no 'fmt ' or no 'data' chunk before the end
        raise ValueError(f"{p}: not a readable WAV file (it has no 'fmt ' or no 'data' chunk: the header alone, "
                         "or a file cut short)") from None
    if not MIN_RATE_HZ <= int(fs) <= MAX_RATE_HZ:
        raise ValueError(f"{p}: sample rate {int(fs)} Hz is not a recording's; roommodes reads {MIN_RATE_HZ} to "
                         f"{MAX_RATE_HZ} Hz (check the file's header)")
    fmt = _read_format(p)
    n_ch = 1 if raw.ndim == 1 else raw.shape[1]
    if channel is None:
        if n_ch != 1:
            raise ValueError(
                f"{p}: the file has {n_ch} channels; choose one (0..{n_ch - 1})")
        x = raw
    else:
        if isinstance(channel, bool) or int(channel) != channel or not 0 <= channel < n_ch:
            raise ValueError(
                f"{p}: channel {channel!r} does not exist; the file has {n_ch} "
                f"channel{'s' if n_ch > 1 else ''} (0..{n_ch - 1})")
        channel = int(channel)
        x = raw if raw.ndim == 1 else raw[:, channel]
    dt = raw.dtype
    if dt == np.uint8:
        data = (x.astype(np.float64) - 128.0) / 128.0
        sub = "pcm8"
    elif np.issubdtype(dt, np.signedinteger):
        data = x.astype(np.float64) / float(2 ** (8 * dt.itemsize - 1))
        bits = fmt[1] if fmt else 8 * dt.itemsize
        sub = f"pcm{bits}"
    elif np.issubdtype(dt, np.floating):
        data = x.astype(np.float64)
        sub = f"float{8 * dt.itemsize}"
    else:  # pragma: no cover - scipy returns only the types above
        raise ValueError(f"{p}: unsupported sample type {dt}")
    info = WavInfo(str(p), int(fs), n_ch, int(raw.shape[0]), sub,
                   None if channel is None else channel)
    return np.ascontiguousarray(data), int(fs), info


def _encode(data, subtype):
    """Interleaved little-endian sample bytes for a (frames, channels) float array."""
    tag, bits = SUBTYPES[subtype]
    if tag == 3:
        return data.astype("<f4" if bits == 32 else "<f8").tobytes()
    full = 2 ** (bits - 1)
    q = np.clip(np.round(data * full), -full, full - 1).astype(np.int64)
    if bits == 16:
        return q.astype("<i2").tobytes()
    if bits == 32:
        return q.astype("<i4").tobytes()
    # 24-bit: the low three bytes of each little-endian int32
    b = q.astype("<i4").reshape(-1, 1).view(np.uint8).reshape(-1, 4)[:, :3]
    return b.tobytes()


def _wav_bytes(data, fs_hz, subtype):
    tag, bits = SUBTYPES[subtype]
    n_frames, n_ch = data.shape
    block = n_ch * bits // 8
    payload = _encode(data, subtype)
    if tag == 1:
        fmt = struct.pack("<HHIIHH", tag, n_ch, fs_hz, fs_hz * block, block, bits)
        extra = b""
    else:
        fmt = struct.pack("<HHIIHHH", tag, n_ch, fs_hz, fs_hz * block, block, bits, 0)
        extra = b"fact" + struct.pack("<II", 4, n_frames)
    pad = b"\x00" if len(payload) % 2 else b""
    body = (b"WAVE" + b"fmt " + struct.pack("<I", len(fmt)) + fmt + extra
            + b"data" + struct.pack("<I", len(payload)) + payload + pad)
    if len(body) > 0xFFFFFFFF:
        raise ValueError("data too large for a WAV file (4 GiB limit)")
    return b"RIFF" + struct.pack("<I", len(body)) + body


def write_wav_atomic(path, data, fs_hz, subtype="pcm24", overwrite=False):
    """Write a WAV file via a temporary file in the same folder and :func:`os.replace`.

    Parameters
    ----------
    path : str or os.PathLike
        Target file. Its folder must exist.
    data : array_like, shape (n,) or (n, channels)
        Samples in full-scale units; for PCM subtypes every sample must lie in -1..1
        (+1 is stored as the largest positive code).
    fs_hz : int
        Sample rate in Hz, 1..4294967295 (whole number).
    subtype : str
        One of :data:`SUBTYPES`: ``"pcm16"``, ``"pcm24"`` (default), ``"pcm32"``,
        ``"float32"``, ``"float64"``.
    overwrite : bool
        Replace an existing file. Without it an existing target raises
        :class:`FileExistsError` and nothing is written.

    Returns
    -------
    pathlib.Path
        The written file.

    Notes
    -----
    PCM values are rounded to the nearest code, ``round(x 2**(bits-1))``, clipped to the
    code range. On any failure the temporary file is removed and the target is left
    as it was. The existence check and the final move are two steps, so a file created
    by another program between them would be replaced.
    """
    p = Path(path)
    if subtype not in SUBTYPES:
        raise ValueError(f"subtype must be one of {', '.join(SUBTYPES)}, got {subtype!r}")
    if isinstance(fs_hz, bool) or int(fs_hz) != fs_hz or not 1 <= int(fs_hz) <= 0xFFFFFFFF:
        raise ValueError(f"fs_hz must be a positive whole number, got {fs_hz!r}")
    fs_hz = int(fs_hz)
    x = np.asarray(data)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[0] == 0 or not 1 <= x.shape[1] <= 65535:
        raise ValueError(f"data must have shape (n,) or (n, channels), got {np.shape(data)}")
    if not np.issubdtype(x.dtype, np.number) or np.iscomplexobj(x):
        raise ValueError(f"data must be real numbers, got dtype {x.dtype}")
    x = x.astype(np.float64)
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{p}: data contains NaN or infinite samples; nothing written")
    peak = float(np.max(np.abs(x)))
    if SUBTYPES[subtype][0] == 1 and peak > 1.0:
        raise ValueError(
            f"{p}: samples reach {peak:.4g}, beyond full scale (1.0) for {subtype}; scale the "
            "signal down (nothing written)")
    if not p.parent.is_dir():
        raise FileNotFoundError(f"{p}: folder {p.parent} does not exist")
    if p.exists() and not overwrite:
        raise FileExistsError(f"{p} already exists; not overwriting it")
    blob = _wav_bytes(x, fs_hz, subtype)
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(blob)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return p
