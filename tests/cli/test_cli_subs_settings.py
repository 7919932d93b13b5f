"""`roommodes subs --write-settings`: the chosen settings go into a copy of the room file, and
`predict` on that copy sums the system exactly as `subs` scored it.

The reference is the test's own recomputation (`predict` on the written copy against the
`subs` JSON); the LR4 filter itself is checked against Linkwitz (1976) in
tests/analysis/test_subs_settings.py."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import load_room
from roommodes.cli import main
from roommodes.io.roomfile import example_rooms

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The sofa room with a quick search (counts 1 and 2, a 0.5 m grid), its JSON, and the
    copy written with configuration #2."""
    folder = tmp_path_factory.mktemp("subs-settings")
    room_path = folder / "sofa.toml"
    room_path.write_text(SOFA.read_text().replace("counts = [1, 2, 4]", "counts = [1, 2]\nstep_m = 0.5"))
    before = room_path.read_bytes()
    out = folder / "set.toml"
    res = run("subs", room_path, "--json", "--write-settings", out, "--rank", 2)
    assert res.exit_code == 0, res.output
    assert room_path.read_bytes() == before  # the input is never written
    return room_path, json.loads(res.stdout), out


def test_the_copy_holds_the_chosen_positions_and_settings(written):
    _, d, out = written
    cfg = d["ranked"][1]
    room = load_room(out)
    subs = {s.name: s for s in room.layout.subs}
    assert sorted(subs) == sorted(s["name"] for s in cfg["subs"])
    for s in cfg["subs"]:
        got = subs[s["name"]]
        assert np.allclose(got.position_m, s["position_m"])
        assert (got.gain_db, got.delay_ms, got.polarity) == (s["gain_db"], s["delay_ms"], s["polarity"])
    assert room.system.crossover_hz == cfg["crossover_hz"]
    assert room.system.mains_delay_ms == cfg["mains_delay_ms"]
    assert "# small monitors: their own -3 dB point" in out.read_text()


def test_predict_on_the_copy_reproduces_the_level_subs_reported(written):
    _, d, out = written
    cfg = d["ranked"][1]
    f = d["frequencies_hz"]
    res = run("predict", out, "--json", "--freq-range", f"{f[0]:g},{f[-1]:g}", "--points-per-octave", 24)
    assert res.exit_code == 0, res.output
    p = json.loads(res.stdout)
    assert np.allclose(p["frequencies_hz"], f)
    got = np.array([s["level_db"] for s in p["system"]["seats"]])
    assert np.allclose(got, cfg["level_db"], atol=1e-6)
    assert "from the room file" in p["system"]["settings"]


def test_write_settings_refuses_the_input_an_existing_file_and_a_bad_rank(written, tmp_path):
    room_path, _, out = written
    for args, text in (((room_path,), "refusing to write over the input file"),
                       ((out,), "already exists"),
                       ((tmp_path / "x.txt",), "must be a .toml file")):
        res = run("subs", room_path, "--write-settings", *args)
        assert res.exit_code == 2 and text in res.output and "Traceback" not in res.output


def test_a_rank_past_the_table_and_mic_cal_without_measurements_give_one_line(written, tmp_path):
    room_path, d, _ = written
    n = len(d["ranked"])
    res = run("subs", room_path, "--rank", n + 1, "--write-settings", tmp_path / "x.toml")
    assert res.exit_code == 2 and f"--rank {n + 1}: the table has {n} configurations" in res.output
    assert not (tmp_path / "x.toml").exists()
    cal = tmp_path / "cal.txt"
    cal.write_text("20 0\n200 0\n")
    res = run("subs", room_path, "--mic-cal", cal)
    assert res.exit_code == 2 and "--mic-cal applies to --measured" in res.output
