"""``python -m roommodes ...``: the same command line as the ``roommodes`` console script."""

from roommodes.cli import run

if __name__ == "__main__":
    run()
