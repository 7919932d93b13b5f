"""Shared pieces of the command-line interface: errors, JSON, options, formatting."""

from __future__ import annotations

import contextlib
import functools
import os
import signal
import sys
import tempfile
import threading
from pathlib import Path

import click
import numpy as np

from ..analysis.uncertainty import DEFAULT_SAMPLES, DEFAULT_SEED, MAX_SAMPLES
from ..io.roomfile import RoomFileError, load_room
from ..model.placement import PRESETS, preset_layout
from ..present.serialise import dumps
from ..present.units import UNITS
from ..present.units import walls_text as _walls_text
from ..solvers import DEFAULT_METHOD, METHODS
from ._progress import clear_status

CONTEXT = {"help_option_names": ["-h", "--help"], "max_content_width": 100}

MODEL_CAUTION = (
    "Model: an idealised rectangular box with locally reacting walls and point-source speakers, "
    "no furniture: check its predictions against a measurement before acting on them."
)


class UserError(click.ClickException):
    """A problem with the user's input: one line, exit code 2."""

    exit_code = 2

    def show(self, file=None):
        click.echo(f"roommodes: error: {self.format_message()}", err=True)


def fail(msg):
    raise UserError(msg)


def echo_err(msg=""):
    clear_status()  # a progress line, if one is shown, is erased first
    click.echo(msg, err=True)


def dump_json(payload):
    """Print one JSON document (:func:`roommodes.present.serialise.document`) on stdout."""
    click.echo(dumps(payload))


def load_or_fail(path):
    try:
        return load_room(path)
    except RoomFileError as exc:
        fail(str(exc))


def parse_range(text, name="--freq-range", allow_zero=False):
    try:
        parts = [float(v) for v in text.replace(":", ",").split(",")]
    except ValueError:
        parts = []
    if len(parts) != 2 or not all(np.isfinite(parts)) or not (0 <= parts[0] if allow_zero else 0 < parts[0]) \
            or not parts[0] < parts[1]:
        fail(f"{name} must be LOW,HIGH in Hz with 0 < LOW < HIGH, e.g. 15,300; got '{text}'")
    if parts[1] > 2000:
        fail(f"{name}: {parts[1]:g} Hz is above 2000 Hz; roommodes models the low-frequency range")
    return tuple(parts)


def check_output(path, force=False, suffixes=None, what="output"):
    """Check an output path before any computation, so that a bad one fails first.

    Parameters
    ----------
    path : path
        The file to write.
    force : bool
        Whether an existing file may be replaced.
    suffixes : tuple of str, optional
        Allowed extensions (lower case, with the dot), e.g. ``(".png", ".svg")``.
    what : str
        What the file is, for the message (``"--plot"``).

    Returns
    -------
    Path
    """
    p = Path(path)
    if suffixes is not None and p.suffix.lower() not in suffixes:
        kinds = ", ".join(suffixes[:-1]) + " or " + suffixes[-1] if len(suffixes) > 1 else suffixes[0]
        fail(f"{what} {p}: must be a {kinds} file (got '{p.suffix or 'no extension'}')")
    if p.is_dir():
        fail(f"{what} {p}: is a folder; give a file name")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.exists():
        fail(f"cannot write {p}: folder {parent} does not exist")
    if p.exists() and not force:
        fail(f"{p} already exists; choose another name or pass --force")
    if p.exists() and not p.is_file():
        fail(f"{what} {p}: exists and is not a regular file; choose another name")
    check_folder_writable(parent)
    return p


#: Figure formats every ``--plot`` writes (from the file's extension).
PLOT_SUFFIXES = (".png", ".svg", ".pdf")


def check_plot(path, force, *inputs, what="--plot"):
    """Check a figure's path before computing: format, not an input, folder writable."""
    if not path:
        return None
    protect_inputs(path, *inputs)
    return check_output(path, force, PLOT_SUFFIXES, what)


def _same_file(a, b):
    try:
        if os.path.samefile(a, b):
            return True
    except OSError:
        pass
    try:
        return Path(a).resolve() == Path(b).resolve()
    except (OSError, RuntimeError):
        return False


def protect_inputs(out, *inputs):
    """Fail if ``out`` is one of ``inputs`` (same path, symbolic or hard link), with or without --force."""
    for i in inputs:
        if i is not None and _same_file(out, i):
            alias = "" if str(out) == str(i) else f" (given as {out})"
            fail(f"refusing to write over the input file {i}{alias}: inputs are never written, with or without "
                 "--force; choose another output name")


def room_inputs(room_file, room=None):
    """The files a room file brings in: itself and its speakers' response files."""
    files = [Path(room_file)]
    if room is not None and room.layout is not None:
        base = Path(room_file).parent
        for sp in room.layout.speakers:
            if sp.response_file:
                rp = Path(sp.response_file)
                files.append(rp if rp.is_absolute() else base / rp)
    return files


freq_range_option = click.option(
    "--freq-range", default="15,300", show_default=True, metavar="LOW,HIGH",
    help="Frequency range in Hz.")
ppo_option = click.option(
    "--points-per-octave", type=click.IntRange(1, 384), default=48, show_default=True,
    help="Frequency-grid density.")
method_option = click.option(
    "--method", type=click.Choice(list(METHODS)), default=DEFAULT_METHOD, show_default=True,
    help="Solver of the predicted levels (docs/methods.md): " + "; ".join(f"{k}: {v}" for k, v in METHODS.items()) + ".")
json_option = click.option("--json", "as_json", is_flag=True, help="Print one JSON object on stdout.")


def uncertainty_options(func=None, *, samples=DEFAULT_SAMPLES, samples_note=""):
    """``--uncertainty``, ``--samples`` and ``--seed``: the Monte Carlo over the room file's [uncertainty].

    Used bare (``@uncertainty_options``) or with another default sample count
    (``@uncertainty_options(samples=40, samples_note="...")``).
    """
    if func is None:
        return lambda f: uncertainty_options(f, samples=samples, samples_note=samples_note)
    func = click.option("--seed", type=click.IntRange(0, 2**32 - 1), default=DEFAULT_SEED, show_default=True,
                        help="Seed of the drawn rooms (the same seed gives the same result).")(func)
    func = click.option("--samples", type=click.IntRange(2, MAX_SAMPLES), default=samples, show_default=True,
                        help="How many rooms --uncertainty draws." + (f" {samples_note}" if samples_note else ""))(func)
    return click.option("--uncertainty", is_flag=True,
                        help="Draw rooms from the room file's [uncertainty] table (positions, size, absorption, "
                             "temperature) and give the 10-90 % band of the result.")(func)


def uncertainty_text(room):
    """The room's standard deviations in words, surfaces with a range of their own named."""
    u = room.uncertainty
    own = [f"{s.name} {u.surface_rel(s):.0%}" for s in room.surfaces if u.surface_rel(s) != u.absorption_rel]
    return (f"sd {u.position_m * 100:g} cm on positions, {u.size_m * 100:g} cm on dimensions, "
            f"{u.absorption_rel:.0%} on absorption" + (f" ({', '.join(own)}: their own ranges)" if own else "")
            + f", {u.temperature_c:g} C on temperature")


def layouts_for(room, layout):

    names = (["file"] if room.layout is not None else []) + list(PRESETS) if layout == "all" else [layout]
    out = []
    for name in names:
        if name == "file":
            if room.layout is None:
                fail(f"{room.source}: the room file has no [speakers] and [seat]; add them or use "
                      "--layout corner|wall|mid-room|desk")
            out.append(room.layout)
        else:
            try:
                out.append(preset_layout(room, name))
            except ValueError as exc:
                fail(str(exc))
    return out


def _remember_units(ctx, _param, value):
    ctx.meta["roommodes_units"] = value
    return value


units_option = click.option(
    "--units", type=click.Choice(["cm", "m", "ft-in"]), default="cm", show_default=True, expose_value=False,
    callback=_remember_units, help="Units of the distances from the walls in the printed output.")


def walls_text(room, pos):
    """Where a point is, from named walls, in the units chosen with --units (default cm)."""

    ctx = click.get_current_context(silent=True)
    units = ctx.meta.get("roommodes_units", "cm") if ctx is not None else "cm"
    return _walls_text(room, pos, units)


def _exit_on_signal(signum, _frame):
    raise SystemExit(128 + signum)


@contextlib.contextmanager
def _cleanup_on_terminate():
    """Turn SIGTERM (and SIGHUP) into ``SystemExit`` while a command runs, so that the
    ``finally`` clauses that remove temporary files run before the process ends."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    saved = {}
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None:
            try:
                saved[sig] = signal.signal(sig, _exit_on_signal)
            except (OSError, ValueError):
                pass
    try:
        yield
    finally:
        for sig, handler in saved.items():
            signal.signal(sig, handler)


@contextlib.contextmanager
def user_errors():
    """Turn input problems raised below the CLI into one line on stderr and exit code 2.

    ``ValueError`` (the library's bad-input error, :class:`RoomFileError` included) and
    ``FileExistsError`` keep their message; other ``OSError`` name the file. SIGTERM ends the
    command through ``SystemExit`` so that temporary files are removed. A closed stdout
    (``roommodes ... | head``) ends the command quietly, as shell tools do.
    """
    try:
        with _cleanup_on_terminate():
            yield
    except click.ClickException:
        raise
    except RecursionError:
        raise UserError("the input is nested too deeply to read; it is not a file roommodes writes or reads") from None
    except (ValueError, FileExistsError) as exc:
        raise UserError(str(exc)) from None
    except BrokenPipeError:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        sys.exit(1)
    except OSError as exc:
        name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        raise UserError(f"cannot read or write{name}: {exc.strerror or exc}") from None


def guard(func):
    """Run a command under :func:`user_errors` (for commands invoked on their own, as in tests)."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with user_errors():
            return func(*args, **kwargs)

    return wrapper


display_units_option = click.option("--units", type=click.Choice(UNITS), default="cm", show_default=True,
                             help="Units of the distances shown (centimetres, metres, or feet and inches).")


def check_folder_writable(folder):
    """Fail with a clear message unless files can be created in ``folder``."""
    folder = Path(folder)
    if not folder.exists():
        fail(f"cannot write into {folder}: the folder does not exist")
    if not folder.is_dir():
        fail(f"cannot write into {folder}: it is not a folder")
    try:
        fd, probe = tempfile.mkstemp(prefix=".roommodes-probe-", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        fail(f"cannot write into {folder}: the folder is not writable ({exc.strerror or exc})")



def subs_note(room, what):
    """One line saying that the file's subs are left out of ``what`` (and that ``roommodes subs``
    places them), and which seat is used when there are several; None when neither applies."""
    lay = room.layout
    if lay is None or (not lay.subs and len(lay.all_seats) < 2):
        return None
    parts = []
    if lay.subs:
        names = ", ".join(s.name for s in lay.subs)
        parts.append(f"The subwoofer{'s' if len(lay.subs) > 1 else ''} ({names}) {'are' if len(lay.subs) > 1 else 'is'} "
                     f"left out of {what}, which covers the main speakers only; `roommodes subs` places "
                     f"{'them' if len(lay.subs) > 1 else 'it'} and works out gain, delay, polarity and crossover.")
    if len(lay.all_seats) > 1:
        parts.append(f"Of the {len(lay.all_seats)} seats, only the main seat ('{lay.all_seats[0].name}') counts here; "
                     "`roommodes subs` scores every seat.")
    return " ".join(parts)


def subs_json(room, what):
    """The ``subs`` key of ``place --json`` and ``explain --json``: the note of :func:`subs_note`
    with the subs' and seats' names; None when :func:`subs_note` is."""
    note = subs_note(room, what)
    if note is None:
        return None
    lay = room.layout
    return {"names": [s.name for s in lay.subs], "treatment": "left out", "seat_used": lay.all_seats[0].name,
            "seats": [s.name for s in lay.all_seats], "see": "roommodes subs", "note": note}
