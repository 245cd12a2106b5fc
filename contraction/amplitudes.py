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
from dataclasses import dataclass, field, replace
from typing import Iterable, Protocol

import numpy as np

from .bitstrings import check_bitstrings
from .circuit import Circuit
from .errors import MemoryLimitError, VerampError
from .executor import CancelCheck, ProgressCallback, contract_scalar
from .network import NetworkStructure, build_structure, tensor_arrays
from .planner import Plan, PlannerOptions, find_plan
from .statevector import MAX_QUBITS as SV_MAX_QUBITS
from .statevector import state_vector

ENGINES = ("auto", "network", "statevector")
DTYPES = {"complex128": np.complex128, "complex64": np.complex64}

#: the automatic choice uses the state vector up to this many qubits
SV_AUTO_QUBITS = 22


class PlanCache(Protocol):
    """Where plans are kept between calls (in memory, or a durable store)."""

    def get(self, network_key: str) -> Plan | None: ...

    def put(self, plan: Plan) -> None: ...


class MemoryPlanCache:
    def __init__(self) -> None:
        self._plans: dict[str, Plan] = {}

    def get(self, network_key: str) -> Plan | None:
        return self._plans.get(network_key)

    def put(self, plan: Plan) -> None:
        old = self._plans.get(plan.network_key)
        if old is None or plan.madds < old.madds:
            self._plans[plan.network_key] = plan


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
    extra: dict = field(default_factory=dict)


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


def network_plan(structure: NetworkStructure, cache: PlanCache | None, options: PlannerOptions,
                 memory_bytes: float = DEFAULT_MEMORY_BYTES, dtype="complex128") -> tuple[Plan, bool]:
    """A plan for ``structure`` whose peak fits ``memory_bytes``: the cached one or a new one.

    Raises :class:`MemoryLimitError` when no plan within the cap is found; a plan over the cap
    is never returned.
    """
    if cache is not None:
        plan = cache.get(structure.key)
        if plan is not None and plan.peak_bytes(dtype) <= memory_bytes:
            return plan, True
    itemsize = np.dtype(dtype).itemsize
    # the peak holds a contraction's two inputs and its output at once: aim each below a quarter
    options = replace(options, max_elements=min(options.max_elements or math.inf,
                                                 memory_bytes / itemsize / 4))
    plan = find_plan(structure, options)
    if plan.peak_bytes(dtype) > memory_bytes:
        raise MemoryLimitError(f"the best plan found needs {plan.peak_bytes(dtype):.4g} bytes at its peak, "
                               f"over the memory cap of {memory_bytes:.4g} bytes")
    if cache is not None:
        cache.put(plan)
    return plan, False


def amplitudes(circuit: Circuit, bitstrings: Iterable[str], *, dtype: str = "complex128",
               engine: str = "auto", planner: PlannerOptions | None = None,
               plan_cache: PlanCache | None = None, memory_bytes: float = DEFAULT_MEMORY_BYTES,
               progress: ProgressCallback | None = None,
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
    plan, hit = network_plan(structure, plan_cache, planner or PlannerOptions(), memory_bytes, dtype)
    tree = plan.tree(structure)
    results = []
    for b in bits:
        arrays = tensor_arrays(structure, circuit, b, dt)
        value = contract_scalar(tree, arrays, progress=progress, cancelled=cancelled)
        results.append(Amplitude(b, complex(value * phase)))
    return AmplitudeRun(results, chosen, reason, dtype, time.perf_counter() - t0, plan, hit)
