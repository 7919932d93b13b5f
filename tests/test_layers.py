"""The package's layers as folders, and the direction of imports between them.

The order, lowest first, is the data flow a newcomer reads (docs/design.md):
model -> dsp -> solvers -> io -> measure -> analysis -> present -> cli. A module may import
from its own layer and from layers below it, never from one above. The check reads every
import statement (module level and inside functions) with :mod:`ast`; it has no outside
source: the rule is the project's own (shared/ARCHITECTURE.md).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import roommodes

LAYERS = ("model", "dsp", "solvers", "io", "measure", "analysis", "present", "cli")
PACKAGE = Path(roommodes.__file__).parent


def _layer(module):
    """Layer of a dotted module name inside roommodes, or None for the package root."""
    parts = module.split(".")
    if len(parts) < 2 or parts[0] != "roommodes":
        return None
    return parts[1] if parts[1] in LAYERS else None


def _imports(path):
    """(line, absolute module name) of every roommodes import in ``path``."""
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    pkg = parts if path.name == "__init__.py" else parts[:-1]
    if path.name == "__init__.py":
        pkg = parts[:-1]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg[: len(pkg) - (node.level - 1)]
                names = [".".join(base + ([node.module] if node.module else []))]
                if not node.module:
                    names = [f"{names[0]}.{a.name}" for a in node.names]
            else:
                names = [node.module or ""]
            for name in names:
                if name.startswith("roommodes"):
                    yield node.lineno, name
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("roommodes"):
                    yield node.lineno, a.name


def _modules():
    return sorted(p for p in PACKAGE.rglob("*.py") if p.parent != PACKAGE or p.name != "__init__.py")


def test_every_module_sits_in_a_layer_folder():
    # __init__.py and the `python -m roommodes` entry point must sit at the top, by Python's rules
    loose = [p.name for p in PACKAGE.glob("*.py") if p.name not in ("__init__.py", "__main__.py")]
    assert loose == [], f"modules directly in roommodes/ (put them in a layer folder): {loose}"
    folders = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert folders - {"data"} <= set(LAYERS)


def test_the_dash_m_entry_point_only_calls_the_command_line():
    # the one module outside the layers is a door to the top layer, nothing more
    names = [name for _, name in _imports(PACKAGE / "__main__.py")]
    assert names and all(_layer(name) == "cli" for name in names), names


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_point_down(path):
    own = _layer("roommodes." + ".".join(path.relative_to(PACKAGE).with_suffix("").parts))
    if own is None:
        return
    rank = LAYERS.index(own)
    bad = [(line, name) for line, name in _imports(path)
           if _layer(name) is not None and LAYERS.index(_layer(name)) > rank]
    assert not bad, f"{path.relative_to(PACKAGE)} ({own}) imports from a higher layer: {bad}"


def test_the_checker_sees_an_upward_import(tmp_path, monkeypatch):
    """The rule must be able to fail: a model module that imports analysis is caught."""
    fake = PACKAGE / "model" / "room.py"
    src = "from ..analysis.predict import predict\nfrom . import walls\n"
    monkeypatch.setattr(Path, "read_text", lambda self, encoding=None: src)
    found = list(_imports(fake))
    assert ("roommodes.analysis.predict" in [n for _, n in found])
    assert _layer("roommodes.analysis.predict") == "analysis"
