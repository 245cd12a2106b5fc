"""Contraction tasks on a Dask cluster the lab already runs.

:class:`DaskRunner` has the same contract as the local runners (:mod:`contraction.execution.slices`): the
plan travels as JSON, each Dask worker rebuilds the tree once per plan and keeps it, tasks are
slices of a contraction or whole batch chunks, every finished task is reported (progress) and the
cancel check is polled between completions (pending tasks are then cancelled on the cluster).

Memory: a plan whose peak does not fit the smallest worker's memory limit is refused before any
task is sent. BLAS is limited to one thread inside each task (Dask already runs one task per
worker thread).
"""

from __future__ import annotations

from typing import Sequence

from contraction.errors import MemoryLimitError
from contraction.execution.executor import CancelCheck
from contraction.execution.slices import SliceResults, Task, TaskDone, keep_freed_memory, run_task, wait_all
from contraction.planning.capped_plans import Contraction
from contraction.planning.slice_reuse import reuse_budget
from contraction.planning.stacked_cost import stacked_cost


def _task_on_worker(tree, arrays: list, slices: list[int], reuse_elements: float = 0.0,
                    stacked: tuple | None = None) -> SliceResults:
    from threadpoolctl import threadpool_limits

    keep_freed_memory()
    with threadpool_limits(1):
        return run_task(tree, Task(arrays, slices, reuse_elements, stacked))


class DaskRunner:
    """Runs tasks on the cluster behind ``address`` (``tcp://host:port``) or an existing client."""

    def __init__(self, address):
        from distributed import Client

        self.client = address if isinstance(address, Client) else Client(address, timeout="10s")
        self._own = not isinstance(address, Client)
        info = self.client.scheduler_info()["workers"]
        self.workers = max(1, sum(w.get("nthreads", 1) for w in info.values()))
        limits = [w.get("memory_limit") or 0 for w in info.values()]
        self.memory_limit = min((m for m in limits if m), default=None)

    def close(self) -> None:
        """Close the client if this runner opened it."""
        if self._own:
            self.client.close()

    def run(self, contraction: Contraction, tasks: Sequence[Task], done: TaskDone,
            cancelled: CancelCheck | None = None) -> None:
        """Run the tasks on the cluster, the tree and each distinct array list sent to the workers once; raises
        :class:`MemoryLimitError` when the plan's peak exceeds the smallest worker's memory limit."""
        plan = contraction.plan
        if tasks and self.memory_limit is not None:
            itemsize = tasks[0].arrays[0].dtype.itemsize
            peak = plan.peak_elements * itemsize
            # stacked chunks hold rows of every intermediate: their own peak, once per distinct chunk
            tables = {id(t.stacked[1]): t.stacked for t in tasks if t.stacked is not None}
            for projected, table in tables.values():
                peak = max(peak, stacked_cost(contraction.tree, projected, table).peak_elements * itemsize)
            if peak > self.memory_limit:
                raise MemoryLimitError(f"the plan needs {peak:.4g} bytes at its peak; the smallest Dask worker "
                                       f"allows {self.memory_limit:.4g} bytes")
        import distributed

        # the tree and every distinct array list travel to the workers once, not with every task
        [blob] = self.client.scatter([contraction.tree], broadcast=True, hash=False)
        shared: dict[int, object] = {}

        def submit(task: Task):
            key = id(task.arrays)
            if key not in shared:
                [shared[key]] = self.client.scatter([task.arrays], broadcast=True, hash=False)
            reuse = task.reuse_elements
            if self.memory_limit is not None:       # within what the smallest worker allows above the peak
                reuse = min(reuse, reuse_budget(self.memory_limit / task.arrays[0].dtype.itemsize, plan.peak_elements,
                                                 plan.width))
            return self.client.submit(_task_on_worker, blob, shared[key], task.slices, reuse, task.stacked,
                                      pure=False)

        def wait(fs, timeout, return_when):
            try:
                res = distributed.wait(list(fs), timeout=timeout, return_when="FIRST_COMPLETED")
            except (TimeoutError, distributed.TimeoutError):
                return set(), set(fs)
            return set(res.done), set(res.not_done)

        wait_all(submit, tasks, done, cancelled, lambda fs: self.client.cancel(list(fs)), wait=wait)
