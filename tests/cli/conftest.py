"""Fixtures shared by the command-line tests."""

import pytest

from roommodes.io.roomfile import example_rooms


@pytest.fixture(scope="module")
def small_room(tmp_path_factory):
    """The bundled sofa room with a smaller search (counts 1 and 2, a 0.5 m grid): quick."""
    sofa = next(p for p in example_rooms() if p.stem == "sofa-and-sub")
    text = sofa.read_text().replace("counts = [1, 2, 4]", "counts = [1, 2]\nstep_m = 0.5")
    path = tmp_path_factory.mktemp("subs") / "sofa.toml"
    path.write_text(text)
    return path
