"""``roommodes study`` as a user meets it: the JSON keys of shared/ARCHITECTURE.md, the CSV,
a minimal study file, and one-line errors. The cluster is started here in-process
(processes=False, for speed on a 2-core CI machine) and reached with --scheduler. Source of the
check values: none from outside; the keys are the project's stable ones (shared/ARCHITECTURE.md)."""

import csv
import json

import pytest
from click.testing import CliRunner
from dask.distributed import LocalCluster

from roommodes.cli import main

MINIMAL = "[study]\nlength_m = [4.0, 4.4]\nwidth_m = [3.0, 3.2]\nheight_m = [2.4, 2.6]\nsteps = 1\n"


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture(scope="module")
def scheduler():
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        yield cluster.scheduler_address


def test_minimal_study_file_runs_and_writes_json_and_csv(tmp_path, scheduler):
    study = tmp_path / "plan.toml"
    study.write_text(MINIMAL)
    res = run("study", study, "--scheduler", scheduler, "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["engine"]["name"] == "dask.distributed" and data["engine"]["workers"] == 2
    (c,) = data["candidates"]
    assert c["size_m"] == [4.0, 3.0, 2.4]
    assert c["score"] > c["spread_db"] > 0 and isinstance(c["criteria"], dict)
    rows = list(csv.DictReader((tmp_path / "plan-results.csv").open()))
    assert len(rows) == 1 and float(rows[0]["score_db"]) == pytest.approx(c["score"])
    # where the layout put the seat and the woofers, and the band scored (30 Hz to the room's
    # Schroeder frequency), in the CSV as in the JSON
    assert [float(rows[0][f"seat_{k}_m"]) for k in "xyz"] == pytest.approx(c["seat_m"])
    assert [float(rows[0][f"right_{k}_m"]) for k in "xyz"] == pytest.approx(c["speakers_m"][1])
    assert float(rows[0]["band_low_hz"]) == 30.0 and float(rows[0]["band_high_hz"]) == pytest.approx(c["band_hz"][1])
    assert c["layout"] == "triangle" and data["study"]["placement"] == "rule"
    # the results file exists now: a second run refuses to overwrite it without --force
    again = run("study", study, "--scheduler", scheduler)
    assert again.exit_code == 2 and "already exists" in again.stderr


def test_bad_study_file_is_one_line(tmp_path):
    study = tmp_path / "plan.toml"
    study.write_text(MINIMAL.replace("steps = 1", "steps = -2"))
    res = run("study", study)
    assert res.exit_code == 2
    assert res.stderr.count("\n") == 1 and "[study] steps" in res.stderr


def test_output_over_the_input_is_refused(tmp_path):
    study = tmp_path / "plan.toml"
    study.write_text(MINIMAL)
    res = run("study", study, "-o", study, "--force")
    assert res.exit_code == 2 and "refusing to write over the input" in res.stderr


def test_workers_and_scheduler_together_is_refused(tmp_path):
    study = tmp_path / "plan.toml"
    study.write_text(MINIMAL)
    res = run("study", study, "--workers", 2, "--scheduler", "tcp://127.0.0.1:1")
    assert res.exit_code == 2 and "--workers" in res.stderr
