"""What a run will cost, before anything is contracted.

:func:`estimate` plans (or reuses a stored plan) and reads the cost figures off the plan: complex
multiply-adds, real FLOPs (8 per complex multiply-add), the largest intermediate, peak memory for
the dtype, slices and slicing overhead, and a predicted wall time from the machine's measured
rates. It also says which engine would run and why.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from .amplitudes import DEFAULT_MEMORY_BYTES, _dtype, choose_engine, network_plan
from .calibration import MachineRate
from .circuit import Circuit
from .network import build_structure
from .plan_store import PlanStore
from .planner import PlannerOptions
from .statevector import MAX_QUBITS as SV_MAX_QUBITS

FLOPS_PER_MADD = 8


@dataclass(frozen=True)
class Estimate:
    engine: str
    reason: str
    num_qubits: int
    bitstrings: int
    dtype: str
    madds: float                 # complex multiply-adds for the whole request
    flops: float                 # real floating-point operations (8 per complex multiply-add)
    madds_per_bitstring: float
    width: float                 # log2 of the largest intermediate (elements)
    peak_bytes: int              # peak memory of one contraction / of the state vector
    slices: int
    slicing_overhead: float      # sliced madds / unsliced madds
    predicted_seconds: float
    memory_cap_bytes: int
    plan_hash: str | None = None
    plan_cached: bool | None = None

    def to_dict(self) -> dict:
        return asdict(self)


def _statevector_estimate(circuit: Circuit, k: int, dtype: str, rate: MachineRate, reason: str,
                          cap: float) -> Estimate:
    n = circuit.num_qubits
    # the fused gates the state-vector engine applies, counted from the layout (no matrices built)
    arities = [len(src[1]) if src[0] == "gate" else 1 for src in build_structure(circuit).sources
               if src[0] == "gate" or (src[0] == "proj" and src[2])]
    madds = float(sum(2 ** n * 2 ** a for a in arities))
    itemsize = np.dtype(dtype).itemsize
    # the state, a transposed copy and the product are alive at once during a gate
    peak = 3 * 2 ** n * itemsize
    seconds = rate.statevector_seconds_per_update * 2 ** n * len(arities) * (itemsize / 16)
    return Estimate("statevector", reason, n, k, dtype, madds, FLOPS_PER_MADD * madds, madds, float(n),
                    int(peak), 1, 1.0, seconds, int(cap))


def network_seconds(plan, structure, rate: MachineRate, dtype: str = "complex128") -> float:
    """Predicted seconds of one amplitude with ``plan`` (all slices)."""
    steps = max(0, structure.num_tensors - 1) * plan.nslices
    per = rate.contraction_seconds(plan.madds, plan.writes, steps)
    if np.dtype(dtype).itemsize == 8:
        per *= 0.5  # complex64 moves half the bytes (an assumption; the benchmark measures complex128)
    return per


def estimate(circuit: Circuit, bitstrings: int = 1, *, dtype: str = "complex128", engine: str = "auto",
             rate: MachineRate, planner: PlannerOptions | None = None, plan_store: PlanStore | None = None,
             memory_bytes: float = DEFAULT_MEMORY_BYTES) -> Estimate:
    """The cost report for ``bitstrings`` amplitudes of ``circuit``."""
    _dtype(dtype)
    chosen, reason = choose_engine(circuit, engine)
    n = circuit.num_qubits
    sv_fits = n <= SV_MAX_QUBITS and 3 * 2 ** n * np.dtype(dtype).itemsize <= memory_bytes
    if chosen == "statevector" and sv_fits:
        return _statevector_estimate(circuit, bitstrings, dtype, rate, reason, memory_bytes)
    if chosen == "statevector":
        reason = "a state vector would not fit the memory cap"
    structure = build_structure(circuit)
    plan, _tree, hit = network_plan(structure, plan_store, planner or PlannerOptions(), memory_bytes, dtype)
    per = network_seconds(plan, structure, rate, dtype)
    return Estimate(
        engine="network", reason=reason, num_qubits=n, bitstrings=bitstrings, dtype=dtype,
        madds=plan.madds * bitstrings, flops=FLOPS_PER_MADD * plan.madds * bitstrings,
        madds_per_bitstring=plan.madds, width=plan.width, peak_bytes=plan.peak_bytes(dtype),
        slices=plan.nslices, slicing_overhead=plan.slicing_overhead,
        predicted_seconds=per * bitstrings, memory_cap_bytes=int(memory_bytes),
        plan_hash=plan.plan_hash, plan_cached=hit,
    )


def parse_bytes(text: str) -> int:
    """'8GiB', '512MB', '1.5G', '1000000' -> bytes."""
    from .errors import VerampError

    units = {"": 1, "b": 1, "k": 1e3, "kb": 1e3, "kib": 2 ** 10, "m": 1e6, "mb": 1e6, "mib": 2 ** 20,
             "g": 1e9, "gb": 1e9, "gib": 2 ** 30, "t": 1e12, "tb": 1e12, "tib": 2 ** 40}
    s = text.strip().lower().replace(" ", "")
    num = s.rstrip("abgikmt")
    unit = s[len(num):]
    try:
        value = float(num) * units[unit]
    except (ValueError, KeyError):
        raise VerampError(f"cannot read a memory size from {text!r} (e.g. 8GiB, 512MB)") from None
    if not math.isfinite(value) or value <= 0:
        raise VerampError(f"memory size must be positive, got {text!r}")
    return int(value)
