"""Sliced contraction on a two-worker Dask cluster against the local process pool.

One 30-qubit (5x6) circuit, planned with slices of at most 2^22 elements (``--max-log2``), lowered a
power of two at a time until the plan has at least ``--slices`` slices (64); the same plan and arrays
run on two local worker processes and on a cluster of two single-threaded worker processes on
127.0.0.1 — by default a scheduler and workers started with Dask's command-line tools over TCP
(``--cluster cli``), or an in-process LocalCluster (``--cluster local``) — with the grouping the
request path uses (about four tasks per worker, each task's slices summed on its worker) and with
one task per slice. Overhead per slice of the cluster path = (cluster time - local time) / slices,
also as a share of the local time per slice.

    python tests/benchmarks/bench_dask.py [--cycles 12] [--max-log2 22] [--slices 64] [--repeats 3] [--cluster cli|local]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.dask_runner import DaskRunner
from contraction.execution.executor import combine_scaled
from contraction.execution.slices import ProcessRunner, Task, split_slices
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.capped_plans import Contraction
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan


def timed_run(runner, plan, structure, arrays, pieces: int) -> tuple[float, complex]:
    parts: list = []
    tasks = [Task(arrays, p) for p in split_slices(plan.nslices, pieces)]
    t = time.perf_counter()
    runner.run(Contraction(structure, plan, plan.tree(structure)), tasks, lambda k, res: parts.extend(res))
    return time.perf_counter() - t, complex(combine_scaled(parts).reshape(()))


@contextmanager
def cluster_address(kind: str):
    """The scheduler address of two single-threaded worker processes on loopback."""
    import distributed

    if kind == "local":
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                      dashboard_address=None) as cluster:
            yield cluster.scheduler_address
        return
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))   # the repository, for tests.dask_cli
    from tests.dask_cli import cli_cluster

    with tempfile.TemporaryDirectory() as logs, cli_cluster(Path(logs), workers=2, memory_limit="8GiB") as (client, _):
        yield client.scheduler.address


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cycles", type=int, default=12)
    ap.add_argument("--max-log2", type=int, default=22)
    ap.add_argument("--budget", type=float, default=20.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--slices", type=int, default=64, help="fewest slices the plan may have")
    ap.add_argument("--cluster", choices=("cli", "local"), default="cli")
    args = ap.parse_args()

    circuit = random_instance(grid_architecture(5, 6, args.cycles), seed=3)
    s = build_structure(circuit)
    for log2 in range(args.max_log2, 9, -1):
        plan = find_plan(s, PlannerOptions(budget_seconds=args.budget, max_elements=2 ** log2))
        if plan.nslices >= args.slices:
            break
    arrays = tensor_arrays(s, circuit, "0" * 30)
    local = ProcessRunner(2)
    timed_run(local, plan, s, arrays, 2)                       # warm-up: worker start-up, page cache
    t_local = [timed_run(local, plan, s, arrays, 2 * 4) for _ in range(args.repeats)]
    with cluster_address(args.cluster) as address:
        dask = DaskRunner(address)
        timed_run(dask, plan, s, arrays, 2)                    # warm-up: trees built on the workers
        # the production grouping (about four tasks per worker thread, each reduced on its worker) and,
        # for comparison, one task per slice
        t_dask = [timed_run(dask, plan, s, arrays, 2 * 4) for _ in range(args.repeats)]
        t_per_slice = [timed_run(dask, plan, s, arrays, plan.nslices) for _ in range(args.repeats)]
        dask.close()
    local_s = statistics.median(t for t, _ in t_local)
    dask_s = statistics.median(t for t, _ in t_dask)
    per_slice_s = statistics.median(t for t, _ in t_per_slice)
    per_slice_local = local_s / plan.nslices * 2               # two workers: wall per slice per worker
    overhead = (dask_s - local_s) / plan.nslices * 2
    values = [v for _, v in t_local + t_dask + t_per_slice]
    print(json.dumps({
        "cluster": args.cluster, "qubits": 30, "cycles": args.cycles, "slices": plan.nslices, "width_log2": plan.width,
        "madds": plan.madds, "local_pool_s_median": round(local_s, 3), "dask_s_median": round(dask_s, 3),
        "dask_tasks": 8, "local_tasks": 8, "dask_one_task_per_slice_s_median": round(per_slice_s, 3),
        "ratio_dask_one_task_per_slice_over_local": round(per_slice_s / local_s, 3),
        "ratio_dask_over_local": round(dask_s / local_s, 3),
        "overhead_per_slice_s": round(overhead, 4), "overhead_share_of_slice": round(overhead / per_slice_local, 4),
        "goal_overhead_share": 0.10,
        "results_agree": bool(max(abs(v - values[0]) for v in values) <= 1e-12 * abs(values[0])),
        "runs_local": [round(t, 3) for t, _ in t_local], "runs_dask": [round(t, 3) for t, _ in t_dask],
        "runs_dask_one_task_per_slice": [round(t, 3) for t, _ in t_per_slice],
    }))


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
