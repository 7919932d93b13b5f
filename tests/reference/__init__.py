"""Outside references for the tests: a scikit-fem wave solution of the box (fem_box.py)."""
