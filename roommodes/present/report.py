"""The report: one self-contained HTML page a practitioner can hand over or keep.

:func:`build_report` runs the whole tool on a room (and measurements, when given) and
returns a :class:`Report`: the page as a string, every figure (PNG and SVG bytes) and every
table (with CSV text), so that the command line can write them next to the page. Nothing
here reads or writes files: measurements arrive already read
(:func:`roommodes.compare.load_measurement`), and the caller passes the room file's text and
the inputs' checksums for the reproduction section.

The page has no external references: figures are embedded as ``data:`` URIs, styles are
inline, fonts are the reader's system fonts. A print style sheet breaks pages before each
section and never inside a figure or a table row, so the page prints on A4 or Letter.

The mode coupling and the floor map it shows are computed in :mod:`roommodes.analysis.maps`.
"""

from __future__ import annotations

import base64
import csv
import html
import io
import math
import platform
import re
import threading
from dataclasses import dataclass, replace

import numpy as np

from .. import __version__
from ..analysis import eq as eqmod
from ..analysis.compare import average_measurements, compare_to_prediction
from ..analysis.correction import correct_measured, correct_prediction
from ..analysis.ensemble import MIN_FOUND_FRACTION, ensemble_scores, feature_spread
from ..analysis.explain import EXPLAIN_SAMPLES, explain_bands
from ..analysis.explain import explain as run_explain
from ..analysis.fit import fit_room
from ..analysis.maps import (
    INTERPOLATED_METHODS,
    MAP_UNSURE_DB,
    coupling_ranges,
    floor_level_map,
    floor_map_bands,
    mode_coupling,
)
from ..analysis.predict import band_figures, predict, response_features, usable_band
from ..analysis.search import (
    PARTS,
    front_distance_profile,
    layout_curves,
    search_layouts,
    search_space,
    seat_score_map,
)
from ..analysis.subs import BEFORE_CROSSOVER_HZ, CROSSOVER_TYPE, RANKING_RULE, optimise_subs
from ..analysis.subs import CAUTIONS as SUB_CAUTIONS
from ..analysis.summary import room_summary
from ..analysis.uncertainty import SUBS_SAMPLES, mode_frequency_ranges, predict_bands, subs_bands
from ..dsp.response import log_frequencies
from ..dsp.text import boost_text, range_text
from ..model.criteria import note_name
from ..model.materials import get_material
from ..model.modes import room_modes
from ..model.placement import PRESETS, preset_layout
from ..solvers import ACCURACY_DB, ASSUMPTIONS, DEFAULT_METHOD
from .plots import plot_correction, plot_modes, plot_prediction
from .plots_measure import plot_comparison, plot_fit
from .plots_place import plot_explain, plot_place
from .plots_report import plot_floor_map, plot_mode_coupling, plot_room_views
from .plots_subs import plot_subs
from .render import FigureRenderer
from .serialise import document
from .units import UNITS, format_length, wall_distances, walls_text

__all__ = [
    "SEARCH_MODES", "EMBED_FORMATS", "MODEL_ASSUMPTIONS", "SAFETY_NOTES",
    "MeasuredCurve", "Table", "ReportFigure", "Report", "build_report",
]

#: Grid step of the floor maps' solver, m: the level is interpolated from it to the 5 cm cells
#: drawn (:func:`~roommodes.analysis.maps.floor_level_map`'s ``solve_step_m``).
MAP_SOLVE_STEP_M = 0.1

#: Placement search done by the report: as ``place`` does, without the refinement, or none.
SEARCH_MODES = ("full", "quick", "off")
#: How figures are embedded in the page.
EMBED_FORMATS = ("svg", "png")

#: What the model assumes (the validity section).
MODEL_ASSUMPTIONS = (
    "The room is a closed rectangular box with flat walls; doors, windows, alcoves, furniture and "
    "sloping ceilings are not in the model.",
    "Each surface is locally reacting, with the real impedance whose random-incidence absorption "
    "equals the room file's coefficient (London's formula; docs/methods.md). Walls that flex "
    "(plasterboard, timber) enter only through that coefficient.",
    "Each loudspeaker is a point source at its woofer centre; its own low-frequency roll-off is a "
    "Butterworth high-pass at lowcut_hz (2nd order sealed, 4th order vented) or an imported curve.",
    "Levels are in dB relative to the free-field level of the same speaker at 1 m.",
    "Speakers play the same signal in phase when they are summed (the mono sum and the floor maps).",
)

#: Cautions in short (the full text is docs/cautions.md).
SAFETY_NOTES = (
    "The model is an idealised box: check its predictions against a measurement before moving heavy "
    "furniture or building anything, and treat anything above the Schroeder frequency as indicative only.",
    "Absorption below 125 Hz is extrapolated from handbook tables; measuring the room and calibrating "
    "the model (roommodes fit) makes the details trustworthy.",
    "Test signals are loud: start quiet, aim for 75-85 dB SPL at the seat when measuring, and wear hearing "
    "protection at higher levels; where local rules are stricter than the limits below, follow them.",
    "Speakers on stands, shelves or walls must be secured as their makers and local building codes "
    "require; this report says where sound is best, not what a wall or shelf can carry.",
)


# ======================================================================================
# Report pieces
# ======================================================================================
@dataclass(frozen=True, eq=False)
class MeasuredCurve:
    """One measured curve with the speaker that played and the microphone position.

    Attributes
    ----------
    channel : str
        Speaker name in the room file.
    position_m : tuple of float
        Microphone position, m.
    measurement : roommodes.compare.Measurement
    """
    channel: str
    position_m: tuple
    measurement: object


@dataclass(frozen=True)
class Table:
    """A table of the report.

    Attributes
    ----------
    name : str
        File stem of its CSV (``t03-surfaces``).
    number : int
    title : str
    columns : tuple of str
        Headers, with units.
    text : tuple of tuple of str
        The cells as shown.
    values : tuple of tuple
        The same cells at full precision (numbers, text or None) for the CSV file and the
        page's ``data-value`` attributes.
    note : str
    """
    name: str
    number: int
    title: str
    columns: tuple
    text: tuple
    values: tuple
    note: str = ""

    def csv_text(self):
        """Return the table as CSV text (header row, then the full-precision values)."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(self.columns)
        for row in self.values:
            w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, (float, np.floating)) else v)
                        for v in row])
        return buf.getvalue()


@dataclass(frozen=True)
class ReportFigure:
    """A figure of the report, rendered.

    Attributes
    ----------
    name : str
        File stem (``f02-mode-coupling``); the files are ``name + ".png"`` and ``".svg"``.
    number : int
    title, caption : str
    png, svg : bytes
    """
    name: str
    number: int
    title: str
    caption: str
    png: bytes
    svg: bytes


@dataclass(frozen=True)
class Report:
    """What :func:`build_report` returns.

    Attributes
    ----------
    html : str
        The self-contained page.
    figures : tuple of ReportFigure
    tables : tuple of Table
    values : dict
        Headline numbers as shown in the page, full precision (``schroeder_hz``,
        ``modes``, ``eq_max_boost_db``, ``best_score``, ...).
    glance : tuple of str
        The "At a glance" sentences of the page, for printing.
    """
    html: str
    figures: tuple
    tables: tuple
    values: dict
    glance: tuple = ()


def _esc(text):
    return html.escape(str(text), quote=True)


_UNSAFE_IN_NAME = re.compile(r"[^A-Za-z0-9_-]+")


def safe_stem(text, limit=40):
    """A file-name stem from user text (a speaker's name): ASCII letters, digits, '-' and '_'
    only, at most ``limit`` characters; never empty, never a path."""
    stem = _UNSAFE_IN_NAME.sub("-", str(text)).strip("-_")[:limit].strip("-_")
    return stem or "x"


def _fmt(v, spec):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return format(v, spec)


def _num(v, spec):
    """A numeric cell: (full value, text)."""
    if v is None:
        return (None, "-")
    fv = float(v)
    return (fv if math.isfinite(fv) else None, _fmt(fv, spec))


def _indices_text(n):
    return "(" + ",".join(str(int(v)) for v in n) + ")"


#: How the report's figures are drawn: laid out once, deterministic SVG ids, no date.
_RENDER_OPTIONS = {"png_dpi": 130, "svg_metadata": {"Date": None, "Creator": f"roommodes {__version__}"},
                   "svg_rc": {"svg.hashsalt": "roommodes-report", "svg.fonttype": "path"}}


_CSS = """
:root { --ink: #1b1b1b; --muted: #555; --rule: #d4d4d4; --accent: #0072B2; --warn: #E69F00; }
html { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: var(--ink); background: #fff; }
body { max-width: 62rem; margin: 0 auto; padding: 1.2rem 1.5rem 3rem; line-height: 1.45; font-size: 15px; }
header h1 { font-size: 1.75rem; margin: 0.3rem 0 0.2rem; }
header p { margin: 0.15rem 0; color: var(--muted); }
h2 { font-size: 1.3rem; border-bottom: 2px solid var(--accent); padding-bottom: 0.15rem; margin-top: 2.2rem; }
h3 { font-size: 1.05rem; margin: 1.4rem 0 0.4rem; }
p, li { max-width: 52rem; }
nav.toc ol { columns: 2; font-size: 0.92rem; }
nav.toc a { color: var(--accent); text-decoration: none; }
.glance { background: #f2f7fb; border-left: 4px solid var(--accent); padding: 0.5rem 1rem; }
.glance li { margin: 0.2rem 0; }
.caution { background: #fff6e6; border-left: 4px solid var(--warn); padding: 0.4rem 1rem; }
table { border-collapse: collapse; margin: 0.5rem 0 1.1rem; font-size: 0.86rem; max-width: 100%; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: 0 0 0.3rem; }
th, td { border-bottom: 1px solid var(--rule); padding: 0.22rem 0.5rem; text-align: left; vertical-align: top;
         overflow-wrap: break-word; }
th { background: #f4f4f4; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.pass { color: #00795a; font-weight: 600; }
.fail { color: #b34700; font-weight: 600; }
.note { color: var(--muted); font-size: 0.85rem; }
figure { margin: 1rem 0 1.4rem; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.86rem; color: var(--muted); margin-top: 0.3rem; max-width: 52rem; }
pre { white-space: pre-wrap; font-size: 0.78rem; background: #f7f7f7; padding: 0.6rem; border: 1px solid #eee; }
code { font-size: 0.9em; }
@page { margin: 14mm 12mm 14mm 12mm; }
@media print {
  html { font-size: 10pt; }
  body { max-width: none; padding: 0; font-size: 10pt; }
  nav.toc a { color: inherit; }
  h2.newpage { break-before: page; page-break-before: always; }
  h2, h3 { break-after: avoid; page-break-after: avoid; }
  figure, .glance, .caution, tr, pre { break-inside: avoid; page-break-inside: avoid; }
  table { break-inside: auto; }
  thead { display: table-header-group; }
  figure img { max-height: 235mm; width: auto; border: none; }
}
"""


class _Doc:
    """Accumulates the page's sections, figures and tables, numbering them."""
    def __init__(self, embed, renderer=None):
        self.embed = embed
        self.renderer = FigureRenderer(use_worker=False, **_RENDER_OPTIONS) if renderer is None else renderer
        self.parts = []
        self.toc = []
        self.figures = []  # ReportFigure once :meth:`page` has collected the drawings
        self.tables = []

    def section(self, anchor, title, newpage=True):
        self.toc.append((anchor, title))
        cls = ' class="newpage"' if newpage else ""
        self.parts.append(f'<h2 id="{anchor}"{cls}>{len(self.toc)}. {_esc(title)}</h2>')

    def h3(self, text, anchor=None):
        ident = f' id="{anchor}"' if anchor else ""
        self.parts.append(f"<h3{ident}>{_esc(text)}</h3>")

    def p(self, text, cls=None):
        c = f' class="{cls}"' if cls else ""
        self.parts.append(f"<p{c}>{_esc(text)}</p>")

    def raw(self, markup):
        self.parts.append(markup)

    def ul(self, items, cls=None, ordered=False):
        tag = "ol" if ordered else "ul"
        c = f' class="{cls}"' if cls else ""
        self.parts.append(f"<{tag}{c}>" + "".join(f"<li>{_esc(i)}</li>" for i in items) + f"</{tag}>")

    def figure(self, fig, stem, title, caption="", rendered=None):
        """Add a figure; ``rendered`` is a future of its ``(png, svg)`` bytes when its drawing
        has already been started (by :attr:`renderer`), which it is here otherwise."""
        number = len(self.figures) + 1
        name = f"f{number:02d}-{safe_stem(stem)}"
        drawing = self.renderer.submit(fig) if rendered is None else rendered
        self.figures.append((name, number, title, caption, drawing))
        mime = "image/svg+xml" if self.embed == "svg" else "image/png"
        width = int(round(fig.get_figwidth() * 96))
        head = f'<figure id="fig-{number}"><img src="data:{mime};base64,'
        tail = (f'" alt="Figure {number}: {_esc(title)}" '
                f'style="width:{width}px"><figcaption><strong>Figure {number}.</strong> {_esc(title)}. '
                f'{_esc(caption)} <span class="note">(files {_esc(name)}.png, {_esc(name)}.svg)</span></figcaption>'
                "</figure>")
        self.parts.append((head, number - 1, tail))
        return number

    def collect_figures(self):
        """Wait for every figure's drawing; :attr:`figures` then holds ReportFigure."""
        self.figures = [f if isinstance(f, ReportFigure) else ReportFigure(*f[:4], *f[4].result())
                        for f in self.figures]
        return self.figures

    def _part(self, part):
        if isinstance(part, str):
            return part
        head, index, tail = part
        f = self.figures[index]
        data = f.svg if self.embed == "svg" else f.png
        return head + base64.b64encode(data).decode("ascii") + tail

    def table(self, stem, title, columns, rows, note="", key=None):
        """Rows of cells: str, or (value, text) for a number (right-aligned, with data-value)."""
        number = len(self.tables) + 1
        name = f"t{number:02d}-{safe_stem(stem)}"
        text_rows, value_rows = [], []
        body = []
        for row in rows:
            trow, vrow, cells = [], [], []
            for cell in row:
                if isinstance(cell, tuple):
                    value, text = cell
                    trow.append(text)
                    vrow.append(value)
                    dv = "" if value is None else f' data-value="{_esc(repr(value))}"'
                    cells.append(f'<td class="num"{dv}>{_esc(text)}</td>')
                else:
                    text = "" if cell is None else str(cell)
                    trow.append(text)
                    vrow.append(text)
                    cls = ' class="pass"' if text == "PASS" else (' class="fail"' if text == "FAIL" else "")
                    cells.append(f"<td{cls}>{_esc(text)}</td>")
            text_rows.append(tuple(trow))
            value_rows.append(tuple(vrow))
            body.append("<tr>" + "".join(cells) + "</tr>")
        t = Table(name, number, title, tuple(columns), tuple(text_rows), tuple(value_rows), note)
        self.tables.append(t)
        head = "".join(f"<th>{_esc(c)}</th>" for c in columns)
        k = f' data-key="{_esc(key)}"' if key else ""
        note_html = f'<p class="note">{_esc(note)} (file {_esc(name)}.csv)</p>' if note else \
            f'<p class="note">(file {_esc(name)}.csv)</p>'
        self.parts.append(f'<table id="table-{number}"{k}><caption>Table {number}. {_esc(title)}</caption>'
                          f"<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>{note_html}")
        return number

    def page(self, title, header_html, glance_html):
        self.collect_figures()
        toc = "".join(f'<li><a href="#{a}">{_esc(t)}</a></li>' for a, t in self.toc)
        return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
                "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
                f"<meta name=\"generator\" content=\"roommodes {__version__}\">\n"
                f"<title>{_esc(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
                f"<header>{header_html}</header>\n"
                f"<nav class=\"toc\"><strong>Contents</strong><ol>{toc}</ol></nav>\n"
                f"{glance_html}\n" + "\n".join(self._part(p) for p in self.parts) + "\n</body>\n</html>\n")


def _val(key, value, text):
    """Inline number with its full value attached (``data-key``/``data-value``)."""
    return f'<span data-key="{_esc(key)}" data-value="{_esc(repr(float(value)))}">{_esc(text)}</span>'


# ======================================================================================
# The report
# ======================================================================================
def _analysis_layout(room):
    """The file's layout, or the first preset that fits a room without one."""
    if room.layout is not None:
        return room.layout, None
    for name in PRESETS:
        try:
            return preset_layout(room, name), name
        except ValueError:
            continue
    raise ValueError(f"{room.source or room.name}: the room file has no speakers and seat, and no standard "
                     "layout fits the room")


#: Floor maps are drawn by default for a mode below this frequency (our choice: where modes
#: are sparse enough to be heard one by one in small rooms).
_MAP_MODE_TOP_HZ = 120.0


def _map_frequencies(coupling, features):
    """Choose the floor maps' frequencies.

    The strongest mode that matters and varies over the floor (nx or ny non-zero) below
    :data:`_MAP_MODE_TOP_HZ` and the Schroeder frequency, and the most prominent dip of the
    first channel.
    """
    out = []
    top = min(coupling.schroeder_hz, _MAP_MODE_TOP_HZ)
    over_floor = (coupling.indices[:, 0] + coupling.indices[:, 1]) > 0
    sel = np.flatnonzero(coupling.matters & over_floor & (coupling.freq_hz <= top))
    if sel.size == 0:
        sel = np.flatnonzero(coupling.matters & over_floor)
    if sel.size:
        strength = coupling.coupling[:, sel].max(axis=0)
        out.append(round(float(coupling.freq_hz[sel[np.argmax(strength)]]), 1))
    dips = [ft for ft in features if ft.kind == "dip"]
    if dips:
        f = round(max(dips, key=lambda ft: ft.prominence_db).freq_hz, 1)
        if all(abs(f - g) > 0.03 * g for g in out):
            out.append(f)
    return out


def build_report(room, measurements=(), fit_targets=None, *, units="cm", search="full", method=DEFAULT_METHOD,
                 embed="svg", room_text=None, inputs=(), command=None, created=None, files_folder=None,
                 map_freqs_hz=None, compare_band_hz=(20.0, 200.0), compare_smoothing=12, progress=None,
                 uncertainty=None, spl_reference=None):
    """Run the whole tool on a room and lay the results out as one self-contained HTML page.

    Parameters
    ----------
    room : Room
        Usually from :func:`roommodes.load_room`. Without speakers and a seat, the first
        standard layout that fits is analysed (and the page says so).
    measurements : sequence of MeasuredCurve
        Measured curves to compare with the prediction (grouped by channel and
        power-averaged, as ``roommodes compare`` does).
    fit_targets : sequence of roommodes.fit.FitTarget, optional
        When given, :func:`roommodes.fit.fit_room` calibrates the model to them (its
        defaults, as ``roommodes fit``) and the page shows what changed.
    units : {"cm", "m", "ft-in"}
        Units of the distances shown.
    search : {"full", "quick", "off"}
        Placement search as ``roommodes place`` runs it, without the local refinement, or
        none.
    method : {"modal", "image"}
        Solver of the predictions.
    embed : {"svg", "png"}
        Format of the figures embedded in the page (both are returned).
    room_text : str, optional
        The room file's text, shown for reproduction.
    inputs : sequence of dict
        ``name``, ``bytes``, ``sha256`` of every input file, shown for reproduction.
    command : str, optional
        The command line that made the report.
    created : str, optional
        Date and time shown in the header.
    files_folder : str, optional
        Name of the folder the caller writes the figures and tables to (mentioned in the page).
    map_freqs_hz : sequence of float, optional
        Frequencies of the floor maps; default the strongest mode that matters and the
        deepest dip at the seat.
    compare_band_hz, compare_smoothing
        Band (Hz) and 1/b-octave smoothing of the measurement comparison.
    progress : callable, optional
        ``progress(text)`` as each part starts.
    uncertainty : dict, optional
        ``{"n_samples": N, "seed": S}``: shade the 10-90 % band of rooms drawn from the room's
        ``[uncertainty]`` on the response figures, and say which peaks and dips are solid and
        which fragile (:func:`roommodes.analysis.ensemble.feature_spread`).
    spl_reference : SplReference, optional
        The calibration of the chain the ``measurements`` (in dBFS) were made with
        (:mod:`roommodes.measure.calibration`): the EQ section then shows each measured
        channel's maximum level at the seat for a full-scale input, before and after.

    Returns
    -------
    Report

    Raises
    ------
    ValueError
        For bad options, or measurements naming speakers the room file does not have.

    Notes
    -----
    Every number is computed by the same function, with the same defaults, as the command
    that prints it with ``--json`` (``modes``, ``predict``, ``place``, ``explain``, ``eq``,
    ``compare``, ``fit``), so the page and those commands agree.
    """
    if units not in UNITS:
        raise ValueError(f"units must be one of {', '.join(UNITS)}, got {units!r}")
    if search not in SEARCH_MODES:
        raise ValueError(f"search must be one of {', '.join(SEARCH_MODES)}, got {search!r}")
    if embed not in EMBED_FORMATS:
        raise ValueError(f"embed must be one of {', '.join(EMBED_FORMATS)}, got {embed!r}")
    measurements = list(measurements)
    if (measurements or fit_targets) and room.layout is None:
        raise ValueError(f"{room.source or room.name}: measurements need the room file's [speakers] and [seat]")
    file_room = room
    fit_res = None
    if fit_targets:
        # measurement first: calibrate before anything is predicted, so that placement, EQ and
        # every curve come from the calibrated model
        if progress is not None:
            progress("fit")
        fit_res = fit_room(room, list(fit_targets), method=method)
        room = replace(fit_res.room, name=room.name, source=room.source)
    layout, preset_used = _analysis_layout(room)
    space = search_space(room)
    model = ("the room file's model calibrated to the measurements (fit)" if fit_res is not None
             else "the room file's model")
    run = _Run(room=room, file_room=file_room, model=model, layout=layout, preset_used=preset_used, units=units,
               method=method, search=search,
               space=space, keep_out=space.keep_out, f=log_frequencies(15.0, 300.0, 48),
               doc=_Doc(embed, FigureRenderer(**_RENDER_OPTIONS)),
               values=document({"units": units}), glance=[], progress=progress,
               measurements=measurements, fit_targets=fit_targets, spl_reference=spl_reference, compare_band_hz=compare_band_hz,
               compare_smoothing=compare_smoothing, created=created, command=command, files_folder=files_folder,
               inputs=inputs, room_text=room_text, map_freqs_hz=map_freqs_hz, fit_res=fit_res,
               uncertainty=uncertainty, early_figures={})
    # the placement search needs nothing the sections compute: it runs on a second thread
    # beside them (its matrix products leave the interpreter free for the figures)
    run.search_job = None if search == "off" else _Job(search_layouts, room, space, refine=(search == "full"))
    for section in (_section_room, _section_modes, _section_responses, _section_placement, _section_subs,
                    _section_eq, _section_measurements, _section_validity, _section_reproduce, _section_appendix):
        section(run)
    doc, values, glance, created, fs = run.doc, run.values, run.glance, run.created, run.fs
    title = f"Room report: {run.room.name}"
    header = (f"<h1>{_esc(title)}</h1><p>Low-frequency behaviour, loudspeaker placement and bass correction.</p>"
              f"<p>roommodes {_esc(__version__)}" + (f" &middot; {_esc(created)}" if created else "") + "</p>")
    glance.append("Read 'How far to trust this report' and 'Cautions' before acting on these numbers.")
    glance_html = ('<section class="glance" id="glance"><h2 id="at-a-glance">At a glance</h2><ul>'
                   + "".join(f"<li>{_esc(g)}</li>" for g in glance) + "</ul>"
                   + f"<p class=\"note\">Schroeder frequency: {_val('schroeder_hz', fs, f'{fs:.0f} Hz')}.</p>"
                   + "</section>")
    values["glance"] = glance
    return Report(doc.page(title, header, glance_html), tuple(doc.figures), tuple(doc.tables), values, tuple(glance))


class _Job:
    """A call started on a daemon thread; :meth:`result` waits for it and raises its error."""
    def __init__(self, func, *args, **kwargs):
        self._done = threading.Event()
        self._value = self._error = None

        def target():
            try:
                self._value = func(*args, **kwargs)
            except BaseException as exc:  # noqa: BLE001 - handed to the caller by result()
                self._error = exc
            finally:
                self._done.set()

        threading.Thread(target=target, name=f"roommodes-{func.__name__}", daemon=True).start()

    def done(self):
        """Whether the call has finished."""
        return self._done.is_set()

    def result(self):
        self._done.wait()
        if self._error is not None:
            raise self._error
        return self._value


class _Run:
    """What the sections of :func:`build_report` share.

    The inputs, the page being built, the headline sentences, and what earlier sections
    computed.
    """
    def __init__(self, **kw):
        self.__dict__.update(kw)

    def L(self, metres):  # noqa: N802 - reads like the unit it formats
        return format_length(metres, self.units)

    def step(self, text):
        if self.progress is not None:
            self.progress(text)


def _section_room(run):
    """The room drawn to scale, its surfaces, figures and proportion checks."""
    doc, values, glance, step, L = run.doc, run.values, run.glance, run.step, run.L
    room, layout, preset_used, units, keep_out = run.room, run.layout, run.preset_used, run.units, run.keep_out
    lx, ly, lz = room.size_m
    step("room and modes")
    summ = room_summary(room)
    fs = summ.schroeder_hz
    values["schroeder_hz"] = fs
    ms300 = room_modes(room, 300.0)
    values["modes"] = [{"indices": [int(v) for v in ms300.indices[i]], "freq_hz": float(ms300.freq_hz[i]),
                        "kind": str(ms300.kind[i])} for i in range(len(ms300))]
    coupling = mode_coupling(room, layout)
    glance.append(f"Room {L(lx)} long, {L(ly)} wide, {L(lz)} high ({summ.volume_m3:.1f} m\u00b3). "
                  f"Schroeder frequency {fs:.0f} Hz: below it single room modes shape the bass at the seat, "
                  "above it the room behaves statistically and this report's predictions are indicative only.")
    lowest = [f"{_indices_text(ms300.indices[i])} {ms300.freq_hz[i]:.1f} Hz {ms300.kind[i]}"
              for i in range(min(4, len(ms300)))]
    glance.append("Lowest modes: " + ", ".join(lowest) + ".")
    if preset_used:
        glance.append(f"The room file gives no speakers and seat; the sections below analyse the standard "
                      f"'{preset_used}' layout.")

    doc.section("room", "The room", newpage=False)
    doc.p(f"{room.name}: {L(lx)} long (front wall to back wall), {L(ly)} wide (left wall to right wall) and "
          f"{L(lz)} high. The front wall is the wall behind the speakers; left and right are as seen from the "
          "seat facing the speakers. Positions are given from named walls; the room file keeps them in metres "
          "from the floor corner of the front and left walls.")
    fig = plot_room_views(room, layout, keep_out, units)
    doc.figure(fig, "room", "The room drawn to scale",
               "Plan and section with the speakers (squares), the seat (star) and their distances from the "
               "walls" + (", and the keep-out boxes of the placement search (hatched)" if keep_out else "") +
               ". Each surface is labelled with its material or absorption coefficient.")
    rows = []
    for s, area in zip(room.surfaces, room.surface_areas_m2):
        a = s.absorption_at([63.0, 125.0, 250.0])
        desc = ""
        if s.material:
            desc = get_material(s.material).description
        rows.append([s.name, _num(area, ".2f"), s.describe(), desc, _num(a[0], ".2f"), _num(a[1], ".2f"),
                     _num(a[2], ".2f"),
                     "63 Hz value extrapolated" if any(abs(b - 63.0) < 1 for b in s.extrapolated_hz) else ""])
    doc.table("surfaces", "Surfaces, their areas and random-incidence absorption coefficients",
              ("surface", "area (m\u00b2)", "material or values", "description", "alpha 63 Hz", "alpha 125 Hz",
               "alpha 250 Hz", "note"), rows,
              note="Values between band centres are interpolated in log frequency. Handbook tables stop at 125 Hz; "
                   "63 Hz values of library materials are extrapolated by stated rules.")
    rows = [["volume", _num(summ.volume_m3, ".1f"), "m\u00b3"],
            ["surface area", _num(summ.total_area_m2, ".1f"), "m\u00b2"],
            ["air temperature", _num(room.temperature_c, ".0f"), "\u00b0C"],
            ["speed of sound", _num(summ.speed_of_sound, ".1f"), "m/s"]]
    for b, ts, te in zip(summ.bands_hz, summ.sabine_rt60_s, summ.eyring_rt60_s):
        rows.append([f"reverberation time at {b:g} Hz, Sabine", _num(ts, ".2f"), "s"])
        rows.append([f"reverberation time at {b:g} Hz, Eyring", _num(te, ".2f"), "s"])
    rows.append(["Schroeder frequency (Sabine time at 125 Hz)", _num(fs, ".0f"), "Hz"])
    doc.table("room-figures", "The room's figures", ("quantity", "value", "unit"), rows, key="room-figures")
    doc.p(f"The Schroeder frequency, {fs:.0f} Hz here, is 2000 sqrt(T/V) (Schroeder 1996, J. Acoust. Soc. Am. "
          "99(5):3240): below it the modes are far enough apart to be heard one by one as peaks, dips and long "
          "decays, and they are what this report is about. Above it they overlap and the response becomes "
          "statistical; every figure shades that region.")
    rows = [[c.name, "PASS" if c.passed else "FAIL", c.reason] for c in summ.checks]
    doc.table("proportions", "Room-proportion checks", ("check", "result", "details"), rows,
              note="BBC / ITU-R BS.1116 proportion rule (Walker, BBC RD 1993/8), dimension ratios near whole "
                   "numbers (common practice), and Bonello's criteria (J. Audio Eng. Soc. 29(9):597, 1981). "
                   "A failed check predicts uneven mode spacing, not a bad room: placement and treatment matter more.")
    run.summ = summ
    run.fs = fs
    run.ms300 = ms300
    run.coupling = coupling


def _section_modes(run):
    """The modes that matter at the seat, and the floor maps."""
    doc, values, glance, step, L = run.doc, run.values, run.glance, run.step, run.L
    room, layout, units, method, f = run.room, run.layout, run.units, run.method, run.f
    map_freqs_hz, coupling = run.map_freqs_hz, run.coupling
    step("modes at the seat")
    doc.section("modes", "The modes that matter at this seat")
    doc.p(f"Source: {run.model}, {run.method} solver.", cls="note")
    doc.p("A room mode is a standing wave at one frequency. How loud it is at the seat depends on two numbers: "
          "its shape value psi at the speaker (how strongly the speaker drives it; 1 at a pressure maximum such "
          "as a corner, 0 on a node) and at the seat (how much of it the listener hears). Their product is the "
          "coupling drawn below. A mode with a high coupling gives a peak and a long decay at the seat; a mode "
          "with the seat on a node leaves a gap. When the two speakers have opposite signs they drive the mode "
          "in opposite phase, so it differs between left and right and is weakened when both play the same bass.")
    held = _maps_held(run)
    ranges = None
    if held:
        step(f"uncertainty: {held['n_samples']} drawn rooms, mode coupling")
        ranges = (*coupling_ranges(room, coupling, layout, n_samples=held["n_samples"], seed=held["seed"]),
                  held["n_samples"])
    fig = plot_mode_coupling(coupling, ranges=ranges)
    doc.figure(fig, "mode-coupling", "Room modes and their coupling to each speaker and the seat",
               f"Top: |psi(speaker) psi(seat)| for every mode up to {coupling.fmax_hz:.0f} Hz; modes at or above "
               f"{coupling.threshold:g} (dashed line) are labelled with their indices nx ny nz along length, width "
               "and height. Bottom: |psi| at each speaker and at the seat (dot area; open dots: negative, i.e. "
               "opposite phase)."
               + (f" Pale bars: each coupling's 10-90 % range over {held['n_samples']} rooms drawn from the room "
                  f"file's [uncertainty] (seed {held['seed']}; the room's size, the speakers and the seat moved "
                  "as drawn): a long bar is a coupling that a few centimetres decide." if held else ""))
    sel = np.flatnonzero(coupling.matters)
    mode_rows = []
    for i in sel:
        row = [_indices_text(coupling.indices[i]), str(coupling.kind[i]), _num(coupling.freq_hz[i], ".1f"),
               _num(coupling.t60_s[i], ".2f")]
        row += [_num(coupling.psi_speakers[s, i], "+.2f") for s in range(len(coupling.names))]
        row += [_num(coupling.psi_seat[i], "+.2f")]
        row += [_num(coupling.coupling[s, i], ".2f") for s in range(len(coupling.names))]
        row += [coupling.note(i)]
        mode_rows.append(row)
    cols = (["mode", "kind", "frequency (Hz)", "T60 (s)"] + [f"psi {n}" for n in coupling.names] + ["psi seat"]
            + [f"coupling {n}" for n in coupling.names] + ["note"])
    if mode_rows:
        doc.table("modes-that-matter", f"Modes up to {coupling.fmax_hz:.0f} Hz with a coupling of "
                  f"{coupling.threshold:g} or more", cols, mode_rows,
                  note="T60 is the mode's own decay time from the surfaces' absorption; axial modes ring longest.")
    else:
        doc.p(f"No mode up to {coupling.fmax_hz:.0f} Hz reaches a coupling of {coupling.threshold:g} at this seat.")
    strongest = sorted(sel, key=lambda i: -coupling.coupling[:, i].max())[:3]
    if len(strongest):
        glance.append("Modes that matter most at the seat: " + "; ".join(
            f"{_indices_text(coupling.indices[i])} {coupling.freq_hz[i]:.1f} Hz {coupling.kind[i]} (coupling "
            + ", ".join(f"{n} {coupling.coupling[s, i]:.2f}" for s, n in enumerate(coupling.names)) + ")"
            for i in strongest) + ".")

    step("predictions")
    pred = predict(room, layout, f, method=method)
    feats = {ch.name: response_features(room, pred, ch.name) for ch in pred.channels}
    first_feats = feats[pred.channels[0].name]
    freqs = list(map_freqs_hz) if map_freqs_hz is not None else _map_frequencies(coupling, first_feats)
    if freqs:
        doc.h3("Where the modes are loud: the level over the floor", anchor="maps")
        doc.p("The maps show the predicted level over the whole floor plan at the seat's ear height at one "
              "frequency, with every speaker playing the same signal in phase: bright is loud, dark is quiet. "
              "They show where a mode's pressure maxima and nodes fall, and so what moving the seat would do.")
    for fq in freqs:
        step(f"floor map at {fq:g} Hz")
        fm = floor_level_map(room, fq, layout, method=method, solve_step_m=MAP_SOLVE_STEP_M)
        mb = None
        if held:
            step(f"uncertainty: {held['n_samples']} drawn rooms, floor map at {fq:g} Hz")
            mb = floor_map_bands(room, fm, layout, n_samples=held["n_samples"], seed=held["seed"])
        fig = plot_floor_map(fm, room, layout, units, bands=mb)
        xm, ym, top = fm.extreme("max")
        xn, yn, low = fm.extreme("min")
        near = ""
        if fm.near_modes:
            md = fm.near_modes[0]
            near = (f" The nearest mode is {_indices_text(md['indices'])}, {md['kind']}, at {md['freq_hz']:.1f} Hz; "
                    "its nodal lines are dashed.")
        doc.figure(fig, f"map-{fq:g}hz".replace(".", "p"), f"Level over the floor at {fq:g} Hz",
                   f"At the seat {fm.seat_level_db:+.1f} dB; loudest {top:+.1f} dB at {L(xm)} from the front wall and "
                   f"{L(ym)} from the left wall; quietest {low:+.1f} dB at {L(xn)} and {L(yn)}." + near
                   + (f" Solved on a {MAP_SOLVE_STEP_M * 100:g} cm grid and interpolated to the cells drawn, "
                      "the speakers' own free field added exactly (within 0.25 dB of solving every cell)."
                      if method in INTERPOLATED_METHODS else "") + _map_band_caption(mb))
        values.setdefault("maps", []).append({"freq_hz": fq, "seat_level_db": fm.seat_level_db}
                                             | (_map_band_values(mb) if mb is not None else {}))
    run.pred = pred
    run.feats = feats
    run.first_feats = first_feats


def _section_responses(run):
    """Predicted responses of the file's layout and the presets."""
    doc, glance, room, layout, preset_used = run.doc, run.glance, run.room, run.layout, run.preset_used
    method, f, ms300, pred, feats = run.method, run.f, run.ms300, run.pred, run.feats
    first_feats = run.first_feats
    doc.section("responses", "Predicted response at the seat")
    doc.p(f"Source: {run.model}, {run.method} solver.", cls="note")
    doc.p("Each speaker's predicted level at the seat, relative to the level the same speaker would give at 1 m "
          "in free space (0 dB); room gain shows as positive values. The speakers' own low-frequency roll-off is "
          "included. Ticks along the top mark the room modes (long: axial, short: tangential).")
    bands = _bands(run, layout)
    fig = plot_prediction(pred, ms300, title=f"{room.name}: predicted level at the seat ({layout.name} layout)",
                          bands=None if bands is None else [bands])
    doc.figure(fig, "response", "Predicted level at the seat for the room file's layout" if not preset_used
               else f"Predicted level at the seat for the '{preset_used}' layout",
               "Unsmoothed, 48 points per octave." + _band_caption(run))
    preds = [(layout, pred)]
    for name in PRESETS:
        if preset_used == name:
            continue
        try:
            lay = preset_layout(room, name)
        except ValueError:
            continue
        preds.append((lay, predict(room, lay, f, method=method)))
    all_bands = None if bands is None else [bands] + [_bands(run, lay, own=False) for lay, _ in preds[1:]]
    fig = plot_prediction([p for _, p in preds], ms300, title=f"{room.name}: layouts compared", bands=all_bands)
    doc.figure(fig, "layouts", "The file's layout and the standard placements compared",
               "Colour: layout; line style: channel. Standard placements: corner, against the wall, mid-room and "
               "desk (docs/placement.md)." + _layouts_band_caption(run))
    rows = []
    for lay, p in preds:
        band = usable_band(lay.speakers)
        for ch in p.channels:
            bf = band_figures(f, ch.level_db, band)
            rows.append([lay.name, ch.name, f"{band[0]:g}-{band[1]:g}", _num(bf["min_db"], "+.1f"),
                         _num(bf["max_db"], "+.1f"), _num(bf["spread_db"], ".1f"), _num(bf["std_db"], ".1f")])
    doc.table("layout-figures", "How even each layout is at the seat (1/6-octave smoothed)",
              ("layout", "channel", "band (Hz)", "lowest (dB)", "highest (dB)", "spread (dB)", "std (dB)"), rows,
              note="The band runs from the speakers' low cut (at least 20 Hz) to 200 Hz; spread = highest - lowest.")
    band = usable_band(layout.speakers)
    glance.append("At the seat, " + "; ".join(
        f"{ch.name} varies by {band_figures(f, ch.level_db, band)['spread_db']:.1f} dB over {band[0]:g}-{band[1]:g} Hz"
        for ch in pred.channels) + " (1/6-octave smoothed).")
    rows = []
    for ch in pred.channels:
        for ft in feats[ch.name]:
            rows.append([ch.name, ft.kind, _num(ft.freq_hz, ".1f"), _num(ft.level_db, "+.1f"),
                         _num(ft.prominence_db, ".1f"), "; ".join(ft.causes)])
    if rows:
        doc.table("peaks-dips", "Main peaks and dips at the seat and their likely causes",
                  ("channel", "kind", "frequency (Hz)", "level (dB)", "prominence (dB)", "likely cause"), rows,
                  note="Found on the 1/12-octave smoothed curve below the Schroeder frequency.")
        big = max(first_feats, key=lambda t: t.prominence_db) if first_feats else None
        if big is not None:
            glance.append(f"Largest feature for {pred.channels[0].name}: a {big.kind} at {big.freq_hz:.0f} Hz, "
                          f"{big.level_db:+.1f} dB, standing {big.prominence_db:.1f} dB "
                          f"{'above' if big.kind == 'peak' else 'below'} its surroundings: "
                          f"{'; '.join(big.causes) or 'many modes together'}.")
    if bands is not None:
        _feature_spreads(run, pred, feats, bands)


def _maps_held(run):
    """The count and seed of the drawn rooms of the floor maps and the mode coupling (at most
    :data:`COMPARED_SAMPLES`: each map costs one solver call per drawn room over its whole grid),
    or None without ``uncertainty``."""
    return _compared(run)


def _map_band_caption(mb):
    if mb is None:
        return ""
    sp = mb.pattern_spread_db[np.isfinite(mb.pattern_spread_db)]
    lo, hi = mb.floor_shift_db
    return (f" Right: each cell's 10-90 % spread over {mb.n_samples} rooms drawn from the room file's [uncertainty] "
            f"(seed {mb.seed}; each cell solved in every drawn room, the grid kept where it is from the front and "
            f"left walls), taken against the median level of the floor in the same drawn room: the whole floor moves "
            f"together by {lo:+.1f} to {hi:+.1f} dB (10-90 %), which says nothing about where to sit, and is taken out. "
            f"Hatched where the rest exceeds {MAP_UNSURE_DB:g} dB: there the pattern is unsure. "
            f"The rest has a median of {np.median(sp):.1f} dB over the floor; {100 * np.mean(sp > MAP_UNSURE_DB):.0f} % "
            "of the floor is hatched. "
            "Crosses on the left: the quietest spot of each drawn room; where they scatter, the node moves.")


def _map_band_values(mb):
    sp = mb.spread_db[np.isfinite(mb.spread_db)]
    pattern = mb.pattern_spread_db[np.isfinite(mb.pattern_spread_db)]
    return {"samples": mb.n_samples, "spread_db_median": float(np.median(sp)), "spread_db_max": float(np.max(sp)),
            "pattern_spread_db_median": float(np.median(pattern)),
            "pattern_spread_db_max": float(np.max(pattern)),
            "floor_median_db_p10": mb.floor_shift_db[0], "floor_median_db_p90": mb.floor_shift_db[1],
            "unsure_share": float(np.mean(pattern > MAP_UNSURE_DB))}


#: Rooms drawn at most for the layouts the report compares with the file's own (the standard
#: placements, the placement figure's curves and sweep): the file's own layout is drawn as many
#: times as asked (``report --samples``, default
#: :data:`~roommodes.analysis.uncertainty.DEFAULT_SAMPLES`), the others' rough bands at this count
#: keep the report's time in bounds (docs/report.md gives the measurement).
COMPARED_SAMPLES = 100


def _compared(run):
    """The count and seed of the compared layouts' drawn rooms, or None without ``uncertainty``."""
    if not run.uncertainty:
        return None
    return {"n_samples": min(run.uncertainty["n_samples"], COMPARED_SAMPLES), "seed": run.uncertainty["seed"]}


def _bands(run, layout, own=True):
    """The 10-50-90 % bands of ``layout`` over the drawn rooms (the file's own layout: the count
    asked; a compared one: at most :data:`COMPARED_SAMPLES`), or None without ``uncertainty``."""
    if not run.uncertainty:
        return None
    held = run.uncertainty if own else _compared(run)

    run.step(f"uncertainty: {held['n_samples']} drawn rooms, {layout.name} layout")
    return predict_bands(run.room, layout, run.f, n_samples=held["n_samples"],
                         seed=run.uncertainty["seed"], method=run.method)


def _band_caption(run, n_samples=None):
    if not run.uncertainty:
        return ""
    n = run.uncertainty["n_samples"] if n_samples is None else n_samples
    return (f" Shaded: 10-90 % of {n} rooms drawn from the room file's [uncertainty] "
            f"(seed {run.uncertainty['seed']}).")


def _layouts_band_caption(run):
    if not run.uncertainty:
        return ""
    n, m = run.uncertainty["n_samples"], _compared(run)["n_samples"]
    if n == m:
        return _band_caption(run)
    return (f" Shaded: 10-90 % of the rooms drawn from the room file's [uncertainty] (seed {run.uncertainty['seed']}): "
            f"{n} for the file's layout, {m} for each standard placement (rougher edges).")


def _feature_spreads(run, pred, feats, bands):
    """Which peaks and dips are solid and which fragile, over the drawn rooms."""

    doc, glance, values, f = run.doc, run.glance, run.values, run.f
    u = run.room.uncertainty
    doc.h3("How solid each peak and dip is", anchor="solid-fragile")
    doc.p(f"Each peak and dip above was looked for again in {bands.n_samples} rooms drawn from what the room file "
          f"says it does not know (standard deviations: {u.position_m * 100:g} cm on every position, "
          f"{u.size_m * 100:g} cm on each dimension, {u.absorption_rel:.0%} on the absorption of surfaces without a "
          f"range of their own, {u.temperature_c:g} C on the air; docs/uncertainty.md). A feature is solid when it "
          f"appears in at least {MIN_FOUND_FRACTION:.0%} of them, its frequency moves less than its own width (at "
          "half its prominence) and its level moves less than half its prominence (10-90 % of the drawn rooms, on "
          "the 1/12-octave smoothed curve). A fragile feature moves with a tape-measure error or a wall that is "
          "lighter than assumed: do not correct it with EQ or rely on it.")
    rows, spreads = [], []
    for ch in pred.channels:
        if ch.name not in bands.names:
            continue
        sp = feature_spread(f, ch.level_db, feats[ch.name], bands.samples_db[:, bands.names.index(ch.name)], ch.name)
        spreads += sp
        for x in sp:
            ft = x.feature
            rows.append([ch.name, ft.kind, _num(ft.freq_hz, ".1f"), _num(x.bandwidth_hz, ".1f"),
                         _num(100 * x.found_fraction, ".0f"),
                         range_text(x.freq_p10_hz, x.freq_p90_hz, "Hz", ".1f") if x.found_fraction else "-",
                         _num(x.level_spread_db, ".1f") if x.found_fraction else "-",
                         _num(ft.prominence_db, ".1f"), "solid" if x.solid else "fragile: " + x.reason()])
    if rows:
        doc.table("solid-fragile", "Peaks and dips over the drawn rooms",
                  ("channel", "kind", "frequency (Hz)", "width (Hz)", "found in (%)", "frequency 10-90 % (Hz)",
                   "level spread (dB)", "prominence (dB)", "verdict"), rows,
                  note="Width: at half the feature's prominence on the 1/12-octave smoothed curve. Level spread: "
                       "90th minus 10th percentile of the feature's smoothed level.")
        solid = [x for x in spreads if x.solid]
        fragile = [x for x in spreads if not x.solid]
        glance.append(f"Over {bands.n_samples} drawn rooms, {len(solid)} of {len(spreads)} peaks and dips are solid"
                      + (": " + ", ".join(f"{x.channel} {x.feature.kind} {x.feature.freq_hz:.0f} Hz" for x in solid)
                         if solid else "")
                      + ("; fragile: " + ", ".join(f"{x.channel} {x.feature.kind} {x.feature.freq_hz:.0f} Hz"
                                                     for x in fragile) if fragile else "") + ".")
    else:
        doc.p("No peak or dip stands out enough to follow.")
    values["uncertainty"] = {"samples": bands.n_samples, "seed": bands.seed, "uncertainty": u.to_dict(),
                             "features": [x.to_dict() for x in spreads]}


def _section_placement(run):
    """The placement search and the left/right explanation."""
    doc, values, glance, step, L = run.doc, run.values, run.glance, run.step, run.L
    room, layout, preset_used, units, method = run.room, run.layout, run.preset_used, run.units, run.method
    space, search = run.space, run.search
    doc.section("placement", "Placement suggestion")
    doc.p(f"Source: {run.model}, {run.method} solver.", cls="note")
    if search == "off":
        doc.p("No placement search was run for this report (search off). Run `roommodes place` on the room "
              "file, or make the report again with --search full.")
    else:
        step(f"placement search ({search})")
        if not run.search_job.done():
            # while the search runs on: what later sections draw without it
            _model_corrections(run)
            if not run.measurements:
                _early_figure(run, "eq", _eq_figure, _model_corrections(run))
            _early_figure(run, "modes", _modes_figure)
            if len(layout.speakers) >= 2:
                _early_figure(run, "left-right", _left_right_figure, _explanation(run))
        res = run.search_job.result()
        best = res.ranked[0]
        values["best_score"] = best.score
        values["best_layout"] = {"speakers": [list(s.position_m) for s in best.layout.speakers],
                                 "seat_m": list(best.layout.seat_m)}
        doc.p(f"The search placed the two speakers and the seat over the region the room file allows "
              f"({'mirror-symmetric pair' if space.symmetric else 'pair placed freely'}, listening triangle "
              f"{'kept' if space.triangle else 'not required'}), scoring {res.n_candidates} layouts on a "
              f"{res.step_m * 100:g} cm grid"
              f"{' and refining the best' if search == 'full' else ' (quick: not refined)'}."
              f" The score, in dB, lower is better, adds weighted parts over {res.band_hz[0]:g}-{res.band_hz[1]:g} Hz: "
              "flatness of each channel at the seat, left/right mismatch, spread over a listening area of "
              f"{space.area_m[0]:g} x {space.area_m[1]:g} m around the seat, the EQ boost the deepest broad dip "
              "would need, and robustness to 5 cm moves (docs/placement.md).")
        rows = []
        scored = [(f"#{s.name}", s) for s in res.ranked]
        if res.current is not None:
            scored.append(("file", res.current))
        scored += [(s.name, s) for s in res.presets]
        for label, s in scored:
            rows.append([label, _num(s.score, ".2f")] + [_num(s.parts[p], ".2f") for p in PARTS]
                        + ["yes" if s.in_region else "no"])
        doc.table("placement-scores", "Layouts ranked by the placement score (dB, lower is better)",
                  ["layout", "score"] + list(PARTS) + ["meets the [search] constraints"], rows,
                  note="Weights: " + ", ".join(f"{p} {res.weights[p]:g}" for p in PARTS) + ".", key="placement")
        rows = []
        lays = [("suggested (#1)", best.layout)] + ([("file", res.current.layout)] if res.current is not None else [])
        for label, lay in lays:
            for what, pos in [(f"{sp.name} speaker", sp.position_m) for sp in lay.speakers] + [("seat", lay.seat_m)]:
                d = wall_distances(room, pos)
                rows.append([label, what] + [(d[w], L(d[w])) for w in ("front", "left", "right", "floor")]
                            + [walls_text(room, pos, units)])
        doc.table("placement-positions", "Where to put the speakers and the seat",
                  ("layout", "object", "from the front wall", "from the left wall", "from the right wall",
                   "height", "in words"), rows,
                  note="Speaker distances are to the woofer's centre, not the cabinet; the seat is the listener's "
                       "ears. The CSV file gives the distances in metres.")
        ref = [s.score for s in res.presets] + ([res.current.score] if res.current is not None else [])
        gain = (min(ref) - best.score) if ref else float("nan")
        sp_txt = "; ".join(f"{sp.name} speaker {walls_text(room, sp.position_m, units)}" for sp in best.layout.speakers)
        doc.p(f"Suggested: {sp_txt}; seat {walls_text(room, best.layout.seat_m, units)}. It scores "
              f"{best.score:.2f} dB, {gain:.2f} dB better than the best of the file's layout and the standard "
              "placements.")
        cur = f" against {res.current.score:.2f} dB for the file's layout" if res.current is not None else ""
        glance.append(f"Suggested placement (score {best.score:.2f} dB{cur}; lower is better): {sp_txt}; seat "
                      f"{walls_text(room, best.layout.seat_m, units)}.")
        step("placement figure" + (f" (uncertainty: {_compared(run)['n_samples']} drawn rooms per layout)"
                                   if run.uncertainty else ""))
        fig = _placement_figure(room, space, res, layout if room.layout is not None else None, method,
                                drawn=_compared(run))
        doc.figure(fig, "placement", "The suggested layout",
                   "(a) Predicted level at the seat for the suggested and the file's layout. (b) Each layout's "
                   "level before (thin) and after (thick) the EQ the search's score assumes for it (a quick "
                   "design over the listening area; the EQ section below designs the file's layout's EQ in full). (c) The floor plan "
                   "coloured by the score the seat would get at each point with the suggested speakers. (d) The "
                   "score as both speakers move away from the front wall, everything else kept."
                   + _band_caption(run, _compared(run)["n_samples"] if run.uncertainty else None).replace(
                       " Shaded:", " Shaded in (a):")
                   + (f" Circles in (c): where 80 % of positions drawn with the room file's sd of "
                      f"{room.uncertainty.position_m * 100:g} cm per coordinate land on the plan (radius 1.79 sd). "
                      f"Shaded in (d): the score's 10-90 % range over "
                      f"{_compared(run)['n_samples']} drawn rooms (the same seed) at up to "
                      f"{PROFILE_BAND_POINTS} distances along the sweep, scored with the search's modal scorer."
                      if run.uncertainty else ""))
    step("left/right explanation")
    doc.h3("Why left and right differ", anchor="explain")
    if len(layout.speakers) < 2:
        doc.p("The layout has one speaker: nothing to compare.")
    else:
        e = _explanation(run)
        n1, n2 = e.names
        values["band_mismatch_db"] = e.band_mismatch_db
        doc.p(f"The two channels of the {'file' if not preset_used else preset_used} layout at the seat differ by "
              f"{e.band_mismatch_db:.1f} dB RMS over {e.band_hz[0]:g}-{e.band_hz[1]:g} Hz (1/{e.smoothing}-octave "
              f"smoothed, {n1} minus {n2}). Regions where the difference reaches {e.threshold_db:g} dB, with their "
              "main cause and the single speaker move that helps most:")
        if e.regions:
            doc.ul([r.sentence for r in e.regions], ordered=True)
            rows = []
            for k, r in enumerate(e.regions, 1):
                for c in r.causes[:4]:
                    rows.append([str(k), f"{r.freq_hz[0]:.0f}-{r.freq_hz[1]:.0f}", c.kind, c.text,
                                 _num(c.contribution_db, ".1f")])
            if rows:
                doc.table("left-right-causes", f"Causes of the {n1}/{n2} difference, by region",
                          ("region", "band (Hz)", "kind", "cause", "contribution (dB)"), rows,
                          note="Contribution: how much of the region's mean |difference| the cause accounts for.")
            r0 = max(e.regions, key=lambda r: abs(r.difference_db))
            glance.append(f"{n1[:1].upper()}{n1[1:]} and {n2} differ by {e.band_mismatch_db:.1f} dB RMS; most at "
                          f"{r0.peak_hz:.0f} Hz "
                          f"({r0.difference_db:+.1f} dB, {n1} minus {n2}).")
        else:
            doc.p(f"No region reaches {e.threshold_db:g} dB.")
        if e.mono_cancelled:
            doc.p("Modes the two speakers drive in opposite phase, so that they cancel when both play the same bass: "
                  + ", ".join(f"{_indices_text(m['indices'])} {m['freq_hz']:.1f} Hz" for m in e.mono_cancelled[:8])
                  + ".")
        early = run.early_figures.pop("left-right", None)
        fig, rendered = early if early is not None else (_left_right_figure(run, e), None)
        doc.figure(fig, "left-right", f"{n1} and {n2} at the seat, and their difference",
                   "Top: both channels (thin: unsmoothed) and the mono sum. Bottom: the difference with the regions "
                   "numbered as in the list above."
                   + (f" Shaded: 10-90 % of {_explain_held(run)['n_samples']} drawn rooms (seed "
                      f"{_explain_held(run)['seed']}), each channel and the difference."
                      if run.uncertainty else ""), rendered)


def _section_subs(run):
    """Subwoofers and several seats: the best configuration of :func:`optimise_subs` (only when
    the file has subs or several seats)."""
    doc, values, glance, step = run.doc, run.values, run.glance, run.step
    room, layout, units, method, search = run.room, run.layout, run.units, run.method, run.search
    if room.layout is None or (not layout.subs and len(layout.all_seats) < 2):
        return
    doc.section("subs", "Subwoofers")
    current = ", ".join(s.name for s in layout.subs)
    doc.p((f"The room file has {len(layout.subs)} subwoofer{'s' if len(layout.subs) > 1 else ''} ({current}) "
           if layout.subs else "The room file has no subwoofer (a vented sub with its -3 dB point at 25 Hz is "
           "assumed) ") + f"and {len(layout.all_seats)} seat{'s' if len(layout.all_seats) > 1 else ''} "
          f"({', '.join(s.name for s in layout.all_seats)}; the first is the main seat). The placement above "
          "covers the two main speakers only; this section works out where the subs go and their gain, delay, "
          "polarity and crossover, as `roommodes subs` does (docs/subs.md). The evaluated signal is the mono bass "
          f"sum: the same signal to both mains and every sub. Crossover: {CROSSOVER_TYPE} (Linkwitz-Riley 4th "
          "order, low-pass on the subs, high-pass on the mains).")
    if search == "off":
        doc.p("No subwoofer search was run for this report (search off). Run `roommodes subs` on the room file, "
              "or make the report again with --search quick or full.")
        return
    step(f"subwoofer search ({search})")
    # quick: the same search without the check in the perturbed room
    res = optimise_subs(room, layout, method=method, check_perturbed=(search == "full"))
    best, before = res.ranked[0], res.before
    values["subs"] = {"best": best.to_dict(), "before": before.to_dict(), "band_hz": list(res.band_hz),
                      "seats": [s.name for s in res.seats]}
    band = f"{res.band_hz[0]:g}-{res.band_hz[1]:g} Hz"
    system = room.system
    xo_text = (f"the file's crossover at {system.crossover_hz:g} Hz" if system is not None and system.crossover_hz
               else f"low-pass at {BEFORE_CROSSOVER_HZ:g} Hz, mains full range")
    before_text = ("the file's layout as it is (each sub's gain, delay and polarity from the file, 0 dB, 0 ms, + "
                   f"when not given; {xo_text})" if layout.subs else "the mains alone, full range")
    doc.p(f"Best: {best.label}, crossover {best.crossover_hz:g} Hz. Seat-to-seat spread over {band} (square root "
          f"of the weighted mean spatial variance; Welti & Devantier, J. Audio Eng. Soc. 54(5), 2006): "
          f"{before.seat_spread_db:.1f} dB before ({before_text}), {best.seat_spread_db:.1f} dB after. Flatness "
          f"at the main seat: {before.parts['flatness']:.1f} dB before, {best.parts['flatness']:.1f} dB after."
          + ("" if search == "full" else " (Quick: the settings were not checked in a perturbed room.)"))
    glance.append(f"Subwoofers: best {best.label} (crossover {best.crossover_hz:g} Hz); seat-to-seat spread "
                  f"{before.seat_spread_db:.1f} dB before, {best.seat_spread_db:.1f} dB after ({band}).")
    rows = []
    for st in best.subs:
        rows.append([st.name, walls_text(room, st.position_m, units), _num(st.gain_db, "+.1f"),
                     _num(st.delay_ms, ".2f"), "+" if st.polarity > 0 else "- (inverted)",
                     _num(st.headroom_db, ".1f")])
    doc.table("subs-settings", f"Where the subs go and what to set ({best.label})",
              ("sub", "position (woofer centre)", "gain (dB)", "delay (ms)", "polarity", "headroom (dB)"), rows,
              note=(f"Mains delay {best.mains_delay_ms:.2f} ms; crossover {best.crossover_hz:g} Hz, {CROSSOVER_TYPE}. "
                    "Gains are relative to a sub as loud at 1 m in free field as one main: set the overall sub "
                    "level by measurement at the main seat and keep the differences."), key="subs-settings")
    rows = []
    for j, seat in enumerate(res.seats):
        rows.append([seat.name + (" (main)" if j == 0 else ""), _num(seat.weight, "g"),
                     _num(before.seat_deviation_db[j], ".1f"), _num(best.seat_deviation_db[j], ".1f"),
                     _num(before.flatness_db[j], ".1f"), _num(best.flatness_db[j], ".1f")])
    doc.table("subs-seats", "Each seat before and after",
              ("seat", "weight", "deviation before (dB)", "after (dB)", "flatness before (dB)", "after (dB)"),
              rows, note=f"Over {band}. Deviation: RMS of the seat's level minus the weighted seat mean; flatness: "
                         "RMS of the seat's level minus its own mean.")
    rows = []
    for c in [*res.ranked, before]:
        rows.append([c.label if c.kind != "before" else f"before: {c.label}", str(len(c.subs)),
                     "-" if c.crossover_hz is None else _num(c.crossover_hz, "g"), _num(c.score, ".2f"),
                     _num(c.seat_spread_db, ".1f"), _num(c.parts["flatness"], ".1f"),
                     _num(c.perturbed_seat_spread_db, ".1f") if search == "full" else "-"])
    doc.table("subs-configurations", "Sub configurations ranked (score in dB, lower is better)",
              ("configuration", "subs", "crossover (Hz)", "score", "spread (dB)", "flatness (dB)",
               "spread, perturbed room (dB)"), rows,
              note="Perturbed room: 1 % larger with 1.3 times the absorption, the same settings. Ranking: "
                   + RANKING_RULE + "." + "".join(
                       f" {n['more']} scored only {n['score_difference_db']:.2f} dB better than {n['fewer']}, which "
                       "ranks first." for n in res.ranking_notes)
                   + "".join(f" {c.label}: {c.note}." for c in res.ranked if c.note), key="subs")
    bands = None
    if run.uncertainty:

        n_subs = min(run.uncertainty["n_samples"], SUBS_SAMPLES)
        step(f"uncertainty: {n_subs} drawn rooms, sub configurations")
        # the ranked settings, then the file's own ("before"): the same drawn rooms for each
        bands = subs_bands(room, [*res.ranked, before], res.freq_hz, res.band_hz, n_samples=n_subs,
                           seed=run.uncertainty["seed"], method=method)
    step("subwoofer figure")
    mains_m = [m.position_m for m in layout.mains]
    fig = plot_subs(res, room, mains_m, title=f"Subwoofers: {room.name}", bands=bands)
    doc.figure(fig, "subs", "Level of the mono sum at every seat, and where the subs go",
               "One row per configuration, the file's layout as it is last: left, the level at each seat; right, "
               "the floor plan with the subs (numbered; gain, delay and polarity in the legend, a nearly idle sub "
               "hollow), the mains and the seats."
               + ("" if bands is None else
                  f" Shaded: each seat's 10-90 % of {bands.n_samples} rooms drawn from the room file's [uncertainty] "
                  f"(seed {bands.seed}), each configuration's settings tried in the same drawn rooms."))
    doc.raw('<div class="caution"><strong>Before setting up the subs</strong><ul>'
            + "".join(f"<li>{_esc(t)}</li>" for t in SUB_CAUTIONS) + "</ul></div>")




#: Frequencies of the maximum-level table, Hz (ISO 266 one-third-octave centres).
_LEVEL_TABLE_HZ = (31.5, 40.0, 50.0, 63.0, 80.0, 100.0, 125.0, 160.0, 200.0)


def _max_level_table(run, corrections):
    """Each channel's maximum level at the seat, before and after EQ, where it is known."""
    doc, values = run.doc, run.values
    rows = []
    values["max_level_db"] = {}
    for c in corrections:
        cl = c.clean
        if cl is None:
            continue
        idx = [int(np.argmin(np.abs(cl.freq_hz - fr))) for fr in _LEVEL_TABLE_HZ]
        basis = ("measured, full-scale input at the measurement's volume" if cl.basis == "measured"
                 else "room file's amplifier, sensitivity and maximum SPL")
        values["max_level_db"][c.name] = {"basis": cl.basis, "freq_hz": [float(cl.freq_hz[i]) for i in idx],
                                          "before_db": [float(cl.before_db[i]) for i in idx],
                                          "after_db": [float(cl.after_db[i]) for i in idx]}
        rows.append([c.name, "before", basis] + [_num(cl.before_db[i], ".0f") for i in idx])
        rows.append([c.name, "after", basis] + [_num(cl.after_db[i], ".0f") for i in idx])
    if not rows:
        doc.p("No maximum level is shown: the room file gives no amplifier power, sensitivity and maximum SPL for "
              "the predicted channels, and measured levels are relative unless calibrated (--spl-ref).", cls="note")
        return
    note = ("dB SPL at the seat. 'measured': the level a full-scale input gives at the volume setting used for "
            "the measurement, through the calibrated chain (" + run.spl_reference.describe() + "); the "
            "amplifier's and speaker's own limits apply on top." if run.spl_reference is not None else
            "dB SPL at the seat, from the room file's amplifier power, sensitivity and maximum SPL.")
    doc.table("max-level", "Maximum level at the seat before and after the correction (dB SPL)",
              ("channel", "", "from") + tuple(f"{fr:g} Hz" for fr in _LEVEL_TABLE_HZ), rows, note=note,
              key="max-level")


def _model_corrections(run):
    """The EQ designed on the model for the analysed layout (computed once: the placement
    section starts it while it waits for the search)."""
    if getattr(run, "model_corrections", None) is None:
        if run.uncertainty:
            run.step(f"uncertainty: bass correction held to {_eq_held(run)['n_samples']} drawn rooms")
        run.model_corrections, _ = correct_prediction(run.room, run.layout, run.f, method=run.method,
                                                      uncertainty=_eq_held(run))
    return run.model_corrections


def _eq_held(run):
    """The drawn rooms the model EQ is held to (the report's setting, at most ``eq``'s own
    default count), or None without ``uncertainty``."""
    if not run.uncertainty:
        return None
    return {"n_samples": min(run.uncertainty["n_samples"], eqmod.HELD_SAMPLES), "seed": run.uncertainty["seed"]}


def _section_eq(run):
    """Bass correction and headroom, channel by channel."""
    doc, values, glance, step, room = run.doc, run.values, run.glance, run.step, run.room
    layout = run.layout
    step("bass correction")
    doc.section("eq", "Bass correction (EQ) and headroom")
    corrections = _model_corrections(run)
    measured = {}
    for m in run.measurements:
        measured.setdefault(m.channel, []).append(m.measurement)
    if measured:
        # measurement first: a measured channel is corrected on what the room did
        full_scale = None if run.spl_reference is None else run.spl_reference.full_scale_spl_db
        by_name = {c.name: c for c in correct_measured(room.with_layout(layout), measured,
                                                          full_scale_spl_db=full_scale)}
        corrections = [by_name.get(c.name, c) for c in corrections]
    doc.p("Source: " + "; ".join(
        f"{c.name}: {'its measured curve' + ('s (averaged)' if len(measured.get(c.name, ())) > 1 else '')}"
        if c.name in measured else f"{c.name}: {run.model}" for c in corrections) + ".", cls="note")
    held = [c.name for c in corrections if c.ensemble_seat_db is not None]
    if held:
        n_held = len(corrections[[c.name for c in corrections].index(held[0])].ensemble_seat_db)
        doc.p(f"The parametric filters{'' if len(held) == len(corrections) else ' of ' + ', '.join(held)} were "
              f"held to {n_held} rooms drawn from the room file's [uncertainty] (seed {run.uncertainty['seed']}, "
              "as in 'How solid each peak and dip is'): " + eqmod.held_rule_text())
        values["eq_held"] = {"samples": n_held, "seed": run.uncertainty["seed"], "channels": held,
                             "stable_share": eqmod.STABLE_SHARE}
    doc.p("For each channel the predicted curve at the seat (1/12-octave smoothed) is compared with a flat target "
          "aligned to its mean. Every dip is classified first: a deep, narrow dip that moves when the seat or the "
          "speaker moves by 5 cm is a cancellation null, and boosting it only costs amplifier power and cone "
          "excursion, so it is left alone; broad shortfalls may be boosted (at most +6 dB of the combined curve), "
          "peaks are cut. A vented speaker is never boosted below its tuning. Filters are peaking biquads with "
          "the Audio EQ Cookbook's Q (bandwidth between the half-gain points).")
    values["eq_max_boost_db"] = {}
    rows_h = []
    for c in corrections:
        p = c.parametric
        values["eq_max_boost_db"][c.name] = c.headroom.max_boost_db
        doc.h3(f"Channel {c.name}")
        rows = []
        for i, flt in enumerate(sorted(p.filters, key=lambda x: x.freq_hz), 1):
            rows.append([str(i), flt.type, _num(flt.freq_hz, ".1f"), _num(flt.gain_db, "+.1f"), _num(flt.q, ".2f"),
                         _num(flt.bandwidth_octaves, ".2f")])
        if rows:
            doc.table(f"eq-{c.name}", f"Parametric EQ for {c.name} (band {p.band_hz[0]:g}-{p.band_hz[1]:g} Hz)",
                      ("#", "type", "frequency (Hz)", "gain (dB)", "Q", "bandwidth (octaves)"), rows,
                      note=f"Deviation from the target where EQ may act: rms {p.error_before.rms_db:.1f} -> "
                           f"{p.error_after.rms_db:.1f} dB, largest {p.error_before.max_abs_db:.1f} -> "
                           f"{p.error_after.max_abs_db:.1f} dB.", key=f"eq-{c.name}")
        else:
            doc.p("No filter is needed within the limits.")
        regs = [f"{r.kind} {range_text(r.freq_lo_hz, r.freq_hi_hz)} ({r.deviation_db:+.1f} dB): "
                + {"peak": "cut", "broad dip": "may be boosted", "narrow null": "not boosted"}.get(r.kind, "")
                for r in p.classification.regions if r.kind != "ok"]
        if regs:
            doc.ul(regs)
        g = c.graphic_third
        sliders = ", ".join(f"{lab} {v:+.1f}" for lab, v in zip(g.bands.labels, g.gains_db) if abs(v) >= 0.05)
        shelf = (f"a low shelf at {c.shelf.filters[0].freq_hz:.0f} Hz, {c.shelf.filters[0].gain_db:+.1f} dB"
                 if c.shelf.filters else "no shelf (the curve needs none)")
        doc.p(f"With a bass tone control only: {shelf}. With a "
              f"31-band graphic EQ (1/3 octave): {sliders or 'all sliders at 0'} dB.")
        doc.table(f"graphic-{c.name}", f"1/3-octave graphic EQ sliders for {c.name}", ("band (Hz)", "gain (dB)"),
                  [[lab, _num(v, "+.1f")] for lab, v in zip(g.bands.labels, g.gains_db)])
        for w in p.warnings:
            doc.p(f"Warning: {w.message}", cls="caution")
        h = c.headroom
        rows_h.append([c.name, _num(h.max_boost_db, "+.1f"), _num(h.max_boost_freq_hz, ".0f"),
                       _num(h.preattenuation_db, ".1f"), _num(10 ** (max(h.max_boost_db, 0) / 10), ".2f"),
                       _num(10 ** (max(h.max_boost_db, 0) / 20), ".2f")])
    doc.h3("Headroom")
    doc.table("headroom", "What the correction costs in headroom, per channel",
              ("channel", "max boost (dB)", "at (Hz)", "digital pre-attenuation (dB)", "amplifier power (x)",
               "cone excursion (x)"), rows_h,
              note="Max boost of the combined filter curve at any frequency; power grows as 10^(G/10), excursion "
                   "and voltage as 10^(G/20).", key="headroom")
    for w in eqmod.channel_headroom_warnings({c.name: c.headroom.max_boost_db for c in corrections}):
        doc.p(f"Warning: {w.message}", cls="caution")
    _max_level_table(run, corrections)
    glance.append("Bass correction: " + "; ".join(
        f"{c.name} {len(c.parametric.filters)} filter(s), {boost_text(c.headroom.max_boost_db)} "
        f"(pre-attenuate {c.headroom.preattenuation_db:.1f} dB)" for c in corrections) + ".")
    early = None if measured else run.early_figures.pop("eq", None)
    fig, rendered = early if early is not None else (_eq_figure(run, corrections), None)
    doc.figure(fig, "eq", "Bass correction, channel by channel",
               "Left: before, after and the target, with the classified regions shaded (nulls are not boosted). "
               "Right: each filter and the combined correction; the dotted line is the maximum boost."
               + (f" Shaded light: the seat before and after over the {values['eq_held']['samples']} drawn rooms "
                  "(10-90 %)." if held else ""), rendered)
    doc.raw('<div class="caution"><strong>Before loading a correction</strong><ul>'
            + "".join(f"<li>{_esc(t)}</li>" for t in eqmod.CAUTIONS) + "</ul></div>")
    run.corrections = corrections


def _section_measurements(run):
    """Measured against predicted, and the fit."""
    doc, values, glance, step, room = run.doc, run.values, run.glance, run.step, run.room
    method, measurements, fit_targets = run.method, run.measurements, run.fit_targets
    compare_band_hz, compare_smoothing = run.compare_band_hz, run.compare_smoothing
    fit_res = None
    if measurements or fit_targets:
        doc.section("measurements", "Measured against predicted")
        doc.p(f"Predictions here come from {run.model}.", cls="note")
        by_channel = {}
        for m in measurements:
            by_channel.setdefault(m.channel, []).append(m)
        values["comparisons"] = {}
        for ch, group in by_channel.items():
            step(f"comparison ({ch})")
            meas = [g.measurement for g in group]
            first = average_measurements(meas, label=meas[0].label if len(meas) == 1 else f"mean of {len(meas)}")
            pos = [g.position_m for g in group]
            rep = compare_to_prediction(room, first, ch, pos, band_hz=compare_band_hz, smoothing=compare_smoothing,
                                        method=method)
            cmp = rep.comparison
            values["comparisons"][ch] = {"median_abs_diff_db": cmp.median_abs_diff_db,
                                         "p90_abs_diff_db": cmp.p90_abs_diff_db}
            doc.h3(f"Speaker {ch}: {len(meas)} measurement(s)")
            doc.table(f"compare-{ch}", f"Measured against predicted, {ch}",
                      ("quantity", "value"),
                      [["files", ", ".join(m.label for m in meas)],
                       ["band (Hz)", f"{cmp.band_hz[0]:g}-{cmp.band_hz[1]:g}"],
                       ["smoothing", f"1/{cmp.smoothing:g} octave" if cmp.smoothing else "none"],
                       ["level offset added to the measurement (dB)", _num(cmp.offset_db, "+.1f")],
                       ["median |difference| (dB)", _num(cmp.median_abs_diff_db, ".2f")],
                       ["90th percentile |difference| (dB)", _num(cmp.p90_abs_diff_db, ".2f")],
                       ["rms difference (dB)", _num(cmp.rms_diff_db, ".2f")],
                       ["correlation", _num(cmp.correlation, ".2f")]], key=f"compare-{ch}")
            rows = []
            for mt in rep.matches:
                rows.append([mt.kind, _num(mt.measured.freq_hz if mt.measured else None, ".1f"),
                             _num(mt.reference.freq_hz if mt.reference else None, ".1f"), _num(mt.ratio, ".3f"),
                             mt.cause])
            if rows:
                doc.table(f"features-{ch}", f"Peaks and dips, measured and predicted, {ch}",
                          ("kind", "measured (Hz)", "predicted (Hz)", "ratio", "predicted cause"), rows)
            if rep.interpretation:
                doc.ul(rep.interpretation)
            spread = None
            if first.std_db is not None:
                spread = np.interp(np.log(cmp.freq_hz), np.log(first.freq_hz), first.std_db)
            fig = plot_comparison(rep, spread_db=spread, title=f"{room.name}: {ch}, measured against predicted")
            doc.figure(fig, f"compare-{ch}", f"Measured against predicted, {ch}",
                       "Top: both curves smoothed alike and aligned in level; triangles mark matched peaks and dips. "
                       "Bottom: measured minus predicted.")
            glance.append(f"Measured {ch}: median |measured - predicted| {cmp.median_abs_diff_db:.1f} dB over "
                          f"{cmp.band_hz[0]:g}-{cmp.band_hz[1]:g} Hz.")
        if fit_targets:
            fit_res = run.fit_res
            eb, ea = fit_res.error_before, fit_res.error_after
            values["fit"] = {"error_before": eb, "error_after": ea,
                             "parameters": {p.name: p.value for p in fit_res.parameters}}
            doc.h3("Calibrating the model to the measurements", anchor="fit")
            doc.p(f"The model's absorption, dimensions, positions and roll-off were adjusted within bounds, pulled "
                  f"toward the room file's values, to match the measurements: median |difference| "
                  f"{eb['median_abs_db']:.2f} -> {ea['median_abs_db']:.2f} dB, 90th percentile {eb['p90_abs_db']:.2f} "
                  f"-> {ea['p90_abs_db']:.2f} dB ({fit_res.iterations} iterations"
                  f"{'' if fit_res.success else ', stopped before converging: ' + fit_res.message}). Every "
                  "prediction, the placement search and the EQ of channels without measurements in this report use "
                  "the calibrated model; `roommodes fit ... -o CALIBRATED.toml` writes it as a room file.")
            rows = []
            for p in fit_res.parameters:
                spec = ".1f" if p.unit == "Hz" else ".3f"
                rows.append([p.name, p.unit or "alpha", _num(p.initial, spec), _num(p.value, spec),
                             _num(p.change, "+" + spec), _num(p.std_error, spec), "yes" if p.at_bound else ""])
            doc.table("fit", "Fitted parameters", ("parameter", "unit", "file", "fitted", "change",
                                                    "standard error", "at its bound"), rows,
                      note="Absorption is the area-weighted coefficient of the group at "
                           f"{fit_res.reference_hz:.0f} Hz. A standard error near the tolerance means the "
                           "measurements say little about that parameter.", key="fit")
            fig = plot_fit(fit_res, title=f"{room.name}: fit to measurements")
            doc.figure(fig, "fit", "The model before and after the fit, against the measurements",
                       "Smoothed alike and level-aligned.")


def _section_validity(run):
    """What the model assumes, where it stops being trustworthy; the cautions."""
    doc, step, L, room, layout = run.doc, run.step, run.L, run.room, run.layout
    measurements, summ, fs, fit_res = run.measurements, run.summ, run.fs, run.fit_res
    step("validity, cautions, reproduction")
    doc.section("validity", "How far to trust this report")
    doc.h3("What the model assumes")
    doc.ul(MODEL_ASSUMPTIONS + (ASSUMPTIONS[run.method] + " (docs/methods.md)",))
    doc.h3("Where it stops being trustworthy")
    limits = [f"Above the Schroeder frequency, {fs:.0f} Hz here (shaded in every figure): modes overlap and details "
              "of the real room the box model does not know (furniture, openings, the walls' construction) decide "
              "the response. Use the figures there as indications of trends only."]
    ext = [n for n, b in summ.extrapolated]
    if ext:
        limits.append("Absorption below 125 Hz is extrapolated for " + ", ".join(ext) + ": the modes' decay times "
                      "and peak heights depend on it directly. A measurement and a fit settle it.")
    dmin = min(float(np.linalg.norm(np.subtract(s.position_m, layout.seat_m))) for s in layout.speakers)
    if dmin < 1.0:
        limits.append(f"The seat is {L(dmin)} from the nearest speaker: close to a real cabinet the point-source "
                      "model and the woofer's size matter.")
    hi_abs = [s.name for s in room.surfaces if float(s.absorption_at([125.0])[0]) > 0.45]
    if hi_abs and run.method == "modal":
        limits.append("Strongly absorbing surfaces (" + ", ".join(hi_abs) + ", alpha above 0.45 at 125 Hz): the "
                      "perturbation damping of the modes is least accurate there.")
    limits.append("Positions are as accurate as the tape measure: at 200 Hz a 5 cm error moves a mode's pattern by "
                  "about a tenth of the distance between its node and its maximum. The placement score's "
                  "robustness part accounts for 5 cm moves.")
    med, p90 = ACCURACY_DB[run.method]
    limits.append(f"In the project's comparison with a finite-element wave solution of the same box "
                  f"(docs/validation.md), the {run.method} solver used here differs by a median {med:.2g} dB "
                  f"(90th percentile {p90:.2g} dB) over 20-200 Hz: the model is solved far more exactly than the "
                  "room is a box.")
    doc.ul(limits)
    doc.h3("What the measurements and the fit changed")
    if fit_res is not None:
        spec = {"Hz": ".1f", "m": ".3f"}
        shown = [(p, format(p.initial, spec.get(p.unit, ".3f")), format(p.value, spec.get(p.unit, ".3f")))
                 for p in fit_res.parameters if abs(p.change) > max(1e-9, 0.5 * p.std_error)]
        items = [f"{p.name}: {a} -> {b} {p.unit}".rstrip() + (" (at its bound)" if p.at_bound else "")
                 for p, a, b in shown if a != b]  # no "2.6 -> 2.6 m"
        items = items or ["No parameter moved by more than half its standard error."]
        items.append(f"Median |measured - model| {fit_res.error_before['median_abs_db']:.2f} -> "
                     f"{fit_res.error_after['median_abs_db']:.2f} dB.")
        doc.ul(items)
    elif measurements:
        doc.p("Measurements were compared but not fitted (make the report with --fit to calibrate the model to them).")
    else:
        doc.p("No measurements were given, so nothing here has been checked against the room itself. Measure the "
              "seat with each speaker (docs/measurement.md) and make the report again with the measurement files "
              "and --fit.")
    doc.section("cautions", "Cautions")
    doc.raw('<div class="caution"><ul>' + "".join(f"<li>{_esc(t)}</li>" for t in SAFETY_NOTES + tuple(eqmod.CAUTIONS))
            + "</ul></div>")
    doc.p("The full text is docs/cautions.md.", cls="note")


def _section_reproduce(run):
    """Versions, settings, inputs and the room file."""
    doc, units, method, search, measurements = run.doc, run.units, run.method, run.search, run.measurements
    fit_targets, compare_band_hz, compare_smoothing = run.fit_targets, run.compare_band_hz, run.compare_smoothing
    created, command = run.created, run.command
    files_folder, inputs, room_text = run.files_folder, run.inputs, run.room_text
    doc.section("reproduce", "Inputs, settings and version")
    import matplotlib
    import scipy

    rows = [["roommodes", __version__], ["Python", platform.python_version()], ["NumPy", np.__version__],
            ["SciPy", scipy.__version__], ["Matplotlib", matplotlib.__version__],
            ["created", created or "-"], ["units shown", units], ["solver", method],
            ["frequency grid", "15-300 Hz, 48 points per octave"],
            ["placement search", search], ["EQ", "flat target, at most 6 filters, at most +6 dB boost, Q 0.5-10"],
            ["left/right regions", "1/6-octave smoothed, threshold 3 dB"]]
    if measurements:
        rows.append(["measurement comparison", f"{compare_band_hz[0]:g}-{compare_band_hz[1]:g} Hz, 1/"
                     f"{compare_smoothing:g}-octave smoothing, levels aligned"])
    if fit_targets:
        rows.append(["fit", "roommodes fit defaults: absorption by pairs of opposite surfaces, 5 % size, 5 cm "
                     "positions, 30 % roll-off, 20-200 Hz"])
    if command:
        rows.append(["command", command])
    if files_folder:
        rows.append(["figures and tables", f"{files_folder}/ next to this page (PNG, SVG and CSV)"])
    doc.table("settings", "Version and settings", ("item", "value"), rows)
    if inputs:
        doc.table("inputs", "Input files", ("file", "bytes", "SHA-256"),
                  [[i["name"], (int(i["bytes"]), str(i["bytes"])), i["sha256"]] for i in inputs])
    if room_text:
        doc.h3("The room file")
        doc.raw(f"<pre>{_esc(room_text)}</pre>")


def _section_appendix(run):
    """Every mode up to 200 Hz."""
    doc, ms300 = run.doc, run.ms300
    doc.section("appendix", "Appendix: room modes up to 200 Hz")
    rows = []
    for i in np.flatnonzero(ms300.freq_hz <= 200.0):
        rows.append([_indices_text(ms300.indices[i]), str(ms300.kind[i]), _num(ms300.freq_hz[i], ".1f"),
                     note_name(float(ms300.freq_hz[i])), _num(ms300.t60_s[i], ".2f"),
                     _num(ms300.bandwidth_hz[i], ".1f")])
    doc.table("modes", "Room modes up to 200 Hz (rigid-wall frequencies, with their decay from the surfaces)",
              ("mode", "kind", "frequency (Hz)", "note", "T60 (s)", "bandwidth (Hz)"), rows, key="modes",
              note="Indices nx, ny, nz count half-wavelengths along length, width and height; all modes up to "
                   "300 Hz are in `roommodes modes`.")
    early = run.early_figures.pop("modes", None)
    fig, rendered = early if early is not None else (_modes_figure(run), None)
    doc.figure(fig, "modes", "Room modes up to 200 Hz with their decay times", "Colour: kind of mode."
               + (f" Bars across the stems: each mode's 10-90 % frequency range over {run.uncertainty['n_samples']} "
                  f"rooms drawn from the room file's [uncertainty] (seed {run.uncertainty['seed']}; only the size and "
                  "the air temperature move a mode)." if run.uncertainty else ""), rendered)


def _explanation(run):
    """Why left and right differ, for the analysed layout (computed once)."""
    if getattr(run, "explanation", None) is None:
        run.explanation = run_explain(run.room, run.layout, freq_hz=run.f, keep_out=run.keep_out, method=run.method)
    return run.explanation


def _explain_held(run):
    """The count and seed of the left/right figure's drawn rooms (at most ``explain``'s default
    count), or None without ``uncertainty``."""
    if not run.uncertainty:
        return None
    return {"n_samples": min(run.uncertainty["n_samples"], EXPLAIN_SAMPLES), "seed": run.uncertainty["seed"]}


def _left_right_figure(run, e):
    n1, n2 = e.names
    drawn = _explain_held(run)
    bands = None
    if drawn:
        run.step(f"uncertainty: {drawn['n_samples']} drawn rooms, left/right explanation")
        bands = explain_bands(run.room, e, run.layout, n_samples=drawn["n_samples"], seed=drawn["seed"])
    return plot_explain(e, title=f"{run.room.name}: {n1} and {n2} at the seat", bands=bands)


def _eq_figure(run, corrections):
    return plot_correction(corrections, title=f"{run.room.name}: bass correction")


def _modes_figure(run):
    ranges = None
    if run.uncertainty:
        n = run.uncertainty["n_samples"]
        ranges = (*mode_frequency_ranges(run.room, run.ms300.indices, n, run.uncertainty["seed"]), n)
    return plot_modes(run.ms300, 200.0, title=f"Room modes: {run.room.name}", freq_ranges=ranges)


def _early_figure(run, stem, make, *args):
    """Draw and render a later section's figure ahead (while the search runs); the section
    takes it from ``run.early_figures`` and draws it itself when it is not there."""
    fig = make(run, *args)
    run.early_figures[stem] = (fig, run.doc.renderer.submit(fig))


def _placement_figure(room, space, res, current, method, drawn=None):
    """The ``place`` command's figure for a search result; with ``drawn`` (``{"n_samples",
    "seed"}``) its level panel shades each layout's 10-90 % band over that many drawn rooms."""
    best = res.ranked[0].layout
    preds = [("best", predict(room, best, method=method))]
    if current is not None and len(current.speakers) >= 2:
        preds.append(("current", predict(room, current, method=method)))
    else:
        current = None
    bands = None
    if drawn:
        # the curves of (a) over rooms drawn with the report's count and seed, with the curves' own solver

        bands = [predict_bands(room, lay, p.freq_hz, method=p.method, n_samples=drawn["n_samples"],
                               seed=drawn["seed"]) for lay, (_, p) in zip((best, current), preds)]
    kw = {"weights": res.weights, "band_hz": res.band_hz, "area_m": space.area_m, "area_points": space.area_points}
    seat_map = seat_score_map(room, best, **kw)
    lo = max(0.05, min(space.speaker_front_m[0], best.speakers[0].position_m[0]) - 0.15)
    hi = min(best.seat_m[0] - 0.5, max(space.speaker_front_m[1], best.speakers[0].position_m[0]) + 0.15)
    profile = front_distance_profile(room, best, distances_m=np.arange(lo, hi + 1e-9, 0.02), space=space, **kw)
    profile_band = None
    if drawn:
        profile_band = _profile_band(room, best, profile[0], res, space, drawn)
    eq_curves = [(label, layout_curves(room, lay, space, res.band_hz))
                 for lay, (label, _) in zip((best, current), preds)]
    return plot_place(room, best, current, preds, res.band_hz, preds[0][1].schroeder_hz, seat_map, profile,
                      space.keep_out, bands=bands, position_sd_m=room.uncertainty.position_m if drawn else None,
                      profile_band=profile_band, eq_curves=eq_curves, space=space)


#: The placement figure's sweep band: at most this many distances of the sweep are scored in
#: the drawn rooms (every 2 cm would cost four times as much; the score is smooth between them).
PROFILE_BAND_POINTS = 16
def _profile_band(room, best, distances_m, res, space, drawn):
    """10-90 % of the score over drawn rooms along the placement figure's sweep (both speakers'
    distance from the front wall), with the search's score (:func:`ensemble_scores`)."""
    stride = max(1, int(np.ceil(distances_m.size / PROFILE_BAND_POINTS)))
    d = distances_m[::stride]
    lays = [replace(best, speakers=tuple(sp.moved((float(x), sp.position_m[1], sp.position_m[2]))
                                         for sp in best.speakers[:2]) + tuple(best.speakers[2:])) for x in d]
    n = drawn["n_samples"]
    sc = ensemble_scores(room, lays, n_samples=n, seed=drawn["seed"], weights=res.weights, band_hz=res.band_hz,
                         area_m=space.area_m, area_points=space.area_points)
    p10, p90 = np.percentile(sc, [10.0, 90.0], axis=0)
    return d, p10, p90, n
