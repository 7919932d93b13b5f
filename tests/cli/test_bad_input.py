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
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

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


# ============================================================================ valid input, bounded work
def test_eq_on_a_flat_measured_curve(tmp_path):
    room = room_file(tmp_path)
    flat = curve_file(tmp_path, "flat.txt", level=lambda f: np.full_like(f, 80.0))
    res = run("eq", room, "--measured", f"left={flat}")
    assert res.exit_code == 0, res.output
    assert "no shelf" in res.stdout


RIGID = {f"{w} = {v}": f"{w} = 0" for w, v in
         (("front", "0.1"), ("back", "0.3"), ("left", "0.1"), ("right", "0.1"), ("floor", "0.15"), ("ceiling", "0.1"))}


@pytest.mark.parametrize("command", [["modes"], ["predict"], ["eq"], ["explain"], ["map", "--freq", "50"]])
def test_rigid_box_is_computed_with_the_stated_minimum_damping(tmp_path, command):
    """All six surfaces at absorption 0: every command runs, with MIN_ABSORPTION (the project's own rule)."""
    from roommodes.model.room import MIN_ABSORPTION

    room = room_file(tmp_path, **RIGID)
    res = run(command[0], room, *command[1:], "--json")
    assert res.exit_code == 0, res.output
    if command[0] == "modes":
        import json

        first = json.loads(res.stdout)["modes"][0]
        assert np.isfinite(first["t60_s"]) and first["t60_s"] > 10.0
        assert MIN_ABSORPTION > 0


def test_image_solver_refuses_beyond_its_range(tmp_path):
    room = room_file(tmp_path)
    one_line_error(run("predict", room, "--method", "image", "--freq-range", "15,2000"), "image-source", "500 Hz")


def test_small_cube_modes_and_default_area(tmp_path):
    text = {"size_m = [4.6, 3.4, 2.45]": "size_m = [0.5, 0.5, 0.5]", "[0.5, 0.62, 1.15]": "[0.1, 0.1, 0.1]",
            "[0.5, 2.27, 1.15]": "[0.1, 0.4, 0.1]", "[1.85, 1.45, 1.2]": "[0.35, 0.25, 0.3]"}
    room = room_file(tmp_path, **text)
    res = run("modes", room)
    assert res.exit_code == 0, res.output
    assert "Not applicable" in res.stdout
    one_line_error(run("explain", room), "area_m", "the default")


def test_large_room_modes_are_listed_and_map_step_is_coarsened(tmp_path):
    room = room_file(tmp_path, **{"size_m = [4.6, 3.4, 2.45]": "size_m = [50, 40, 15]"})
    res = run("modes", room, "--freq-range", "0,60")
    assert res.exit_code == 0, res.output
    one_line_error(run("modes", room, "--freq-range", "0,2000"), "lower the top frequency")
    from roommodes.analysis.maps import MAP_MAX_POINTS

    res = run("map", room, "--freq", "20", "--json")
    assert res.exit_code == 0, res.output
    import json

    d = json.loads(res.stdout)
    assert len(d["x_m"]) * len(d["y_m"]) <= MAP_MAX_POINTS


@pytest.mark.parametrize("args, names", [
    (["map", "{room}", "--freq", "1000", "--step", "1cm"], ["room.toml", "at least 3 cm"]),
    (["map", "{room}", "--freq", "0"], ["--freq"]), (["map", "{room}", "--freq", "nan"], ["--freq"]),
    (["map", "{room}", "--freq", "-5"], ["--freq"]), (["map", "{room}", "--freq", "1e9"], ["--freq"]),
    (["map", "{room}", "--freq", "50", "--step", "0"], ["--step"]),
    (["map", "{room}", "--freq", "50", "--step", "1 mm"], ["--step"]),
    (["eq", "{room}", "--max-boost", "nan"], ["--max-boost"]), (["eq", "{room}", "--max-boost", "-1"], ["--max-boost"]),
    (["eq", "{room}", "--max-boost", "1e308"], ["--max-boost"]), (["eq", "{room}", "--q-range", "10,0.5"], ["--q-range"]),
    (["eq", "{room}", "--q-range", "0,0"], ["--q-range"]), (["eq", "{room}", "--target", "tilt", "--tilt", "nan"], ["--tilt"]),
    (["eq", "{room}", "--target", "tilt", "--tilt-corner", "0"], ["--tilt-corner"]),
    (["eq", "{room}", "--area", "9,9"], ["--area"]),
    (["predict", "{room}", "--points-per-octave", "0"], ["--points-per-octave"]),
    (["compare", "{room}", "{meas}", "--channel", "left", "--smoothing", "99"], ["--smoothing"]),
    (["modes"], ["ROOM_FILE"]),
])
def test_option_errors_name_the_option(tmp_path, args, names):
    room = room_file(tmp_path)
    meas = curve_file(tmp_path)
    one_line_error(run(*[a.format(room=room, meas=meas) for a in args]), *names)


@pytest.mark.parametrize("command, make", [
    (["bands", "{f}"], lambda: wav_bytes(np.full(48000 * 2, 0.5))),
    (["decay", "{f}"], lambda: wav_bytes(np.full(48000, 0.5))),
])
def test_constant_recordings_are_refused(tmp_path, command, make):
    f = tmp_path / "dc.wav"
    f.write_bytes(make())
    one_line_error(run(*[a.format(f=f) for a in command]), "dc.wav", "DC")


def test_measurement_whose_frequencies_fall_then_rise(tmp_path):
    room = room_file(tmp_path)
    p = tmp_path / "zigzag.txt"
    p.write_text("100 1\n50 2\n20 0\n200 1\n300 0\n")
    one_line_error(run("compare", room, p, "--channel", "left"), "zigzag.txt", "changes direction")


@pytest.mark.parametrize("suffix", [".bogus", ".gif"])
@pytest.mark.parametrize("command, main_out", [
    (["fit", "{room}", "{meas}", "--channel", "left", "-o", "{out}.toml"], ".toml"),
    (["eq", "{room}", "--export", "{out}.txt"], ".txt"),
])
def test_bad_plot_extension_fails_before_the_main_output(tmp_path, suffix, command, main_out):
    room = room_file(tmp_path)
    meas = curve_file(tmp_path)
    out = tmp_path / "main"
    args = [a.format(room=room, meas=meas, out=out) for a in command]
    one_line_error(run(*args, "--plot", tmp_path / f"p{suffix}"), f"p{suffix}")
    assert not out.with_suffix(main_out).exists() and not leftovers(tmp_path)


@pytest.mark.parametrize("target", ["folder", "unwritable"])
def test_output_that_is_a_folder_or_in_an_unwritable_folder(tmp_path, target):
    room = room_file(tmp_path)
    if target == "folder":
        out = tmp_path / "d.png"
        out.mkdir()
    else:
        if os.geteuid() == 0:
            pytest.skip("root writes anywhere")
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        out = ro / "d.png"
    one_line_error(run("predict", room, "--plot", out), "d.png" if target == "folder" else "ro")


@pytest.mark.parametrize("name", ["", "a\nb", "a\x00b", "x" * 300])
def test_speaker_names_that_cannot_label_anything_are_refused(tmp_path, name):
    text = ROOM.format(left_extra="").replace("[speakers.left]", "[speakers." + __import__("json").dumps(name) + "]")
    room = tmp_path / "room.toml"
    room.write_text(text, encoding="utf-8")
    one_line_error(run("predict", room), "room.toml", "speakers.")


@pytest.mark.parametrize("name", ["front.left", "gauche-avant", "Lautsprecher \u00e4", 'say "hi"'])
def test_unusual_speaker_names_round_trip_through_write_layout(tmp_path, name):
    import json
    import tomllib

    text = ROOM.format(left_extra="").replace("[speakers.left]", "[speakers." + json.dumps(name) + "]")
    room = tmp_path / "room.toml"
    room.write_text(text, encoding="utf-8")
    res = run("place", room, "--write-layout", tmp_path / "out.toml", "--top", "1")
    assert res.exit_code == 0, res.output
    back = tomllib.loads((tmp_path / "out.toml").read_text(encoding="utf-8"))
    assert name in back["speakers"]


# ============================================================================ fuzzing

_FUZZ = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])

_values = st.recursive(
    st.none() | st.booleans() | st.integers(min_value=-(10 ** 400), max_value=10 ** 400)
    | st.floats(allow_nan=True, allow_infinity=True) | st.text(max_size=20),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4),
    max_leaves=12)


def _toml_value(v):
    """A TOML rendering of ``v`` (None becomes a string; TOML has no null)."""
    import json
    import math

    if v is None:
        return '"none"'
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {_toml_value(x)}" for k, x in v.items()) + "}"


_KEYS = ["size_m = [4.6, 3.4, 2.45]", "front = 0.1", "position_m = [0.5, 0.62, 1.15]", "lowcut_hz = 48",
         "lowcut_order = 4", "position_m = [1.85, 1.45, 1.2]", 'name = "Test room"']


@_FUZZ
@given(key=st.sampled_from(_KEYS), value=_values)
def test_fuzz_room_files(tmp_path_factory, key, value):
    """Any value at any key: the one-line error or a valid result, never a traceback."""
    folder = tmp_path_factory.mktemp("fuzz")
    room = room_file(folder, **{key: key.split(" = ")[0] + " = " + _toml_value(value)})
    res = run("modes", room, "--freq-range", "0,100", "--json")
    assert res.exit_code in (0, 2), res.output
    if res.exit_code == 2:
        one_line_error(res, "room.toml")


@_FUZZ
@given(data=st.binary(max_size=400) | st.text(alphabet="0123456789.,;-+eE \t\n#", max_size=400).map(str.encode))
def test_fuzz_measurement_files(tmp_path_factory, data):
    """Any bytes as a text or WAV measurement: the one-line error or a valid comparison."""
    folder = tmp_path_factory.mktemp("fuzz")
    room = room_file(folder)
    for name, body in (("m.txt", data), ("m.wav", b"RIFF" + data[:4] + b"WAVE" + data[4:])):
        (folder / name).write_bytes(body)
        res = run("compare", room, folder / name, "--channel", "left", "--json")
        assert res.exit_code in (0, 2), res.output
        if res.exit_code == 2:
            one_line_error(res, name)


# ---- the remaining cases of the fuzzing run


def test_sigint_during_start_up_ends_in_one_line(tmp_path):
    """Ctrl-C while the modules are still being imported: one line, exit 130 (128 + SIGINT,
    the shells' convention), no KeyboardInterrupt traceback. The interrupt is sent from
    inside the import of numpy, so it lands in start-up every time."""
    code = textwrap.dedent(f"""
        import builtins, os, signal
        from roommodes.cli import run
        real = builtins.__import__
        def hook(name, *a, **k):
            if name == "numpy":
                builtins.__import__ = real
                os.kill(os.getpid(), signal.SIGINT)
            return real(name, *a, **k)
        builtins.__import__ = hook
        run(["modes", {str(DEMO)!r}])
    """)
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == 130, out.stderr
    assert "Traceback" not in out.stderr and "KeyboardInterrupt" not in out.stderr
    assert out.stderr.strip().splitlines() == ["roommodes: interrupted"]
    assert out.stdout == ""


@pytest.mark.parametrize("header", ["freq phase", "Frequency (Hz)\tPhase (deg)"])
def test_text_measurement_of_phase_only_is_refused(tmp_path, header):
    room = room_file(tmp_path)
    f = np.geomspace(10.0, 400.0, 60)
    p = tmp_path / "phase.txt"
    sep = "\t" if "\t" in header else " "
    p.write_text(header + "\n" + "".join(f"{a:.3f}{sep}{b:.1f}\n" for a, b in zip(f, 90 * np.sin(f))))
    for command in (["compare", room, p, "--channel", "left"], ["fit", room, p, "--channel", "left", "-o",
                                                                  tmp_path / "cal.toml"]):
        line = one_line_error(run(*command), "phase.txt", "line 1")
        assert "phase" in line
    assert not (tmp_path / "cal.toml").exists()


def _decaying_noise_wav(fs):
    """An impulse response at sample rate ``fs``: exponentially decaying noise, T60 0.4 s."""
    t = np.arange(int(1.5 * fs)) / fs
    h = np.random.default_rng(1).standard_normal(t.size) * np.exp(-t * 6.91 / 0.4)
    return wav_bytes(0.5 * h / np.abs(h).max(), fs)


def test_decay_default_range_adapts_to_an_8_khz_impulse_response(tmp_path):
    import json

    f = tmp_path / "ir8k.wav"
    f.write_bytes(_decaying_noise_wav(8000))
    res = run("decay", f, "--json")
    assert res.exit_code == 0, res.output
    bands = [b["nominal_hz"] for b in json.loads(res.stdout)["reverberation"]]
    # octave bands 63..2000 Hz: the 4 kHz band's upper edge (5.66 kHz, IEC 61260-1) lies above fs / 2
    assert bands == [63, 125, 250, 500, 1000, 2000]
    line = one_line_error(run("decay", f, "--freq-range", "63,4000"), "--freq-range", "ir8k.wav", "4000 Hz")
    assert "63,2000" in line


@pytest.mark.parametrize("args, names", [
    (["noise", "{d}/n.wav", "--rate", "8000", "--band", "20,5000"], ["--band", "4000 Hz"]),
    (["sweep", "{d}/s.wav", "--rate", "8000", "--f2", "6000"], ["--f2", "4000 Hz"]),
    (["bands", "{ir}", "--band", "5000,8000"], ["--band", "ir8k.wav", "4000 Hz"]),
    (["decay", "{ir}", "--freq-range", "5000,8000"], ["--freq-range", "ir8k.wav", "4000 Hz"]),
])
def test_band_above_nyquist_names_the_option_and_the_limit(tmp_path, args, names):
    ir = tmp_path / "ir8k.wav"
    ir.write_bytes(_decaying_noise_wav(8000))
    one_line_error(run(*[a.format(d=tmp_path, ir=ir) for a in args]), *names)
    assert not (tmp_path / "n.wav").exists() and not (tmp_path / "s.wav").exists()


def test_sweep_default_end_adapts_to_a_low_sample_rate(tmp_path):
    import json

    res = run("sweep", tmp_path / "s.wav", "--rate", "8000", "--json")
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["sweep"]["f2_hz"] == pytest.approx(0.45 * 8000)


def test_eq_with_fifty_speakers_asks_for_a_choice(tmp_path):
    import json

    from roommodes.analysis.correction import MAX_EQ_CHANNELS

    many = "".join(f"[speakers.s{k}]\nposition_m = [{0.4 + 0.07 * k:.2f}, {0.3 + (k % 7) * 0.4:.2f}, 1.1]\n\n"
                   for k in range(50))
    text = ROOM.format(left_extra="")
    text = text[:text.index("[speakers.left]")] + many + text[text.index("[seat]"):]
    room = tmp_path / "many.toml"
    room.write_text(text, encoding="utf-8")
    one_line_error(run("eq", room), "many.toml", "50 speakers", f"at most {MAX_EQ_CHANNELS}", "--channel")
    one_line_error(run("eq", room, "--channel", "nope"), "--channel nope", "many.toml")
    res = run("eq", room, "--channel", "s3", "--channel", "s40", "--json")
    assert res.exit_code == 0, res.output
    assert [c["name"] for c in json.loads(res.stdout)["channels"]] == ["s3", "s40"]


@pytest.mark.parametrize("command", ["noise", "sweep"])
@pytest.mark.parametrize("rate", ["0", "1", "10000000"])
def test_signal_sample_rate_out_of_range_names_the_option(tmp_path, command, rate):
    one_line_error(run(command, tmp_path / "x.wav", "--rate", rate), "--rate", "8000")
    assert not (tmp_path / "x.wav").exists()
