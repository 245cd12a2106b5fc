"""Planning benchmark: plan reuse, estimate accuracy, contraction efficiency, 53-qubit scale.

Prints one JSON line per part and a summary line; every ratio is against a baseline measured in
this same run (the first instance, the prediction, the matrix-multiply rate).

    python tests/benchmarks/bench_planning.py [--parts abcd] [--budget 30] [--scale-cycles 12]
"""

from __future__ import annotations

import argparse
import json
import time

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.calibration import matmul_rate, measure
from contraction.execution.executor import contract_scalar
from contraction.network.builder import build_structure, tensor_arrays
from contraction.planning.capped_plans import network_plan
from contraction.planning.estimate import estimate
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore


def emit(doc: dict) -> None:
    print(json.dumps(doc), flush=True)


def part_a(budget: float) -> dict:
    arch = grid_architecture(5, 6, 14)
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=budget)
    bits = ["0" * 30]
    t = time.perf_counter()
    first = amplitudes(random_instance(arch, 1), bits, engine="single", planner=opts, plan_store=store)
    t_first = time.perf_counter() - t
    t = time.perf_counter()
    second = amplitudes(random_instance(arch, 2), bits, engine="single", planner=opts, plan_store=store)
    t_second = time.perf_counter() - t
    return {"part": "a_plan_reuse", "qubits": 30, "cycles": 14, "budget_s": budget,
            "first_instance_s": round(t_first, 3), "second_instance_s": round(t_second, 3),
            "speedup": round(t_first / t_second, 1), "second_used_stored_plan": second.plan_cached,
            "madds": first.plan.madds, "goal_speedup": 50}


def part_b(rate, budget: float) -> dict:
    cases = [(4, 5, 10), (5, 5, 10), (5, 6, 10), (5, 6, 14), (6, 6, 12), (6, 7, 12), (6, 7, 14)]
    rows = []
    for r, c, cy in cases:
        circ = random_instance(grid_architecture(r, c, cy), seed=r * 100 + c + cy)
        store = MemoryPlanStore()
        opts = PlannerOptions(budget_seconds=budget)
        est = estimate(circ, 1, engine="single", rate=rate, planner=opts, plan_store=store)
        if est.predicted_seconds > 240:
            rows.append({"grid": f"{r}x{c}", "cycles": cy, "madds": est.madds,
                         "predicted_s": round(est.predicted_seconds, 2), "measured_s": None,
                         "skipped": "predicted over 240 s"})
            continue
        t = time.perf_counter()
        amplitudes(circ, ["0" * circ.num_qubits], engine="single", planner=opts, plan_store=store)
        measured = time.perf_counter() - t
        rows.append({"grid": f"{r}x{c}", "cycles": cy, "madds": est.madds, "width": est.width,
                     "predicted_s": round(est.predicted_seconds, 4), "measured_s": round(measured, 4),
                     "ratio_measured_over_predicted": round(measured / est.predicted_seconds, 2)})
    ok = [x for x in rows if x.get("measured_s")]
    return {"part": "b_estimate_accuracy", "cases": rows,
            "within_2x": sum(1 for x in ok if 0.5 <= x["ratio_measured_over_predicted"] <= 2),
            "measured_cases": len(ok)}


def part_c(budget: float) -> dict:
    rate = matmul_rate()
    rows = []
    for r, c, cy in [(5, 5, 12), (5, 6, 12), (5, 6, 14)]:
        circ = random_instance(grid_architecture(r, c, cy), seed=7)
        s = build_structure(circ)
        plan = network_plan(s, None, PlannerOptions(budget_seconds=budget), 8 * 2 ** 30).plan
        if plan.width < 20:
            rows.append({"grid": f"{r}x{c}", "cycles": cy, "width": plan.width, "skipped": "width < 20"})
            continue
        if plan.madds > 60 * rate:
            rows.append({"grid": f"{r}x{c}", "cycles": cy, "width": plan.width, "madds": plan.madds,
                         "skipped": "over a minute even at the matmul rate"})
            continue
        tree = plan.tree(s)
        arrays = tensor_arrays(s, circ, "0" * circ.num_qubits)
        t = time.perf_counter()
        contract_scalar(tree, arrays)
        dt = time.perf_counter() - t
        rows.append({"grid": f"{r}x{c}", "cycles": cy, "width": plan.width, "madds": plan.madds,
                     "seconds": round(dt, 3), "madds_per_s": plan.madds / dt,
                     "fraction_of_matmul": round(plan.madds / dt / rate, 3)})
    return {"part": "c_efficiency", "matmul_madds_per_s": rate, "cases": rows, "goal_fraction": 0.6}


def part_d(rate, cycles: int, budget: float) -> dict:

    arch = grid_architecture(6, 9, cycles, "ABCDCDAB", removed=frozenset({53}))
    circ = random_instance(arch, seed=2019, gates="discrete")
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=budget)
    t = time.perf_counter()
    est = estimate(circ, 1, engine="single", rate=rate, planner=opts, plan_store=store,
                   memory_bytes=16 * 2 ** 30)
    t_plan = time.perf_counter() - t
    out = {"part": "d_scale", "qubits": circ.num_qubits, "cycles": cycles, "madds": est.madds,
           "width": est.width, "slices": est.slices, "peak_bytes": est.peak_bytes,
           "plan_seconds": round(t_plan, 2), "predicted_s": round(est.predicted_seconds, 2)}
    if est.predicted_seconds > 900:
        out["measured_s"] = None
        out["skipped"] = "predicted over 900 s"
        return out
    t = time.perf_counter()
    run = amplitudes(circ, ["0" * circ.num_qubits], engine="single", planner=opts, plan_store=store,
                     memory_bytes=16 * 2 ** 30, workers=2)
    out["contract_seconds"] = round(time.perf_counter() - t, 2)
    out["total_seconds"] = round(out["contract_seconds"] + t_plan, 2)
    out["amplitude"] = [run.results[0].amplitude.real, run.results[0].amplitude.imag]
    out["goal_seconds"] = 600
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--parts", default="abcd")
    ap.add_argument("--budget", type=float, default=20.0)
    ap.add_argument("--scale-cycles", type=int, default=12)
    ap.add_argument("--scale-budget", type=float, default=120.0)
    args = ap.parse_args()
    rate = measure()
    emit({"part": "calibration", **rate.to_dict()})
    if "a" in args.parts:
        emit(part_a(args.budget))
    if "b" in args.parts:
        emit(part_b(rate, args.budget))
    if "c" in args.parts:
        emit(part_c(args.budget))
    if "d" in args.parts:
        emit(part_d(rate, args.scale_cycles, args.scale_budget))


if __name__ == "__main__":
    main()
