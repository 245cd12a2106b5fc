"""Commands that analyse: ``xeb``, ``fit``, ``path``, ``path-study``."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from contraction.analysis.cayley import cayley_path, path_probabilities
from contraction.analysis.rational_fit import (
    extrapolation_study, path_probabilities_mp, recover_path, sample_digits_needed)
from contraction.analysis.xeb import estimate_xeb, fit_depth, mixture_ks
from contraction.circuits.bitstrings import check_bitstrings, read_bitstrings
from contraction.execution.amplitudes import amplitudes
from contraction.planning.options import PlannerOptions

from ..plots import depth_fit_plot, path_plot, porter_thomas_plot, study_plot
from .common import UsageError, current_settings, load_circuit_file, memory_cap, plan_store, read_text, theta_list


def cmd_xeb(args) -> int:
    """``veramp xeb``: linear and log XEB of device samples, a mixture KS test and an optional Porter–Thomas plot."""
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    samples = read_bitstrings(read_text(args.samples))
    if not samples:
        raise UsageError(f"{args.samples} holds no bitstrings")
    run = amplitudes(circuit, samples, planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                     plan_store=plan_store(settings), memory_bytes=settings.memory_bytes)
    probs = [r.probability for r in run.results]
    res = estimate_xeb(probs, circuit.num_qubits, bootstrap=args.bootstrap, seed=args.seed)
    doc = res.to_dict()
    doc["engine"] = run.engine

    ks, ks_p = mixture_ks(probs, circuit.num_qubits, min(1.0, max(0.0, res.linear_xeb)))
    doc["mixture_ks_statistic"], doc["mixture_ks_pvalue"] = ks, ks_p
    if args.plot:

        fmt = "svg" if args.plot.lower().endswith(".svg") else "png"
        image = porter_thomas_plot(probs, circuit.num_qubits, res.linear_xeb, fmt)
        try:
            Path(args.plot).write_bytes(image)
        except OSError as exc:
            raise UsageError(f"cannot write {args.plot}: {exc.strerror}") from None
    if args.format == "json":
        print(json.dumps(doc))
    else:
        print(f"samples                  {res.samples}")
        print(f"linear XEB               {res.linear_xeb:.6f} +/- {res.linear_xeb_stderr:.6f} "
              f"(model {res.linear_xeb_stderr_model:.6f})")
        print(f"95% bootstrap interval   [{res.bootstrap_low:.6f}, {res.bootstrap_high:.6f}]")
        if res.log_xeb is not None:
            print(f"log XEB                  {res.log_xeb:.6f} +/- {res.log_xeb_stderr:.6f}")
        else:
            print("log XEB                  undefined (a sample has probability 0)")
        print(f"N·p vs F-mixture (KS)    D = {ks:.4f}, p-value = {ks_p:.3g}")
    return 0


def cmd_fit(args) -> int:
    """``veramp fit``: fit fidelity against cycles from a table, with extrapolations and an optional plot."""
    rows = []
    for n, line in enumerate(read_text(args.table).splitlines(), 1):
        if not line.strip() or line.lstrip().startswith("#") or line.lower().startswith("cycles"):
            continue
        try:
            d, f, se = (float(v) for v in line.replace(",", " ").split()[:3])
        except ValueError:
            raise UsageError(f"{args.table}:{n}: expected 'cycles, fidelity, stderr'") from None
        rows.append((d, f, se))
    if len(rows) < 3:
        raise UsageError("a depth fit needs at least three (cycles, fidelity, stderr) rows")
    d, f, se = (list(x) for x in zip(*rows))
    fit = fit_depth(d, f, se)
    doc = fit.to_dict()
    doc["extrapolations"] = {str(c): list(fit.predict(c)) for c in args.extrapolate or []}
    if args.plot:

        Path(args.plot).write_bytes(depth_fit_plot(d, f, se, fit, "svg" if args.plot.endswith(".svg") else "png"))
    print(json.dumps(doc))
    return 0


def cmd_path(args) -> int:
    """``veramp path``: p(θ) along the Cayley path, optionally recovered from samples at other nodes with error bounds."""
    settings = current_settings()
    circuit = load_circuit_file(args.circuit)
    [bits] = check_bitstrings([args.bitstring], circuit.num_qubits)
    path = cayley_path(circuit, args.seed)
    thetas = theta_list(args.thetas)
    opts = dict(planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes), plan_store=plan_store(settings),
                memory_bytes=memory_cap(args, settings), workers=settings.workers)
    probs, engine = path_probabilities(path, bits, thetas, **opts)
    doc = {"bitstring": bits, "seed": args.seed, "engine": engine, "gate_dimension_sum": path.degree_bound,
           "fitted_degree": 2 * path.degree_bound, "theta": thetas, "probability": probs.tolist()}
    recovery = None
    if args.fit_nodes:
        nodes = theta_list(args.fit_nodes)
        targets = theta_list(args.targets)
        digits = None
        if args.precision == "mp":
            # as many digits as the denominator's range over the nodes and targets takes away, or more
            digits = max(args.dps or 0, sample_digits_needed(path, list(nodes) + list(targets)))
            samples = path_probabilities_mp(path, bits, nodes, digits)
        else:
            samples = path_probabilities(path, bits, nodes, **opts)[0]
        recovery = recover_path(path, nodes, samples, targets, errors=args.errors, noise=args.noise,
                                max_relative_error=args.max_relative_error, sample_digits=digits)
        recovery.exact = path_probabilities(path, bits, targets, **opts)[0].tolist()
        recovery.actual_error = [None if a is None else abs(a - b) for a, b in zip(recovery.recovered, recovery.exact)]
        doc["recovery"] = recovery.to_dict()
    if args.plot:

        Path(args.plot).write_bytes(path_plot(thetas, probs, bits, recovery,
                                              "svg" if args.plot.endswith(".svg") else "png"))
    if args.format == "json":
        print(json.dumps(doc))
        return 0
    print(f"{'theta':>12}  {'p(theta)':>24}")
    for t, p in zip(thetas, probs):
        print(f"{t:>12.6g}  {p:>24.16e}")
    if recovery is not None:
        print(f"# recovery: numerator degree {recovery.fitted_degree} (2 x sum d_k = 2 x {recovery.gate_dimension_sum}), "
              f"{len(recovery.nodes)} nodes on [{min(recovery.nodes):g}, {max(recovery.nodes):g}], "
              f"{recovery.precision_bits}-bit ball arithmetic, sample error: {recovery.sample_error}"
              + (f", corrupted samples found: {recovery.corrupted}" if args.errors else ""))
        print(f"{'theta':>12}  {'recovered':>24}  {'error bound':>12}  {'computed':>24}  {'actual error':>13}")
        for t, v, e, x, a, why in zip(recovery.theta, recovery.recovered, recovery.error_bound, recovery.exact,
                                      recovery.actual_error, recovery.declined):
            if v is None:
                print(f"{t:>12.6g}  {'declined':>24}  {'':>12}  {x:>24.16e}  {'':>13}  # {why}")
            else:
                print(f"{t:>12.6g}  {v:>24.16e}  {e:>12.3e}  {x:>24.16e}  {a:>13.3e}")
    print(f"# engine {engine}, seed {args.seed}", file=sys.stderr)
    return 0


def cmd_path_study(args) -> int:
    """``veramp path-study``: recovery of p(target) from noisy samples on [0, δ] over a table of δ and noise."""
    circuit = load_circuit_file(args.circuit)
    [bits] = check_bitstrings([args.bitstring], circuit.num_qubits)
    path = cayley_path(circuit, args.seed)
    deltas, noises = theta_list(args.deltas), theta_list(args.noise)
    exact, cells = extrapolation_study(path, bits, deltas, noises, target=args.target, seed=args.seed)
    doc = {"bitstring": bits, "seed": args.seed, "target": args.target, "probability": exact,
           "fitted_degree": 2 * path.degree_bound, "gate_dimension_sum": path.degree_bound,
           "cells": [c.__dict__ for c in cells]}
    if args.plot:

        Path(args.plot).write_bytes(study_plot(exact, cells, args.target, "svg" if args.plot.endswith(".svg") else "png"))
    if args.format == "json":
        print(json.dumps(doc))
        return 0
    print(f"# p({args.target:g}) computed directly: {exact:.16e}; numerator degree {2 * path.degree_bound}")
    print(f"{'delta':>8}  {'noise':>8}  {'recovered':>24}  {'error bound':>12}  {'actual error':>12}")
    for c in cells:
        if c.recovered is None:
            print(f"{c.delta:>8.4g}  {c.noise:>8.2g}  {'declined':>24}  {'':>12}  {'':>12}  # {c.declined}")
        else:
            print(f"{c.delta:>8.4g}  {c.noise:>8.2g}  {c.recovered:>24.16e}  {c.error_bound:>12.3e}  "
                  f"{c.actual_error:>12.3e}")
    return 0
