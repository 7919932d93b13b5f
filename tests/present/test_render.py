"""present.render: figures drawn in the worker process give the same bytes as drawn here.

No check values from outside: the reference is matplotlib's own drawing of the same figure in
this process (plots.figure_bytes, itself compared with ``savefig`` in test_figure_bytes.py).
"""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.ticker import FuncFormatter

from roommodes.present.plots import figure_bytes, new_figure
from roommodes.present.render import FigureRenderer, render_worker_available

OPTIONS = {"png_dpi": 100, "svg_metadata": {"Date": None}, "svg_rc": {"svg.hashsalt": "test"}}


def _figure(label_fn=None):
    fig, ax = new_figure(4.0, 3.0)
    f = np.geomspace(20, 200, 50)
    ax.semilogx(f, 3 * np.sin(f / 10), label="level")
    ax.set_xlabel("Frequency (Hz)")
    ax.legend()
    if label_fn is not None:
        ax.yaxis.set_major_formatter(FuncFormatter(label_fn))
    return fig


@pytest.mark.skipif(not render_worker_available(), reason="one CPU: figures are drawn in the caller")
def test_worker_draws_the_same_bytes():
    renderer = FigureRenderer(**OPTIONS)
    assert renderer.use_worker
    futures = [renderer.submit(_figure()) for _ in range(2)]
    here = figure_bytes(_figure(), **OPTIONS)
    for fut in futures:
        png, svg = fut.result()
        assert png == here[0]
        assert svg == here[1]


def test_unpicklable_figure_is_drawn_here():
    # a lambda does not pickle: the figure must still come back, drawn in this process
    renderer = FigureRenderer(use_worker=True, **OPTIONS)
    png, svg = renderer.submit(_figure(lambda v, pos: f"{v:.0f} dB")).result()
    assert png.startswith(b"\x89PNG")
    assert b"<svg" in svg
    here = figure_bytes(_figure(lambda v, pos: f"{v:.0f} dB"), **OPTIONS)
    assert (png, svg) == here


def test_switched_off_draws_here(monkeypatch):
    monkeypatch.setenv("ROOMMODES_RENDER_WORKER", "0")
    assert not render_worker_available()
    assert not FigureRenderer(**OPTIONS).use_worker
