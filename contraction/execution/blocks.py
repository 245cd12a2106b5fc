"""Blocks of amplitudes and marginal probabilities on k chosen qubits.

Ordering (both operations): entry i of the returned length-2^k array belongs to the values of
``qubits`` read off the binary digits of i, ``qubits[0]`` the most significant — the same rule
as bitstrings, so with ``qubits = (0, 1, ..., k-1)`` entry i is the bitstring ``format(i, "0kb")``.

* :func:`block_amplitudes`: all 2^k amplitudes <x|C|0...0> whose other n-k bits are fixed, from
  one contraction with the k wires left open (or from the state vector).
* :func:`marginal_probabilities`: P(y) = sum over the other qubits of |<y, z|C|0...0>|^2, from the
  network of <0|C^dagger (|y><y| (x) 1) C|0>: the circuit and its conjugate joined on the traced
  wires, with the measured wires as one shared output index (the diagonal). Gates outside the
  reverse light cone of the measured qubits cancel against their conjugates and are dropped first.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from contraction import defaults
from contraction.circuits.model import Circuit
from contraction.errors import VerampError
from contraction.execution.amplitudes import amplitudes
from contraction.execution.executor import contract_array
from contraction.execution.statevector import state_vector
from contraction.network.builder import NetworkStructure, _symbol, build_structure, resolve_dtype, tensor_arrays
from contraction.planning.capped_plans import network_plan
from contraction.planning.engine_choice import network_seconds, statevector_option
from contraction.planning.options import PlannerOptions
from contraction.planning.plan import Plan
from contraction.planning.rates import NOMINAL_RATE, MachineRate
from contraction.planning.store import PlanStore


@dataclass
class BlockResult:
    """The 2^k values of a block or marginal on ``qubits`` (entry order in the module docstring), the engine that
    computed them and why."""

    qubits: tuple[int, ...]
    values: np.ndarray             # length 2^k, ordering in the module docstring
    engine: str
    reason: str
    wall_seconds: float
    plan: Plan | None = None


def _check_qubits(circuit: Circuit, qubits) -> tuple[int, ...]:
    qs = tuple(int(q) for q in qubits)
    n = circuit.num_qubits
    if not qs or len(set(qs)) != len(qs) or any(not 0 <= q < n for q in qs):
        raise VerampError(f"qubits {list(qs)} must be a non-empty list of distinct qubits in 0..{n - 1}")
    if len(qs) > defaults.MAX_BLOCK_QUBITS:
        raise VerampError(f"{len(qs)} qubits give 2^{len(qs)} values; the limit is {defaults.MAX_BLOCK_QUBITS} qubits")
    return qs


def block_amplitudes(circuit: Circuit, qubits, fixed: str, **opts) -> BlockResult:
    """All 2^k amplitudes on ``qubits`` with the other bits as in ``fixed`` (an n-bit string whose
    characters on ``qubits`` are ignored). ``opts`` as for :func:`contraction.execution.amplitudes.amplitudes`."""
    qs = _check_qubits(circuit, qubits)
    if len(fixed) != circuit.num_qubits:
        raise VerampError(f"the fixed bitstring has {len(fixed)} characters; the circuit has "
                          f"{circuit.num_qubits} qubits")
    k = len(qs)
    bits = []
    base = list(fixed)
    for i in range(2 ** k):
        b = list(base)
        for j, q in enumerate(qs):
            b[q] = "1" if (i >> (k - 1 - j)) & 1 else "0"
        bits.append("".join(b))
    run = amplitudes(circuit, bits, open_qubits=qs, **opts)
    values = np.array([r.amplitude for r in run.results], dtype=np.complex128)
    return BlockResult(qs, values, run.engine, run.reason, run.wall_seconds, run.plan)


def light_cone(circuit: Circuit, qubits) -> Circuit:
    """The gates that can influence the measured ``qubits`` (their reverse light cone), in order;
    the others cancel in C^dagger (|y><y| (x) 1) C."""
    reach = set(qubits)
    keep = []
    for g in reversed(circuit.gates):
        if reach.intersection(g.qubits):
            keep.append(g)
            reach.update(g.qubits)
    return circuit.with_gates(list(reversed(keep)), global_phase=0.0)


def marginal_structure(circuit: Circuit, qubits) -> tuple[NetworkStructure, Circuit, NetworkStructure]:
    """The doubled network of the marginal on ``qubits`` (after light-cone pruning), the pruned
    circuit, and its single-copy network whose tensors (then their conjugates) fill the doubled one."""
    qs = tuple(qubits)
    pruned = light_cone(circuit, qs)
    n = pruned.num_qubits
    ket = build_structure(pruned, open_qubits=tuple(range(n)))
    final = dict(zip(range(n), ket.output))
    used = {ix for term in ket.inputs for ix in term}
    nxt = 0
    bra_of: dict[str, str] = {}
    for ix in sorted(used, key=ket.canonical.get):
        if ix in final.values():
            bra_of[ix] = ix                  # joined: traced (contracted) or measured (hyper, in output)
            continue
        while _symbol(nxt) in used:
            nxt += 1
        bra_of[ix] = _symbol(nxt)
        nxt += 1
    inputs = ket.inputs + tuple(tuple(bra_of[ix] for ix in term) for term in ket.inputs)
    output = tuple(final[q] for q in qs)
    return NetworkStructure(n, inputs, output, ket.sources + ket.sources), pruned, ket


def marginal_probabilities(circuit: Circuit, qubits, *, dtype: str = "complex128", engine: str = "auto",
                           planner: PlannerOptions | None = None, plan_store: PlanStore | None = None,
                           memory_bytes: float = defaults.MEMORY_BYTES,
                           rate: MachineRate | None = None) -> BlockResult:
    """P(y) on ``qubits`` (summed over all other qubits), length 2^k."""
    t0 = time.perf_counter()
    qs = _check_qubits(circuit, qubits)
    dt = resolve_dtype(dtype)
    if engine not in ("auto", "statevector", "single"):
        raise VerampError(f"unknown engine {engine!r} for marginals; choose auto, statevector or single")
    rate = rate or NOMINAL_RATE
    sv = statevector_option(circuit, 1, dtype, rate)
    sv_fits = circuit.num_qubits <= defaults.STATEVECTOR_MAX_QUBITS and sv.peak_bytes <= memory_bytes
    if engine == "statevector" and not sv_fits:
        raise VerampError(f"a {circuit.num_qubits}-qubit state vector does not fit the memory cap")
    plan = None
    small = sv_fits and circuit.num_qubits <= defaults.STATEVECTOR_AUTO_QUBITS
    if engine == "single" or (engine == "auto" and not small):
        structure, pruned, ket_structure = marginal_structure(circuit, qs)
        contraction = network_plan(structure, plan_store, planner or PlannerOptions(), memory_bytes, dtype)
        plan, tree = contraction.plan, contraction.tree
        predicted = network_seconds(plan, structure, rate, dtype)
    if engine == "statevector" or (engine == "auto" and (small or (sv_fits and sv.seconds <= predicted))):
        p = np.abs(state_vector(circuit, dtype=dt).reshape((2,) * circuit.num_qubits)) ** 2
        others = tuple(q for q in range(circuit.num_qubits) if q not in qs)
        p = p.sum(axis=others).transpose(np.argsort(np.argsort(qs)))
        reason = "requested" if engine == "statevector" else (
            f"{circuit.num_qubits} qubits <= {defaults.STATEVECTOR_AUTO_QUBITS}: one state vector" if small else
            f"state vector predicted {sv.seconds:.3g} s <= network {predicted:.3g} s")
        return BlockResult(qs, p.reshape(-1).astype(np.float64), "statevector", reason,
                           time.perf_counter() - t0, None)
    ket = tensor_arrays(ket_structure, pruned, "0" * pruned.num_qubits, dt)
    value = contract_array(tree, ket + [a.conj() for a in ket])
    reason = "requested" if engine == "single" else (
        f"network predicted {predicted:.3g} s" + (f" < state vector {sv.seconds:.3g} s" if sv_fits
                                                 else "; a state vector does not fit the memory cap"))
    return BlockResult(qs, np.real(value).reshape(-1), "single", reason, time.perf_counter() - t0, plan)
