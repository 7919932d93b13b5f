"""`roommodes subs` as a user meets it: the table, the JSON keys, the plot and bad input."""

import json

import numpy as np
import pytest
from click.testing import CliRunner

from roommodes import load_room
from roommodes.analysis.levels import speaker_levels
from roommodes.cli import main
from roommodes.io.roomfile import example_rooms

SOFA = next(p for p in example_rooms() if p.stem == "sofa-and-sub")


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def small_json(small_room):
    res = run("subs", small_room, "--json")
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


def test_json_has_the_stable_keys(small_json):
    d = small_json
    assert {"frequencies_hz", "seats", "crossover", "ranked", "roommodes_version"} <= set(d)
    assert [s["name"] for s in d["seats"]] == ["middle", "left", "right"]
    assert [s["weight"] for s in d["seats"]] == [1.0, 0.7, 0.7]
    assert d["crossover"]["type"] == "LR4" and d["crossover"]["freq_hz"] == d["ranked"][0]["crossover_hz"]
    # the ranking rule (docs/subs.md): a configuration ranks above a lower-scoring one only when it has
    # fewer subs and scores within the stated margin of it
    m = d["ranking"]["fewer_subs_margin_db"]
    for i, a in enumerate(d["ranked"]):
        for b in d["ranked"][i + 1:]:
            assert a["score"] <= b["score"] or (len(a["subs"]) < len(b["subs"]) and a["score"] - b["score"] <= m)
    kinds = {c["kind"] for c in d["ranked"]}
    assert {"search", "current", "reference"} <= kinds
    for c in d["ranked"]:
        assert {"subs", "crossover_hz", "score", "seat_spread_db", "level_db"} <= set(c)
        assert len(c["level_db"]) == 3 and all(len(x) == len(d["frequencies_hz"]) for x in c["level_db"])
        for s in c["subs"]:
            assert {"name", "position_m", "gain_db", "delay_ms", "polarity"} <= set(s)
            assert s["polarity"] in (1, -1)


def test_json_settings_applied_independently_reproduce_level_db(small_room, small_json):
    # The settings, applied with the test's own Linkwitz-Riley 4th-order filters (a 2nd-order
    # Butterworth section squared; Linkwitz, JAES 24(1), 1976) and delays exp(-j 2 pi f t), to the
    # solver's transfer functions of the speakers at the JSON positions, give the JSON's level_db.
    room = load_room(small_room)
    f = np.array(small_json["frequencies_hz"])
    seats = np.array([s["position_m"] for s in small_json["seats"]])
    mains = speaker_levels(room, room.layout.mains, seats, f).transfer.sum(axis=0)
    proto = room.layout.subs[0]

    def lr4(fc, high):
        s = 1j * f / fc
        section = (s**2 if high else 1.0) / (s**2 + np.sqrt(2) * s + 1)
        return section**2

    for c in small_json["ranked"]:
        fc = c["crossover_hz"]
        total = lr4(fc, True) * np.exp(-2j * np.pi * f * c["mains_delay_ms"] * 1e-3) * mains
        sp = [proto.moved(s["position_m"]) for s in c["subs"]]
        h = speaker_levels(room, sp, seats, f).transfer
        for s, hk in zip(c["subs"], h):
            part = 10 ** (s["gain_db"] / 20) * s["polarity"] * np.exp(-2j * np.pi * f * s["delay_ms"] * 1e-3) * lr4(
                fc, False) * hk
            total = total + part
            # the phase that explains the polarity: this sub against the mains at the crossover, main seat
            i = int(np.argmin(np.abs(np.log(f / fc))))
            a = lr4(fc, True)[i] * np.exp(-2j * np.pi * f[i] * c["mains_delay_ms"] * 1e-3) * mains[0, i]
            want = np.degrees(np.angle(part[0, i] / a))
            assert abs((s["phase_to_mains_deg"] - want + 180) % 360 - 180) < 0.06, (c["label"], s["name"])
        np.testing.assert_allclose(20 * np.log10(np.abs(total)), c["level_db"], atol=1e-6, err_msg=c["label"])


def test_text_output_plot_and_no_overwrite(small_room, tmp_path):
    out = tmp_path / "subs.png"
    res = run("subs", small_room, "--plot", out)
    assert res.exit_code == 0, res.output
    text = res.stdout
    for needle in ("mono bass sum", "Linkwitz-Riley", "gain", "delay", "polarity", "headroom needed",
                   "spread before", "Caution: Subs are heavy", "Start quietly", "front-wall centre",
                   "current positions", "before: as it is", "Ranking: best score first",
                   "Confirm both by measurement at the seats"):
        assert needle in text, needle
    # in this room the search inverts the subs (the mains' vented roll-off turns their phase): the
    # output says why, with the phase at the crossover either way
    assert "polarity - (inverted)" in text and "inverted because" in text
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    again = run("subs", small_room, "--plot", out)
    assert again.exit_code == 2 and "already exists" in again.stderr
    over = run("subs", small_room, "--plot", small_room, "--force")
    assert over.exit_code == 2 and "input" in over.stderr


@pytest.mark.parametrize("snippet, where", [
    ("[subs]\ncounts = [3]\n", "[subs] counts"),
    ("[subs]\ncrossover_hz = [120, 60]\n", "[subs] crossover_hz"),
    ("[subs]\nkeep_out = [{ min_m = [1, 1] }]\n", "[subs] keep_out[0]"),
    ("[seat]\nposition_m = [3.4, 1.9, 1.0]\n", "both [seat] and [seats.NAME]"),
    ("[seats.extra]\nposition_m = [3.4, 1.9, 1.0]\nweight = -2\n", "[seats.extra] weight"),
])
def test_bad_subs_and_seats_tables_give_one_line_and_exit_2(tmp_path, snippet, where):
    text = SOFA.read_text()
    if snippet.startswith("[subs]"):
        text = text[:text.index("[subs]")] + snippet
    else:
        text = text + "\n" + snippet
    path = tmp_path / "bad.toml"
    path.write_text(text)
    res = run("subs", path)
    assert res.exit_code == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and where in lines[0] and "Traceback" not in res.output, res.stderr


@pytest.mark.parametrize("command", [("predict",), ("eq",), ("explain",), ("place", "--json"), ("modes",)])
def test_other_commands_run_on_the_room_with_subs_and_seats(command):
    res = run(command[0], SOFA, *command[1:])
    assert res.exit_code == 0, res.output
