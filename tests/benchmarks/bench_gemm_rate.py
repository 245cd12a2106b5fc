"""Contraction efficiency: complex multiply-adds per second of one slice against the dense
matrix-multiply rate measured in the same run, on three networks of widths 2^20 to 2^27, in
complex128 and complex64; the complex64 value's error against complex128; what cotengra's
exponent stripping (every intermediate rescaled) costs against the plain-first contraction; and a
run of consecutive slices keeping intermediates between them (complex64).

All on one BLAS thread (a contraction worker's setting), one slice per case, run as a worker runs
its slices (one contractor made first, its set-up reported apart): the first run apart (fresh
memory) and the median of the runs after it (at least one; ``--repeats`` in all, two for slices over
10 s); ``seconds_with_a_new_contractor`` is the same slice with a contractor made for it alone. Plans are
searched in this run with the service's default objective ("auto": multiply-adds alone for a network
that must be sliced, as all three are) unless ``--minimize`` names another (e.g. "combo": multiply-adds
and memory writes); ``objective`` says which, and ``seconds_all_slices`` is a slice's time times the
slices (complex64), so that plans of different objectives compare by the time they take, not only by
their rate.

    python tests/benchmarks/bench_gemm_rate.py [--budget 30] [--repeats 3] [--cases 20,24,27] [--minimize auto]
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
from threadpoolctl import threadpool_limits

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.calibration import matmul_rate
from contraction.execution.executor import contract_slice_scaled
from contraction.execution.reuse import SliceContractor
from contraction.execution.slices import keep_freed_memory
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.options import PlannerOptions
from contraction.planning.search import find_plan
from contraction.planning.slice_reuse import reuse_plan

#: width (log2 elements of the largest intermediate) -> (rows, cols, cycles, removed qubits)
CASES = {20: (5, 6, 14, frozenset()), 24: (5, 6, 14, frozenset()), 27: (6, 9, 12, frozenset({53}))}


def timed(fn, repeats: int):
    """(median seconds of the runs after the first, first run's seconds, value): a worker contracts many
    slices, so the first one's page faults (fresh memory) are reported apart. At least two runs; runs
    over 10 s stop after the second."""
    times, value = [], None
    for k in range(max(2, repeats)):
        t = time.perf_counter()
        value = fn()
        times.append(time.perf_counter() - t)
        if k >= 1 and times[-1] > 10:
            break
    return float(np.median(times[1:])), times[0], value


def case(width: int, budget: float, repeats: int, run_slices: int, minimize: str = "auto") -> dict:
    rows, cols, cycles, removed = CASES[width]
    circ = random_instance(grid_architecture(rows, cols, cycles, removed=removed), 1, gates="discrete")
    s = build_structure(circ)
    plan = find_plan(s, PlannerOptions(budget_seconds=budget, max_elements=2 ** width, parallel=2, minimize=minimize))
    tree = plan.tree(s)
    per_slice = plan.madds / plan.nslices
    bits = "0" * circ.num_qubits
    row = {"qubits": circ.num_qubits, "cycles": cycles, "objective": plan.options.get("minimize"),
           "width_log2": plan.width, "slices": plan.nslices, "log10_madds": round(float(np.log10(plan.madds)), 3),
           "madds_per_slice": per_slice, "writes_per_slice": plan.writes / plan.nslices}
    values = {}
    with threadpool_limits(1):
        for dtype in ("complex128", "complex64"):
            before = matmul_rate(dtype=np.dtype(dtype))
            arrays = tensor_arrays(s, circ, bits, dtype=dtype)
            # a worker runs its slices with one contractor (step program, arena): made once here, its
            # set-up timed apart; the same slice contracted again does all of its work every time (no
            # intermediates are kept without a reuse plan)
            t = time.perf_counter()
            steady = SliceContractor(tree, arrays)
            setup = time.perf_counter() - t
            seconds, first, (m, e) = timed(lambda: contract_slice_scaled(tree, arrays, 0, steady), repeats)
            fresh, _, _ = timed(lambda: contract_slice_scaled(tree, arrays, 0), 2)
            values[dtype] = complex(m) * 10.0 ** e
            # the ceiling: the better of two measurements around the slice (the first may overlap the
            # planning processes' exit)
            rate = max(before, matmul_rate(dtype=np.dtype(dtype)))
            row[dtype] = {"seconds": round(seconds, 3), "first_slice_seconds": round(first, 3),
                          "contractor_setup_seconds": round(setup, 4),
                          "seconds_with_a_new_contractor": round(fresh, 3),
                          "first_slice_fraction_of_matmul": round(per_slice / first / rate, 3),
                          "matmul_madds_per_s": rate,
                          "madds_per_s": per_slice / seconds, "fraction_of_matmul": round(per_slice / seconds / rate, 3)}
            if dtype == "complex64":
                stripped, _, _ = timed(lambda: tree.contract_slice(arrays, 0, strip_exponent=True), repeats)
                row["complex64"]["seconds_all_intermediates_rescaled"] = round(stripped, 3)
                row["complex64"]["rescaled_over_plain"] = round(stripped / seconds, 3)
                # a run of consecutive slices keeping intermediates in 2^width extra elements (what a
                # worker whose share of the cap is four times the target leaves: see amplitudes)
                k = min(plan.nslices, run_slices)
                reuse = reuse_plan(tree, 2.0 ** width)
                sc = SliceContractor(tree, arrays, reuse)
                t = time.perf_counter()
                for i in range(k):
                    contract_slice_scaled(tree, arrays, i, sc)
                run_s = time.perf_counter() - t
                row["complex64"]["run_with_reuse"] = {
                    "slices": k, "seconds_per_slice": round(run_s / k, 3),
                    "speedup_over_one_slice": round(seconds / (run_s / k), 3),
                    "predicted_work_share_all_slices": round(reuse.work_share, 3),
                    "madds_run_share": round(sc.madds_done / (k * per_slice), 3),
                    "plan_madds_per_s": k * per_slice / run_s}
    ref = values["complex128"]
    row["seconds_all_slices"] = round(row["complex64"]["seconds"] * plan.nslices, 1)
    row["complex64_relative_error"] = abs(values["complex64"] - ref) / abs(ref)
    return row


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=float, default=30.0, help="planning seconds per network")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--run-slices", type=int, default=8, help="consecutive slices run with reuse (complex64)")
    ap.add_argument("--cases", default="20,24,27", help="widths (log2) to run, from 20, 24, 27")
    ap.add_argument("--minimize", default="auto", help="the planner's objective (auto, flops, combo, ...)")
    args = ap.parse_args()
    keep_freed_memory()
    rows = [case(int(w), args.budget, args.repeats, args.run_slices, args.minimize) for w in args.cases.split(",")]
    print(json.dumps({"bench": "gemm_rate", "goal_fraction_of_matmul": 0.6, "cases": rows}), flush=True)


if __name__ == "__main__":
    main()
