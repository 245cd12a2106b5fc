"""Batched amplitudes benchmark: one batched run against a per-bitstring loop and the state vector.

Part a: 1,024 random bitstrings of a 30-qubit (5x6) 14-cycle Haar circuit.
Part b: a 40-qubit (5x8) circuit, whose state vector (16 GiB complex128, plus work space) is over
the memory cap used here.

Every figure comes from this run. None of the three runs fits a session on two cores in full, so
each is measured on a part and scaled (the JSON says so): the batched run on its first chunk
(x number of chunks), the loop on ``--loop-sample`` bitstrings with the stored plan (x count), the
state vector on its first ``--sv-gates`` fused gates applied in place (median x number of gates).

    python tests/benchmarks/bench_batched.py [--parts ab] [--budget 30] [--loop-sample 2]
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.calibration import measure
from contraction.execution.executor import contract_array
from contraction.execution.statevector import apply_gate_in_place
from contraction.network.builder import fused_gates, tensor_arrays
from contraction.planning.engine_choice import choose
from contraction.planning.options import PlannerOptions
from contraction.planning.store import MemoryPlanStore


def emit(doc: dict) -> None:
    print(json.dumps(doc), flush=True)


def random_bits(n: int, k: int, seed: int) -> list[str]:
    rng = np.random.default_rng(seed)
    return ["".join("1" if b else "0" for b in rng.integers(0, 2, n)) for _ in range(k)]


def statevector_seconds(circuit, gates_measured: int) -> tuple[float, int]:
    """Seconds per fused gate on the full state (in place), and the number of fused gates."""
    gates = fused_gates(circuit)
    n = circuit.num_qubits
    psi = np.zeros((2,) * n, dtype=np.complex128)
    psi[(0,) * n] = 1
    times = []
    for g in gates[:gates_measured]:
        t = time.perf_counter()
        apply_gate_in_place(psi, g.matrix, g.qubits)
        times.append(time.perf_counter() - t)
    del psi
    return float(np.median(times)), len(gates)


def run_case(name: str, rows: int, cols: int, cycles: int, count: int, args, rate, memory: float,
             with_sv: bool) -> dict:
    circuit = random_instance(grid_architecture(rows, cols, cycles), seed=1)
    n = circuit.num_qubits
    bits = random_bits(n, count, seed=7)
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=args.budget)
    t = time.perf_counter()
    choice = choose(circuit, count, rate=rate, store=store, planner=opts, memory_bytes=memory)
    planning = time.perf_counter() - t
    doc = {"part": name, "qubits": n, "cycles": cycles, "bitstrings": count, "budget_s": args.budget,
           "planning_s": round(planning, 2), "automatic_choice": choice.engine, "reason": choice.reason,
           "predicted_s": {k: round(v, 2) for k, v in choice.predictions().items()}}
    emit({"progress": doc})
    single_opt = next(o for o in choice.options if o.engine == "single")
    # the batched run: the planned batch size (> 1) with the least predicted time per bitstring,
    # even when the choice preferred another engine
    b = min((k for k in choice.planned if k > 1), key=lambda k: choice.planned[k].seconds / k)
    part = choice.planned[b]
    chunks = -(-count // b)
    doc.update(batch=b, chunks=chunks, predicted_per_bitstring_s={k: round(o.seconds / k, 3)
                                                                   for k, o in choice.planned.items()},
               batch_plan={"madds": part.plan.madds,
               "width": part.plan.width, "slices": part.plan.nslices},
               single_plan={"madds": single_opt.plan.madds, "width": single_opt.plan.width,
                            "slices": single_opt.plan.nslices})
    if part.seconds > args.max_chunk_seconds:
        doc["batched"] = f"skipped: one chunk predicted {part.seconds:.0f} s > --max-chunk-seconds"
        return doc
    # one chunk of the batched run (the plan the choice stored), scaled by the number of chunks
    arrays = tensor_arrays(part.structure, circuit, bits[:b], np.complex128)
    t = time.perf_counter()
    chunk_values = contract_array(part.tree, arrays)
    t_chunk = time.perf_counter() - t
    t_batched = t_chunk * chunks
    # the loop: one contraction per bitstring with the stored plan, on a sample
    sample = bits[:args.loop_sample]
    t = time.perf_counter()
    single = amplitudes(circuit, sample, engine="single", rate=rate, plan_store=store, planner=opts,
                        memory_bytes=memory)
    t_each = (time.perf_counter() - t) / len(sample)
    t_loop = t_each * count
    err = max(abs(chunk_values[i] - r.amplitude) / abs(r.amplitude) for i, r in enumerate(single.results))
    doc.update(batched_chunk_s=round(t_chunk, 2), batched_s_scaled=round(t_batched, 2),
               predicted_chunk_s=round(part.seconds, 2), single_each_s=round(t_each, 2),
               predicted_single_each_s=round(single_opt.parts[1].seconds, 2), loop_s_scaled=round(t_loop, 2),
               loop_sample=len(sample), ratio_loop_over_batched=round(t_loop / t_batched, 2), goal_ratio=10,
               max_rel_diff_batched_vs_single=float(err))
    measured = {"batch": t_batched, "single": t_loop}
    if with_sv:
        per_gate, ngates = statevector_seconds(circuit, args.sv_gates)
        doc["statevector_s_scaled"] = round(per_gate * ngates, 2)
        doc["statevector_gates"] = f"{args.sv_gates} of {ngates} fused gates measured (median per gate)"
        measured["statevector"] = per_gate * ngates
    fastest = min(measured, key=measured.get)
    doc["fastest_measured"] = fastest
    doc["choice_was_fastest"] = choice.engine == fastest
    doc["batched_madds_per_s"] = part.plan.madds / t_chunk
    doc["batched_fraction_of_matmul"] = round(doc["batched_madds_per_s"] / rate.matmul_madds_per_second, 3)
    return doc


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--parts", default="ab")
    ap.add_argument("--budget", type=float, default=30.0)
    ap.add_argument("--loop-sample", type=int, default=2)
    ap.add_argument("--sv-gates", type=int, default=6)
    ap.add_argument("--memory-gib", type=float, default=18.0)
    ap.add_argument("--max-chunk-seconds", type=float, default=1200.0)
    args = ap.parse_args()
    rate = measure()
    emit({"part": "calibration", **rate.to_dict()})
    memory = args.memory_gib * 2 ** 30
    if "a" in args.parts:
        emit(run_case("a_30q_1024", 5, 6, 14, 1024, args, rate, memory, with_sv=True))
    if "b" in args.parts:
        emit(run_case("b_40q", 5, 8, 10, 256, args, rate, min(memory, 8 * 2 ** 30), with_sv=False))


if __name__ == "__main__":
    main()
