"""Slices and batch chunks on a Dask LocalCluster (two worker processes on 127.0.0.1).

Reference: the engine's state vector, itself checked against textbook circuits (Nielsen & Chuang
2010) in test_textbook_circuits.py.
"""

from __future__ import annotations

import pytest

distributed = pytest.importorskip("distributed")

from contraction.circuits.random_instances import grid_architecture, random_instance  # noqa: E402
from contraction.errors import Cancelled, MemoryLimitError  # noqa: E402
from contraction.execution.amplitudes import amplitudes  # noqa: E402
from contraction.execution.dask_runner import DaskRunner  # noqa: E402
from contraction.execution.statevector import state_vector  # noqa: E402
from contraction.planning.options import PlannerOptions  # noqa: E402

from .conftest import random_bitstrings  # noqa: E402


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None, memory_limit="2GiB") as c:
        yield c


@pytest.fixture(scope="module")
def runner(cluster):
    r = DaskRunner(cluster.scheduler_address)
    yield r
    r.close()


@pytest.fixture(scope="module")
def circuit():
    return random_instance(grid_architecture(4, 4, 8), seed=11)


def test_sliced_and_batched_on_the_cluster_match_the_state_vector(runner, circuit, rng):
    psi = state_vector(circuit)
    assert runner.workers == 2 and runner.memory_limit == 2 * 2 ** 30
    seen = []
    sliced = amplitudes(circuit, ["0110" * 4], engine="single", runner=runner, progress=seen.append,
                        planner=PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 6))
    assert sliced.plan.nslices > 1
    assert abs(sliced.results[0].amplitude - psi[int("0110" * 4, 2)]) <= 1e-10 * abs(psi[int("0110" * 4, 2)])
    assert seen[-1].done == seen[-1].total >= 2
    bits = random_bitstrings(rng, 16, 40)
    batched = amplitudes(circuit, bits, engine="batch", runner=runner,
                         planner=PlannerOptions(budget_seconds=0.3, max_repeats=4))
    assert batched.batch > 1
    for r in batched.results:
        ref = psi[int(r.bitstring, 2)]
        assert abs(r.amplitude - ref) <= 1e-10 * abs(ref)


def test_stacked_chunks_on_the_cluster_match_the_state_vector(runner, circuit, rng):
    psi = state_vector(circuit)
    bits = random_bitstrings(rng, 16, 24)
    run = amplitudes(circuit, bits, engine="stacked", runner=runner,
                     planner=PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 6))
    assert run.engine == "stacked" and run.batch > 1
    for r in run.results:
        ref = psi[int(r.bitstring, 2)]
        assert abs(r.amplitude - ref) <= 1e-10 * abs(ref)


def test_cancellation_stops_the_cluster_run(runner, circuit):
    calls = []

    def cancelled() -> bool:
        calls.append(1)
        return len(calls) > 1

    with pytest.raises(Cancelled):
        amplitudes(circuit, ["1" * 16], engine="single", runner=runner, cancelled=cancelled,
                   planner=PlannerOptions(budget_seconds=0.3, max_repeats=4, max_elements=2 ** 4))


def test_plans_over_the_worker_memory_limit_are_refused(cluster, circuit):
    with distributed.Client(cluster.scheduler_address) as client:
        runner = DaskRunner(client)
        runner.memory_limit = 1024                 # bytes: below any plan's peak
        with pytest.raises(MemoryLimitError, match="Dask worker"):
            amplitudes(circuit, ["0" * 16], engine="single", runner=runner,
                       planner=PlannerOptions(budget_seconds=0.2, max_repeats=2))


def test_service_jobs_run_on_the_cluster(cluster, tmp_path, circuit):
    """A job of the service, with VERAMP_DASK_SCHEDULER set, runs its contraction on the cluster."""
    import time

    from fastapi.testclient import TestClient

    from contraction.circuits.qasm_writer import write_qasm3
    from service.app import create_app

    from .test_service import make_settings

    settings = make_settings(tmp_path, sync_threshold_seconds=0.0, dask_scheduler=cluster.scheduler_address)
    bits = ["0" * 16, "1" * 16]
    with TestClient(create_app(settings)) as client:
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": write_qasm3(circuit)}, "bitstrings": bits,
                                                "engine": "single"})
        assert r.status_code == 202
        job_id = r.json()["job_id"]
        deadline = time.time() + 120
        while (job := client.get(f"/v1/jobs/{job_id}").json())["status"] not in ("succeeded", "failed"):
            assert time.time() < deadline
            time.sleep(0.2)
        page = client.get(f"/v1/jobs/{job_id}/results").json()["results"]
    assert job["status"] == "succeeded", job
    assert job["provenance"]["runner"] == "dask"
    psi = state_vector(circuit)
    assert [x["bitstring"] for x in page] == bits
    for x in page:
        ref = psi[int(x["bitstring"], 2)]
        assert abs(complex(*x["amplitude"]) - ref) <= 1e-10 * abs(ref)


def test_stacked_chunks_over_the_worker_memory_limit_are_refused(cluster, circuit, rng):
    from contraction.planning.engine_choice import choose
    from contraction.planning.store import MemoryPlanStore

    bits = random_bitstrings(rng, 16, 64)
    opts = PlannerOptions(budget_seconds=0.3, max_repeats=4)
    store = MemoryPlanStore()
    choice = choose(circuit, 64, engine="stacked", store=store, planner=opts, memory_bytes=2 ** 30, bitstrings=bits)
    assert choice.engine == "stacked"
    with distributed.Client(cluster.scheduler_address) as client:
        runner = DaskRunner(client)
        runner.memory_limit = 2 * choice.chosen.plan.peak_bytes("complex128")   # one bitstring fits, a chunk not
        with pytest.raises(MemoryLimitError, match="Dask worker"):
            amplitudes(circuit, bits, engine="stacked", runner=runner, planner=opts, plan_store=store, choice=choice)
