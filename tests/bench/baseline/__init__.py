"""The solvers as they were before the speed work (modal, exact, image-source), and the
placement search's product paths before the modal-kernel work (scorer.py), kept unchanged
so that tests/bench/bench.py can time the old and the new code in the same run.
Not part of the package; nothing imports them but the benchmark."""
