"""Slices on a real Dask cluster: a scheduler and two worker processes started with Dask's own
command-line tools (``python -m dask scheduler`` / ``python -m dask worker``), talking TCP on
loopback — not an in-process cluster. One worker is killed (SIGKILL) while a job runs: Dask
reschedules its tasks on the other and the amplitudes are still exact.

Reference: the einsum reference of ``tests/conftest.py`` (one ``numpy.einsum`` per unfused gate).
"""

from __future__ import annotations

import os
import signal

import pytest

distributed = pytest.importorskip("distributed")

from contraction.circuits.random_instances import grid_architecture, random_instance  # noqa: E402
from contraction.execution.amplitudes import amplitudes  # noqa: E402
from contraction.execution.dask_runner import DaskRunner  # noqa: E402
from contraction.planning.options import PlannerOptions  # noqa: E402
from contraction.planning.store import MemoryPlanStore  # noqa: E402

from .conftest import einsum_state  # noqa: E402
from .dask_cli import cli_cluster  # noqa: E402


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    with cli_cluster(tmp_path_factory.mktemp("dask"), workers=2, memory_limit="2GiB") as (client, procs):
        yield client, procs


def _worker_pid(client, exclude=()) -> int:
    pids = client.run(os.getpid)
    return next(pid for addr, pid in sorted(pids.items()) if pid not in exclude)


def test_sliced_amplitudes_on_a_cluster_started_from_the_command_line(cluster, rng):
    client, _procs = cluster
    circuit = random_instance(grid_architecture(4, 4, 8), seed=11)
    reference = einsum_state(circuit)
    runner = DaskRunner(client)
    assert runner.workers == 2 and runner.memory_limit == 2 * 2 ** 30
    bits = ["0110" * 4, "1" * 16, "0" * 16]
    run = amplitudes(circuit, bits, engine="single", runner=runner, memory_bytes=2 ** 16,
                     planner=PlannerOptions(budget_seconds=1.0, max_repeats=8), plan_store=MemoryPlanStore())
    assert run.plan.nslices > 1
    for r in run.results:
        assert abs(r.amplitude - reference[int(r.bitstring, 2)]) < 1e-12


def test_a_worker_killed_mid_job_is_survived(cluster):
    """SIGKILL one worker after the first task has finished; the remaining tasks (including any the
    dead worker held) run on the other worker and the amplitude is still exact."""
    client, _procs = cluster
    circuit = random_instance(grid_architecture(4, 5, 10), seed=3)
    reference = einsum_state(circuit)
    runner = DaskRunner(client)
    killed = []

    def progress(p):
        if not killed and p.done >= 1:
            pid = _worker_pid(client)
            os.kill(pid, signal.SIGKILL)
            killed.append(pid)

    bits = ["10" * 10]
    run = amplitudes(circuit, bits, engine="single", runner=runner, memory_bytes=2 ** 16, progress=progress,
                     planner=PlannerOptions(budget_seconds=1.0, max_repeats=8), plan_store=MemoryPlanStore())
    assert killed, "no worker was killed: the job had a single task"
    assert run.plan.nslices >= 4
    assert abs(run.results[0].amplitude - reference[int(bits[0], 2)]) < 1e-12
    assert len(client.scheduler_info()["workers"]) == 1
