"""The report's computations (modes at the seat, the floor map), its figures and its page.

Outside references:
* mode shapes psi_n = cos(nx pi x/Lx) cos(ny pi y/Ly) cos(nz pi z/Lz) of the rigid box
  (Rayleigh; Kuttruff, Room Acoustics, 5th ed., 2009, sec. 3.3), written out here
  independently of roommodes.model.modes;
* a source in a corner couples with |psi| = 1 to every mode (same source; CHECKS.md);
* at an axial mode's frequency in a lightly damped room that mode dominates, so the level
  over the floor follows 20 log10 |cos(n pi x / L)| (same source);
* the page is parsed with the standard library's html.parser, and embedded SVG figures
  with xml.etree.
"""

import csv
import io
import re
import xml.etree.ElementTree as ET
from dataclasses import replace

import numpy as np
import pytest

from roommodes import WALLS, example_rooms, load_room, log_frequencies, predict, transfer_function
from roommodes.analysis.maps import MATTERS_COUPLING, _separated_groups, floor_level_map, mode_coupling
from roommodes.analysis.search import search_space
from roommodes.analysis.summary import room_summary
from roommodes.model.modes import room_modes
from roommodes.model.room import Layout, Room, Speaker, Surface
from roommodes.present.report import build_report

ROOMS = example_rooms()
BOOTH = next(p for p in ROOMS if "booth" in p.name)
from pagecheck import PNG_SIGNATURE, check_page, data_values  # noqa: E402


def _psi(n, size, p):
    # Rayleigh's rigid-box mode shape, written out (Kuttruff 2009, sec. 3.3)
    return float(np.prod([np.cos(k * np.pi * x / length) for k, x, length in zip(n, p, size)]))


@pytest.mark.parametrize("path", ROOMS, ids=lambda p: p.stem)
def test_mode_coupling_equals_the_closed_form(path):
    room = load_room(path)
    cp = mode_coupling(room, fmax_hz=150.0)
    lay = room.layout
    assert len(cp.freq_hz) > 10 and cp.freq_hz.max() <= 150.0
    for i in range(len(cp.freq_hz)):
        n = cp.indices[i]
        ref_seat = _psi(n, room.size_m, lay.seat_m)
        assert cp.psi_seat[i] == pytest.approx(ref_seat, abs=1e-12)
        for s, sp in enumerate(lay.speakers):
            ref = _psi(n, room.size_m, sp.position_m)
            assert cp.psi_speakers[s, i] == pytest.approx(ref, abs=1e-12)
            assert cp.coupling[s, i] == pytest.approx(abs(ref * ref_seat), abs=1e-12)
        assert cp.matters[i] == bool(np.any(cp.coupling[:, i] >= MATTERS_COUPLING))
    # the frequencies are the rigid-box ones, f = c/2 sqrt(sum (n/L)^2)
    c = room.speed_of_sound
    ref_f = 0.5 * c * np.sqrt(np.sum((cp.indices / np.asarray(room.size_m)) ** 2, axis=1))
    np.testing.assert_allclose(cp.freq_hz, ref_f, rtol=1e-12)


def test_corner_speaker_couples_fully_to_every_mode():
    # a source in a corner is at a pressure maximum of every mode: |psi| = 1 (CHECKS.md, Kuttruff)
    room = load_room(BOOTH)
    lay = Layout((Speaker("corner", (0.0, 0.0, 0.0)),), room.layout.seat_m)
    cp = mode_coupling(room, lay, fmax_hz=200.0)
    np.testing.assert_allclose(np.abs(cp.psi_speakers[0]), 1.0, atol=1e-12)
    np.testing.assert_allclose(cp.coupling[0], np.abs(cp.psi_seat), atol=1e-12)


def test_mirrored_speakers_differ_only_in_the_sign_of_odd_width_modes():
    # psi(x, Ly - y, z) = (-1)^ny psi(x, y, z) for the cosine shapes
    room = load_room(BOOTH)
    ly = room.size_m[1]
    lay = Layout((Speaker("left", (0.5, 0.7, 1.1)), Speaker("right", (0.5, ly - 0.7, 1.1))), (1.4, ly / 2, 1.2))
    cp = mode_coupling(room, lay, fmax_hz=200.0)
    sign = np.where(cp.indices[:, 1] % 2 == 1, -1.0, 1.0)
    np.testing.assert_allclose(cp.psi_speakers[1], sign * cp.psi_speakers[0], atol=1e-12)
    odd = cp.indices[:, 1] % 2 == 1
    assert all("opposite phase" in cp.note(i) for i in np.flatnonzero(odd & (np.abs(cp.psi_speakers[0]) >= 0.3)))
    # the seat on the centre line is on a node of every odd width mode
    np.testing.assert_allclose(cp.psi_seat[odd], 0.0, atol=1e-12)
    assert all("seat near a node" in cp.note(i) for i in np.flatnonzero(odd))


def test_mode_coupling_defaults_and_refusals():
    room = load_room(BOOTH)
    cp = mode_coupling(room)
    assert cp.fmax_hz == pytest.approx(min(200.0, room_summary(room).schroeder_hz))
    with pytest.raises(ValueError, match="fmax_hz must be 1 to 1000 Hz"):
        mode_coupling(room, fmax_hz=0.0)
    with pytest.raises(ValueError, match="threshold must be 0 to 1"):
        mode_coupling(room, threshold=2.0)
    with pytest.raises(ValueError, match="no speakers and seat"):
        mode_coupling(replace(room, layout=None))


# ------------------------------------------------------------------------------ the floor map
def _quiet_box(size):
    return Room("quiet box", size, tuple(Surface(w, (0.02,)) for w in WALLS))


@pytest.mark.parametrize("n", [(1, 0, 0), (0, 1, 0), (2, 0, 0)])
def test_map_at_an_axial_mode_shows_its_cosine(n):
    # Lightly damped 6 x 4 x 2.5 m box (alpha 0.02), source near a corner (couples to every
    # mode). At the mode's own frequency it dominates: the level away from the source is
    # 20 log10 |cos(n pi x / L)| plus a constant (Rayleigh; Kuttruff 2009, sec. 3.3).
    size = (6.0, 4.0, 2.5)
    room = _quiet_box(size)
    lay = Layout((Speaker("a", (0.3, 0.3, 0.3)),), (3.1, 2.1, 1.2))
    ms = room_modes(room, 80.0)
    f = float(ms.freq_hz[[tuple(i) for i in ms.indices].index(n)])
    fm = floor_level_map(room, f, lay, height_m=1.2, step_m=0.1)
    axis = 0 if n[0] else 1
    coord = fm.x_m if axis == 0 else fm.y_m
    shape = np.abs(np.cos(n[axis] * np.pi * coord / size[axis]))
    shape2d = shape[:, None] * np.ones((1, fm.y_m.size)) if axis == 0 else np.ones((fm.x_m.size, 1)) * shape[None, :]
    xx, yy = np.meshgrid(fm.x_m, fm.y_m, indexing="ij")
    far = np.hypot(xx - 0.3, yy - 0.3) > 1.0
    ok = far & (shape2d > 0.3)
    d = fm.level_db[ok] - 20 * np.log10(shape2d[ok])
    assert np.max(np.abs(d - np.median(d))) < 0.15  # dB; other modes add a little near the nodes
    # linear pressure against |cos| over the whole plane away from the source
    assert np.corrcoef(10 ** (fm.level_db[far] / 20), shape2d[far])[0, 1] > 0.999
    # quietest along the nodal lines, loudest at the walls the mode's maxima lie on
    profile = np.nanmean(fm.level_db, axis=1 - axis)
    nodes = (np.arange(n[axis]) + 0.5) * size[axis] / n[axis]
    assert min(abs(coord[np.argmin(profile)] - nodes)) <= 0.1 + 1e-9
    assert profile[-1] > profile.min() + 20 and profile[0] > profile.min() + 20  # cells straddle the node
    assert fm.near_modes[0]["indices"] == n


def test_map_agrees_with_the_prediction_at_the_seat():
    room = load_room(ROOMS[0])
    f = 57.0
    fm = floor_level_map(room, f, step_m=0.25)
    # the predicted curve on the default grid (15-300 Hz), at f
    pred = predict(room, freq_hz=np.append(log_frequencies(15.0, 300.0, 48), f))
    h = sum(c.transfer for c in pred.channels)[-1]
    assert fm.seat_level_db == pytest.approx(20 * np.log10(abs(h)), abs=1e-6)
    one = floor_level_map(room, f, step_m=0.25, channels=["right"])
    ref = pred.channels[1].level_db[-1]
    assert one.seat_level_db == pytest.approx(ref, abs=1e-6)
    assert one.channels == ("right",)


def test_map_grouping_does_not_change_the_values():
    # the map asks the solver for groups of points on one side of the source; the values
    # must equal those of one call for every point
    room = load_room(BOOTH)
    fm = floor_level_map(room, 63.0, step_m=0.3, include_speaker=False, method="modal")
    xx, yy = np.meshgrid(fm.x_m, fm.y_m, indexing="ij")
    pts = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, fm.height_m)], axis=1)
    ok = np.isfinite(fm.level_db.ravel())
    h = transfer_function(room, fm.sources_m, pts[ok], [63.0, 63.0], method="modal")[:, :, 0].sum(axis=0)
    np.testing.assert_allclose(fm.level_db.ravel()[ok], 20 * np.log10(np.abs(h)), atol=1e-9)
    # every point lands in exactly one group
    mask = np.ones(len(pts), bool)
    groups = _separated_groups(fm.sources_m[0], pts, mask)
    assert sorted(np.concatenate(groups).tolist()) == list(range(len(pts)))


def test_map_refuses_bad_input():
    room = load_room(BOOTH)
    with pytest.raises(ValueError, match="frequency must be 5 to 1000 Hz"):
        floor_level_map(room, 0.0)
    with pytest.raises(ValueError, match="height must lie inside the room"):
        floor_level_map(room, 50.0, height_m=3.0)
    with pytest.raises(ValueError, match="step must be 0.01 to 0.5 m"):
        floor_level_map(room, 50.0, step_m=0.001)
    with pytest.raises(ValueError, match="no speaker named 'centre'"):
        floor_level_map(room, 50.0, channels=["centre"])
    with pytest.raises(ValueError, match="needs at least one speaker"):
        floor_level_map(replace(room, layout=None), 50.0)


# ------------------------------------------------------------------------------ figures
@pytest.mark.parametrize("path", ROOMS, ids=lambda p: p.stem)
def test_figures_for_every_example_room(path):
    from matplotlib.collections import LineCollection, QuadMesh
    from matplotlib.patches import Rectangle

    from roommodes.present.plots_report import plot_floor_map, plot_mode_coupling, plot_room_views

    room = load_room(path)
    lx, ly, lz = room.size_m
    for units in ("cm", "ft-in"):
        fig = plot_room_views(room, keep_out=search_space(room).keep_out, units=units)
        assert fig.canvas.get_default_filetype() == "png" and type(fig.canvas).__name__ == "FigureCanvasAgg"
        ax = fig.axes[0]
        # both views in one set of axes at equal aspect: one scale for the plan and the section
        assert ax.get_aspect() == 1.0
        boxes = [(p.get_width(), p.get_height()) for p in ax.patches if isinstance(p, Rectangle)]
        assert (pytest.approx(ly), pytest.approx(lx)) in boxes  # plan: width across, length down
        assert (pytest.approx(lx), pytest.approx(lz)) in boxes  # section: length across, height up
        labels = [t.get_text() for t in ax.texts]
        for s in room.surfaces:
            assert any(s.describe() in t for t in labels), s.name

    cp = mode_coupling(room)
    fig = plot_mode_coupling(cp)
    stems = [c for c in fig.axes[0].collections if isinstance(c, LineCollection)]
    assert len(stems) == len(cp.names)
    for s, coll in enumerate(stems):
        tops = np.array([seg[1][1] for seg in coll.get_segments()])
        np.testing.assert_allclose(tops, cp.coupling[s], atol=1e-12)

    fm = floor_level_map(room, float(cp.freq_hz[0]), step_m=0.1)
    fig = plot_floor_map(fm, room)
    mesh = [c for c in fig.axes[0].collections if isinstance(c, QuadMesh)][0]
    np.testing.assert_allclose(np.ma.filled(mesh.get_array(), np.nan).reshape(fm.level_db.shape), fm.level_db)


# ------------------------------------------------------------------------------ the page
@pytest.fixture(scope="module")
def booth_report():
    room = load_room(BOOTH)
    return room, build_report(room, search="off", embed="png", created="2026-01-01 12:00",
                              room_text=BOOTH.read_text(), files_folder="booth_files")


def test_report_page_is_self_contained_and_embeds_its_figures(booth_report):
    room, rep = booth_report
    c = check_page(rep.html)
    for anchor in ("room", "modes", "responses", "placement", "eq", "validity", "cautions", "reproduce"):
        assert anchor in c.ids
    assert len(rep.figures) == len({f.name for f in rep.figures}) >= 7
    for f in rep.figures:
        assert f.png.startswith(PNG_SIGNATURE)
        assert ET.fromstring(f.svg).tag.endswith("svg")
        assert f"fig-{f.number}" in c.ids
    text = " ".join(c.text)
    assert "search off" in text  # the placement section says no search was run
    assert "Cautions" in text and "NIOSH" in text


def test_report_numbers_and_tables(booth_report):
    room, rep = booth_report
    summ = room_summary(room)
    fs = re.search(r'data-key="schroeder_hz" data-value="([^"]+)"', rep.html)
    assert float(fs.group(1)) == summ.schroeder_hz
    rows = data_values(rep.html, "modes")
    ms = room_modes(room, 300.0)
    ref = ms.freq_hz[ms.freq_hz <= 200.0]
    shown = np.array([r[0][0] for r in rows])
    np.testing.assert_array_equal(shown, ref)
    assert [r[0][1] for r in rows] == [f"{v:.1f}" for v in ref]
    # every table's CSV has its header and one row per table row, numbers at full precision
    for t in rep.tables:
        got = list(csv.reader(io.StringIO(t.csv_text())))
        assert tuple(got[0]) == t.columns
        assert len(got) == len(t.text) + 1
    modes_t = next(t for t in rep.tables if t.name.endswith("-modes"))
    freqs = [float(r[2]) for r in list(csv.reader(io.StringIO(modes_t.csv_text())))[1:]]
    np.testing.assert_array_equal(freqs, ref)


def test_report_for_a_room_without_speakers_uses_a_standard_layout():
    room = replace(load_room(BOOTH), layout=None)
    rep = build_report(room, search="off", map_freqs_hz=[])
    assert "gives no speakers and seat" in rep.html
    check_page(rep.html)


def test_report_refuses_bad_options():
    room = load_room(BOOTH)
    with pytest.raises(ValueError, match="units must be one of"):
        build_report(room, units="yards")
    with pytest.raises(ValueError, match="search must be one of"):
        build_report(room, search="slow")
    with pytest.raises(ValueError, match="embed must be one of"):
        build_report(room, embed="gif")
    with pytest.raises(ValueError, match="measurements need"):
        build_report(replace(room, layout=None), measurements=[object()])



def test_map_names_the_mode_whose_pattern_it_draws():
    # Mode shapes (Rayleigh; Kuttruff 2009, sec. 3.3): at 70.0 Hz in the demo room the height
    # mode (0,0,1) coincides with the map's frequency, but at ear height (1.2 m of 2.45 m) it
    # sits at its node and it is constant over the floor plane, so it cannot draw a pattern;
    # the length mode (2,0,0), 4.6 Hz away and within its bandwidth, does.
    room = load_room(example_rooms()[0])
    fm = floor_level_map(room, 70.0, step_m=0.2)
    assert fm.near_modes[0]["indices"] == (2, 0, 0)
    assert (0, 0, 1) in [m["indices"] for m in fm.near_modes]


# ------------------------------------------------------------------ drawn rooms on the EQ and placement figures
def _drawn_fills(fig):
    """Labels of every filled band, on any axes of ``fig``, that names drawn rooms."""
    return [c.get_label() for ax in fig.axes for c in ax.collections if "drawn rooms" in c.get_label()]


@pytest.mark.slow  # two reports with a placement search: about 15 s
def test_report_eq_and_placement_figures_shade_the_drawn_rooms(monkeypatch):
    """With ``uncertainty`` the report's EQ is held to the drawn rooms (its figure shades the
    seat before and after, its text says so) and the placement figure's level panel shades
    both layouts; without it neither figure has a band (this checks the wiring: the bands'
    values are held to the ensemble's percentiles in tests/present/test_plot_bands.py)."""
    import roommodes.present.report as report
    from roommodes.analysis.eq import held_rule_text
    from roommodes.analysis.uncertainty import predict_bands
    from roommodes.model.room import Layout as _Layout

    drawn = {}

    def keeping(name, make):
        def keep(*a, **kw):
            fig = make(*a, **kw)
            drawn.setdefault(name, []).append(fig)
            return fig
        return keep

    for name in ("plot_correction", "plot_place"):
        monkeypatch.setattr(report, name, keeping(name, getattr(report, name)))
    room = load_room(next(p for p in ROOMS if "demo" in p.name))
    n = 5
    rep = build_report(room, search="quick", embed="png", uncertainty={"n_samples": n, "seed": 7})
    (eq_fig,), (place_fig,) = drawn.pop("plot_correction"), drawn.pop("plot_place")
    labels = _drawn_fills(eq_fig)
    assert labels.count(f"seat before: 10-90 % of {n} drawn rooms") == len(room.layout.speakers)
    assert labels.count(f"seat after: 10-90 % of {n} drawn rooms") == len(room.layout.speakers)
    held = rep.values["eq_held"]
    assert held["samples"] == n and held["seed"] == 7 and held["channels"] == [s.name for s in room.layout.speakers]
    text = " ".join(check_page(rep.html).text)
    assert f"held to {n} rooms drawn from the room file's [uncertainty] (seed 7" in text
    assert held_rule_text() in text
    # the placement figure's level panel: each channel of the best and the file's layout
    ax = place_fig.axes[0]
    fills = [c for c in ax.collections if "drawn rooms" in c.get_label()]
    assert [c.get_label() for c in fills] == [f"best: 10-90 % of {n} drawn rooms", f"current: 10-90 % of {n} drawn rooms"]
    best = rep.values["best_layout"]
    lay = _Layout(name="best", speakers=tuple(sp.moved(p) for sp, p in zip(room.layout.speakers, best["speakers"])),
                  seat_m=tuple(best["seat_m"]))
    f = predict(room, lay).freq_hz
    band = predict_bands(room, lay, f, n_samples=n, seed=7)  # the best layout's band, recomputed
    poly = fills[0].get_paths()[0].vertices
    for k in (f.size // 4, f.size // 2, 3 * f.size // 4):
        y = poly[np.isclose(poly[:, 0], f[k], rtol=0, atol=1e-9 * f[k]), 1]
        np.testing.assert_allclose([y.min(), y.max()], [band.level_db_p10[0, k], band.level_db_p90[0, k]], atol=1e-9)
    assert "Shaded in (a): 10-90 % of 5 rooms" in next(f.caption for f in rep.figures if f.name.endswith("placement"))

    plain = build_report(room, search="quick", embed="png")
    assert not _drawn_fills(drawn.pop("plot_correction")[0]) and not _drawn_fills(drawn.pop("plot_place")[0])
    assert "eq_held" not in plain.values and held_rule_text() not in plain.html


def _subs_bands_drawn(fig):
    """Each seat's shaded band on every level panel of the subs figure: [(row, seat, vertices)]."""
    out = []
    for row, ax in enumerate(fig.axes[0::2]):
        for c in ax.collections:
            gid = c.get_gid() or ""
            if gid.startswith("seat-band-"):
                out.append((row, int(gid.rsplit("-", 1)[1]), c.get_paths()[0].vertices))
    return out


@pytest.mark.slow  # two reports of the sofa room with a quick search: about 30 s
def test_report_subs_figure_shades_the_drawn_rooms(monkeypatch):
    """With ``uncertainty`` the report's subs figure shades each seat's band of every
    configuration (the ranked ones, then the file's own) with subs_bands' 10th and 90th
    percentiles over the same drawn rooms, and its caption says so; without it, no band."""
    import roommodes.present.report as report
    from roommodes.analysis.subs import optimise_subs
    from roommodes.analysis.uncertainty import subs_bands

    drawn = []

    def keep(*a, **kw):
        fig = make(*a, **kw)
        drawn.append(fig)
        return fig

    make = report.plot_subs
    monkeypatch.setattr(report, "plot_subs", keep)
    room = load_room(next(p for p in ROOMS if "sofa" in p.name))
    n = 4
    rep = build_report(room, search="quick", embed="png", uncertainty={"n_samples": n, "seed": 3})
    (fig,) = drawn
    res = optimise_subs(room, room.layout, check_perturbed=False)  # the report's quick search, recomputed
    configs = [*res.ranked, res.before]
    bands = subs_bands(room, configs, res.freq_hz, res.band_hz, n_samples=n, seed=3)
    shaded = _subs_bands_drawn(fig)
    n_seats = len(room.layout.all_seats)
    assert len(shaded) == len(configs) * n_seats
    f = res.freq_hz
    lo, hi = bands.level_db_p10, bands.level_db_p90
    for row, p, poly in shaded:
        for k in (f.size // 4, f.size // 2, 3 * f.size // 4):
            y = poly[np.isclose(poly[:, 0], f[k], rtol=0, atol=1e-9 * f[k]), 1]
            np.testing.assert_allclose([y.min(), y.max()], [lo[row, p, k], hi[row, p, k]], atol=1e-9)
    caption = next(x.caption for x in rep.figures if x.name.endswith("subs"))
    assert f"10-90 % of {n} rooms drawn from the room file's [uncertainty] (seed 3)" in caption

    drawn.clear()
    plain = build_report(room, search="quick", embed="png")
    (fig,) = drawn
    assert not _subs_bands_drawn(fig)
    assert "drawn from" not in next(x.caption for x in plain.figures if x.name.endswith("subs"))


def _explain_fills(fig):
    """Vertices of every band naming drawn rooms on the explanation figure: [(axes index, label, vertices)]."""
    return [(i, c.get_label(), c.get_paths()[0].vertices) for i, ax in enumerate(fig.axes) for c in ax.collections
            if "drawn rooms" in c.get_label()]


@pytest.mark.slow  # two reports of the demo room without a search: about 15 s
def test_report_left_right_figure_shades_the_drawn_rooms(monkeypatch):
    """With ``uncertainty`` the report's "Why left and right differ" figure shades each channel
    and the difference with explain_bands' 10th and 90th percentiles over the same drawn rooms,
    capped at ``explain``'s default count (lowered here to keep the test short), and its caption
    says so; without it, no band."""
    import roommodes.present.report as report
    from roommodes.analysis.explain import explain, explain_bands

    drawn = []

    def keep(*a, **kw):
        fig = make(*a, **kw)
        drawn.append(fig)
        return fig

    make = report.plot_explain
    monkeypatch.setattr(report, "plot_explain", keep)
    monkeypatch.setattr(report, "EXPLAIN_SAMPLES", 4)  # the cap: 6 asked, 4 drawn
    room = load_room(next(p for p in ROOMS if "demo" in p.name))
    rep = build_report(room, search="off", embed="png", uncertainty={"n_samples": 6, "seed": 5})
    (fig,) = drawn
    # the report's explanation and its bands, recomputed (the report's grid: 15-300 Hz, 48 per octave)
    e = explain(room, room.layout, freq_hz=log_frequencies(15.0, 300.0, 48), keep_out=search_space(room).keep_out)
    b = explain_bands(room, e, room.layout, n_samples=4, seed=5)
    fills = _explain_fills(fig)
    names = [s.name for s in room.layout.speakers][:2]
    assert [(i, lab) for i, lab, _ in fills] == [(0, f"{names[0]}: 10-90 % of 4 drawn rooms"),
                                                 (0, f"{names[1]}: 10-90 % of 4 drawn rooms"),
                                                 (1, "10-90 % of 4 drawn rooms")]
    f = b.freq_hz
    want = [(b.level_db_p10[0], b.level_db_p90[0]), (b.level_db_p10[1], b.level_db_p90[1]),
            (b.difference_db_p10, b.difference_db_p90)]
    for (_, _, poly), (lo, hi) in zip(fills, want):
        for k in (f.size // 4, f.size // 2, 3 * f.size // 4):
            y = poly[np.isclose(poly[:, 0], f[k], rtol=0, atol=1e-9 * f[k]), 1]
            np.testing.assert_allclose([y.min(), y.max()], [lo[k], hi[k]], atol=1e-9)
    caption = next(x.caption for x in rep.figures if x.name.endswith("left-right"))
    assert "Shaded: 10-90 % of 4 drawn rooms (seed 5)" in caption
    drawn.clear()
    plain = build_report(room, search="off", embed="png")
    (fig,) = drawn
    assert not _explain_fills(fig)
    assert "Shaded" not in next(x.caption for x in plain.figures if x.name.endswith("left-right"))


def _keeping(monkeypatch, module, names):
    drawn = {}
    for name in names:
        make = getattr(module, name)

        def keep(*a, _make=make, _name=name, **kw):
            fig = _make(*a, **kw)
            drawn.setdefault(_name, []).append(fig)
            return fig
        monkeypatch.setattr(module, name, keep)
    return drawn


@pytest.mark.slow  # two reports of the demo room without a search: about 20 s
def test_report_maps_coupling_and_mode_chart_show_the_drawn_rooms(monkeypatch):
    """With ``uncertainty`` each floor map gains the spread panel (floor_map_bands' p90 - p10 of
    the same drawn rooms), the mode-coupling chart each coupling's 10-90 % range and the mode
    chart each mode's frequency range; without it, none of them (this checks the wiring: the
    values are held to the analysis functions, tested in tests/analysis/test_uncertainty.py)."""
    import roommodes.present.report as report
    from roommodes.analysis.maps import coupling_ranges, floor_map_bands
    from roommodes.analysis.uncertainty import mode_frequency_ranges

    drawn = _keeping(monkeypatch, report, ("plot_floor_map", "plot_mode_coupling", "plot_modes"))
    room = load_room(next(p for p in ROOMS if "demo" in p.name))
    n = 5
    rep = build_report(room, search="off", embed="png", uncertainty={"n_samples": n, "seed": 4})
    maps = rep.values["maps"]
    assert maps and all(m["samples"] == n and 0 <= m["unsure_share"] <= 1 for m in maps)
    fig = drawn["plot_floor_map"][0]
    spread_ax = next(ax for ax in fig.axes if ax.get_title().startswith("How sure"))
    shown = np.asarray(spread_ax.collections[0].get_array()).reshape(-1)
    fm = floor_level_map(room, maps[0]["freq_hz"], method="exact", solve_step_m=report.MAP_SOLVE_STEP_M)
    bands = floor_map_bands(room, fm, room.layout, n_samples=n, seed=4)
    want = bands.pattern_spread_db.reshape(-1)
    ok = np.isfinite(want)
    np.testing.assert_allclose(np.ma.filled(shown, np.nan)[ok], want[ok], atol=1e-4)
    assert maps[0]["pattern_spread_db_median"] == pytest.approx(float(np.median(want[ok])))
    assert maps[0]["spread_db_median"] == pytest.approx(float(np.nanmedian(bands.spread_db)))
    caption = next(x.caption for x in rep.figures if "map-" in x.name)
    assert f"10-90 % spread over {n} rooms drawn" in caption and "Hatched where the rest exceeds 6 dB" in caption

    (cfig,) = drawn["plot_mode_coupling"]
    c = mode_coupling(room, room.layout)
    p10, p90 = coupling_ranges(room, c, room.layout, n_samples=n, seed=4)
    bars = [col for col in cfig.axes[0].collections if col.get_linewidth()[0] == 5.0]
    assert len(bars) == len(c.names)
    seg = np.array(bars[0].get_segments())  # (N, 2, 2): frequency, coupling
    np.testing.assert_allclose(seg[:, 0, 1], p10[0], atol=1e-12)
    np.testing.assert_allclose(seg[:, 1, 1], p90[0], atol=1e-12)

    (mfig,) = drawn["plot_modes"]
    ms = room_modes(room, 300.0)
    lo, hi = mode_frequency_ranges(room, ms.indices, n, 4)
    segs = np.concatenate([np.array(col.get_segments()) for col in mfig.axes[0].collections
                           if col.get_linewidth()[0] == 3.0])
    axial = (ms.order == 1) & (ms.freq_hz <= 200.0)
    np.testing.assert_allclose(segs[:axial.sum(), 0, 0], lo[axial], atol=1e-9)
    np.testing.assert_allclose(segs[:axial.sum(), 1, 0], hi[axial], atol=1e-9)

    for v in drawn.values():
        v.clear()
    plain = build_report(room, search="off", embed="png")
    assert len(drawn["plot_floor_map"][0].axes) == 2  # one panel and its colour bar
    assert not any(col.get_linewidth()[0] == 5.0 for col in drawn["plot_mode_coupling"][0].axes[0].collections)
    assert "samples" not in plain.values["maps"][0]


@pytest.mark.slow  # a report with a quick placement search: about 20 s
def test_report_placement_plan_and_sweep_show_the_drawn_rooms(monkeypatch):
    """The placement figure's floor plan circles every position with the radius holding 80 % of
    positions drawn with the stated sd (1.79 sd: the Rayleigh distribution's 80th percentile,
    sqrt(-2 ln 0.2); any statistics table), and its sweep shades the score's 10-90 % range."""
    from matplotlib.patches import Circle

    import roommodes.present.report as report

    drawn = _keeping(monkeypatch, report, ("plot_place",))
    room = load_room(next(p for p in ROOMS if "demo" in p.name))
    rep = build_report(room, search="quick", embed="png", uncertainty={"n_samples": 4, "seed": 2})
    (fig,) = drawn["plot_place"]
    plan = next(ax for ax in fig.axes if ax.get_title().startswith("(c)"))
    circles = [p for p in plan.patches if isinstance(p, Circle)]
    assert len(circles) == 2 * 3  # best and current: two speakers and the seat each
    assert all(abs(c.get_radius() - 1.79 * room.uncertainty.position_m) < 1e-3 for c in circles)
    sweep = next(ax for ax in fig.axes if ax.get_title().startswith("(d)"))
    assert any(c.get_label() == "score: 10-90 % of 4 drawn rooms" for c in sweep.collections)
    caption = next(x.caption for x in rep.figures if x.name.endswith("placement"))
    assert "Circles in (c)" in caption and "Shaded in (d)" in caption
