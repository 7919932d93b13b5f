"""Design studies on Dask: the same ranking for any number of workers, and the study file's errors.

The workers are threads of this process (``LocalCluster(processes=False)``): the tests then
start in a fraction of a second and need no second interpreter that re-imports numpy and
scipy, on a 2-core CI machine. The determinism the check is about does not depend on that:
each candidate's result is a pure function of the spec and its index (its own seed), and
with two workers the candidates finish in a different order from one worker's, which the
ranking must not see. Source of the check values: none from outside; the properties are the
project's own (docs/study.md; the issue's "identical whatever the number of workers")."""

import numpy as np
import pytest
from dask.distributed import Client, LocalCluster

from roommodes.analysis.study import candidate_room, candidate_seed, evaluate_candidate, run_study
from roommodes.io.studyfile import StudyFileError, load_study, parse_study
from roommodes.model.room import Uncertainty
from roommodes.model.study import StudySpec

SMALL = StudySpec((3.8, 5.2), (2.9, 3.9), (2.4, 2.8), 2, seat_area_points=(2, 1), points_per_octave=6,
                  band_hz=(30.0, 100.0), samples=3, seed=5)
TWO_WALLS = StudySpec(**{**SMALL.__dict__, "walls": ("plasterboard-on-studs", "concrete-wall")})


def _on_cluster(spec, workers):
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=False, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        return run_study(spec, client)


def test_one_and_two_workers_give_identical_candidates():
    one = _on_cluster(SMALL, 1)
    two = _on_cluster(SMALL, 2)
    assert one.engine["workers"] == 1 and two.engine["workers"] == 2
    assert len(one.candidates) == SMALL.n_candidates == 8
    assert [c.to_dict() for c in one.candidates] == [c.to_dict() for c in two.candidates]
    # and the same as scoring a candidate here
    best = one.candidates[0]
    assert evaluate_candidate(best.index, SMALL).to_dict() == best.to_dict()
    scores = [c.score_db for c in one.candidates]
    assert scores == sorted(scores)
    for c in one.candidates:
        assert c.score_p10_db <= c.score_db <= c.score_p90_db
        assert c.score_db > c.spread_db > 0
        assert set(c.criteria) >= {"proportion-rule", "integer-ratios"}


def test_candidate_grid_and_seeds():
    sizes = [candidate_room(TWO_WALLS, i).size_m for i in range(TWO_WALLS.n_candidates)]
    assert len(sizes) == 16
    assert set(sizes) == {(a, b, c) for a in (3.8, 5.2) for b in (2.9, 3.9) for c in (2.4, 2.8)}
    assert candidate_room(TWO_WALLS, 9).surfaces[0].material == "concrete-wall"
    assert candidate_room(TWO_WALLS, 9).surfaces[4].material == TWO_WALLS.floor
    seeds = [candidate_seed(TWO_WALLS, i) for i in range(TWO_WALLS.n_candidates)]
    assert len(set(seeds)) == len(seeds)


def test_no_uncertainty_collapses_the_ensemble():
    spec = StudySpec((4.0, 4.0), (3.2, 3.2), (2.5, 2.5), 1, seat_area_points=(2, 1), points_per_octave=6,
                     band_hz=(30.0, 120.0), samples=3, uncertainty=Uncertainty(0.0, 0.0, 0.0, 0.0))
    c = evaluate_candidate(0, spec)
    assert c.score_p10_db == pytest.approx(c.score_db, abs=1e-9)
    assert c.score_p90_db == pytest.approx(c.score_db, abs=1e-9)
    wide = evaluate_candidate(0, StudySpec(**{**spec.__dict__, "uncertainty": Uncertainty(0.1, 0.05, 0.5, 3.0)}))
    assert wide.score_p90_db - wide.score_p10_db > 0.01


def test_layout_that_does_not_fit_is_ranked_last_with_the_reason():
    spec = StudySpec((1.0, 4.0), (3.2, 3.2), (2.5, 2.5), 2, layout="mid-room", seat_area_points=(1, 1),
                     points_per_octave=6, band_hz=(30.0, 120.0), samples=2)
    res = run_study(spec)
    assert res.candidates[0].feasible and not res.candidates[-1].feasible
    assert "too short" in res.candidates[-1].note
    assert np.isnan(res.candidates[-1].score_db)


MINIMAL = "[study]\nlength_m = [4.0, 6.0]\nwidth_m = [3.0, 4.5]\nheight_m = [2.4, 3.0]\nsteps = 3\n"


def test_minimal_file_gets_the_defaults(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(MINIMAL)
    spec = load_study(p)
    assert spec.n_candidates == 27 and spec.walls == ("plasterboard-on-studs",)
    assert spec.uncertainty == Uncertainty()


@pytest.mark.parametrize("text, expect", [
    ("", "the file is empty"),
    ("[study]\nlength_m = [4.0, 6.0]\nwidth_m = [3.0, 4.5]\nheight_m = [2.4, 3.0]\n", "[study] steps: missing"),
    (MINIMAL.replace("[4.0, 6.0]", "[6.0, 4.0]"), "[study] length_m: LOW (6) must be at most HIGH (4)"),
    (MINIMAL.replace("[4.0, 6.0]", "4.0"), "[study] length_m: expected [LOW, HIGH]"),
    (MINIMAL.replace("steps = 3", "steps = 0"), "[study] steps: expected a whole number from 1 to 100"),
    (MINIMAL + "walls = [\"plasterbord-on-studs\"]\n", "[study] walls[0]:"),
    (MINIMAL + "layout = \"sofa\"\n", "[study] layout: must be one of triangle, corner, wall"),
    (MINIMAL + "lenght_m = 3\n", "unknown key 'lenght_m'"),
    (MINIMAL + "[uncertainty]\nsize_m = -1\n", "[uncertainty] size_m: -1 is out of range"),
    (MINIMAL.replace("steps = 3", "steps = 100") + "walls = [\"concrete-wall\", \"brick-painted\"]\n",
     "candidate rooms"),
])
def test_bad_study_file_gives_one_line(tmp_path, text, expect):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(StudyFileError) as err:
        load_study(p)
    msg = str(err.value)
    assert "\n" not in msg and msg.startswith(f"{p}: ") and expect in msg, msg


def test_parse_rejects_a_non_table():
    with pytest.raises(StudyFileError, match=r"\[study\]: must be a table"):
        parse_study({"study": 3}, "x.toml")
