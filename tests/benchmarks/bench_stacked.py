"""The stacked engine against single amplitudes (and the automatic choice) on uncorrelated and correlated
bitstrings, in one run.

For each case: the plans are searched first by the automatic choice (``--budget`` seconds, kept in a plan store),
then the same request runs with the engine forced to ``single`` and to ``stacked`` and with ``auto``,
each timed once, in alternating order over ``--rounds`` rounds (medians reported). Printed per case as
one JSON line: the stacked engine's chunk size and multiply-adds over the single amplitudes', the
seconds of each engine, single/stacked, what ``auto`` chose and its time over the fastest forced
engine's, and the largest relative difference between the stacked and single results.

Cases (grid circuits with Haar-random gates, seed 1): uncorrelated random bitstrings (40 qubits,
8 cycles, 2,000; 36 qubits, 8 cycles, 64), and correlated ones of the 40-qubit circuit: 1,024
bitstrings agreeing on 30 qubits, and every bitstring within Hamming distance 2 of a random one (821).

    python tests/benchmarks/bench_stacked.py [--budget 5] [--workers 2] [--memory-gib 4] [--rounds 1]
"""

from __future__ import annotations

import argparse
import itertools
import json
import statistics
import time

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.planning.engine_choice import choose
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore


def _random(rng, n: int, count: int) -> list[str]:
    return list(dict.fromkeys("".join(map(str, rng.integers(0, 2, n))) for _ in range(count)))


def _flip(b: str, qubits) -> str:
    out = list(b)
    for q in qubits:
        out[q] = "1" if out[q] == "0" else "0"
    return "".join(out)


def cases():
    rng = np.random.default_rng(0)
    g40 = random_instance(grid_architecture(5, 8, 8), seed=1)
    g36 = random_instance(grid_architecture(6, 6, 8), seed=1)
    base = _random(rng, 40, 1)[0]
    ball = [base] + [_flip(base, (q,)) for q in range(40)] + [_flip(base, p) for p in itertools.combinations(range(40), 2)]
    return [("grid40x8 uncorrelated", g40, _random(rng, 40, 2000)),
            ("grid36x8 uncorrelated", g36, _random(rng, 36, 64)),
            ("grid40x8 30 qubits shared", g40, [base[:30] + format(k, "010b") for k in range(1024)]),
            ("grid40x8 Hamming ball r=2", g40, ball)]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=float, default=5.0)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--memory-gib", type=float, default=4.0)
    ap.add_argument("--rounds", type=int, default=1)
    ap.add_argument("--cases", default="all", help="comma-separated case numbers (0-based) or 'all'")
    args = ap.parse_args()
    chosen = cases() if args.cases == "all" else [cases()[int(k)] for k in args.cases.split(",")]
    cap = args.memory_gib * 2 ** 30
    for name, circuit, bits in chosen:
        store = MemoryPlanStore()
        opts = PlannerOptions(budget_seconds=args.budget, parallel=False)
        t = time.perf_counter()
        # every plan the engines use (single amplitude, batch sizes) searched here and stored
        plan_choice = choose(circuit, len(bits), engine="auto", store=store, planner=opts, memory_bytes=cap,
                             workers=args.workers, bitstrings=bits)
        planning = time.perf_counter() - t
        times: dict[str, list[float]] = {"single": [], "stacked": [], "auto": []}
        runs = {}
        for r in range(args.rounds):
            order = ["single", "stacked", "auto"] if r % 2 == 0 else ["auto", "stacked", "single"]
            for engine in order:
                t = time.perf_counter()
                runs[engine] = amplitudes(circuit, bits, engine=engine, planner=opts, plan_store=store,
                                          memory_bytes=cap, workers=args.workers)
                times[engine].append(time.perf_counter() - t)
        med = {k: statistics.median(v) for k, v in times.items()}
        stacked, single = runs["stacked"], runs["single"]
        diff = max(abs(a.amplitude - b.amplitude) / abs(b.amplitude) for a, b in zip(stacked.results, single.results))
        fastest = min(med["single"], med["stacked"])
        print(json.dumps({
            "case": name, "qubits": circuit.num_qubits, "bitstrings": len(bits), "planning_s": round(planning, 2),
            "slices": single.plan.nslices if single.plan else None, "stacked_chunk": stacked.batch,
            "stacked_chunks": stacked.chunks, "madds_stacked_over_single": round(stacked.madds / single.madds, 4),
            "single_s": round(med["single"], 3), "stacked_s": round(med["stacked"], 3),
            "single_over_stacked": round(med["single"] / med["stacked"], 3),
            "predicted": {"single_s": round(single.predicted_seconds, 3), "stacked_s": round(stacked.predicted_seconds, 3)},
            "auto": {"engine": runs["auto"].engine, "batch": runs["auto"].batch, "seconds": round(med["auto"], 3),
                     "over_fastest_forced": round(med["auto"] / fastest, 3), "reason": runs["auto"].reason},
            "stacked_vs_single_max_relative_difference": diff, "auto_when_planning": plan_choice.engine,
            "workers": args.workers, "rounds": args.rounds}), flush=True)


if __name__ == "__main__":
    main()
