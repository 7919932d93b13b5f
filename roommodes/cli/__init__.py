"""The ``roommodes`` command line: click commands that parse, call one API function, and
print or write. The console script is :func:`roommodes.cli.main`."""

from .app import main

__all__ = ["main"]
