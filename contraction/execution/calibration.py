"""Machine rates used to predict wall time before anything is contracted.

A short calibration measures, on this machine and in this process configuration:

* the dense complex matrix-multiply rate (complex multiply-adds per second) — the ceiling;
* then fits, over three calibration networks of different shapes, the time model
  ``t = madds / (rate x efficiency) + writes x seconds_per_write + steps x step_overhead``
  (non-negative least squares in relative error): arithmetic at a fraction of the matmul rate,
  memory traffic for every element an intermediate writes, and a fixed cost per pairwise step;
* the state-vector engine's cost per (amplitude x gate) element update;
* for the batched and open-qubit engines, measured over predicted time of one small request each
  (their networks are not like the one-amplitude networks the model is fitted on: a batch of 16
  bitstrings of a 24-qubit QFT ran 4.8x longer than predicted without this factor).

The figures are stored as JSON and re-measured on demand (``veramp calibrate``).
"""

from __future__ import annotations

import json
import os
import statistics
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.amplitudes import amplitudes
from contraction.execution.pairwise import blas_threads
from contraction.execution.statevector import apply_gate_in_place
from contraction.network.builder import build_structure
from contraction.planning.options import PlannerOptions
from contraction.planning.rates import MachineRate, read_rate
from contraction.planning.store import MemoryPlanStore


def _median_time(fn, repeats: int) -> float:
    out = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return statistics.median(out)


def matmul_rate(n: int = 1024, repeats: int = 3, dtype=np.complex128) -> float:
    """Complex multiply-adds per second of an n x n x n matrix product."""
    rng = np.random.default_rng(0)
    a = (rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n))).astype(dtype)
    b = a.copy()
    a @ b  # warm-up
    return n ** 3 / _median_time(lambda: a @ b, repeats)


def _network_time(rows: int, cols: int, cycles: int, repeats: int, count: int = 1
                  ) -> tuple[float, float, float, int]:
    """Median wall time of a request for ``count`` amplitudes through the path requests take (stored
    plan, tree rebuild, tensor values, contraction), with the plan's madds, writes and steps."""

    c = random_instance(grid_architecture(rows, cols, cycles), seed=1)
    store = MemoryPlanStore()
    opts = PlannerOptions(budget_seconds=0.0, max_repeats=1)
    rng = np.random.default_rng(0)
    bits = ["0" * c.num_qubits] + ["".join(map(str, rng.integers(0, 2, c.num_qubits))) for _ in range(count - 1)]
    plan = amplitudes(c, bits[:1], engine="single", planner=opts, plan_store=store).plan
    t = _median_time(lambda: amplitudes(c, bits, engine="single", planner=opts, plan_store=store), repeats)
    return t, plan.madds, plan.writes, build_structure(c).num_tensors - 1


def request_overhead_seconds(repeats: int = 5, count: int = 16, one: float | None = None) -> float:
    """Seconds a request costs besides its contractions (engine choice, checks, set-up): a request
    for one amplitude of the smallest calibration network against one for ``count`` of them. The
    per-contraction model is fitted without it: counted once per step, it made one amplitude of a
    40-qubit 8-cycle grid circuit (213 steps) predicted at 2.1x its time inside a 2,000-bitstring request."""
    rows, cols, cycles, _ = CALIBRATION_NETWORKS[0]
    if one is None:                       # ``one``: that request's time when the caller measured it already
        one = _network_time(rows, cols, cycles, repeats)[0]
    many = _network_time(rows, cols, cycles, repeats, count)[0]
    per_amplitude = max(0.0, many - one) / (count - 1)
    return max(0.0, one - per_amplitude)


def _dense_pair_time(outer: int = 10, shared: int = 10, repeats: int = 3) -> tuple[float, float, float, int]:
    """An arithmetic-heavy pairwise contraction (2^outer x 2^shared times 2^shared x 2^outer)."""
    import cotengra as ctg

    left = tuple(ctg.get_symbol(i) for i in range(outer + shared))
    right = tuple(ctg.get_symbol(i) for i in range(outer, 2 * outer + shared))
    out = tuple(ix for ix in left + right if (ix in left) != (ix in right))
    sizes = {ix: 2 for ix in left + right}
    tree = ctg.ContractionTree.from_path([left, right], out, sizes, path=[(0, 1)])
    rng = np.random.default_rng(0)
    arrays = [(rng.standard_normal(2 ** len(t)) + 0j).reshape((2,) * len(t)) for t in (left, right)]
    tree.contract(arrays)
    t = _median_time(lambda: tree.contract(arrays), repeats)
    return t, float(tree.contraction_cost()), float(tree.total_write()), 1


#: calibration networks (grid rows, cols, cycles, repeats): tiny, arithmetic-heavy, wide
CALIBRATION_NETWORKS = ((3, 3, 6, 7), (4, 5, 12, 2), (5, 6, 8, 2), (4, 6, 14, 1))


def _statevector_update_time() -> float:
    """Seconds per (amplitude x gate) of the state-vector engine on a large state: 2^24 amplitudes
    updated in place block by block, the path states of 25 qubits and more take. (Measured at 30
    qubits: 1.15e-8 s; the copying path at 20 qubits gave 3e-8 s and made the prediction for a
    30-qubit run 2.6x too high.)"""

    n = 24
    psi = np.zeros((2,) * n, dtype=np.complex128)
    psi[(0,) * n] = 1
    g = np.eye(4, dtype=np.complex128)
    # the cost depends on where the gate's axes sit: average over early, spread and late pairs
    pairs = ((0, 1), (3, 11), (7, 20), (22, 23))
    t = statistics.mean(_median_time(lambda p=p: apply_gate_in_place(psi, g, p), 3) for p in pairs)
    return t / 2 ** n


#: engine calibration requests (grid rows, cols, cycles, bitstrings, open qubits): a batch of 64 and
#: 16 groups of 2^4 open-qubit blocks (0.2-0.4 s each here; on a 4x4 grid the batch factor varied
#: 1.18-1.27 between runs, on 4x5 1.37-1.41)
ENGINE_CALIBRATIONS = {"batch": (4, 5, 10, 64, ()), "open": (4, 4, 10, 16, (0, 5, 10, 15))}


def engine_factor(base: MachineRate, which: str, overhead: float = 0.0, repeats: int = 3) -> float:
    """Measured over predicted seconds of one request through the ``which`` engine ("batch" or
    "open"), predicted with ``base`` (whose factors are 1): the correction the engine choice applies
    to that engine's predictions. ``overhead``: a request's cost besides its contractions."""
    rows, cols, cycles, count, open_qubits = ENGINE_CALIBRATIONS[which]
    c = random_instance(grid_architecture(rows, cols, cycles), seed=1)
    rng = np.random.default_rng(0)
    bits = list(dict.fromkeys("".join(map(str, rng.integers(0, 2, c.num_qubits))) for _ in range(count)))
    kw = dict(engine="batch" if which == "batch" else "single", open_qubits=open_qubits, rate=base,
              planner=PlannerOptions(budget_seconds=0.0, max_repeats=1), plan_store=MemoryPlanStore())
    predicted = amplitudes(c, bits, **kw).predicted_seconds       # plans them; the timed runs reuse them
    seconds = _median_time(lambda: amplitudes(c, bits, **kw), repeats)
    if predicted <= 0:
        return 1.0
    return float(min(100.0, max(0.01, max(0.1 * seconds, seconds - overhead) / predicted)))


def measure() -> MachineRate:
    """Run the calibration (a few seconds)."""
    from scipy.optimize import nnls

    rate = matmul_rate()
    rows, times = [], []
    samples = [_network_time(*spec) for spec in CALIBRATION_NETWORKS]
    overhead = request_overhead_seconds(one=samples[0][0])
    # what one contraction takes inside a request (at least a tenth of the measured time, so that a
    # noisy overhead cannot make a sample vanish)
    samples = [(max(0.1 * t, t - overhead), m, w, s) for t, m, w, s in samples] + [_dense_pair_time()]
    for t, madds, writes, steps in samples:
        # relative-error weighting: divide each equation by its measured time
        rows.append([madds / rate / t, writes / t, steps / t])
        times.append(1.0)
    coef, _ = nnls(np.array(rows), np.array(times))
    inv_eff, per_write, per_step = coef
    eff = 1.0 / inv_eff if inv_eff > 0 else 1.0
    base = MachineRate(rate, float(min(1.0, max(0.01, eff))), float(per_write), float(per_step),
                       _statevector_update_time(), blas_threads(), time.time())
    return replace(base, batch_factor=engine_factor(base, "batch", overhead),
                   open_factor=engine_factor(base, "open", overhead), request_overhead_seconds=float(overhead))


def load_or_measure(path: str | os.PathLike | None, remeasure: bool = False) -> MachineRate:
    """The stored calibration at ``path``, measuring (and storing) it when absent or asked to."""
    stored = None if remeasure else read_rate(path)
    if stored is not None:
        return stored
    if path is None:
        return measure()
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    # several processes (server workers) starting together measure once: the first takes the lock,
    # the others wait for it and read what it stored (two measurements at once would also skew both)
    with open(p.with_suffix(".lock"), "a+") as lock:
        _lock_exclusive(lock)
        stored = None if remeasure else read_rate(path)
        if stored is not None:
            return stored
        rate = measure()
        tmp = p.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps(rate.to_dict()))
        os.replace(tmp, p)
    return rate


def _lock_exclusive(f) -> None:
    """An exclusive advisory lock on an open file, released when it is closed (no-op without fcntl)."""
    try:
        import fcntl
    except ImportError:          # not a POSIX system: concurrent starts may measure twice
        return
    fcntl.flock(f.fileno(), fcntl.LOCK_EX)
