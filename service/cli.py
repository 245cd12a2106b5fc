"""The ``veramp`` command line.

Bad input prints one line ``veramp: error: ...`` on stderr and exits with status 2; nothing the
user types produces a traceback.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import sys
from pathlib import Path

from contraction.errors import VerampError

BITSTRING_HELP = "bitstrings are written qubit 0 first: '0110' means q0=0, q1=1, q2=1, q3=0"


class UsageError(VerampError):
    kind = "usage"


def _read_text(path: str) -> str:
    if path == "-":
        return sys.stdin.read()
    p = Path(path)
    try:
        return p.read_text()
    except FileNotFoundError:
        raise UsageError(f"no such file: {path}") from None
    except IsADirectoryError:
        raise UsageError(f"{path} is a directory, not a file") from None
    except UnicodeDecodeError:
        raise UsageError(f"{path} is not a text file") from None
    except OSError as exc:
        raise UsageError(f"cannot read {path}: {exc.strerror}") from None


def load_circuit_file(path: str):
    """Read a circuit file within the configured limits (VERAMP_MAX_QUBITS, VERAMP_MAX_GATES)."""
    from contraction.circuits.loader import load_circuit

    from .settings import get_settings

    s = get_settings()
    return load_circuit(_read_text(path), source=path, max_qubits=s.max_qubits, max_gates=s.max_gates)


def _bitstrings(args) -> list[str]:
    from contraction.circuits.bitstrings import read_bitstrings

    out = list(args.bitstring or [])
    if args.bitstrings:
        out += read_bitstrings(_read_text(args.bitstrings))
    if not out:
        raise UsageError("give bitstrings with --bitstring B (repeatable) or --bitstrings FILE")
    return out


def _fmt_complex(z: complex) -> str:
    return f"{z.real:+.16e}{z.imag:+.16e}j"


def _settings():
    from service.settings import Settings

    return Settings()


def _memory(args, settings) -> int:
    from contraction.planning.estimate import parse_bytes

    return parse_bytes(args.memory) if getattr(args, "memory", None) else settings.memory_bytes


def _plan_store(settings):
    from contraction.planning.store import DirectoryPlanStore

    try:
        return DirectoryPlanStore(settings.plan_dir)
    except OSError as exc:
        raise UsageError(f"cannot use the plan directory {settings.plan_dir}: {exc.strerror}") from None


class ProgressBar:
    """A one-line progress bar on stderr (only when stderr is a terminal or forced)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled

    def __call__(self, p) -> None:
        if not self.enabled:
            return
        width = 30
        filled = int(width * p.done / max(1, p.total))
        eta = "?" if p.eta_seconds is None else f"{p.eta_seconds:.0f}s"
        sys.stderr.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {p.done}/{p.total} tasks, ETA {eta} ")
        if p.done >= p.total:
            sys.stderr.write("\n")
        sys.stderr.flush()


def _stored_rate(settings):
    """The stored calibration, or None (nominal rates) — never a silent calibration run."""
    from contraction.planning.rates import read_rate

    return read_rate(settings.calibration_path)


def _qubit_list(text: str, n: int) -> tuple[int, ...]:
    """'0,3,5' or '0-3,7' -> qubit numbers, checked against the circuit."""
    from contraction.errors import VerampError

    out: list[int] = []
    try:
        for part in text.split(","):
            if "-" in part:
                a, b = part.split("-", 1)
                out.extend(range(int(a), int(b) + 1))
            else:
                out.append(int(part))
    except ValueError:
        raise VerampError(f"cannot read qubits from {text!r} (e.g. 0,3,5 or 0-3)") from None
    bad = [q for q in out if not 0 <= q < n]
    if bad or len(set(out)) != len(out) or not out:
        raise VerampError(f"qubits {text!r} must be distinct numbers in 0..{n - 1}")
    return tuple(out)


def _print_block(args, qubits, values, header: list[str], engine: str, reason: str, seconds: float) -> None:
    """Rows of a block or marginal: index, the qubits' values (first listed qubit first), value."""
    k = len(qubits)
    rows = [(i, format(i, f"0{k}b"), v) for i, v in enumerate(values)]
    if args.format == "json":
        print(json.dumps({"qubits": list(qubits), "engine": engine, "engine_reason": reason,
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
    from contraction.execution.blocks import block_amplitudes
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    qubits = _qubit_list(args.qubits, circuit.num_qubits)
    fixed = args.fixed if args.fixed is not None else "0" * circuit.num_qubits
    r = block_amplitudes(circuit, qubits, fixed, engine=args.engine,
                         planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                         plan_store=_plan_store(settings), memory_bytes=_memory(args, settings),
                         rate=_stored_rate(settings))
    _print_block(args, r.qubits, [complex(v) for v in r.values], ["amplitude_re", "amplitude_im"], r.engine,
                 r.reason, r.wall_seconds)
    return 0


def cmd_marginal(args) -> int:
    from contraction.execution.blocks import marginal_probabilities
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    qubits = _qubit_list(args.qubits, circuit.num_qubits)
    r = marginal_probabilities(circuit, qubits, engine=args.engine,
                               planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                               plan_store=_plan_store(settings), memory_bytes=_memory(args, settings),
                               rate=_stored_rate(settings))
    _print_block(args, r.qubits, [float(v) for v in r.values], ["probability"], r.engine, r.reason, r.wall_seconds)
    return 0


def _theta_list(text: str) -> list[float]:
    """'0:1:21' (21 points from 0 to 1) or '0.1,0.5,1' -> values."""
    import numpy as np

    try:
        if ":" in text:
            a, b, k = text.split(":")
            if int(k) < 1 or int(k) > 100_000:
                raise ValueError
            return [float(v) for v in np.linspace(float(a), float(b), int(k))]
        return [float(v) for v in text.split(",")]
    except ValueError:
        raise VerampError(f"cannot read theta values from {text!r} (e.g. 0:1:21 or 0.1,0.5,1)") from None


def cmd_path(args) -> int:
    from contraction.analysis.cayley import cayley_path, path_probabilities
    from contraction.analysis.rational_fit import path_probabilities_mp, recover_path
    from contraction.circuits.bitstrings import check_bitstrings
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    [bits] = check_bitstrings([args.bitstring], circuit.num_qubits)
    path = cayley_path(circuit, args.seed)
    thetas = _theta_list(args.thetas)
    opts = dict(planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes), plan_store=_plan_store(settings),
                memory_bytes=_memory(args, settings), workers=settings.workers)
    probs, engine = path_probabilities(path, bits, thetas, **opts)
    doc = {"bitstring": bits, "seed": args.seed, "engine": engine, "gate_dimension_sum": path.degree_bound,
           "fitted_degree": 2 * path.degree_bound, "theta": thetas, "probability": probs.tolist()}
    recovery = None
    if args.fit_nodes:
        nodes = _theta_list(args.fit_nodes)
        targets = _theta_list(args.targets)
        if args.precision == "mp":
            samples = [float(v) for v in path_probabilities_mp(path, bits, nodes, args.dps)]
        else:
            samples = path_probabilities(path, bits, nodes, **opts)[0]
        recovery = recover_path(path, nodes, samples, targets, errors=args.errors, noise=args.noise,
                                max_relative_error=args.max_relative_error)
        recovery.exact = path_probabilities(path, bits, targets, **opts)[0].tolist()
        recovery.actual_error = [None if a is None else abs(a - b) for a, b in zip(recovery.recovered, recovery.exact)]
        doc["recovery"] = recovery.to_dict()
    if args.plot:
        from service.plots import path_plot

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
    from contraction.analysis.cayley import cayley_path
    from contraction.analysis.rational_fit import extrapolation_study
    from contraction.circuits.bitstrings import check_bitstrings

    circuit = load_circuit_file(args.circuit)
    [bits] = check_bitstrings([args.bitstring], circuit.num_qubits)
    path = cayley_path(circuit, args.seed)
    deltas, noises = _theta_list(args.deltas), _theta_list(args.noise)
    exact, cells = extrapolation_study(path, bits, deltas, noises, target=args.target, seed=args.seed)
    doc = {"bitstring": bits, "seed": args.seed, "target": args.target, "probability": exact,
           "fitted_degree": 2 * path.degree_bound, "gate_dimension_sum": path.degree_bound,
           "cells": [c.__dict__ for c in cells]}
    if args.plot:
        from service.plots import study_plot

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


def cmd_amplitudes(args) -> int:
    from contraction.execution.amplitudes import amplitudes
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    budget = args.budget if args.budget is not None else settings.plan_budget_seconds
    runner = None
    if settings.dask_scheduler:
        from contraction.execution.dask_runner import DaskRunner

        runner = DaskRunner(settings.dask_scheduler)
    try:
        run = amplitudes(circuit, _bitstrings(args), dtype=args.dtype, engine=args.engine,
                         planner=PlannerOptions(budget_seconds=budget, parallel=settings.plan_processes), plan_store=_plan_store(settings),
                         memory_bytes=_memory(args, settings), workers=settings.workers,
                         progress=ProgressBar(sys.stderr.isatty()), rate=_stored_rate(settings),
                         open_qubits=_qubit_list(args.open, circuit.num_qubits) if args.open else (),
                         runner=runner)
    finally:
        if runner is not None:
            runner.close()
    if args.format == "json":
        doc = {
            "circuit": {"num_qubits": circuit.num_qubits, "gates": len(circuit.gates),
                        "content_hash": circuit.content_hash, "structure_hash": circuit.structure_hash},
            "engine": run.engine, "engine_reason": run.reason, "dtype": run.dtype,
            "batch": run.batch, "chunks": run.chunks, "predicted_seconds": run.predicted_seconds,
            "predictions": run.predictions, "wall_seconds": round(run.wall_seconds, 6),
            "results": [{"bitstring": r.bitstring, "amplitude": [r.amplitude.real, r.amplitude.imag],
                         "probability": r.probability} for r in run.results],
        }
        if run.plan is not None:
            doc["plan"] = {"madds": run.plan.madds, "width": run.plan.width, "slices": run.plan.nslices}
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
            print(f"{r.bitstring:<{width}}  {_fmt_complex(r.amplitude):>48}  {r.probability:>24.16e}")
        print(f"# {len(run.results)} amplitude(s), engine {run.engine} ({run.reason}), {run.dtype}, "
              f"{run.wall_seconds:.3f} s", file=sys.stderr)
    return 0


def cmd_estimate(args) -> int:
    from contraction.execution.calibration import load_or_measure
    from contraction.planning.estimate import estimate
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    rate = load_or_measure(settings.calibration_path)
    budget = args.budget if args.budget is not None else settings.plan_budget_seconds
    est = estimate(circuit, args.bitstrings, dtype=args.dtype, engine=args.engine, rate=rate,
                   planner=PlannerOptions(budget_seconds=budget, parallel=settings.plan_processes), plan_store=_plan_store(settings),
                   memory_bytes=_memory(args, settings))
    doc = est.to_dict()
    if args.format == "json":
        print(json.dumps(doc))
    else:
        rows = [("engine", f"{est.engine} ({est.reason})"), ("qubits", est.num_qubits),
                ("bitstrings", est.bitstrings), ("dtype", est.dtype),
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
    from contraction.execution.amplitudes import network_plan
    from contraction.network.builder import build_structure
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    store = _plan_store(settings)
    structure = build_structure(circuit)
    before = store.get(structure.key)
    options = PlannerOptions(budget_seconds=args.budget, parallel=settings.plan_processes)
    plan, _tree, _hit = network_plan(structure, None, options, _memory(args, settings), args.dtype)
    kept = store.put(plan)
    best = store.get(structure.key)
    print(json.dumps({"network_key": structure.key, "found_madds": plan.madds, "found_width": plan.width,
                      "slices": plan.nslices, "previous_madds": before.madds if before else None,
                      "stored": kept, "best_madds": best.madds if best else None}))
    return 0


def cmd_calibrate(args) -> int:
    from contraction.execution.calibration import load_or_measure

    rate = load_or_measure(_settings().calibration_path, remeasure=True)
    print(json.dumps(rate.to_dict()))
    return 0


def cmd_serve(args) -> int:
    import logging

    import uvicorn

    from service.app import create_app

    overrides = {}
    if args.data_dir:
        overrides["data_dir"] = Path(args.data_dir)
    from service.settings import Settings

    settings = Settings(**overrides)
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    from service.db import DatabaseError, check_sqlite_file

    try:
        note = check_sqlite_file(settings.sqlalchemy_url)
    except DatabaseError as exc:
        raise UsageError(f"refusing to start: {exc}") from None
    if note:
        logging.getLogger("veramp.api").warning(json.dumps({"event": "database", "note": note}))
    host = args.host or settings.host
    if host not in ("127.0.0.1", "localhost", "::1") and not settings.token_set():
        if args.require_tokens:
            raise UsageError(f"refusing to serve on {host} without bearer tokens (set VERAMP_TOKENS or "
                             "VERAMP_TOKENS_FILE, or drop --require-tokens)")
        logging.getLogger("veramp.api").warning(
            "WARNING: serving on %s without bearer tokens: anyone who can reach this address can submit work "
            "and read every job; set VERAMP_TOKENS (or use --require-tokens to refuse this)", host)
    uvicorn.run(create_app(settings, database_checked=True), host=host, port=args.port or settings.port, log_level="warning",
                timeout_graceful_shutdown=5)
    return 0


def cmd_health(args) -> int:
    import httpx

    url = (args.url or f"http://127.0.0.1:{_settings().port}").rstrip("/") + "/v1/health"
    try:
        ok = httpx.get(url, timeout=args.timeout).status_code == 200
    except httpx.HTTPError as exc:
        print(f"veramp: unhealthy: {url}: {exc}", file=sys.stderr)
        return 1
    if not ok:
        print(f"veramp: unhealthy: {url}", file=sys.stderr)
    return 0 if ok else 1


def cmd_xeb(args) -> int:
    from contraction.analysis.xeb import estimate_xeb
    from contraction.circuits.bitstrings import read_bitstrings
    from contraction.execution.amplitudes import amplitudes
    from contraction.planning.search import PlannerOptions

    settings = _settings()
    circuit = load_circuit_file(args.circuit)
    samples = read_bitstrings(_read_text(args.samples))
    if not samples:
        raise UsageError(f"{args.samples} holds no bitstrings")
    run = amplitudes(circuit, samples, planner=PlannerOptions(budget_seconds=settings.plan_budget_seconds, parallel=settings.plan_processes),
                     plan_store=_plan_store(settings), memory_bytes=settings.memory_bytes)
    probs = [r.probability for r in run.results]
    res = estimate_xeb(probs, circuit.num_qubits, bootstrap=args.bootstrap, seed=args.seed)
    doc = res.to_dict()
    doc["engine"] = run.engine
    from contraction.analysis.xeb import mixture_ks

    ks, ks_p = mixture_ks(probs, circuit.num_qubits, min(1.0, max(0.0, res.linear_xeb)))
    doc["mixture_ks_statistic"], doc["mixture_ks_pvalue"] = ks, ks_p
    if args.plot:
        from service.plots import porter_thomas_plot

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


def cmd_submit(args) -> int:
    import os

    from contraction.circuits.bitstrings import read_bitstrings
    from service.client import Client, ServiceError

    text = _read_text(args.circuit)
    bits = read_bitstrings(_read_text(args.bitstrings))
    circuit = {"qasm": text} if not text.lstrip().startswith("{") else {"document": json.loads(text)}
    token = args.token or os.environ.get("VERAMP_TOKEN")
    try:
        with Client(args.url, token=token, retries=args.retries) as cl:
            reply = cl.amplitudes(bits, **{("qasm" if "qasm" in circuit else "document"): next(iter(circuit.values()))},
                                  dtype=args.dtype)
            if "job_id" in reply:
                bar = ProgressBar(sys.stderr.isatty())

                class _P:  # adapt job rows to the progress bar's fields
                    def __init__(self, j):
                        self.done, self.total, self.eta_seconds = j["done"], j["total"], j["eta_seconds"]

                job = cl.wait(reply["job_id"], on_progress=lambda j: bar(_P(j)))
                if job["status"] != "succeeded":
                    raise UsageError(f"job {job['job_id']} {job['status']}: {job.get('error') or ''}".strip())
                rows = list(cl.results(job["job_id"]))
            else:
                rows = reply["results"]
    except ServiceError as exc:
        raise UsageError(f"service answered {exc}") from None
    except httpx_errors() as exc:
        raise UsageError(f"cannot reach {args.url}: {exc}") from None
    if args.format == "json":
        print(json.dumps({"results": [{k: r[k] for k in ("bitstring", "amplitude", "probability")} for r in rows]}))
    else:
        print("bitstring,amplitude_re,amplitude_im,probability")
        for r in rows:
            print(f"{r['bitstring']},{r['amplitude'][0]!r},{r['amplitude'][1]!r},{r['probability']!r}")
    return 0


def httpx_errors():
    import httpx

    return httpx.TransportError


def cmd_fit(args) -> int:
    from contraction.analysis.xeb import fit_depth

    rows = []
    for n, line in enumerate(_read_text(args.table).splitlines(), 1):
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
        from service.plots import depth_fit_plot

        Path(args.plot).write_bytes(depth_fit_plot(d, f, se, fit, "svg" if args.plot.endswith(".svg") else "png"))
    print(json.dumps(doc))
    return 0


def cmd_convert(args) -> int:
    from contraction.circuits.json_document import write_json
    from contraction.circuits.qasm_writer import write_qasm3

    circuit = load_circuit_file(args.circuit)
    text = write_json(circuit, indent=None) + "\n" if args.to == "json" else write_qasm3(circuit)
    _write_out(args.output, text)
    return 0


def cmd_generate(args) -> int:
    from contraction.circuits.json_document import write_json
    from contraction.circuits.qasm_writer import write_qasm3
    from contraction.circuits.random_instances import grid_architecture, random_instance

    try:
        rows, cols = (int(x) for x in args.grid.lower().split("x"))
    except ValueError:
        raise UsageError(f"--grid takes ROWSxCOLS, e.g. 5x6; got {args.grid!r}") from None
    removed = frozenset(args.remove or [])
    arch = grid_architecture(rows, cols, args.cycles, args.pattern, removed)
    circuit = random_instance(arch, args.seed, args.gates)
    text = write_json(circuit) + "\n" if args.format == "json" else write_qasm3(circuit)
    _write_out(args.output, text)
    return 0


def _write_out(path: str | None, text: str) -> None:
    if path in (None, "-"):
        sys.stdout.write(text)
    else:
        try:
            Path(path).write_text(text)
        except OSError as exc:
            raise UsageError(f"cannot write {path}: {exc.strerror}") from None


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, as for every other bad input
        self.exit(2, f"veramp: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="veramp", description="Exact amplitudes and XEB fidelities for random circuits.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    a = sub.add_parser("amplitudes", help="exact amplitudes <x|C|0...0>",
                       description="Exact amplitudes <x|C|0...0> for the given bitstrings. " + BITSTRING_HELP,
                       epilog=BITSTRING_HELP)
    a.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    a.add_argument("--bitstring", "-b", action="append", metavar="B", help="a bitstring (repeatable)")
    a.add_argument("--bitstrings", metavar="FILE", help="file with one bitstring per line")
    a.add_argument("--dtype", choices=["complex128", "complex64"], default="complex128")
    a.add_argument("--engine", choices=["auto", "statevector", "batch", "single"], default="auto")
    a.add_argument("--format", choices=["table", "json", "csv"], default="table")
    a.add_argument("--budget", type=float, metavar="SECONDS",
                   help="time budget for finding a contraction order (default: VERAMP_PLAN_BUDGET_SECONDS, 5)")
    a.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB (default VERAMP_MEMORY_BYTES)")
    a.add_argument("--open", metavar="QUBITS",
                   help="leave these qubits open (e.g. 0-3): bitstrings that agree on all other qubits "
                        "share one contraction")
    a.set_defaults(func=cmd_amplitudes)

    bl = sub.add_parser("block", help="all 2^k amplitudes on k qubits, the other qubits fixed",
                        description="All 2^k amplitudes on the given qubits with the others fixed, from one "
                                    "contraction. Row i: the qubits' values are the binary digits of i, the first "
                                    "listed qubit first.")
    bl.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    bl.add_argument("--qubits", required=True, metavar="QUBITS", help="open qubits, e.g. 0-3 or 5,2,7")
    bl.add_argument("--fixed", metavar="BITS", help="n-bit string for the other qubits (default all 0)")
    bl.add_argument("--engine", choices=["auto", "statevector", "batch", "single"], default="auto")
    bl.add_argument("--format", choices=["csv", "json"], default="csv")
    bl.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB")
    bl.set_defaults(func=cmd_block)

    mg = sub.add_parser("marginal", help="marginal probabilities on k qubits",
                        description="P(y) on the given qubits, summed over all other qubits. Row i: the "
                                    "qubits' values are the binary digits of i, the first listed qubit first.")
    mg.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    mg.add_argument("--qubits", required=True, metavar="QUBITS", help="measured qubits, e.g. 0-3 or 5,2,7")
    mg.add_argument("--engine", choices=["auto", "statevector", "network"], default="auto")
    mg.add_argument("--format", choices=["csv", "json"], default="csv")
    mg.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB")
    mg.set_defaults(func=cmd_marginal)

    pa = sub.add_parser("path", help="p(theta) along the Cayley path from the circuit to a Haar deformation",
                        description="Every gate C_k becomes C_k f(theta h_k), f the Cayley transform and h_k the "
                                    "inverse transform of a seeded Haar-random H_k: theta=0 is the circuit, theta=1 "
                                    "the circuit with gates C_k H_k. Optionally recover p from samples at other "
                                    "nodes (weighted least squares of N/D in ball arithmetic with error bounds; Berlekamp–Welch with "
                                    "--errors).")
    pa.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    pa.add_argument("--bitstring", "-b", required=True, metavar="B")
    pa.add_argument("--seed", type=int, default=0, help="seed of the Haar deformations")
    pa.add_argument("--thetas", default="0:1:21", help="'a:b:k' (k points) or a list (default 0:1:21)")
    pa.add_argument("--fit-nodes", metavar="THETAS", help="sample p here and recover it at --targets")
    pa.add_argument("--targets", default="1", metavar="THETAS", help="where to evaluate the recovery (default 1)")
    pa.add_argument("--errors", type=int, default=0, help="samples that may be corrupted (Berlekamp–Welch)")
    pa.add_argument("--noise", type=float, metavar="EPS",
                    help="relative noise of the samples, for the error bounds (default: double rounding only)")
    pa.add_argument("--max-relative-error", type=float, default=0.1, metavar="R",
                    help="decline targets whose error bound exceeds this share of the value (default 0.1)")
    pa.add_argument("--precision", choices=["double", "mp"], default="double",
                    help="mp: compute the samples with an mpmath state vector (up to 8 qubits); the fit always "
                         "runs in ball arithmetic at the precision it needs")
    pa.add_argument("--dps", type=int, default=50, help="decimal digits for --precision mp")
    pa.add_argument("--plot", metavar="FILE", help="write the figure (PNG or SVG)")
    pa.add_argument("--format", choices=["table", "json"], default="table")
    pa.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB")
    pa.set_defaults(func=cmd_path)

    ps = sub.add_parser("path-study", help="how well p(1) is determined by noisy samples on [0, delta]",
                        description="For each delta and noise level: sample p at Chebyshev nodes on [0, delta], "
                                    "add seeded relative noise, recover p at the target with its error bound "
                                    "(or decline), and compare with p computed directly.")
    ps.add_argument("circuit", help="OpenQASM 2/3 or veramp JSON file ('-' for stdin)")
    ps.add_argument("--bitstring", "-b", required=True, metavar="B")
    ps.add_argument("--seed", type=int, default=0, help="seed of the Haar deformations and of the noise")
    ps.add_argument("--deltas", default="0.25,0.5,0.75,1", metavar="LIST", help="interval lengths (default 0.25,0.5,0.75,1)")
    ps.add_argument("--noise", default="1e-12,1e-9,1e-6,1e-3", metavar="LIST", help="relative noise levels")
    ps.add_argument("--target", type=float, default=1.0, help="theta to recover (default 1)")
    ps.add_argument("--format", choices=["table", "json"], default="table")
    ps.add_argument("--plot", metavar="FILE", help="write the figure (.png or .svg)")
    ps.set_defaults(func=cmd_path_study)

    e = sub.add_parser("estimate", help="cost of a run, before computing it")
    e.add_argument("circuit")
    e.add_argument("--bitstrings", type=int, default=1, metavar="K", help="number of amplitudes wanted")
    e.add_argument("--dtype", choices=["complex128", "complex64"], default="complex128")
    e.add_argument("--engine", choices=["auto", "statevector", "batch", "single"], default="auto")
    e.add_argument("--memory", metavar="SIZE", help="peak memory cap, e.g. 8GiB")
    e.add_argument("--budget", type=float, metavar="SECONDS", help="planning budget")
    e.add_argument("--format", choices=["table", "json"], default="table")
    e.set_defaults(func=cmd_estimate)

    pl = sub.add_parser("plan", help="search a contraction plan ahead of time and store it")
    pl.add_argument("circuit")
    pl.add_argument("--budget", type=float, default=60.0, metavar="SECONDS")
    pl.add_argument("--memory", metavar="SIZE")
    pl.add_argument("--dtype", choices=["complex128", "complex64"], default="complex128")
    pl.set_defaults(func=cmd_plan)

    x = sub.add_parser("xeb", help="linear and log XEB fidelity of device samples")
    x.add_argument("circuit")
    x.add_argument("--samples", required=True, metavar="FILE", help="sampled bitstrings, one per line")
    x.add_argument("--bootstrap", type=int, default=1000, help="bootstrap resamples (default 1000)")
    x.add_argument("--seed", type=int, default=0)
    x.add_argument("--format", choices=["table", "json"], default="table")
    x.add_argument("--plot", metavar="FILE", help="write the N·p histogram against Porter–Thomas (.png or .svg)")
    x.set_defaults(func=cmd_xeb)

    sb = sub.add_parser("submit", help="send a circuit and bitstrings to a running service and follow the job")
    sb.add_argument("circuit")
    sb.add_argument("--bitstrings", required=True, metavar="FILE")
    sb.add_argument("--url", default="http://127.0.0.1:8350")
    sb.add_argument("--token", help="bearer token (or VERAMP_TOKEN)")
    sb.add_argument("--retries", type=int, default=5, help="retries with exponential backoff (default 5)")
    sb.add_argument("--dtype", choices=["complex128", "complex64"], default="complex128")
    sb.add_argument("--format", choices=["json", "csv"], default="csv")
    sb.set_defaults(func=cmd_submit)

    ft = sub.add_parser("fit", help="fit XEB against cycles: F(d) = A(1-e)^d with a 95%% interval on e")
    ft.add_argument("table", help="rows 'cycles, fidelity, stderr' (CSV or whitespace)")
    ft.add_argument("--extrapolate", type=float, action="append", metavar="CYCLES")
    ft.add_argument("--plot", metavar="FILE", help="write the figure (.png or .svg)")
    ft.set_defaults(func=cmd_fit)

    sv = sub.add_parser("serve", help="run the REST service (SQLite and a local worker pool by default)")
    sv.add_argument("--host", help="listen address (VERAMP_HOST, default 127.0.0.1)")
    sv.add_argument("--port", type=int, help="port (VERAMP_PORT, default 8350)")
    sv.add_argument("--data-dir", metavar="DIR", help="database, plans and calibration (VERAMP_DATA_DIR)")
    sv.add_argument("--require-tokens", action="store_true",
                    help="refuse to serve on a non-loopback address without bearer tokens")
    sv.set_defaults(func=cmd_serve)

    hc = sub.add_parser("health", help="exit 0 when the local service answers its health route (container checks)")
    hc.add_argument("--url", help="service URL (default http://127.0.0.1:VERAMP_PORT)")
    hc.add_argument("--timeout", type=float, default=3.0)
    hc.set_defaults(func=cmd_health)

    cal = sub.add_parser("calibrate", help="re-measure this machine's rates used for time predictions")
    cal.set_defaults(func=cmd_calibrate)

    c = sub.add_parser("convert", help="write a circuit as JSON or OpenQASM 3")
    c.add_argument("circuit")
    c.add_argument("--to", choices=["json", "qasm3"], required=True)
    c.add_argument("--output", "-o", metavar="FILE")
    c.set_defaults(func=cmd_convert)

    g = sub.add_parser("generate", help="a seeded random circuit on a grid architecture")
    g.add_argument("--grid", required=True, metavar="ROWSxCOLS")
    g.add_argument("--cycles", type=int, required=True)
    g.add_argument("--gates", choices=["haar", "discrete"], default="haar")
    g.add_argument("--pattern", default="ABCDCDAB", help="order of the four grid matchings")
    g.add_argument("--remove", type=int, action="append", metavar="SITE",
                   help="grid site (row*cols+col) without a qubit (repeatable)")
    g.add_argument("--seed", type=int, default=0)
    g.add_argument("--format", choices=["qasm", "json"], default="qasm")
    g.add_argument("--output", "-o", metavar="FILE")
    g.set_defaults(func=cmd_generate)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except VerampError as exc:
        print(f"veramp: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("veramp: interrupted", file=sys.stderr)
        return 130
    except MemoryError:
        print("veramp: error: out of memory; lower the problem size or use the network engine",
              file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
