"""The progress line of the long commands (roommodes.cli._progress).

No check values from outside sources: these tests check the program's own conventions
(docs: README "Conventions", docs/report.md). Time is a fake clock, never the real one.
"""

from __future__ import annotations

import io
import json

from click.testing import CliRunner

from roommodes.cli import _progress
from roommodes.cli._progress import Progress, clear_status
from roommodes.cli.app import main
from roommodes.io.roomfile import demo_room_path


class Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


class Tty(io.StringIO):
    def isatty(self):
        return True


def test_nothing_before_the_delay_then_one_line_rewritten_and_erased(monkeypatch):
    monkeypatch.delenv("ROOMMODES_PROGRESS", raising=False)
    clock, out = Clock(), Tty()
    with Progress("roommodes x", stream=out, clock=clock, after_s=2.0, interval_s=0) as p:
        p.step("first part")
        clock.t += 1.9
        p.tick()
        assert out.getvalue() == ""  # a quick command prints nothing
        clock.t += 0.2
        p.tick()
        assert out.getvalue() == "\r\x1b[Kroommodes x: first part (2 s)"
        p.tick()  # the same line is not written again
        assert out.getvalue().count("first part") == 1
        p.step("second part")
        p.fraction(0.25)
        assert out.getvalue().endswith("\r\x1b[Kroommodes x: second part 25 % (2 s)")
        assert "\n" not in out.getvalue()  # one line, rewritten in place
    assert out.getvalue().endswith("\r\x1b[K")  # erased before the command prints its results


def test_clear_status_erases_the_line_before_another_message(monkeypatch):
    monkeypatch.delenv("ROOMMODES_PROGRESS", raising=False)
    clock, out = Clock(), Tty()
    with Progress("roommodes x", stream=out, clock=clock, after_s=0.0, interval_s=0) as p:
        p.step("working")
        clear_status()
        assert out.getvalue().endswith("\r\x1b[K")
        n = len(out.getvalue())
        clear_status()  # nothing shown: nothing written
        assert len(out.getvalue()) == n
        p.tick()  # shown again on the next report
        assert out.getvalue().endswith("roommodes x: working (0 s)")
    assert _progress._ACTIVE == []


def test_quiet_when_not_a_terminal_unless_asked(monkeypatch):
    clock = Clock()
    monkeypatch.delenv("ROOMMODES_PROGRESS", raising=False)
    out = io.StringIO()
    with Progress("roommodes x", stream=out, clock=clock, after_s=0.0, interval_s=0) as p:
        p.step("working")
    assert out.getvalue() == ""
    # asked for: plain lines, one per part and per tenth of a part, never rewritten
    monkeypatch.setenv("ROOMMODES_PROGRESS", "1")
    out = io.StringIO()
    with Progress("roommodes x", stream=out, clock=clock, after_s=0.0, interval_s=0) as p:
        p.step("searching")
        for v in (0.01, 0.02, 0.15, 0.16, 1.0):
            p.fraction(v)
        p.step("writing")
    assert out.getvalue().splitlines() == ["roommodes x: searching (0 s)", "roommodes x: searching 1 % (0 s)",
                                           "roommodes x: searching 15 % (0 s)", "roommodes x: searching 100 % (0 s)",
                                           "roommodes x: writing (0 s)"]
    assert "\r" not in out.getvalue()
    # turned off on a terminal too
    monkeypatch.setenv("ROOMMODES_PROGRESS", "0")
    out = Tty()
    with Progress("roommodes x", stream=out, clock=clock, after_s=0.0, interval_s=0) as p:
        p.step("working")
    assert out.getvalue() == ""


def test_a_broken_stderr_does_not_fail_the_command(monkeypatch):
    class Broken(Tty):
        def write(self, text):
            raise BrokenPipeError(32, "Broken pipe")

    monkeypatch.delenv("ROOMMODES_PROGRESS", raising=False)
    with Progress("roommodes x", stream=Broken(), clock=Clock(), after_s=0.0, interval_s=0) as p:
        p.step("working")
        assert not p.enabled


def test_eq_progress_goes_to_stderr_and_json_stays_clean(monkeypatch):
    monkeypatch.setattr(_progress, "AFTER_S", 0.0)
    res = CliRunner().invoke(main, ["eq", str(demo_room_path()), "--json"], env={"ROOMMODES_PROGRESS": "1"})
    assert res.exit_code == 0, res.output
    json.loads(res.stdout)  # stdout is the JSON document and nothing else
    assert "roommodes eq: predicting and designing the correction" in res.stderr
    assert "roommodes eq:" not in res.stdout
    # and by default (stderr not a terminal) no progress at all
    res = CliRunner().invoke(main, ["eq", str(demo_room_path()), "--json"], env={"ROOMMODES_PROGRESS": ""})
    assert res.exit_code == 0, res.output
    assert "roommodes eq:" not in res.stderr
