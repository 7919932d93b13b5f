"""The command-line interface as a user meets it: output, JSON keys, files, errors."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import demo_room_path, load_room, log_frequencies, predict
from roommodes.cli import main

DEMO = str(demo_room_path())


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def test_help_for_every_command():
    res = run("--help")
    assert res.exit_code == 0
    for name, cmd in main.commands.items():
        r = run(name, "--help")
        assert r.exit_code == 0, name
        assert cmd.help and len(cmd.help) > 40


def test_predict_json_keys_and_values():
    res = run("predict", DEMO, "--json")
    assert res.exit_code == 0
    data = json.loads(res.stdout)
    f = np.array(data["frequencies_hz"])
    assert f[0] == pytest.approx(15.0) and f[-1] == pytest.approx(300.0)
    names = [c["name"] for c in data["channels"]]
    assert names == ["left", "right"]
    for c in data["channels"]:
        assert len(c["level_db"]) == len(f)
        assert len(c["position_m"]) == 3
    # the JSON carries the same numbers as the API
    ref = predict(load_room(DEMO), freq_hz=log_frequencies(15, 300, 48))
    np.testing.assert_allclose(data["channels"][0]["level_db"], ref.channels[0].level_db, atol=1e-5)


def test_predict_layout_all_and_plot(tmp_path):
    out = tmp_path / "curves.png"
    res = run("predict", DEMO, "--layout", "all", "--plot", out, "--points-per-octave", "12")
    assert res.exit_code == 0, res.output
    for name in ("file", "corner", "wall", "mid-room", "desk"):
        assert f"Layout: {name}." in res.stdout
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    again = run("predict", DEMO, "--plot", out)
    assert again.exit_code == 2 and "already exists" in again.stderr


def test_predict_image_method_agrees_roughly_with_modal():
    a = json.loads(run("predict", DEMO, "--json", "--freq-range", "30,120", "--points-per-octave", "12").stdout)
    b = json.loads(run("predict", DEMO, "--json", "--freq-range", "30,120", "--points-per-octave", "12",
                       "--method", "image").stdout)
    d = np.abs(np.subtract(a["channels"][0]["level_db"], b["channels"][0]["level_db"]))
    assert np.median(d) < 1.5


def test_modes_json():
    res = run("modes", DEMO, "--json", "--freq-range", "0,120")
    assert res.exit_code == 0
    data = json.loads(res.stdout)
    m = data["modes"]
    assert m[0]["indices"] == [1, 0, 0] and m[0]["kind"] == "axial"
    # demo room length 4.60 m at 20 C: c / (2 L) (Rayleigh; the first axial mode)
    assert m[0]["freq_hz"] == pytest.approx(343.2146 / 9.2, abs=0.01)
    assert {"freq_hz", "kind", "indices", "t60_s", "bandwidth_hz", "note"} <= set(m[0])
    assert all(x["freq_hz"] <= 120 for x in m)
    assert data["summary"]["schroeder_hz"] > 50
    assert len(data["summary"]["checks"]) == 4


def test_demo_writes_figures_and_says_what_it_wrote_as_json(tmp_path):
    res = run("demo", "--out", tmp_path / "d", "--json")
    assert res.exit_code == 0
    data = json.loads(res.stdout)  # stdout holds the JSON object only; the commentary went to stderr
    assert sorted(p.name for p in (tmp_path / "d").glob("*.png")) == data["figures"] == [
        "modes.png", "predict-file-layout.png", "predict-layouts.png"]
    assert data["output"] == str(tmp_path / "d" / "report.html")
    assert (tmp_path / "d" / "report.html").stat().st_size > 100_000
    assert all((tmp_path / "d" / "report_files" / f"{n}.svg").is_file() for n in data["report_figures"])
    assert all((tmp_path / "d" / "report_files" / f"{n}.csv").is_file() for n in data["report_tables"])
    assert "Suggested placement" in res.stderr and "Bass correction" in res.stderr


@pytest.mark.parametrize("args,message", [
    (("predict", "nope.toml"), "no such file"),
    (("predict", DEMO, "--freq-range", "300,15"), "--freq-range must be LOW,HIGH"),
    (("predict", DEMO, "--freq-range", "abc"), "--freq-range must be LOW,HIGH"),
    (("modes", "."), "is a folder"),
])
def test_bad_input_one_line_exit_2(args, message):
    res = run(*args)
    assert res.exit_code == 2
    assert message in res.stderr
    assert "Traceback" not in res.stderr
    assert res.stderr.startswith("roommodes: error:")


def test_bad_room_file_through_cli(tmp_path):
    p = tmp_path / "r.toml"
    p.write_text('[room]\nsize_m = [4, 3, 2.5]\n[surfaces]\nfront = 0.1\n')
    res = run("predict", p)
    assert res.exit_code == 2
    assert "missing back" in res.stderr and str(p) in res.stderr
    assert not list(tmp_path.glob("*.png"))


def test_plot_into_missing_folder(tmp_path):
    res = run("predict", DEMO, "--plot", tmp_path / "no" / "x.png")
    assert res.exit_code == 2 and "does not exist" in res.stderr


def test_installed_console_script_runs_the_demo(tmp_path):
    # The README's first command runs the console script of the installed package from any
    # folder; run it outside the source tree so the installed copy (and its bundled rooms)
    # is what gets tested.
    import shutil
    import subprocess
    import sys
    from pathlib import Path

    exe = shutil.which("roommodes") or str(Path(sys.executable).parent / "roommodes")
    res = subprocess.run([exe, "demo", "--out", str(tmp_path / "d")], cwd=tmp_path, capture_output=True,
                         text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "d" / "predict-layouts.png").exists()


def test_python_dash_m_runs_the_same_command_line(tmp_path):
    # `python -m roommodes` is the console script by another name: same version line, same one-line
    # error and exit code 2 for a missing room file
    import subprocess
    import sys

    res = subprocess.run([sys.executable, "-m", "roommodes", "--version"], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 0 and res.stdout.startswith("roommodes, version")
    res = subprocess.run([sys.executable, "-m", "roommodes", "predict", "missing.toml"], cwd=tmp_path,
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 2 and res.stderr.count("\n") == 1 and "missing.toml" in res.stderr


@pytest.mark.parametrize("units,text", [("cm", "50 cm from the front wall"), ("m", "0.50 m from the front wall"),
                                        ("ft-in", "1 ft 7 3/4 in from the front wall")])
def test_units_of_printed_distances(units, text):
    # 0.50 m = 19.685 in = 1 ft 7 3/4 in to the nearest 1/4 in (international inch, 25.4 mm exactly)
    res = run("predict", DEMO, "--units", units, "--points-per-octave", "6")
    assert res.exit_code == 0 and text in res.stdout


# ------------------------------------------------------------------ the command registry
def test_registry_short_help_is_each_commands_own_first_line():
    # the group lists commands without importing them; its short help must not drift from
    # the commands' docstrings (no outside value: the rule is the project's own)
    from roommodes.cli.app import COMMANDS, _Group

    group = main
    assert isinstance(group, _Group)
    for name, (_, _, short) in COMMANDS.items():
        cmd = group.get_command(None, name)
        assert cmd is not None, name
        assert cmd.name == name
        first = cmd.help.strip().split("\n")[0]
        assert first == short, (name, first)


def test_predict_loads_only_what_it_needs():
    # roommodes predict must not import the report, the measurement tools or matplotlib
    import subprocess
    import sys

    code = ("import sys; from click.testing import CliRunner; from roommodes.cli import main; "
            "from roommodes import demo_room_path; "
            "r = CliRunner().invoke(main, ['predict', str(demo_room_path())]); assert r.exit_code == 0, r.output; "
            "print(sorted(m for m in ('roommodes.present.report', 'roommodes.cli.measure', 'matplotlib', "
            "'scipy.signal', 'scipy.optimize') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]", out
