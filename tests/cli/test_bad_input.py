"""Bad, hostile and extreme input through every command: the fuzzing run's cases.

Every case ends either in the project's one-line error (exit code 2, "roommodes: error:",
naming the file or option, no traceback) or in a valid result computed within bounds;
inputs are never changed and nothing is left half-written. These are the project's own
rules (DEVELOPERS.md, "Rules every contributor follows"); no outside check values are used
except where a test names its source.
"""

from __future__ import annotations

import hashlib
import os
import signal
import struct
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path
from roommodes.cli import main
from roommodes.cli.report import REPORT_MARKER

DEMO = demo_room_path()


def run(*args, input=None):
    return CliRunner().invoke(main, [str(a) for a in args], input=input, catch_exceptions=True)


def one_line_error(res, *names):
    """Exit code 2, one 'roommodes: error:' line on stderr that names each of ``names``."""
    assert res.exception is None or isinstance(res.exception, SystemExit), repr(res.exception)
    assert res.exit_code == 2, (res.exit_code, res.output)
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("roommodes: error: "), lines[0]
    assert "Traceback" not in res.output and "Usage:" not in res.output
    for n in names:
        assert str(n) in lines[0], (n, lines[0])
    return lines[0]


def digest(folder):
    """Name -> SHA-256 of every file under ``folder`` (to show that nothing changed)."""
    out = {}
    for p in sorted(Path(folder).rglob("*")):
        if p.is_file() and not p.is_symlink():
            out[str(p.relative_to(folder))] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def leftovers(folder):
    """Temporary files or folders a writer might leave (they start with a dot)."""
    return sorted(p.name for p in Path(folder).iterdir() if p.name.startswith(".") and p.name != ".hypothesis")


ROOM = """\
[room]
name = "Test room"
size_m = [4.6, 3.4, 2.45]

[surfaces]
front = 0.1
back = 0.3
left = 0.1
right = 0.1
floor = 0.15
ceiling = 0.1

[speakers.left]
position_m = [0.5, 0.62, 1.15]
lowcut_hz = 48
lowcut_order = 4
{left_extra}
[speakers.right]
position_m = [0.5, 2.27, 1.15]
lowcut_hz = 48
lowcut_order = 4

[seat]
position_m = [1.85, 1.45, 1.2]
"""


def room_file(folder, name="room.toml", left_extra="", **replace):
    text = ROOM.format(left_extra=left_extra)
    for old, new in replace.items():
        text = text.replace(old, new)
    p = Path(folder) / name
    p.write_text(text, encoding="utf-8")
    return p


def curve_file(folder, name="meas.txt", level=None):
    f = np.geomspace(10.0, 400.0, 120)
    lv = 3.0 * np.sin(f / 9.0) if level is None else level(f)
    p = Path(folder) / name
    np.savetxt(p, np.c_[f, lv], fmt="%.5f", header="freq_hz level_db")
    return p


def wav_bytes(samples, fs=48000):
    """A 16-bit mono PCM WAV (RIFF/WAVE, 'fmt ' and 'data' chunks, IBM/Microsoft 1991)."""
    data = np.asarray(np.clip(samples, -1, 1) * 32767, dtype="<i2").tobytes()
    fmt = struct.pack("<HHIIHH", 1, 1, fs, fs * 2, 2, 16)
    body = b"WAVE" + b"fmt " + struct.pack("<I", 16) + fmt + b"data" + struct.pack("<I", len(data)) + data
    return b"RIFF" + struct.pack("<I", len(body)) + body


# ============================================================================ data loss, security
def test_report_force_never_removes_a_folder_it_did_not_write(tmp_path):
    room = room_file(tmp_path)
    mine = tmp_path / "notes_files"
    mine.mkdir()
    (mine / "precious.txt").write_text("keep me")
    res = run("report", room, "-o", tmp_path / "notes.html", "--force", "--search", "off")
    one_line_error(res, "notes_files", REPORT_MARKER)
    assert (mine / "precious.txt").read_text() == "keep me"
    assert not (tmp_path / "notes.html").exists() and not leftovers(tmp_path)


def test_report_force_refuses_a_symlinked_folder_and_leaves_nothing(tmp_path):
    room = room_file(tmp_path)
    target = tmp_path / "elsewhere"
    target.mkdir()
    (target / REPORT_MARKER).write_text("")
    (tmp_path / "rep_files").symlink_to(target)
    res = run("report", room, "-o", tmp_path / "rep.html", "--force", "--search", "off")
    one_line_error(res, "rep_files", "symbolic link")
    assert (tmp_path / "rep_files").is_symlink() and (target / REPORT_MARKER).exists()
    assert not leftovers(tmp_path)


def test_report_writer_leaves_no_temporary_folder_on_sigterm(tmp_path):
    """SIGTERM arrives while the folder is being written: the temporary folder and page go."""
    script = textwrap.dedent("""
        import os, signal, sys
        from pathlib import Path
        from roommodes.cli._util import user_errors
        from roommodes.cli.report import write_report
        from roommodes.present.report import Report, Table

        class Slow(Table):
            def csv_text(self):
                os.kill(os.getpid(), signal.SIGTERM)
                return super().csv_text()

        rep = Report(html="<html></html>", figures=(), tables=(Slow("t01-x", 1, "x", ("a",), (("1",),), ((1,),)),),
                     values={}, glance=())
        with user_errors():
            write_report(Path(OUT), rep, False)
    """).replace("OUT", repr(str(tmp_path / "rep.html")))
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 128 + signal.SIGTERM, proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_report_names_are_escaped_and_file_names_safe(tmp_path):
    evil = "<img src=x onerror=alert(2)>"
    text = ROOM.format(left_extra="").replace("[speakers.left]", f'[speakers."{evil}"]')
    room = tmp_path / "room.toml"
    room.write_text(text, encoding="utf-8")
    res = run("report", room, "-o", tmp_path / "r.html", "--search", "off")
    assert res.exit_code == 0, res.output
    page = (tmp_path / "r.html").read_text(encoding="utf-8")
    assert evil not in page and "onerror=alert" not in page.replace("onerror=alert(2)&gt;", "")
    assert "&lt;img src=x onerror=alert(2)&gt;" in page
    names = [p.name for p in (tmp_path / "r_files").iterdir()]
    assert all(set(n) <= set("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_.") for n in names)


@pytest.mark.parametrize("which", ["measured", "response", "target", "room"])
@pytest.mark.parametrize("force", [False, True])
def test_eq_never_writes_over_an_input(tmp_path, which, force):
    resp = curve_file(tmp_path, "resp.txt", level=lambda f: np.zeros_like(f))
    room = room_file(tmp_path, left_extra='response_file = "resp.txt"\n')
    meas = curve_file(tmp_path, "meas.txt")
    target = curve_file(tmp_path, "target.txt", level=lambda f: np.zeros_like(f))
    before = digest(tmp_path)
    out = {"measured": meas, "response": resp, "target": target, "room": room}[which]
    for option in ("--export", "--plot"):
        res = run("eq", room, "--measured", f"left={meas}", "--target", target, option, out,
                  *(["--force"] if force else []))
        one_line_error(res, out.name)
    assert digest(tmp_path) == before and not leftovers(tmp_path)


@pytest.mark.parametrize("command", [
    ["modes", "{room}"], ["predict", "{room}"], ["map", "{room}", "--freq", "50"], ["explain", "{room}"],
    ["compare", "{room}", "{meas}", "--channel", "left"],
])
def test_plot_never_writes_over_an_input(tmp_path, command):
    room = room_file(tmp_path, left_extra='response_file = "resp.txt"\n')
    curve_file(tmp_path, "resp.txt", level=lambda f: np.zeros_like(f))
    meas = curve_file(tmp_path, "meas.txt")
    before = digest(tmp_path)
    args = [a.format(room=room, meas=meas) for a in command]
    for target in (room, tmp_path / "resp.txt", meas):
        if command[0] != "compare" and target == meas:
            continue
        res = run(*args, "--plot", target, "--force")
        one_line_error(res, target.name)
    # a hard link is the same file under another name
    os.link(room, tmp_path / "alias.png")
    one_line_error(run(*args, "--plot", tmp_path / "alias.png", "--force"), "alias.png")
    assert digest(tmp_path) == {**before, "alias.png": before["room.toml"]}


# ============================================================================ files that are not what they seem
def _special(tmp_path, kind, suffix):
    """A path of the given kind: a FIFO, a device, a symbolic-link loop or a folder."""
    p = tmp_path / f"odd{suffix}"
    if kind == "fifo":
        os.mkfifo(p)
    elif kind == "device":
        return Path("/dev/zero")
    elif kind == "loop":
        a, b = tmp_path / f"a{suffix}", tmp_path / f"b{suffix}"
        a.symlink_to(b)
        b.symlink_to(a)
        return a
    elif kind == "folder":
        p.mkdir()
    return p


SPECIAL = ["fifo", "device", "loop", "folder"]
needs_posix = pytest.mark.skipif(not hasattr(os, "mkfifo") or not Path("/dev/zero").exists(), reason="POSIX only")


@needs_posix
@pytest.mark.parametrize("kind", SPECIAL)
@pytest.mark.parametrize("command", [["modes"], ["predict"], ["explain"], ["eq"], ["map", "--freq", "50"],
                                     ["place"], ["report", "-o", "{out}"]])
def test_room_file_that_is_not_a_regular_file(tmp_path, kind, command):
    bad = _special(tmp_path, kind, ".toml")
    args = [a.format(out=tmp_path / "r.html") for a in command[1:]]
    res = run(command[0], bad, *args)
    one_line_error(res, bad.name)


@needs_posix
@pytest.mark.parametrize("kind", SPECIAL)
@pytest.mark.parametrize("command", [
    ["compare", "{room}", "{bad}", "--channel", "left"], ["fit", "{room}", "{bad}", "--channel", "left", "-o", "{out}"],
    ["eq", "{room}", "--measured", "left={bad}"], ["decay", "{bad}"], ["bands", "{bad}"],
    ["eq", "{room}", "--target", "{bad}"],
])
def test_measurement_that_is_not_a_regular_file(tmp_path, kind, command):
    room = room_file(tmp_path)
    bad = _special(tmp_path, kind, ".txt" if command[0] in ("compare", "fit", "eq") else ".wav")
    res = run(*[a.format(room=room, bad=bad, out=tmp_path / "o.toml") for a in command])
    one_line_error(res, bad.name)


@needs_posix
def test_response_file_that_is_a_device(tmp_path):
    room = room_file(tmp_path, left_extra='response_file = "/dev/zero"\n')
    one_line_error(run("predict", room), "room.toml", "response_file", "device")


@pytest.mark.parametrize("name, body, message", [
    ("header-only.wav", b"RIFF\x04\x00\x00\x00WAVE", "no 'fmt ' or no 'data' chunk"),
    ("no-data.wav", b"RIFF\x1c\x00\x00\x00WAVEfmt \x10\x00\x00\x00" + struct.pack("<HHIIHH", 1, 1, 48000, 96000, 2, 16),
     "no 'fmt ' or no 'data' chunk"),
    ("rate0.wav", wav_bytes(np.r_[1.0, np.zeros(4000)], fs=0), "sample rate 0 Hz"),
    ("rate1.wav", wav_bytes(np.r_[1.0, np.zeros(4000)], fs=1), "sample rate 1 Hz"),
    ("rate10M.wav", wav_bytes(np.r_[1.0, np.zeros(4000)], fs=10_000_000), "sample rate 10000000 Hz"),
])
@pytest.mark.parametrize("command", [["compare", "{room}", "{wav}", "--channel", "left"], ["decay", "{wav}"],
                                     ["eq", "{room}", "--measured", "left={wav}"], ["bands", "{wav}"],
                                     ["fit", "{room}", "{wav}", "--channel", "left", "-o", "{out}"]])
def test_broken_wav_files(tmp_path, name, body, message, command):
    room = room_file(tmp_path)
    wav = tmp_path / name
    wav.write_bytes(body)
    res = run(*[a.format(room=room, wav=wav, out=tmp_path / "o.toml") for a in command])
    one_line_error(res, name, message)
    assert not (tmp_path / "o.toml").exists()


def test_deeply_nested_sweep_description(tmp_path):
    desc = tmp_path / "s.sweep.json"
    desc.write_text("[" * 100_000 + "]" * 100_000)
    rec = tmp_path / "rec.wav"
    rec.write_bytes(wav_bytes(np.zeros(48000)))
    one_line_error(run("ir", rec, "--sweep", desc, "-o", tmp_path / "ir.wav"), "s.sweep.json")
    assert not (tmp_path / "ir.wav").exists()


BIG = "4" + "0" * 400  # an integer of 401 digits


@pytest.mark.parametrize("edit, where", [
    ({"size_m = [4.6": f"size_m = [{BIG}"}, "size_m"),
    ({"lowcut_hz = 48\nlowcut_order = 4\n\n[speakers.right]": f"lowcut_hz = {BIG}\nlowcut_order = 4\n\n"
                                                              "[speakers.right]"}, "lowcut_hz"),
    ({'name = "Test room"': f'name = "Test room"\ntemperature_c = {BIG}'}, "temperature_c"),
    ({"size_m = [4.6, 3.4, 2.45]": "size_m = " + "[" * 5000 + "]" * 5000}, "nested too deeply"),
    ({"front = 0.1": "front = " + "{a = " * 3000 + "1" + "}" * 3000}, "nested too deeply"),
    ({'name = "Test room"': 'name = "' + "x" * 1_000_000 + '"'}, "[room] name"),
])
@pytest.mark.parametrize("command", [["modes"], ["predict"], ["explain"], ["eq"], ["map", "--freq", "50"],
                                     ["place"]])
def test_room_file_with_hostile_values(tmp_path, edit, where, command):
    room = room_file(tmp_path, **edit)
    before = digest(tmp_path)
    res = run(command[0], room, *command[1:])
    one_line_error(res, "room.toml", where)
    assert digest(tmp_path) == before


@pytest.mark.parametrize("command", [["modes"], ["predict", "--freq-range", "20,100"]])
def test_room_file_with_a_byte_order_mark_is_read(tmp_path, command):
    """Some editors start UTF-8 files with the byte-order mark EF BB BF (Unicode 15.0, sec. 23.8)."""
    room = tmp_path / "room.toml"
    room.write_bytes(b"\xef\xbb\xbf" + ROOM.format(left_extra="").encode("utf-8"))
    res = run(*command[:1], room, *command[1:])
    assert res.exit_code == 0, res.output
    assert "Test room" in res.stdout


@pytest.mark.parametrize("command", [["place"], ["explain"]])
def test_search_table_with_a_huge_integer(tmp_path, command):
    room = room_file(tmp_path, **{"[seat]": f"[search]\narea_m = [{BIG}, 1]\n\n[seat]"})
    one_line_error(run(command[0], room), "room.toml", "area_m")
