"""The ``roommodes`` command group: a registry of commands, each loaded when it is used.

Every command lives in a module of :mod:`roommodes.cli` that imports what it needs at its
top; the group imports a command's module only when that command runs, so ``roommodes
predict`` does not pay for the report, the measurement tools or the plots. The short help
shown by ``roommodes --help`` is kept here beside each name (tests/cli/test_cli.py checks it
against the commands' own help).

Every command that computes takes ``--json`` and then prints one JSON object on stdout and
nothing else there; messages and cautions go to stderr. Bad input gives one line on stderr and
exit code 2.
"""

from __future__ import annotations

import importlib
import sys
import warnings

import click

from .. import __version__
from ._util import CONTEXT, UserError, echo_err, user_errors

__all__ = ["main", "COMMANDS"]

#: name -> (module in roommodes.cli, attribute, short help), in the order ``--help`` lists them.
COMMANDS = {
    "demo": ("demo", "demo", "Run the whole tool on the bundled demo room and write its figures."),
    "init": ("init", "init", "Write a commented room file, by answering questions or from options."),
    "modes": ("predict", "modes", "List the room's modes with decay times, and the room's summary figures."),
    "predict": ("predict", "predict", "Predict each speaker's level at the seat, with its main peaks and dips."),
    "place": ("place", "place", "Search where to put the two speakers and the seat, and rank the layouts."),
    "explain": ("place", "explain", "Explain why the two channels differ at the seat, and what to move."),
    "subs": ("subs", "subs", "Find where the subwoofers go, and their gain, delay, polarity and crossover, for every seat."),
    "eq": ("eq", "eq", "Design bass-correction EQ for each channel and show the headroom it costs."),
    "map": ("map", "map_", "Map the level over the floor plan at one frequency: where a mode is loud and where its nodes are."),
    "study": ("study", "study", "Rank candidate room sizes by their predicted bass after their own EQ, on a Dask cluster."),
    "report": ("report", "report", "Write a self-contained HTML report of the room, for a client or for your notes."),
    "sweep": ("measure", "sweep", "Write an exponential sine sweep to play through one speaker while recording at the seat."),
    "ir": ("measure", "ir", "Turn a recording of the sweep into an impulse response, with distortion, noise and delay."),
    "noise": ("measure", "noise", "Write band-limited pink noise for a sound-level meter or a real-time analyser."),
    "bands": ("measure", "bands", "Band levels of a recording of pink noise at the seat (IEC 61260-1 base-10 bands)."),
    "decay": ("measure", "decay", "Reverberation times (EDT, T20, T30) and decay times of the strongest low modes."),
    "compare": ("measure", "compare", "Compare measurements with the prediction, or two measurements with each other."),
    "fit": ("measure", "fit", "Calibrate the room file to measurements and write the calibrated room file."),
}


def _show_warning(message, category, filename, lineno, file=None, line=None):
    echo_err(f"roommodes: warning: {message}")


class _Group(click.Group):
    """Loads commands on first use; turns input problems raised below the CLI into one line
    and exit code 2."""

    def list_commands(self, ctx):
        return list(COMMANDS)

    def get_command(self, ctx, name):
        if name not in COMMANDS:
            return None
        module, attr, _ = COMMANDS[name]
        return getattr(importlib.import_module(f"{__package__}.{module}"), attr)

    def format_commands(self, ctx, formatter):
        rows = [(name, short) for name, (_, _, short) in COMMANDS.items()]
        with formatter.section("Commands"):
            formatter.write_dl(rows)

    def invoke(self, ctx):
        warnings.showwarning = _show_warning
        with user_errors():
            try:
                return super().invoke(ctx)
            except click.UsageError as exc:
                # a bad option value or a missing argument: one line like every other input error
                name = f"roommodes {exc.ctx.info_name}" if exc.ctx is not None and exc.ctx.info_name else "roommodes"
                raise UserError(f"{exc.format_message()} (see `{name} --help`)") from None


@click.group(cls=_Group, context_settings=CONTEXT)
@click.version_option(__version__, prog_name="roommodes")
def main():
    """Room modes and loudspeaker placement for small rectangular rooms.

    Start with `roommodes demo`, then copy rooms/demo-studio.toml and edit it for your
    room. Every command reads a room file (TOML); see docs/room-file.md.
    """


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
