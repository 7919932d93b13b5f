"""The ``roommodes`` command line: click commands that parse, call one API function, and
print or write. The console script is :func:`run`, which calls :func:`roommodes.cli.main`
(the click group).

This module imports nothing at its top: the console script installs its Ctrl-C handler
before any of the heavy modules (numpy, click, the commands) are loaded, so that an
interrupt during start-up ends in one line, like an interrupt at any later moment.
"""

__all__ = ["main", "run", "INTERRUPTED_EXIT_CODE"]

#: Exit code after Ctrl-C (SIGINT): 128 + the signal number, as shells report it.
INTERRUPTED_EXIT_CODE = 130


def _interrupted(signum, frame):
    import sys

    sys.stderr.write("roommodes: interrupted\n")
    # SystemExit (not KeyboardInterrupt): no traceback, and the commands' clean-up of
    # temporary files runs as it does for SIGTERM.
    raise SystemExit(INTERRUPTED_EXIT_CODE)


def run(args=None):
    """The console script: handle Ctrl-C from the first instant, then run :func:`main`."""
    import signal

    signal.signal(signal.SIGINT, _interrupted)
    from .app import main

    return main(args=args)


def __getattr__(name):
    if name == "main":
        from .app import main

        globals()["main"] = main
        return main
    raise AttributeError(f"module 'roommodes.cli' has no attribute {name!r}")
