"""The lab-load benchmark's short form: two benches into one store while db status / db check run and
one recorder is killed with SIGKILL and resumed. Counts only (speed targets live in the benchmark)."""

from __future__ import annotations

import pytest

from tests.benchmarks.bench_lab_load import run_lab


@pytest.fixture(params=["sqlite", "postgresql"])
def lab_db(request, tmp_path):
    if request.param == "sqlite":
        return str(tmp_path / "lab.sqlite")
    return request.getfixturevalue("pg_url")


def test_a_shared_store_under_load_loses_nothing_and_stays_sound(lab_db, tmp_path):
    fig = run_lab(
        lab_db, benches=2, sampler_s=20.0, speed=2.0, kill_every_s=8.0, check_every_s=3.0, workdir=tmp_path
    )
    assert len(fig["kills"]) >= 1
    # the simulator drives each unit through exactly the run's target: one make and one break a cycle.
    # A kill between a make and its break loses that break (the resumed sampler starts a new cycle):
    # at most one actuation per channel per kill on the killed bench, none elsewhere.
    exp = fig["expected_per_bench"]
    assert fig["stored"]["lab bench 1"] == exp
    said = (fig["kills"], fig["killed_units"])  # (makes, breaks, highest cycle) per unit if it is off
    assert exp - len(fig["kills"]) * 8 <= fig["stored"]["lab bench 0"] <= exp, said
    assert {reason for reason, _ in fig["ends"].values()} == {"target"}
    assert fig["duplicates"] == 0
    assert fig["final_check"][0] == 0, fig["final_check"][1]
    assert fig["check_failed"] == [] and fig["status_failed"] == []
    assert not [line for line in fig["dash"] if line.startswith("dash-error")]
    # the dashboard process read the store while the lab ran, and said so when told to stop (SIGTERM)
    summary = [line.split() for line in fig["dash"] if line.startswith("dash ")]
    assert summary and int(summary[0][1]) >= 1, fig["dash"]
