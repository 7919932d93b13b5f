"""The accuracy figures the report quotes are the ones docs/validation.md states.

Source of the figures: the acceptance runs against the finite-element reference
(tests/solvers/test_against_fem.py, tests/solvers/test_exact_fem.py), written into
docs/validation.md; this test only holds the code's copy (roommodes.solvers.ACCURACY_DB) to
the document, so that the two cannot drift apart again.
"""

import re
from pathlib import Path

from roommodes.solvers import ACCURACY_DB, ASSUMPTIONS, METHODS

DOC = Path(__file__).resolve().parents[2] / "docs" / "validation.md"


def test_every_solver_has_figures_and_an_assumption():
    assert set(ACCURACY_DB) == set(METHODS) == set(ASSUMPTIONS)


def test_report_figures_equal_the_validation_document():
    text = DOC.read_text(encoding="utf-8")
    rows = {"exact": r"\| exact \(default", "modal": r"\| modal sum", "image": r"\| image sources \(energy reflection, default"}
    for method, start in rows.items():
        m = re.search(start + r"[^|]*\| ([0-9.]+) dB \| ([0-9.]+) dB \|", text)
        assert m, f"no row for {method} in {DOC.name}"
        assert (float(m.group(1)), float(m.group(2))) == ACCURACY_DB[method], method
