"""The README's set-up commands are the ones CI runs (common practice: one source of truth)."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_ci_runs_the_readme_test_command():
    readme = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```bash\n(.*?)\n```", readme, re.S)
    assert len(blocks) >= 2
    install_demo, install_test = blocks[0], blocks[1]
    assert "roommodes demo" in install_demo
    test_cmd = install_test.split("&& ", 2)[-1]  # after the venv creation and activation
    ci = (ROOT / ".ci" / "run").read_text()
    assert test_cmd in ci
    assert "python3 -m venv" in ci
