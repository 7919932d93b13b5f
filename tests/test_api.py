"""The public API: every name in __all__ exists; importing does not import matplotlib.

No outside check values here: these tests hold the package to its own documented
conventions (an explicit __all__, a light import; reference: DEVELOPERS.md).
"""

import subprocess
import sys

import roommodes


def test_all_names_exist():
    for name in roommodes.__all__:
        assert hasattr(roommodes, name), name


def test_import_is_light():
    code = "import sys, roommodes; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
