"""Sliced contraction across worker processes.

Each worker process limits BLAS to one thread (threads or processes, never both), receives the
plan (as JSON) and the arrays once, and contracts chunks of slices, returning each slice as a
(mantissa, exponent) pair. The parent reports progress per finished chunk and checks the cancel
flag between chunks; on cancellation pending chunks are dropped.
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing as mp
import time
from typing import Sequence

import numpy as np

from .errors import Cancelled
from .executor import CancelCheck, Progress, ProgressCallback, combine_scaled, contract_slice_scaled
from .network import NetworkStructure
from .planner import Plan

_worker_state: dict = {}


def _init_worker(plan_json: str, structure: NetworkStructure, arrays: list[np.ndarray]) -> None:
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    _worker_state["tree"] = Plan.from_json(plan_json).tree(structure)
    _worker_state["arrays"] = arrays


def _run_chunk(indices: Sequence[int]) -> list[tuple[complex, float]]:
    tree, arrays = _worker_state["tree"], _worker_state["arrays"]
    return [contract_slice_scaled(tree, arrays, i) for i in indices]


def chunk_indices(total: int, chunks: int) -> list[range]:
    chunks = max(1, min(total, chunks))
    bounds = np.linspace(0, total, chunks + 1).astype(int)
    return [range(a, b) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


def contract_sliced_parallel(plan: Plan, structure: NetworkStructure, arrays: Sequence[np.ndarray],
                             workers: int, progress: ProgressCallback | None = None,
                             cancelled: CancelCheck | None = None,
                             chunks_per_worker: int = 4) -> complex:
    """Contract all slices of ``plan`` on ``workers`` processes and sum them."""
    chunks = chunk_indices(plan.nslices, workers * chunks_per_worker)
    ctx = mp.get_context("forkserver")
    parts: list[tuple[complex, float]] = []
    done = 0
    t0 = time.perf_counter()
    pool = cf.ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                                  initargs=(plan.to_json(), structure, list(arrays)))
    try:
        futures = {pool.submit(_run_chunk, list(c)): len(c) for c in chunks}
        pending = set(futures)
        while pending:
            finished, pending = cf.wait(pending, timeout=0.2, return_when=cf.FIRST_COMPLETED)
            for f in finished:
                parts.extend(f.result())
                done += futures[f]
            if finished and progress is not None:
                progress(Progress(done, plan.nslices, time.perf_counter() - t0))
            if cancelled is not None and cancelled():
                for f in pending:
                    f.cancel()
                raise Cancelled(f"cancelled after {done} of {plan.nslices} slices")
    finally:
        pool.shutdown(wait=False, cancel_futures=True)
    return combine_scaled(parts)
