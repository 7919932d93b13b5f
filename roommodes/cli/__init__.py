"""The ``roommodes`` command line: click commands that parse, call one API function, and
print or write. The console script is :func:`roommodes.cli.main`."""

from .main import main

__all__ = ["main"]
