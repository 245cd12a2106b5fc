"""Commands that compute: ``amplitudes``, ``block``, ``marginal``, ``estimate``, ``plan``, ``calibrate``."""

from __future__ import annotations

import csv
import io
import json
import sys

from contraction.errors import MemoryLimitError
from contraction.execution.amplitudes import amplitudes
from contraction.execution.blocks import block_amplitudes, marginal_probabilities
from contraction.execution.calibration import load_or_measure
from contraction.execution.dask_runner import DaskRunner
from contraction.execution.slices import keep_freed_memory
from contraction.network.builder import build_structure
from contraction.planning.capped_plans import network_plan, plan_fit_elements
from contraction.planning.estimate import estimate
from contraction.planning.options import PlannerOptions
from contraction.planning.progress import observe_searches

from .common import (
    ProgressBar, bitstrings_from_args, current_settings, fmt_complex, load_circuit_file, local_workers, memory_cap,
    plan_store, qubit_list, stored_rate)


def cmd_amplitudes(args) -> int:
    """``veramp amplitudes``: exact amplitudes in input order (table, JSON or CSV), locally or on the configured Dask
    cluster."""
    keep_freed_memory()                  # this process exits after the command: keep what it frees
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    budget = args.budget if args.budget is not None else settings.plan_budget_seconds
    runner = None
    if settings.dask_scheduler:
        runner = DaskRunner(settings.dask_scheduler)
    bar = ProgressBar(sys.stderr.isatty())
    try:
        with observe_searches(bar.search):
            run = amplitudes(circuit, bitstrings_from_args(args), dtype=args.dtype, engine=args.engine,
                             planner=PlannerOptions(budget_seconds=budget, parallel=settings.plan_processes),
                             plan_store=plan_store(settings), memory_bytes=memory_cap(args, settings),
                             workers=settings.workers, progress=bar, rate=stored_rate(settings),
                             open_qubits=qubit_list(args.open, circuit.num_qubits) if args.open else (),
                             runner=runner)
    finally:
        if runner is not None:
            runner.close()
    if args.format == "json":
        doc = {
            "circuit": {"num_qubits": circuit.num_qubits, "gates": len(circuit.gates),
                        "circuit_id": circuit.circuit_id, "architecture_id": circuit.architecture_id},
            "engine": run.engine, "reason": run.reason, "dtype": run.dtype,
            "batch": run.batch, "chunks": run.chunks, "predicted_seconds": run.predicted_seconds,
            "predictions": run.predictions, "wall_seconds": round(run.wall_seconds, 6),
            "results": [{"bitstring": r.bitstring, "amplitude": [r.amplitude.real, r.amplitude.imag],
                         "probability": r.probability} for r in run.results],
        }
        if run.plan is not None:
            doc["plan"] = {"madds": run.plan.madds, "width": run.plan.width, "slices": run.plan.nslices,
                           "stored": run.plan_cached}
        print(json.dumps(doc))
    elif args.format == "csv":
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["bitstring", "amplitude_re", "amplitude_im", "probability"])
        for r in run.results:
            w.writerow([r.bitstring, repr(r.amplitude.real), repr(r.amplitude.imag), repr(r.probability)])
        sys.stdout.write(buf.getvalue())
    else:
        width = max(9, circuit.num_qubits)
        print(f"{'bitstring':<{width}}  {'amplitude':>48}  {'probability':>24}")
        for r in run.results:
            print(f"{r.bitstring:<{width}}  {fmt_complex(r.amplitude):>48}  {r.probability:>24.16e}")
        print(f"# {len(run.results)} amplitude(s), engine {run.engine} ({run.reason}), {run.dtype}, "
              f"{run.wall_seconds:.3f} s", file=sys.stderr)
    return 0


def _print_block(args, qubits, values, header: list[str], engine: str, reason: str, seconds: float) -> None:
    """Rows of a block or marginal: index, the qubits' values (first listed qubit first), value."""
    k = len(qubits)
    rows = [(i, format(i, f"0{k}b"), v) for i, v in enumerate(values)]
    if args.format == "json":
        print(json.dumps({"qubits": list(qubits), "engine": engine, "reason": reason,
                          "wall_seconds": round(seconds, 6),
                          "values": [[v.real, v.imag] if isinstance(v, complex) else v for _, _, v in rows]}))
        return
    w = csv.writer(sys.stdout, lineterminator="\n")
    w.writerow(["index", "bits"] + header)
    for i, bits, v in rows:
        w.writerow([i, bits] + ([repr(v.real), repr(v.imag)] if isinstance(v, complex) else [repr(v)]))
    print(f"# qubits {','.join(map(str, qubits))} (first listed = first bit), engine {engine} ({reason}), "
          f"{seconds:.3f} s", file=sys.stderr)


def cmd_block(args) -> int:
    """``veramp block``: the 2^k amplitudes on k qubits with the others fixed."""
    keep_freed_memory()                  # this process exits after the command: keep what it frees
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    qubits = qubit_list(args.qubits, circuit.num_qubits)
    fixed = args.fixed if args.fixed is not None else "0" * circuit.num_qubits
    r = block_amplitudes(circuit, qubits, fixed, engine=args.engine,
                         planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                         plan_store=plan_store(settings), memory_bytes=memory_cap(args, settings),
                         rate=stored_rate(settings))
    _print_block(args, r.qubits, [complex(v) for v in r.values], ["amplitude_re", "amplitude_im"], r.engine,
                 r.reason, r.wall_seconds)
    return 0


def cmd_marginal(args) -> int:
    """``veramp marginal``: marginal probabilities on k qubits."""
    keep_freed_memory()                  # this process exits after the command: keep what it frees
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    qubits = qubit_list(args.qubits, circuit.num_qubits)
    r = marginal_probabilities(circuit, qubits, engine=args.engine,
                               planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                               plan_store=plan_store(settings), memory_bytes=memory_cap(args, settings),
                               rate=stored_rate(settings))
    _print_block(args, r.qubits, [float(v) for v in r.values], ["probability"], r.engine, r.reason, r.wall_seconds)
    return 0


def cmd_estimate(args) -> int:
    """``veramp estimate``: the predicted cost of ``--count`` amplitudes (measures the machine first if it never was)."""
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    if stored_rate(settings) is None:
        print(f"veramp: measuring this machine's rates once (about half a minute); stored in "
              f"{settings.calibration_path}", file=sys.stderr)
    rate = load_or_measure(settings.calibration_path)
    budget = args.budget if args.budget is not None else settings.plan_budget_seconds
    with observe_searches(ProgressBar(sys.stderr.isatty()).search):
        est = estimate(circuit, args.count, dtype=args.dtype, engine=args.engine, rate=rate,
                       planner=PlannerOptions(budget_seconds=budget, parallel=settings.plan_processes),
                       plan_store=plan_store(settings), memory_bytes=memory_cap(args, settings),
                       workers=local_workers(settings))
    doc = est.to_dict()
    if args.format == "json":
        print(json.dumps(doc))
    else:
        rows = [("engine", f"{est.engine} ({est.reason})"), ("qubits", est.num_qubits),
                ("count", est.count), ("dtype", est.dtype),
                ("complex multiply-adds", f"{est.madds:.4g}"), ("real FLOPs", f"{est.flops:.4g}"),
                ("largest intermediate", f"2^{est.width:.1f} elements"),
                ("peak memory", f"{est.peak_bytes / 2 ** 30:.4g} GiB (cap {est.memory_cap_bytes / 2 ** 30:.4g} GiB)"),
                ("slices", f"{est.slices} (overhead x{est.slicing_overhead:.3f})"),
                ("predicted time", f"{est.predicted_seconds:.4g} s"),
                ("plan", f"{est.plan_hash[:16]} ({'stored' if est.plan_cached else 'new'})" if est.plan_hash else "-")]
        for k, v in rows:
            print(f"{k:<24} {v}")
    return 0


def cmd_plan(args) -> int:
    """``veramp plan``: search a plan with the whole budget and keep it when it beats the stored one.
    The plan fits one worker's share of the memory cap, as ``veramp amplitudes`` and ``estimate`` run
    it (a plan for the whole cap would not serve them on two or more local workers)."""
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    store = plan_store(settings)
    structure = build_structure(circuit)
    workers = local_workers(settings)
    share = memory_cap(args, settings) / workers
    fit = plan_fit_elements(share, args.dtype)              # what network_plan lets a plan take
    before = store.get(structure.key, fit)
    options = PlannerOptions(budget_seconds=args.budget, parallel=settings.plan_processes, whole_budget=True)
    try:
        with observe_searches(ProgressBar(sys.stderr.isatty()).search):
            plan = network_plan(structure, None, options, share, args.dtype).plan
    except MemoryLimitError as exc:
        if workers == 1:
            raise
        raise MemoryLimitError(f"{exc} (the cap is shared by {workers} local workers: {share:.4g} bytes each; "
                               f"VERAMP_WORKERS sets how many)") from None
    kept = store.put(plan)
    best = store.get(structure.key, fit)
    print(json.dumps({"network_key": structure.key, "found_madds": plan.madds, "found_width": plan.width,
                      "slices": plan.nslices, "workers": workers, "memory_share_bytes": int(share),
                      "previous_madds": before.madds if before else None,
                      "stored": kept, "best_madds": best.madds if best else None}))
    return 0


def cmd_calibrate(args) -> int:
    """``veramp calibrate``: measure this machine's rates again and store them."""
    rate = load_or_measure(current_settings().calibration_path, remeasure=True)
    print(json.dumps(rate.to_dict()))
    return 0
