"""Test tree set-up: tests/ on sys.path so that every folder can import tests/reference."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
