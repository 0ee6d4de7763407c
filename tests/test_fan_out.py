"""Fanning independent runs out: in-process, over local processes, and over a Dask cluster (a
local one here) give the same results in the same order."""

from __future__ import annotations

import math

import pytest

from orbitfix.gen import fan_out as fan_out_module
from orbitfix.gen.errors import InputError
from orbitfix.gen.fan_out import fan_out
from orbitfix.gen.study.plan_study import search


def hypotenuse(a: float, b: float) -> float:
    return math.hypot(a, b)


JOBS = [(3.0, 4.0), (5.0, 12.0), (8.0, 15.0), (7.0, 24.0)]
WANT = [5.0, 13.0, 17.0, 25.0]  # Pythagorean triples (common practice)


def test_in_process_and_process_pool_agree() -> None:
    assert fan_out(hypotenuse, JOBS, workers=1) == WANT
    assert fan_out(hypotenuse, JOBS, workers=2) == WANT


def test_dask_cluster_gives_the_same_results() -> None:
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        assert fan_out(hypotenuse, JOBS, scheduler=cluster.scheduler_address) == WANT


def test_search_on_a_dask_cluster_matches_the_local_search(vanderpol_design) -> None:
    distributed = pytest.importorskip("distributed")
    local = search(vanderpol_design, workers=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        remote = search(vanderpol_design, scheduler=cluster.scheduler_address)
    assert [c.to_json() for c in remote.candidates] == [c.to_json() for c in local.candidates]
    assert remote.binding == local.binding


def test_unreachable_scheduler_is_an_input_error(monkeypatch) -> None:
    pytest.importorskip("distributed")
    # nothing listens on port 1: the same error after 1 s of trying as after the default 10 s
    monkeypatch.setattr(fan_out_module, "SCHEDULER_SECONDS", 1)
    with pytest.raises(InputError, match="cannot reach the Dask scheduler"):
        fan_out(hypotenuse, JOBS, scheduler="tcp://127.0.0.1:1")
