"""The report's work done while the placement search runs does not change the report."""

from __future__ import annotations

import pytest

from roommodes import demo_room_path, load_room
from roommodes.present import report as report_module


@pytest.mark.slow
def test_figures_drawn_while_the_search_runs_change_nothing(monkeypatch):
    room = load_room(demo_room_path())
    drawn = []
    early = report_module._early_figure

    def counting(run, stem, *args):
        drawn.append(stem)
        return early(run, stem, *args)

    monkeypatch.setattr(report_module, "_early_figure", counting)
    ahead = report_module.build_report(room, search="quick")
    monkeypatch.setattr(report_module, "_early_figure", lambda *a: None)
    in_order = report_module.build_report(room, search="quick")
    if not drawn:
        pytest.skip("the search finished before the placement section: nothing was drawn ahead")
    assert ahead.html == in_order.html
    assert [(f.name, f.png, f.svg) for f in ahead.figures] == [(f.name, f.png, f.svg) for f in in_order.figures]
    assert ahead.values == in_order.values
