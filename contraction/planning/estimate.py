"""What a run will cost, before anything is contracted.

:func:`estimate` plans (or reuses a stored plan) and reads the cost figures off the plan: complex
multiply-adds, real FLOPs (8 per complex multiply-add), the largest intermediate, peak memory for
the dtype, slices and slicing overhead, and a predicted wall time from the machine's measured
rates. It also says which engine would run and why.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from contraction import defaults
from contraction.circuits.model import Circuit
from contraction.errors import VerampError
from contraction.network.builder import resolve_dtype
from contraction.planning.engine_choice import choose
from contraction.planning.options import PlannerOptions
from contraction.planning.rates import MachineRate
from contraction.planning.store import PlanStore

FLOPS_PER_MADD = 8


@dataclass(frozen=True)
class Estimate:
    """The cost of a request before it runs: engine and reason, multiply-adds, peak memory, slices and predicted
    seconds."""

    engine: str
    reason: str
    num_qubits: int
    count: int                   # distinct amplitudes asked for
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
    batch: int = 1               # bitstrings per contraction
    chunks: int = 1              # contractions
    predictions: dict = field(default_factory=dict)   # predicted seconds of every option considered

    def to_dict(self) -> dict:
        """The estimate as a JSON-ready dict."""
        return asdict(self)


def estimate(circuit: Circuit, count: int = 1, *, dtype: str = "complex128", engine: str = "auto",
             rate: MachineRate, planner: PlannerOptions | None = None, plan_store: PlanStore | None = None,
             memory_bytes: float = defaults.MEMORY_BYTES, workers: int = 1) -> Estimate:
    """The cost report for ``count`` distinct amplitudes of ``circuit``: the engine the
    automatic choice (or ``engine``) would run, why, and what every option would take, for a run on
    ``workers`` local processes sharing ``memory_bytes`` (as :func:`~contraction.execution.amplitudes.amplitudes`
    plans and predicts it)."""
    resolve_dtype(dtype)
    c = choose(circuit, count, engine=engine, dtype=dtype, rate=rate, store=plan_store, planner=planner,
               memory_bytes=memory_bytes, workers=workers)
    o, n = c.chosen, circuit.num_qubits
    common = dict(engine=c.engine, reason=c.reason, num_qubits=n, count=count, dtype=dtype,
                  madds=o.madds, flops=FLOPS_PER_MADD * o.madds, madds_per_bitstring=o.madds / max(1, count),
                  peak_bytes=int(o.peak_bytes), predicted_seconds=o.seconds, memory_cap_bytes=int(memory_bytes),
                  predictions=c.predictions())
    if o.plan is None:
        return Estimate(width=float(n), slices=1, slicing_overhead=1.0, **common)
    return Estimate(width=o.plan.width, slices=o.plan.nslices, slicing_overhead=o.plan.slicing_overhead,
                    plan_hash=o.plan.plan_hash, plan_cached=o.plan_cached, batch=o.batch, chunks=o.chunks, **common)


def parse_bytes(text: str) -> int:
    """'8GiB', '512MB', '1.5G', '1000000' -> bytes."""
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
