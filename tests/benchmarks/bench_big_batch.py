"""Many bitstrings of a 40-qubit circuit in one run, with bounded memory.

A 40-qubit (5x8, ``--grid``) grid circuit (no state vector fits the cap used here); ``--count`` distinct random
bitstrings (default 10,000) in one ``amplitudes`` call with the automatic engine under
``--memory-gib``. Reports the engine, chunk sizes and count, progress events (one per task, tasks
grouped per chunk), wall time, the peak resident memory of this process (``ru_maxrss``) and the
peak of the summed resident memory of all its descendant processes (worker pools; sampled from
/proc every 0.2 s), and — for a baseline in the same run — the time
of the same request for ``--baseline-count`` bitstrings one by one with the stored plan.
A sample of the results is checked against contracting the same bitstring on its own.

    python tests/benchmarks/bench_big_batch.py [--count 10000] [--grid 5x8] [--cycles 8] [--memory-gib 4]

The 36-qubit case of the scale work: ``--grid 6x6 --cycles 12 --count 256 --memory-gib 8``.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore

from rss import PeakRss


def announce(choice) -> None:
    """The engine chosen and its prediction, on stderr before the run (a long run shows what it is doing)."""
    print(json.dumps({"engine": choice.engine, "batch": choice.chosen.batch, "chunks": choice.chosen.chunks,
                      "predicted_seconds": round(choice.chosen.seconds, 2), "reason": choice.reason}),
          file=sys.stderr, flush=True)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--count", type=int, default=10_000)
    ap.add_argument("--cycles", type=int, default=8)
    ap.add_argument("--grid", default="5x8", help="rows x columns of qubits")
    ap.add_argument("--memory-gib", type=float, default=4.0)
    ap.add_argument("--budget", type=float, default=20.0)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--baseline-count", type=int, default=8)
    args = ap.parse_args()
    rows, cols = (int(v) for v in args.grid.lower().split("x"))
    circuit = random_instance(grid_architecture(rows, cols, args.cycles), seed=4, gates="discrete")
    n = circuit.num_qubits
    rng = np.random.default_rng(0)
    bits = list(dict.fromkeys("".join(map(str, rng.integers(0, 2, n))) for _ in range(args.count)))
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=args.budget, parallel=False)
    cap = args.memory_gib * 2 ** 30
    events = []
    t0 = time.perf_counter()
    with PeakRss() as memory:
        run = amplitudes(circuit, bits, planner=opts, plan_store=store, memory_bytes=cap, workers=args.workers,
                         progress=lambda p: events.append((p.done, p.total, round(p.elapsed, 2))),
                         on_choice=announce)
    wall = time.perf_counter() - t0
    # baseline in the same run: the same bitstrings one by one (stored single plan), on a sample
    sample = bits[:args.baseline_count]
    t1 = time.perf_counter()
    single = amplitudes(circuit, sample, engine="single", planner=opts, plan_store=store, memory_bytes=cap,
                        workers=args.workers)
    per_single = (time.perf_counter() - t1) / len(sample)
    agree = max(abs(a.amplitude - b.amplitude) / abs(b.amplitude) for a, b in zip(run.results, single.results))
    print(json.dumps({
        "qubits": n, "cycles": args.cycles, "bitstrings": len(bits), "memory_cap_bytes": cap,
        "engine": run.engine, "reason": run.reason, "batch": run.batch, "chunks": run.chunks,
        "progress_events": len(events), "first_event": events[0] if events else None,
        "last_event": events[-1] if events else None,
        "wall_seconds": round(wall, 2), "predicted_seconds": round(run.predicted_seconds, 2),
        "madds": run.madds, "achieved_madds_per_second": run.madds / wall,
        "peak_rss_self_bytes": memory.self_bytes, "peak_rss_workers_bytes": memory.descendants_bytes,
        "baseline_single_seconds_per_bitstring": round(per_single, 4),
        "baseline_single_seconds_scaled_to_count": round(per_single * len(bits), 1),
        "ratio_run_over_baseline": round(wall / (per_single * len(bits)), 4),
        "max_relative_difference_vs_single": agree,
    }))


if __name__ == "__main__":
    main()
