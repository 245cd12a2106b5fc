"""Where contraction tasks run: in this process, in local worker processes, or on a cluster.

A task is one contraction's arrays and a range of its slices; its result is one
(mantissa, base-10 exponent) pair per slice (see :mod:`contraction.execution.executor`). Every runner
receives the plan as JSON and rebuilds the tree once per worker, runs tasks as workers free up,
reports each finished task, and stops handing out tasks when the cancel check says so.

Worker processes limit BLAS to one thread each (threads or processes, never both).
"""

from __future__ import annotations

import concurrent.futures as cf
import ctypes
import multiprocessing as mp
import os
import threading
import time
from dataclasses import dataclass
from typing import Callable, Protocol, Sequence

import numpy as np

from contraction.errors import Cancelled
from contraction.execution.arena import keep_idle_mapping
from contraction.execution.executor import CancelCheck, contract_slice_scaled, sum_scaled
from contraction.execution.pairwise import program_for
from contraction.execution.reuse import SliceContractor
from contraction.execution.stacked import contract_stacked, row_maps
from contraction.planning.capped_plans import Contraction
from contraction.planning.slice_reuse import reuse_plan_for

SliceResults = list[tuple[np.ndarray, float]]


@dataclass
class Task:
    """A unit of work for a runner: the network's tensor values and the slice numbers to contract with them."""

    arrays: list[np.ndarray]
    slices: list[int]
    reuse_elements: float = 0.0     # memory (elements) for intermediates kept between its slices
    # a batch through a single-amplitude tree (:mod:`contraction.execution.stacked`): the projected
    # qubit of each input (-1: none) and the bit table of the batch; ``arrays`` are then stacked inputs
    stacked: tuple[tuple[int, ...], np.ndarray] | None = None


TaskDone = Callable[[int, SliceResults], None]


class Runner(Protocol):
    """Runs tasks of one contraction; calls ``done(task_index, results)`` as each task finishes."""

    workers: int

    def run(self, contraction: Contraction, tasks: Sequence[Task], done: TaskDone,
            cancelled: CancelCheck | None = None) -> None:
        """Contract every task with the contraction's tree; ``done(k, results)`` as task k finishes;
        raises :class:`Cancelled` when ``cancelled()`` turns true."""


def run_task(tree, task: Task) -> SliceResults:
    """Contract the task's slices with ``tree`` and sum them where they were computed: one
    (mantissa, log10 scale) pair per task, so only one output travels back per task."""
    if task.stacked is not None:
        projected, table = task.stacked
        maps = row_maps(program_for(tree), projected, table)
        return [contract_stacked(tree, task.arrays, maps, task.slices)]
    contractor = SliceContractor(tree, task.arrays, reuse_plan_for(tree, task.reuse_elements))
    return [sum_scaled([contract_slice_scaled(tree, task.arrays, i, contractor) for i in task.slices])]


class InlineRunner:
    """Everything in the calling process, in order."""

    workers = 1

    def run(self, contraction: Contraction, tasks: Sequence[Task], done: TaskDone,
            cancelled: CancelCheck | None = None) -> None:
        """Run the tasks one after the other in this process."""
        tree = contraction.tree
        for k, task in enumerate(tasks):
            if cancelled is not None and cancelled():
                raise Cancelled(f"cancelled after {k} of {len(tasks)} tasks")
            done(k, run_task(tree, task))


_worker_state: dict = {}


#: glibc's mallopt parameters (malloc.h)
_M_TRIM_THRESHOLD, _M_MMAP_MAX = -1, -4
_kept = False


def keep_freed_memory() -> None:
    """Let this process reuse the memory of freed intermediates instead of returning it to the kernel.

    By default glibc maps every large array afresh (the kernel zeroes each page on first touch) and
    unmaps it when freed, so a contraction that allocates and frees intermediates of 2^25 elements at
    every step spends a third of its time in the kernel (measured: 3.1-3.9 s of 10 s at 30 qubits,
    1.3-1.4x slower than with this setting). The heap is never trimmed: with glibc's default trim
    threshold capped at 2 GiB, each slice of the 53-qubit network (2^27-element intermediates) gave
    its memory back and faulted it in again, 16 s a slice against 11.4 s untrimmed. A worker thus keeps
    its peak (which the memory cap bounds) until it exits, and likewise the mapping of its last
    arena (:func:`contraction.execution.arena.keep_idle_mapping`). Called once per contraction worker
    process; the heap setting is a no-op where glibc is not the C library."""
    global _kept
    if _kept:
        return
    _kept = True
    keep_idle_mapping()
    try:
        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(_M_MMAP_MAX, 0)                # large arrays from the heap, not fresh mappings
        libc.mallopt(_M_TRIM_THRESHOLD, -1)          # and freed heap kept for the next step (never trimmed)
    except (OSError, AttributeError):
        pass


#: seconds between two checks by a worker process that the process it works for is still there
OWNER_CHECK_SECONDS = 1.0


def _gone(pid: int) -> bool:
    """Whether process ``pid`` has ended (a zombie waiting to be reaped counts as ended)."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            return fh.read().rsplit(b")", 1)[-1].split()[0] == b"Z"
    except FileNotFoundError:
        return True
    except OSError:                          # no /proc here: ask the kernel whether the pid exists
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True
        except PermissionError:
            pass
        return False


def exit_with(owner: int) -> None:
    """End this worker process, whatever it is computing, within :data:`OWNER_CHECK_SECONDS` of the
    process ``owner`` it works for ending. A pool's workers otherwise outlive an owner that was killed:
    a 53-qubit run stopped with SIGTERM left its two workers contracting at full speed on both cores
    for over 20 minutes (their task was a quarter of the slices), and a service restarted after a
    crash would run a requeued job beside the orphan still running it, over the memory cap."""

    def watch() -> None:
        while not _gone(owner):
            time.sleep(OWNER_CHECK_SECONDS)
        os._exit(70)                        # nothing of this process's work is wanted any more

    threading.Thread(target=watch, name="veramp-owner-watch", daemon=True).start()


def prepare_contraction_process(owner: int | None = None) -> None:
    """Set up a process whose work is contracting: one BLAS thread (processes, not threads, run side by
    side) and freed memory kept for the next step (:func:`keep_freed_memory`); with ``owner`` (the pid
    of the process it works for), it ends when that process does (:func:`exit_with`)."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    keep_freed_memory()
    if owner is not None:
        exit_with(owner)


def _init_worker(tree, owner: int | None = None) -> None:
    prepare_contraction_process(owner)
    _worker_state["tree"] = tree


def _run_in_worker(task: Task) -> SliceResults:
    return run_task(_worker_state["tree"], task)


#: modules the forkserver loads once, so each worker process it starts has them already (measured on an
#: idle 2-core machine: one small contraction on a fresh pool of two took 0.67-0.74 s, 0.14-0.15 s with
#: these loaded)
WORKER_PRELOAD = ("numpy", "cotengra", "contraction.execution.slices")


def worker_context():
    """The start method of contraction worker processes: forkserver (no state inherited from the
    parent), its server loading the main module (Python's default) and :data:`WORKER_PRELOAD` when it
    starts (a module that fails to load is skipped by the server and loaded by the worker as usual)."""
    ctx = mp.get_context("forkserver")
    ctx.set_forkserver_preload(["__main__", *WORKER_PRELOAD])
    return ctx


class ProcessRunner:
    """Local worker processes (forkserver: no state inherited from the parent)."""

    def __init__(self, workers: int):
        self.workers = max(1, int(workers))

    def run(self, contraction: Contraction, tasks: Sequence[Task], done: TaskDone,
            cancelled: CancelCheck | None = None) -> None:
        """Run the tasks on a fresh pool of worker processes (one BLAS thread each); cancelled tasks are dropped."""
        ctx = worker_context()
        # the tree travels to each worker once (pickled between our own processes), not rebuilt there
        pool = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=ctx, initializer=_init_worker,
                                      initargs=(contraction.tree, os.getpid()))
        try:
            wait_all(lambda t: pool.submit(_run_in_worker, t), tasks, done, cancelled,
                     lambda futures: [f.cancel() for f in futures])
        except BaseException:
            # cancelled or failed: the tasks the workers hold would run to their end (minutes on big
            # contractions) beside whatever runs next; nothing of theirs is wanted any more
            _stop_workers(pool)
            raise
        finally:
            pool.shutdown(wait=False, cancel_futures=True)


def _stop_workers(pool: cf.ProcessPoolExecutor) -> None:
    """Terminate the pool's worker processes (the pool is not used again). The executor has no public
    way to do this before Python 3.14; its process table has kept this name since 3.2."""
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        if proc.is_alive():
            proc.terminate()


def wait_all(submit, tasks: Sequence[Task], done: TaskDone, cancelled: CancelCheck | None, cancel_all,
             wait=cf.wait) -> None:
    """Submit every task, report each as it finishes, cancel the rest when asked to."""
    futures = {submit(t): k for k, t in enumerate(tasks)}
    pending = set(futures)
    finished_count = 0
    while pending:
        finished, pending = wait(pending, timeout=0.2, return_when=cf.FIRST_COMPLETED)
        for f in finished:
            done(futures[f], f.result())
            finished_count += 1
        if pending and cancelled is not None and cancelled():
            cancel_all(pending)
            raise Cancelled(f"cancelled after {finished_count} of {len(tasks)} tasks")


def make_runner(workers: int = 1) -> Runner:
    """In the calling process for one worker, else a pool of local worker processes."""
    return InlineRunner() if workers <= 1 else ProcessRunner(workers)


def split_slices(total: int, pieces: int) -> list[list[int]]:
    """``range(total)`` in at most ``pieces`` contiguous runs."""
    pieces = max(1, min(total, pieces))
    bounds = np.linspace(0, total, pieces + 1).astype(int)
    return [list(range(a, b)) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]
