"""WAV reading and atomic writing, cross-read with Python's wave module and libsndfile.

Reference readers: Python's wave module and libsndfile (via soundfile); the WAV format
as those libraries implement it.
"""

import os
import wave

import numpy as np
import pytest

from roommodes.io import wavio
from roommodes.io.wavio import SUBTYPES, read_wav, write_wav_atomic

FS = 44100


def signal(n=1001, channels=2, seed=0):
    x = np.random.default_rng(seed).uniform(-1, 1, (n, channels))
    x[0] = 1.0
    x[1] = -1.0
    return x


@pytest.mark.parametrize("subtype", list(SUBTYPES))
def test_round_trip_each_subtype(tmp_path, subtype):
    x = signal()
    p = write_wav_atomic(tmp_path / "a.wav", x, FS, subtype)
    tag, bits = SUBTYPES[subtype]
    for ch in (0, 1):
        y, fs, info = read_wav(p, channel=ch)
        assert fs == FS and info.subtype == subtype and info.channel == ch
        assert info.n_channels == 2 and info.n_frames == 1001
        if tag == 1:
            lsb = 2.0 ** -(bits - 1)
            # round to nearest code; +1.0 is stored as the largest code, one LSB below
            assert np.max(np.abs(y[1:] - x[1:, ch])) <= 0.5 * lsb + 1e-12
            assert y[0] == 1 - lsb and y[1] == -1.0
        elif bits == 32:
            assert np.allclose(y, x[:, ch].astype(np.float32), rtol=0, atol=0)
        else:
            assert np.array_equal(y, x[:, ch])


@pytest.mark.parametrize("subtype", ["pcm16", "pcm24", "pcm32"])
def test_pcm_codes_as_read_by_the_standard_library(tmp_path, subtype):
    # Python's wave module (stdlib) reads PCM frames; the integer codes must be
    # round(x 2^(bits-1)) clipped to the code range, little-endian, interleaved.
    x = signal(n=333, channels=2, seed=1)  # odd frame count: 24-bit data needs a pad byte
    p = write_wav_atomic(tmp_path / "b.wav", x, FS, subtype)
    bits = SUBTYPES[subtype][1]
    with wave.open(str(p), "rb") as w:
        assert (w.getnchannels(), w.getsampwidth(), w.getframerate(), w.getnframes()) == (
            2, bits // 8, FS, 333)
        raw = w.readframes(333)
    width = bits // 8
    b = np.frombuffer(raw, np.uint8).reshape(-1, width)
    codes = np.zeros(b.shape[0], np.int64)
    for i in range(width):
        codes |= b[:, i].astype(np.int64) << (8 * i)
    codes = np.where(codes >= 2 ** (bits - 1), codes - 2**bits, codes).reshape(333, 2)
    full = 2 ** (bits - 1)
    assert np.array_equal(codes, np.clip(np.round(x * full), -full, full - 1).astype(np.int64))
    assert os.path.getsize(p) % 2 == 0


@pytest.mark.parametrize("subtype", list(SUBTYPES))
def test_files_read_by_libsndfile(tmp_path, subtype):
    sf = pytest.importorskip("soundfile", reason="libsndfile cross-check (comes with pyfar)")
    x = signal(n=500, channels=1)[:, 0]
    p = write_wav_atomic(tmp_path / "c.wav", x, 48000, subtype)
    data, fs = sf.read(str(p), dtype="float64")
    names = {"pcm16": "PCM_16", "pcm24": "PCM_24", "pcm32": "PCM_32", "float32": "FLOAT",
             "float64": "DOUBLE"}
    assert fs == 48000 and sf.info(str(p)).subtype == names[subtype]
    ours, _, _ = read_wav(p)
    assert np.allclose(data, ours, rtol=0, atol=1e-12)


def test_reads_files_written_by_other_writers(tmp_path):
    # 8-bit unsigned PCM from the stdlib wave module: code 128 is zero, 0 is -1.
    p8 = tmp_path / "u8.wav"
    with wave.open(str(p8), "wb") as w:
        w.setnchannels(1)
        w.setsampwidth(1)
        w.setframerate(8000)
        w.writeframes(bytes([0, 64, 128, 192, 255]))
    y, fs, info = read_wav(p8)
    assert fs == 8000 and info.subtype == "pcm8"
    assert np.allclose(y, [-1.0, -0.5, 0.0, 0.5, 127 / 128])
    # 24-bit WAVE_FORMAT_EXTENSIBLE from libsndfile, 3 channels
    sf = pytest.importorskip("soundfile", reason="libsndfile cross-check (comes with pyfar)")
    x = signal(n=200, channels=3)
    p24 = tmp_path / "ext.wav"
    sf.write(str(p24), x, 96000, subtype="PCM_24", format="WAV")
    y, fs, info = read_wav(p24, channel=2)
    assert fs == 96000 and info.subtype == "pcm24" and info.n_channels == 3
    assert np.max(np.abs(y - x[:, 2])) <= 2.0**-23 + 1e-12


def test_channel_errors_name_the_file(tmp_path):
    p = write_wav_atomic(tmp_path / "stereo.wav", signal(), FS, "pcm16")
    with pytest.raises(ValueError, match=r"stereo\.wav: the file has 2 channels; choose one"):
        read_wav(p)
    with pytest.raises(ValueError, match=r"stereo\.wav: channel 2 does not exist.*\(0\.\.1\)"):
        read_wav(p, channel=2)
    with pytest.raises(ValueError, match="channel -1 does not exist"):
        read_wav(p, channel=-1)
    mono = write_wav_atomic(tmp_path / "mono.wav", signal(channels=1), FS, "pcm16")
    assert read_wav(mono)[2].channel is None
    assert read_wav(mono, channel=0)[2].channel == 0


def test_not_a_wav_and_missing_file(tmp_path):
    p = tmp_path / "notes.wav"
    p.write_text("frequency,level\n20,80\n")
    with pytest.raises(ValueError, match=r"notes\.wav: not a readable WAV file"):
        read_wav(p)
    with pytest.raises(ValueError, match=r"nothere\.wav: no such file"):
        read_wav(tmp_path / "nothere.wav")


def test_refuses_to_overwrite(tmp_path):
    p = tmp_path / "keep.wav"
    write_wav_atomic(p, signal(), FS, "pcm16")
    before = p.read_bytes()
    with pytest.raises(FileExistsError, match=r"keep\.wav already exists"):
        write_wav_atomic(p, -signal(), FS, "pcm16")
    assert p.read_bytes() == before
    write_wav_atomic(p, -signal(), FS, "pcm16", overwrite=True)
    assert p.read_bytes() != before
    assert np.allclose(read_wav(p, channel=0)[0][2:], -signal()[2:, 0], atol=2**-15)


@pytest.mark.parametrize("existing", [False, True])
def test_failed_write_leaves_no_partial_file(tmp_path, monkeypatch, existing):
    p = tmp_path / "out.wav"
    if existing:
        write_wav_atomic(p, signal(), FS, "pcm24")
    before = sorted(os.listdir(tmp_path))
    old = p.read_bytes() if existing else None

    def disk_full(fd):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(wavio.os, "fsync", disk_full)
    with pytest.raises(OSError, match="No space left"):
        write_wav_atomic(p, signal(n=5000), FS, "pcm24", overwrite=True)
    assert sorted(os.listdir(tmp_path)) == before  # no temporary file left behind
    if existing:
        assert p.read_bytes() == old
    else:
        assert not p.exists()


def test_refuses_bad_data_and_writes_nothing(tmp_path):
    p = tmp_path / "bad.wav"
    with pytest.raises(ValueError, match="beyond full scale"):
        write_wav_atomic(p, np.array([0.0, 1.5]), FS, "pcm16")
    with pytest.raises(ValueError, match="NaN"):
        write_wav_atomic(p, np.array([0.0, np.nan]), FS, "float32")
    with pytest.raises(ValueError, match="subtype"):
        write_wav_atomic(p, np.zeros(4), FS, "mp3")
    with pytest.raises(ValueError, match="fs_hz"):
        write_wav_atomic(p, np.zeros(4), 44100.5, "pcm16")
    with pytest.raises(FileNotFoundError, match="does not exist"):
        write_wav_atomic(tmp_path / "no" / "x.wav", np.zeros(4), FS, "pcm16")
    assert os.listdir(tmp_path) == []
    # float files may hold values beyond full scale
    write_wav_atomic(p, np.array([0.0, 1.5]), FS, "float32")
    assert read_wav(p)[0][1] == 1.5
