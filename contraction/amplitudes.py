"""Exact amplitudes <x|C|0...0> of a circuit for a list of bitstrings.

Two engines:

* ``statevector``: build C|0...0> once (numpy) and read any number of amplitudes from it;
  limited by memory to about 28 qubits;
* ``network``: contract the circuit's tensor network once per bitstring with a cotengra plan
  that depends only on the layout, so it is found once and reused.

``auto`` picks the state vector for small circuits and the network otherwise, and says why.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
import logging
from typing import Iterable

import numpy as np

from .bitstrings import check_bitstrings
from .circuit import Circuit
from .errors import MemoryLimitError, PlanError, VerampError
from .executor import CancelCheck, ProgressCallback, contract_scalar
from .network import NetworkStructure, build_structure, tensor_arrays
from .plan_store import PlanStore
from .planner import Plan, PlannerOptions, find_plan
from .statevector import MAX_QUBITS as SV_MAX_QUBITS
from .statevector import state_vector

log = logging.getLogger(__name__)

ENGINES = ("auto", "network", "statevector")
DTYPES = {"complex128": np.complex128, "complex64": np.complex64}

#: the automatic choice uses the state vector up to this many qubits
SV_AUTO_QUBITS = 22


@dataclass(frozen=True)
class Amplitude:
    bitstring: str
    amplitude: complex

    @property
    def probability(self) -> float:
        a = self.amplitude
        return a.real * a.real + a.imag * a.imag


@dataclass
class AmplitudeRun:
    """Amplitudes in input order, with how they were computed."""

    results: list[Amplitude]
    engine: str
    reason: str
    dtype: str
    wall_seconds: float
    plan: Plan | None = None
    plan_cached: bool = False


def choose_engine(circuit: Circuit, requested: str = "auto") -> tuple[str, str]:
    """(engine, reason) for a circuit."""
    n = circuit.num_qubits
    if requested not in ENGINES:
        raise VerampError(f"unknown engine {requested!r}; choose one of {', '.join(ENGINES)}")
    if requested == "statevector":
        if n > SV_MAX_QUBITS:
            raise VerampError(f"the state-vector engine is limited to {SV_MAX_QUBITS} qubits; "
                              f"this circuit has {n}")
        return "statevector", "requested by the user"
    if requested == "network":
        return "network", "requested by the user"
    if n <= SV_AUTO_QUBITS:
        return "statevector", f"{n} qubits <= {SV_AUTO_QUBITS}: one state vector answers every bitstring"
    return "network", f"{n} qubits > {SV_AUTO_QUBITS}: a state vector would need {2 ** n * 16:.3g} bytes"


def _dtype(name: str):
    try:
        return DTYPES[name]
    except KeyError:
        raise VerampError(f"unknown dtype {name!r}; choose complex128 or complex64") from None


#: default memory cap of one contraction (peak bytes of all live tensors)
DEFAULT_MEMORY_BYTES = 8 * 2 ** 30


def network_plan(structure: NetworkStructure, store: PlanStore | None, options: PlannerOptions,
                 memory_bytes: float = DEFAULT_MEMORY_BYTES, dtype="complex128"):
    """``(plan, tree, from_store)`` for ``structure`` with a peak within ``memory_bytes``.

    A stored plan is used when one fits the cap and passes validation against the network;
    otherwise a new plan is searched and stored. Raises :class:`MemoryLimitError` when no plan
    within the cap is found: a plan over the cap is never returned.
    """
    cap_elements = memory_bytes / np.dtype(dtype).itemsize
    if store is not None:
        plan = store.get(structure.key, cap_elements)
        if plan is not None:
            try:
                return plan, plan.tree(structure), True
            except PlanError as exc:
                log.warning("stored plan rejected, planning again: %s", exc)
    # the peak holds a contraction's two inputs and its output at once: aim each below a quarter
    options = replace(options, max_elements=min(options.max_elements or math.inf, cap_elements / 4))
    plan = find_plan(structure, options)
    if plan.peak_elements > cap_elements:
        raise MemoryLimitError(f"the best plan found needs {plan.peak_bytes(dtype):.4g} bytes at its peak, "
                               f"over the memory cap of {memory_bytes:.4g} bytes")
    if store is not None:
        store.put(plan)
    return plan, plan.tree(structure), False


def amplitudes(circuit: Circuit, bitstrings: Iterable[str], *, dtype: str = "complex128",
               engine: str = "auto", planner: PlannerOptions | None = None,
               plan_store: PlanStore | None = None, memory_bytes: float = DEFAULT_MEMORY_BYTES,
               workers: int = 1, progress: ProgressCallback | None = None,
               cancelled: CancelCheck | None = None) -> AmplitudeRun:
    """Exact amplitudes of ``circuit`` for ``bitstrings`` (qubit 0 first), in input order."""
    t0 = time.perf_counter()
    bits = check_bitstrings(bitstrings, circuit.num_qubits)
    dt = _dtype(dtype)
    chosen, reason = choose_engine(circuit, engine)
    if chosen == "statevector" and 2 ** circuit.num_qubits * np.dtype(dt).itemsize * 2 > memory_bytes:
        if engine == "statevector":
            raise MemoryLimitError(f"a {circuit.num_qubits}-qubit state vector does not fit the memory cap "
                                   f"of {memory_bytes:.4g} bytes")
        chosen, reason = "network", "a state vector would not fit the memory cap"
    phase = np.exp(1j * circuit.global_phase)
    if chosen == "statevector":
        psi = state_vector(circuit, dtype=dt)
        results = [Amplitude(b, complex(psi[int(b, 2)])) for b in bits]
        return AmplitudeRun(results, chosen, reason, dtype, time.perf_counter() - t0)
    structure = build_structure(circuit)
    plan, tree, hit = network_plan(structure, plan_store, planner or PlannerOptions(), memory_bytes, dtype)
    results = []
    for b in bits:
        arrays = tensor_arrays(structure, circuit, b, dt)
        if plan.nslices > 1 and workers > 1:
            from .parallel import contract_sliced_parallel

            value = contract_sliced_parallel(plan, structure, arrays, workers, progress, cancelled)
        else:
            value = contract_scalar(tree, arrays, progress=progress, cancelled=cancelled)
        results.append(Amplitude(b, complex(value * phase)))
    return AmplitudeRun(results, chosen, reason, dtype, time.perf_counter() - t0, plan, hit)
