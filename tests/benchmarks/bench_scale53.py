"""53-qubit scale: planning under a memory cap against quimb + cotengra called directly, one
amplitude with the stored plan, and the time bound of ``estimate`` on large textbook circuits.

Prints one JSON line per part; every ratio is against a baseline measured in this same run.

    python tests/benchmarks/bench_scale53.py [--parts pace] (add b for the batch) [--budget 300] [--cycles 12]
        [--cap-log2 30] [--estimate-budget 60]

Part p: veramp's ``find_plan`` (structure-only simplification, slicing inside every trial, whole
budget, two processes) and the baseline — quimb's ``full_simplify`` on the same network's arrays,
then cotengra's ``HyperOptimizer`` with slicing to the same target inside each trial, same budget,
same two processes — side by side. Both slice the largest intermediate to an eighth of the cap per
process of part a: the executor holds a step's output and a rearranged copy of each operand besides the
live intermediates, so a plan aimed at a quarter peaks at the whole cap plus the inputs, over the share
a run may use — ``amplitudes()`` then searches a plan of its own instead (a 14-cycle plan aimed at
2^28 elements under a 2^30 cap was replaced so and the run stopped after 62 minutes; the stored plan's
32 slices take ~16 minutes).
Part a: one amplitude in complex64 with the stored plan, the whole run within the cap:
``--amp-workers`` processes on one thread each sharing it (default: one per core, as the command
line runs; the plan's target is then an eighth of a share), or one process on the machine's BLAS
threads; wall time and peak RSS of this process and of
its workers (measured, not estimated), against the time at the matrix-multiply rate measured in the
same run; at 12 cycles also its error against the complex128 amplitude in ``COMPLEX128_REFERENCE``.
Part b: a batch of ``--batch`` uncorrelated bitstrings (|0...0> and random ones) sharing one
contraction (a batch index on the projectors): its plan, searched with the same budget and target as
part p's, against part p's plan (ratio of multiply-adds); with ``--run-batch`` it is contracted in
complex64 (time, peak RSS) and its |0...0> entry compared with part a's amplitude when given
(``--amplitude RE IM``: two plans of the same amplitude, 1e-5 relative in complex64). It also reports
the modelled cost of the batch through part p's single-amplitude tree with every intermediate stacked
over the distinct restrictions of the bitstrings to its projected qubits (sparse output state), and
that stacked cost of a tree searched for it directly (``--stacked-budget``) against a tree searched
for one amplitude in the same time (both unsliced).
Part c: checks that do not trust the engine, at 53 qubits: the patch circuit of the grid (every gate
between rows 0-2 and rows 3-5 removed) against the product of its halves' state-vector amplitudes
(tensor-product rule, Nielsen & Chuang 2010, §2.1.7), and two plans with different slicings (searched
with different seeds and targets) of the full circuit with ``--check-cycles`` cycles (default 10; at 12,
run part a with two stored plans instead), which must agree
to 1e-10 relative in complex128 and 1e-5 in complex64 (common practice for these precisions).
Part e: ``estimate`` with a 60 s budget on a 32-qubit quantum-volume circuit of depth 32, a
63-qubit QFT and a 45-qubit ripple-carry adder (generated from their published definitions).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time

import numpy as np


def emit(doc: dict) -> None:
    print(json.dumps(doc), flush=True)


def progress_to_stderr(progress) -> None:
    print(f"{progress}", file=sys.stderr, flush=True)


def w53(cycles: int):
    from contraction.circuits.random_instances import grid_architecture, random_instance

    return random_instance(grid_architecture(6, 9, cycles, removed=frozenset({53})), 1, gates="discrete")


def part_plan(cycles: int, budget: float, cap_log2: int, baseline: bool = True,
              target_log2: float | None = None) -> tuple[dict, object]:
    import cotengra as ctg
    import quimb.tensor as qtn

    from contraction.network.builder import build_structure, tensor_arrays
    from contraction.planning.options import PlannerOptions
    from contraction.planning.search import find_plan

    circ = w53(cycles)
    s = build_structure(circ)
    target = 2 ** (cap_log2 - 2 if target_log2 is None else target_log2)
    t = time.perf_counter()
    plan = find_plan(s, PlannerOptions(budget_seconds=budget, max_elements=target, parallel=2, minimize="flops"))
    ours_s = time.perf_counter() - t
    ours = {"seconds": round(ours_s, 1), "log10_madds": round(math.log10(plan.madds), 3),
            "log10_madds_unsliced": round(math.log10(plan.madds_unsliced), 3),
            "log10_madds_searched": round(math.log10(plan.options.get("madds_before_fusion", plan.madds)), 3),
            "slicing_overhead": round(plan.slicing_overhead, 3), "slices": plan.nslices,
            "width_log2": plan.width, "trials": plan.options.get("trials"),
            "tensors_after_simplify": plan.options.get("tensors_after_simplify")}
    def log10s(v):
        return [log10s(x) for x in v] if isinstance(v, list) else (round(math.log10(v), 3) if v else v)

    # the final stages: the tree sliced anew, the other kept trees sliced anew, the forest refinement
    for stage in ("resliced", "candidates", "refined", "resliced_fused"):
        if plan.options.get(stage):
            ours[stage] = {k: (log10s(v) if k.startswith("madds") else v) for k, v in plan.options[stage].items()}
    if not baseline:
        return {"part": "p_plan", "qubits": circ.num_qubits, "cycles": cycles, "budget_s": budget,
                "cap_elements_log2": cap_log2, "target_intermediate_log2": math.log2(target), "veramp": ours,
                "baseline_quimb_cotengra": "skipped"}, plan
    # baseline: quimb simplification + cotengra's hyper search, called directly
    t = time.perf_counter()
    arrays = tensor_arrays(s, circ, "0" * circ.num_qubits, dtype="complex64")
    tn = qtn.TensorNetwork([qtn.Tensor(a, inds=ix) for a, ix in zip(arrays, s.inputs)])
    tn.full_simplify_(output_inds=s.output)
    opt = ctg.HyperOptimizer(methods=["greedy", "kahypar"], minimize="flops", max_repeats=10 ** 6,
                             max_time=budget - (time.perf_counter() - t), parallel=2, progbar=False,
                             slicing_opts=dict(target_size=int(target)), on_trial_error="ignore")
    tree = opt.search([x.inds for x in tn], s.output, {ix: d for x in tn for ix, d in zip(x.inds, x.shape)})
    base_s = time.perf_counter() - t
    unsliced = tree.copy()
    unsliced.unslice_all_()
    doc = {"part": "p_plan", "qubits": circ.num_qubits, "cycles": cycles, "budget_s": budget,
           "cap_elements_log2": cap_log2, "target_intermediate_log2": math.log2(target),
           "veramp": ours,
           "baseline_quimb_cotengra": {"seconds": round(base_s, 1),
                                       "log10_madds": round(math.log10(tree.contraction_cost()), 3),
                                       "log10_madds_unsliced": round(math.log10(unsliced.contraction_cost()), 3),
                                       "slices": tree.nslices, "width_log2": tree.contraction_width(),
                                       "trials": len(opt.scores), "tensors_after_simplify": tn.num_tensors},
           "goal": {"log10_madds_max": 12.7, "slicing_overhead_max": 1.5, "budget_overrun_max": 1.1}}
    doc["ratio_veramp_over_baseline_madds"] = round(plan.madds / tree.contraction_cost(), 3)
    doc["budget_overrun"] = round(ours_s / budget, 3)
    return doc, plan


#: <0...0|C|0...0> of ``w53(cycles)`` in complex128, by this project's engine (not an outside value: a
#: reference for the complex64 runs of part a): 12 cycles, one plan of 64 slices (10^12.754
#: multiply-adds, sliced indices 64, 73, 80, 89, 96, 118), slice by slice, 2026-12-04
COMPLEX128_REFERENCE = {12: complex(-3.3490153439103946e-09, 5.091312222326599e-09)}


def part_amplitude(cycles: int, plan, cap_log2: int, workers: int = 1) -> dict:
    from contraction.execution.amplitudes import amplitudes
    from contraction.execution.calibration import matmul_rate
    from contraction.planning.store import MemoryPlanStore

    from contraction.execution.slices import keep_freed_memory

    keep_freed_memory()            # as the command line does: this process contracts in place
    circ = w53(cycles)
    rate = matmul_rate(dtype=np.complex64)
    predicted = plan.madds / rate
    out = {"part": "a_amplitude", "madds": plan.madds, "matmul_madds_per_s": rate,
           "seconds_at_matmul_rate": round(predicted, 1)}
    if predicted > 1800:
        out["skipped"] = "over 30 minutes even at the matrix-multiply rate"
        return out
    store = MemoryPlanStore()
    store.put(plan)
    from rss import PeakRss

    t = time.perf_counter()
    with PeakRss() as memory:
        # the whole run within the cap: one process on the machine's BLAS threads, or ``workers``
        # processes on one thread each sharing the cap (the plan must fit a share)
        run = amplitudes(circ, ["0" * circ.num_qubits], engine="single", dtype="complex64", plan_store=store,
                         planner=None, memory_bytes=2 ** cap_log2 * 8, workers=workers,
                         progress=progress_to_stderr)
    dt = time.perf_counter() - t
    used = run.plan or plan                    # the plan whose multiply-adds the run did
    # the ceiling: the better of two measurements around the run (the first may overlap the exit of
    # part p's planning processes: one run measured 10.3 G/s there against 26.4 G/s in another)
    rate = max(rate, matmul_rate(dtype=np.complex64))
    out.update(matmul_madds_per_s=rate, seconds_at_matmul_rate=round(plan.madds / rate, 1))
    out.update(seconds=round(dt, 1), workers=workers, peak_rss_self_bytes=memory.self_bytes,
               peak_rss_workers_bytes=memory.descendants_bytes, cap_bytes=2 ** cap_log2 * 8,
               slices=plan.nslices, plan_peak_bytes=plan.peak_bytes("complex64"),
               # the plan the run used: the stored one, or one ``amplitudes()`` chose instead (a
               # stored plan whose executor peak exceeds a worker's share is not run as it is)
               plan_run={"stored": run.plan is not None and run.plan.plan_hash == plan.plan_hash,
                         "slices": run.plan.nslices if run.plan else None,
                         "log10_madds": round(math.log10(run.plan.madds), 3) if run.plan else None,
                         "reason": run.reason},
               amplitude=[run.results[0].amplitude.real, run.results[0].amplitude.imag],
               madds_per_s=used.madds / dt, fraction_of_matmul=round(used.madds / dt / rate, 3),
               goal={"seconds": 600, "peak_rss_bytes": 8 * 2 ** 30})
    if cycles in COMPLEX128_REFERENCE:
        ref = COMPLEX128_REFERENCE[cycles]
        diff = abs(run.results[0].amplitude - ref) / abs(ref)
        out["complex128_reference"] = {"relative_difference": diff, "tolerance": 1e-5, "agree": diff <= 1e-5}
    return out


def sparse_state_ratio(tree, structure, bits: list[str]) -> float:
    """Modelled multiply-adds of a batch through ``tree`` (a single-amplitude tree) when every
    intermediate is stacked over the distinct restrictions of the bitstrings to the qubits whose
    projectors it holds (the sparse-output-state idea of Pan, Chen & Zhang, Phys. Rev. Lett. 129,
    090502 (2022)), over the single amplitude's: the stacked engine's own cost model."""
    from contraction.circuits.bitstrings import bit_table
    from contraction.planning.stacked_cost import projected_qubits, stacked_cost

    return stacked_cost(tree, projected_qubits(structure), bit_table(bits)).ratio


def _stacked_counts(structure, bits: list[str]):
    """(reduced network, the projected qubits each of its tensors holds, bit rows) for the search below."""
    from contraction.circuits.bitstrings import bit_table
    from contraction.network.simplify import simplify_structure
    from contraction.planning.stacked_cost import projected_qubits

    red = simplify_structure(structure)
    held = {i: frozenset([q]) if q >= 0 else frozenset() for i, q in enumerate(projected_qubits(structure))}
    nid = len(structure.inputs)
    for a, b in red.pre_path:
        held[nid] = held[a] | held[b]
        nid += 1
    return red, [held[i] for i in red.ssa_ids], bit_table(bits)


class StackedCost:
    """A cotengra objective scoring a tree by the stacked (sparse output state) multiply-adds of a batch
    ``rows``: each step's multiply-adds times the distinct restrictions of the rows to the projected
    qubits below it (module level: the search's worker processes receive it pickled)."""

    def __init__(self, qubits, rows):
        self.qubits, self.rows = qubits, rows
        self.flops = None

    def cost(self, tree) -> float:
        held = {tree.input_to_node(i): self.qubits[i] for i in range(tree.N)}
        total = 0.0
        for p, l, r in tree.traverse():
            held[p] = held[l] | held[r]
            cols = sorted(held[p])
            distinct = len({row.tobytes() for row in self.rows[:, cols]}) if cols else 1
            total += float(tree.get_flops(p)) * distinct
        return total

    def __call__(self, trial) -> float:
        return math.log2(max(self.cost(trial["tree"]), 1.0))

    def __getattr__(self, name):
        # everything else (local costs for reconfiguration, the dynamic-programming objective) as for flops
        if name.startswith("__") or name in ("qubits", "rows", "flops"):
            raise AttributeError(name)
        if self.flops is None:
            from cotengra.scoring import FlopsObjective

            self.flops = FlopsObjective()
        return getattr(self.flops, name)


def stacked_search(structure, bits: list[str], budget: float) -> dict:
    """A tree searched (kahypar and greedy, two processes, unsliced) for the stacked cost of the batch
    ``bits`` itself, against a tree searched for one amplitude's multiply-adds in the same time."""
    import concurrent.futures as cf

    import cotengra as ctg

    red, qubits, rows = _stacked_counts(structure, bits)
    objective = StackedCost(qubits, rows)
    out = {"budget_seconds": budget}
    for name, minimize in (("single", "flops"), ("stacked", objective)):
        with cf.ProcessPoolExecutor(2) as pool:
            opt = ctg.HyperOptimizer(methods=["kahypar", "greedy"], minimize=minimize, max_repeats=10 ** 6,
                                     max_time=budget, parallel=pool, progbar=False, on_trial_error="ignore")
            tree = opt.search(red.inputs, red.output, red.size_dict)
        out[name] = {"trials": len(opt.scores), "log10_madds": round(math.log10(tree.contraction_cost()), 3),
                     "log10_stacked": round(math.log10(objective.cost(tree)), 3)}
    out["ratio_stacked_over_single"] = round(
        10 ** (out["stacked"]["log10_stacked"] - out["single"]["log10_madds"]), 2)
    return out


def part_batch(cycles: int, budget: float, cap_log2: int, target_log2: float, single, batch: int,
               run: bool, amplitude: complex | None, stacked_budget: float = 0.0) -> dict:
    from contraction.execution.executor import contract_array
    from contraction.execution.slices import keep_freed_memory
    from contraction.network.builder import build_structure, tensor_arrays
    from contraction.planning.options import PlannerOptions
    from contraction.planning.search import find_plan

    circ = w53(cycles)
    sb = build_structure(circ, batch=batch)
    t = time.perf_counter()
    plan = find_plan(sb, PlannerOptions(budget_seconds=budget, max_elements=2 ** target_log2, parallel=2,
                                        minimize="flops"))
    out = {"part": "b_batch", "batch": batch, "cycles": cycles, "plan_seconds": round(time.perf_counter() - t, 1),
           "log10_madds": round(math.log10(plan.madds), 3), "slices": plan.nslices, "width_log2": plan.width,
           "single_log10_madds": round(math.log10(single.madds), 3),
           "madds_ratio_to_single": round(plan.madds / single.madds, 2), "goal_time_ratio_max": 4.0}
    rng = np.random.default_rng(5)
    bits = ["0" * circ.num_qubits] + ["".join(rng.choice(["0", "1"], size=circ.num_qubits)) for _ in range(batch - 1)]
    s1 = build_structure(circ)
    out["modelled_sparse_state_ratio_on_single_tree"] = round(sparse_state_ratio(single.tree(s1), s1, bits), 2)
    if stacked_budget > 0:
        out["stacked_cost_searched"] = stacked_search(s1, bits, stacked_budget)
    if not run:
        return out
    keep_freed_memory()
    arrays = tensor_arrays(sb, circ, bits, dtype="complex64")
    from rss import PeakRss

    t = time.perf_counter()
    with PeakRss() as memory:
        values = contract_array(plan.tree(sb), arrays,
                                progress=progress_to_stderr)
    out.update(seconds=round(time.perf_counter() - t, 1), peak_rss_self_bytes=memory.self_bytes,
               cap_bytes=2 ** cap_log2 * 8, first=[complex(values[0]).real, complex(values[0]).imag])
    if amplitude is not None:
        diff = abs(complex(values[0]) - amplitude) / abs(amplitude)
        out["agreement_with_part_a"] = {"relative_difference": diff, "tolerance": 1e-5, "agree": diff <= 1e-5}
    return out


def part_checks(cycles: int, check_cycles: int, cap_log2: int, budget: float) -> dict:
    from contraction.circuits.patches import elide, split
    from contraction.execution.amplitudes import amplitudes
    from contraction.execution.executor import contract_scalar
    from contraction.execution.slices import keep_freed_memory
    from contraction.execution.statevector import state_vector
    from contraction.network.builder import build_structure, tensor_arrays
    from contraction.planning.options import PlannerOptions
    from contraction.planning.search import find_plan

    keep_freed_memory()
    rng = np.random.default_rng(7)
    out: dict = {"part": "c_checks"}
    full = w53(cycles)
    top = list(range(27))                              # rows 0-2 of the 6 x 9 grid (site 53 removed)
    patch = elide(full, top)
    a, b, qa, qb = split(patch, top)
    bits = "".join(rng.choice(["0", "1"], size=full.num_qubits))
    t = time.perf_counter()
    got = amplitudes(patch, [bits], engine="single", planner=PlannerOptions(budget_seconds=30.0, parallel=2),
                     memory_bytes=2 ** cap_log2 * 16).results[0].amplitude
    engine_s = time.perf_counter() - t
    want = complex(state_vector(a)[int("".join(bits[q] for q in qa), 2)])
    want *= complex(state_vector(b)[int("".join(bits[q] for q in qb), 2)])
    out["patch"] = {"cycles": cycles, "qubits": [a.num_qubits, b.num_qubits], "engine": [got.real, got.imag],
                    "product_of_halves": [want.real, want.imag], "engine_seconds": round(engine_s, 1),
                    "relative_difference": abs(got - want) / abs(want), "tolerance": 1e-10,
                    "agree": abs(got - want) <= 1e-10 * abs(want)}
    circ = w53(check_cycles)
    s = build_structure(circ)
    plans = [find_plan(s, PlannerOptions(budget_seconds=budget, max_elements=2.0 ** (cap_log2 - 2 - k),
                                         parallel=2, seed=seed)) for k, seed in ((0, 1), (4, 2))]
    rows = []
    for dtype, tol in (("complex128", 1e-10), ("complex64", 1e-5)):
        arrays = tensor_arrays(s, circ, bits, dtype=dtype)
        values, seconds = [], []
        for plan in plans:
            t = time.perf_counter()
            values.append(contract_scalar(plan.tree(s), arrays))
            seconds.append(round(time.perf_counter() - t, 1))
        diff = abs(values[0] - values[1]) / abs(values[0])
        row = {"dtype": dtype, "amplitudes": [[v.real, v.imag] for v in values], "seconds": seconds,
               "relative_difference": diff, "tolerance": tol, "agree": diff <= tol}
        if rows:                                        # each plan's complex64 value against its complex128 one
            row["relative_to_complex128"] = [abs(complex(*v) - complex(*w)) / abs(complex(*w))
                                             for v, w in zip(row["amplitudes"], rows[0]["amplitudes"])]
        rows.append(row)
    out["two_plans"] = {"cycles": check_cycles, "slices": [p.nslices for p in plans],
                        "sliced_indices": [list(p.sliced) for p in plans],
                        "log10_madds": [round(math.log10(p.madds), 3) for p in plans], "runs": rows}
    return out


def part_estimate(budget: float) -> dict:
    from contraction.circuits.textbook import qft, quantum_volume, ripple_carry_adder
    from contraction.errors import MemoryLimitError
    from contraction.execution.calibration import measure
    from contraction.planning.estimate import estimate
    from contraction.planning.options import PlannerOptions

    rate = measure()
    rows = []
    for name, circ in [("quantum_volume_32x32", quantum_volume(32, 32, seed=1)), ("qft_63", qft(63)),
                       ("qft_63_after_hadamards", qft(63, hadamards_first=True)),
                       ("ripple_carry_adder_45", ripple_carry_adder(22))]:
        t = time.perf_counter()
        try:
            est = estimate(circ, 1, engine="single", rate=rate, planner=PlannerOptions(budget_seconds=budget, parallel=2))
            row = {"madds": est.madds, "predicted_s": est.predicted_seconds, "slices": est.slices}
        except MemoryLimitError as exc:
            row = {"not_feasible": str(exc)}
        row.update(circuit=name, qubits=circ.num_qubits, gates=len(circ.gates),
                   seconds=round(time.perf_counter() - t, 1), budget_s=budget)
        row["within_budget_plus_10pct"] = row["seconds"] <= 1.1 * budget
        rows.append(row)
    return {"part": "e_estimate_bound", "cases": rows}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--parts", default="pace")
    ap.add_argument("--budget", type=float, default=300.0)
    ap.add_argument("--cycles", type=int, default=12)
    ap.add_argument("--cap-log2", type=int, default=30)
    ap.add_argument("--estimate-budget", type=float, default=60.0)
    ap.add_argument("--batch", type=int, default=64, help="part b: bitstrings in the batch")
    ap.add_argument("--run-batch", action="store_true", help="part b: contract the batch too")
    ap.add_argument("--stacked-budget", type=float, default=90.0,
                    help="part b: seconds of each of two searches (one amplitude; the batch's stacked cost); 0: none")
    ap.add_argument("--amplitude", type=float, nargs=2, default=None,
                    help="part b: part a's amplitude of |0...0> (real, imaginary) to compare with")
    ap.add_argument("--check-cycles", type=int, default=10,
                    help="part c: cycles of the circuit whose two plans must agree (12 takes four runs of "
                         "15-40 min; compare two part a runs with --load-plan instead)")
    ap.add_argument("--check-budget", type=float, default=60.0, help="part c: planning budget of each plan")
    ap.add_argument("--no-baseline", action="store_true", help="part p without the quimb + cotengra baseline")
    ap.add_argument("--save-plan", default=None, help="write part p's plan (JSON) to this file")
    ap.add_argument("--load-plan", default=None, help="part a with this stored plan instead of part p's")
    ap.add_argument("--amp-workers", type=int, default=max(1, os.cpu_count() or 1),
                    help="part a: contraction processes sharing the cap, one BLAS thread each (default: one per "
                         "core, as the command line runs; 1: one process on the machine's BLAS threads)")
    ap.add_argument("--target-log2", type=float, default=None,
                    help="largest intermediate of the plan (default: an eighth of the cap per process of part a)")
    args = ap.parse_args()
    plan = None
    if args.load_plan:
        from contraction.planning.plan import Plan

        plan = Plan.from_json(open(args.load_plan).read())
    target_log2 = args.target_log2 or args.cap_log2 - 3 - math.log2(args.amp_workers)
    if "p" in args.parts or (("a" in args.parts or "b" in args.parts) and plan is None):
        doc, plan = part_plan(args.cycles, args.budget, args.cap_log2, baseline=not args.no_baseline,
                              target_log2=target_log2)
        emit(doc)
        if args.save_plan:
            with open(args.save_plan, "w") as f:
                f.write(plan.to_json())
    if "a" in args.parts:
        emit(part_amplitude(args.cycles, plan, args.cap_log2, args.amp_workers))
    if "b" in args.parts:
        emit(part_batch(args.cycles, args.budget, args.cap_log2, target_log2, plan, args.batch, args.run_batch,
                        complex(*args.amplitude) if args.amplitude else None, args.stacked_budget))
    if "c" in args.parts:
        emit(part_checks(args.cycles, args.check_cycles, args.cap_log2, args.check_budget))
    if "e" in args.parts:
        emit(part_estimate(args.estimate_budget))


if __name__ == "__main__":
    main()
