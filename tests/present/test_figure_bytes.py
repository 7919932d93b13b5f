"""plots.figure_bytes: one layout, one drawing per format, the same PNG as savefig.

No check values from outside sources: the reference is matplotlib's own ``savefig`` of an
identical figure, and the counts are of matplotlib's own calls.
"""

from __future__ import annotations

import io
import xml.etree.ElementTree as ET

import numpy as np

from roommodes.present.plots import figure_bytes, new_figure


def _figure():
    fig, axes = new_figure(6.0, 3.5, 1, 2)
    x = np.linspace(20, 200, 50)
    axes[0].semilogx(x, np.sin(x / 9.0), label="a curve with a long label")
    axes[0].set_xlabel("frequency (Hz)")
    axes[0].legend()
    im = axes[1].imshow(np.outer(np.arange(8), np.arange(6)), aspect="auto")
    fig.colorbar(im, ax=axes[1], label="level (dB)")
    fig.suptitle("two panels")
    return fig


def test_png_is_savefigs_and_svg_is_a_drawing_of_the_same_figure():
    ref = _figure()
    buf = io.BytesIO()
    ref.savefig(buf, format="png", dpi=130)
    fig = _figure()
    png, svg = figure_bytes(fig, png_dpi=130, svg_metadata={"Date": None})
    assert png == buf.getvalue()
    root = ET.fromstring(svg)
    assert root.tag.endswith("svg") and root.get("width") == "432pt"  # 6 in at 72 pt/in
    assert b"<image" in svg  # the colour map, embedded
    # the SVG was drawn with the layout of the PNG: the panels sit where savefig put them
    assert fig.get_layout_engine() is None
    for a, b in zip(fig.axes, ref.axes, strict=True):
        assert np.allclose(a.get_position().bounds, b.get_position().bounds, atol=1e-9)


def test_one_layout_and_one_drawing_per_format(monkeypatch):
    import matplotlib.figure as mf
    import matplotlib.layout_engine as le

    n = {"draw": 0, "layout": 0}
    draw, execute = mf.Figure.draw, le.ConstrainedLayoutEngine.execute

    def counted_draw(self, renderer):
        n["draw"] += 1
        return draw(self, renderer)

    def counted_execute(self, fig):
        n["layout"] += 1
        return execute(self, fig)

    monkeypatch.setattr(mf.Figure, "draw", counted_draw)
    monkeypatch.setattr(le.ConstrainedLayoutEngine, "execute", counted_execute)
    fig = _figure()
    figure_bytes(fig)
    assert n == {"draw": 2, "layout": 1}
    # savefig once per format, as before, for comparison: more of both
    n.update(draw=0, layout=0)
    fig = _figure()
    fig.savefig(io.BytesIO(), format="png", dpi=130)
    fig.savefig(io.BytesIO(), format="svg")
    assert n["draw"] > 2 and n["layout"] > 1
