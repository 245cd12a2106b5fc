"""Which engine answers a request, from predicted time and memory.

Four ways to get N amplitudes of an n-qubit circuit:

* ``statevector``: build C|0...0> once and read any number of amplitudes (memory: see
  :func:`statevector_peak_elements`);
* ``batch``: contract the network with a batch index of size B on the projectors, so one
  contraction gives B amplitudes; the chunk size B is chosen from the cost model among a few powers
  of two (each one planned, or its plan read from the store);
* ``single``: one (sliced) contraction per bitstring;
* ``stacked``: the single amplitude's tree for a chunk of bitstrings at once, every intermediate
  stacked over the distinct restrictions of the chunk to the qubits whose projectors it holds
  (:mod:`contraction.planning.stacked_cost`): never more multiply-adds than the single amplitudes,
  and no plan of its own; chunks as large as the cap and a working-set limit allow
  (:func:`stacked_option`), taken by ``auto`` only when clearly faster than single amplitudes.

:func:`choose` predicts each feasible option with the machine's measured rates and picks the
fastest; ``engine=`` forces one. The result says what was predicted for every option considered.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field, replace

import numpy as np

from contraction import defaults
from contraction.circuits.bitstrings import bit_table
from contraction.circuits.model import Circuit
from contraction.errors import MemoryLimitError, NoStoredPlan, VerampError
from contraction.network.builder import NetworkStructure, build_structure
from contraction.planning.capped_plans import (PLAN_SHARE_OF_CAP, Contraction, intermediate_target, network_plan,
                                               sliced_further_note)
from contraction.planning.options import PlannerOptions, planning_seconds
from contraction.planning.plan import Plan, retarget_plan
from contraction.planning.rates import NOMINAL_RATE, MachineRate
from contraction.planning.slice_reuse import reuse_budget, reuse_plan_for
from contraction.planning.stacked_cost import projected_qubits, stacked_chunks
from contraction.planning.store import PlanStore

log = logging.getLogger(__name__)

ENGINES = ("auto", "statevector", "batch", "single", "stacked")

#: a small circuit's state vector predicted below this (seconds) is used without looking at the network
#: engines (predicting those costs a structure and a greedy pass, tens of milliseconds); above it a
#: stored or cheap network plan can be faster even below ``defaults.STATEVECTOR_AUTO_QUBITS`` qubits
#: (measured: 20 qubits, 10 cycles, one bitstring: network 0.15 s, state vector 0.41 s)
SV_OUTRIGHT_SECONDS = 0.05

#: the state vector is taken when its prediction is within this factor of the fastest network
#: engine's: it is a measured rate per (amplitude x gate) update, while a network's prediction rests on
#: a plan's counts and was off by more (measured, 20-qubit 10-cycle grid, 9,955 bitstrings: batches of
#: 4,096 predicted 0.82 s ran 1.61-2.05 s; the state vector predicted 0.90 s ran 0.63 s)
STATEVECTOR_MARGIN = 1.25


def pick_fastest(options: list[Option]) -> tuple[Option, str]:
    """The option with the lowest prediction, or the state vector when within
    :data:`STATEVECTOR_MARGIN` of it; with a note when the margin decided."""
    best = min(options, key=lambda o: o.seconds)
    sv = next((o for o in options if o.engine == "statevector"), None)
    if sv is not None and sv is not best and sv.seconds <= STATEVECTOR_MARGIN * best.seconds:
        return sv, (f"state vector {sv.seconds:.3g} s within {STATEVECTOR_MARGIN:g}x of {_label(best)} "
                    f"{best.seconds:.3g} s, whose network prediction is less certain")
    return best, ""


def statevector_peak_elements(n: int) -> float:
    """Peak elements alive while the state-vector engine applies a gate to an n-qubit state: below
    ``defaults.STATEVECTOR_IN_PLACE_QUBITS`` a gate copies the state twice, from there on it is
    applied in place a block of ``defaults.STATEVECTOR_CHUNK_ELEMENTS`` at a time."""
    if n < defaults.STATEVECTOR_IN_PLACE_QUBITS:
        return 3.0 * 2 ** n
    return 2 ** n + 3.0 * defaults.STATEVECTOR_CHUNK_ELEMENTS


@dataclass
class Option:
    """One way to answer the request, as planned and predicted."""

    engine: str
    seconds: float
    peak_bytes: float
    batch: int = 1                          # bitstrings per contraction (network engines)
    contraction: Contraction | None = None  # network engines: the largest batch size's contraction
    plan_cached: bool = False               # every contraction's plan came from the store
    madds: float = 0.0                      # whole request
    schedule: list[int] = field(default_factory=list)      # batch size of each chunk, in order
    parts: dict[int, "Option"] = field(default_factory=dict)  # batch size -> its planned contraction

    @property
    def chunks(self) -> int:
        """Contractions the request runs (0 for the state vector)."""
        return len(self.schedule)

    @property
    def plan(self) -> Plan | None:
        """The plan of :attr:`contraction`, if any."""
        return self.contraction.plan if self.contraction is not None else None


@dataclass
class Choice:
    """The engine chosen for ``count`` amplitudes (or groups), why, and every option considered."""

    engine: str
    reason: str
    chosen: Option
    options: list[Option] = field(default_factory=list)
    planned: dict[int, Option] = field(default_factory=dict)   # every contraction size planned, per chunk
    count: int = 0                                              # amplitudes (or groups) it was made for

    def predictions(self) -> dict[str, float]:
        """Predicted seconds of every option considered, by label (``statevector``, ``single``, ``batchB``)."""
        return {_label(o): o.seconds for o in self.options}


def _with_overhead(o: Option, rate: MachineRate) -> Option:
    """``o`` with the request's fixed cost besides its contractions added to its predicted seconds."""
    return replace(o, seconds=o.seconds + rate.request_overhead_seconds)


def _statevector_choice(reason: str, sv: Option, rate: MachineRate, count: int) -> Choice:
    """The state vector chosen for ``reason``, its prediction with the request's fixed cost added."""
    sv = _with_overhead(sv, rate)
    return Choice("statevector", reason, sv, [sv], count=count)


def _label(o: Option) -> str:
    return f"{o.engine}{o.batch}" if o.engine in ("batch", "stacked") else o.engine


def _planning_seconds(s: NetworkStructure, store: PlanStore | None, planner: PlannerOptions, memory_bytes: float,
                      dtype: str) -> float:
    """Predicted seconds to plan the one-bitstring network ``s``: none with a stored plan within
    ``memory_bytes``, else from a quick greedy pass (:func:`planning_seconds`), never simply the budget."""
    if store is not None and store.get(s.key, memory_bytes / np.dtype(dtype).itemsize) is not None:
        return 0.0
    return planning_seconds(s, planner)


def statevector_option(circuit: Circuit, count: int, dtype: str, rate: MachineRate,
                       structure: NetworkStructure | None = None) -> Option:
    """The state-vector engine's predicted seconds and peak bytes for this circuit (any number of amplitudes costs the
    same). ``structure``: the circuit's one-amplitude network (no open qubits), when already built."""
    n = circuit.num_qubits
    # the fused gates the state-vector engine applies, counted from the layout (no matrices built)
    structure = structure or build_structure(circuit)
    arities = [len(src[1]) if src[0] in ("gate", "diag") else 1 for src in structure.sources
               if src[0] in ("gate", "diag") or (src[0] == "proj" and src[2])]
    itemsize = np.dtype(dtype).itemsize
    seconds = rate.statevector_seconds_per_update * 2 ** n * len(arities) * (itemsize / 16)
    madds = float(sum(2 ** n * 2 ** a for a in arities))
    return Option("statevector", seconds, statevector_peak_elements(n) * itemsize, madds=madds)


def network_seconds(plan: Plan, structure: NetworkStructure, rate: MachineRate, dtype: str = "complex128",
                    scale: float = 1.0, steps: float | None = None) -> float:
    """Predicted seconds of one contraction with ``plan`` (all slices); ``scale``: its multiply-adds and
    writes times this, ``steps``: its matrix products when not one per step and slice (a stacked chunk)."""
    steps = max(0, structure.num_tensors - 1) * plan.nslices if steps is None else steps
    per = rate.contraction_seconds(plan.madds * scale, plan.writes * scale, steps)
    if structure.batch:
        per *= rate.batch_factor
    elif structure.open_qubits:
        per *= rate.open_factor
    if np.dtype(dtype).itemsize == 8:
        per *= 0.5  # complex64 moves half the bytes (an assumption; the benchmark measures complex128)
    return per


def chunk_schedule(count: int, per_chunk: dict[int, float]) -> list[int]:
    """Chunk sizes covering ``count`` bitstrings: for what is left, the batch size with the least
    predicted time per useful bitstring (a short last chunk is padded to its batch size)."""
    out = []
    left = count
    while left > 0:
        b = min(per_chunk, key=lambda b: (per_chunk[b] / min(b, left), b))
        out.append(b)
        left -= min(b, left)
    return out


def batch_candidates(count: int) -> list[int]:
    """A few powers of two from the request size down: each is planned, so keep the list short."""
    if count < 2:
        return []
    top = min(1 << (count - 1).bit_length(), defaults.MAX_BATCH)
    return sorted({top, max(2, top // 8), max(2, top // 64)})


def network_option(circuit: Circuit, batch: int, dtype: str, rate: MachineRate, store: PlanStore | None,
                   planner: PlannerOptions, memory_bytes: float, open_qubits: tuple[int, ...] = (),
                   structure: NetworkStructure | None = None) -> Option:
    """One contraction of ``batch`` bitstrings (or groups, with ``open_qubits``), planned or read
    from the store; ``structure``: that network when the caller has built it already."""
    s = structure or build_structure(circuit, batch=batch if batch > 1 else 0, open_qubits=open_qubits)
    c = network_plan(s, store, planner, memory_bytes, dtype)
    # slices keep intermediates between them within the worker's cap: only that share of the work runs
    budget = reuse_budget(memory_bytes / np.dtype(dtype).itemsize, c.plan.peak_elements, c.plan.width)
    share = reuse_plan_for(c.tree, budget).work_share
    return Option("batch" if batch > 1 else "single", share * network_seconds(c.plan, s, rate, dtype),
                  c.plan.peak_bytes(dtype), batch, c, c.from_store, c.plan.madds)


def tasks_per_chunk(nslices: int, workers: int) -> int:
    """Tasks one contraction of ``nslices`` slices is split into for ``workers`` local processes (as
    the executor splits it: contiguous runs of slices)."""
    return 1 if nslices <= 1 else min(nslices, defaults.TASKS_PER_WORKER * max(1, workers))


def scheduled(engine: str, count: int, parts: dict[int, Option], workers: int = 1) -> Option:
    """The whole request run as chunks of the planned sizes in ``parts``, its tasks shared by
    ``workers`` local processes: predicted wall time is the larger of the total over the workers
    and the longest single task (one unsliced chunk runs on one worker however many there are)."""
    schedule = chunk_schedule(count, {b: o.seconds for b, o in parts.items()})
    used = {b: parts[b] for b in set(schedule)}
    main = max(used.values(), key=lambda o: o.batch)
    total = sum(parts[b].seconds for b in schedule)
    longest = max(o.seconds / tasks_per_chunk(o.plan.nslices if o.plan else 1, workers) for o in used.values())
    wall = max(total / max(1, workers), longest)
    return Option(engine, wall, max(o.peak_bytes for o in used.values()),
                  main.batch, main.contraction, all(o.plan_cached for o in used.values()),
                  sum(parts[b].madds for b in schedule), schedule, used)


#: a stacked chunk's peak is kept below this many bytes (or twice the single amplitude's peak, if more)
#: even when the cap allows more: memory a process touches for the first time cost 1.0-1.3 s per GiB on
#: the 2-core test machine (measured, 2 GiB filled afresh against 0.13-0.20 s filled again), and
#: uncorrelated bitstrings share little however large the chunk
STACKED_WORKING_BYTES = 1 << 30

#: the automatic choice takes stacked chunks over single amplitudes only when predicted below this share of
#: their time: in six paired runs (20-40 qubits, 16-9,955 bitstrings, two workers) the stacked engine's
#: time over its prediction was 0.91-4.5x, the single engine's 0.81-3.8x, and the first over the second
#: 0.65-2.33x with a median of 1.26 (measured; the state vector's margin above works the same way)
STACKED_MARGIN = 0.8

#: ... and only when single amplitudes and batches are predicted to take at least this long for the whole
#: request: on shorter requests its prediction was furthest off (2.9-4.5x its time, a 24-qubit QFT x16 and
#: 20-qubit chunks of 125; measured), there is little to win, and counting its rows costs a share of the
#: request
STACKED_MIN_SECONDS = 1.0


def stacked_option(single: Option, table: np.ndarray, rate: MachineRate, dtype: str, memory_bytes: float,
                   workers: int = 1) -> Option | None:
    """The stacked engine for the bitstrings of ``table`` (a bit table) through the single amplitude's
    contraction, in chunks whose peak for any bitstrings fits ``memory_bytes`` and
    :data:`STACKED_WORKING_BYTES` (:func:`stacked_chunks`), at most a worker's share of the bitstrings
    each when the plan has fewer slices than workers. Predicted as the single amplitude's contraction
    (without slice reuse) with each chunk's multiply-adds, writes and matrix products (a step runs once
    for all rows unless a hyper-index makes it multiply row by row). None when not even two bitstrings fit."""
    c = single.contraction
    count = table.shape[0]
    itemsize = np.dtype(dtype).itemsize
    fit = min(memory_bytes * PLAN_SHARE_OF_CAP, max(STACKED_WORKING_BYTES, 2 * c.plan.peak_bytes(dtype))) / itemsize
    top = min(count, defaults.MAX_BATCH, -(-count // workers) if c.plan.nslices < workers else count)
    chunks = stacked_chunks(c.tree, projected_qubits(c.structure), table, fit, top)
    if chunks is None:
        return None
    seconds = [network_seconds(c.plan, c.structure, rate, dtype, r, k) for r, k in zip(chunks.ratios, chunks.row_steps)]
    longest = max(seconds) / tasks_per_chunk(c.plan.nslices, workers)
    wall = max(sum(seconds) * chunks.share / max(1, workers), longest)
    return Option("stacked", wall, chunks.peak_elements * itemsize, chunks.size, c, single.plan_cached,
                  chunks.madds, list(chunks.schedule), {chunks.size: single})


#: share of the planning budget spent trying each batch size's contraction order on the other sizes
SHARE_ORDERS_FRACTION = 0.2


def _share_batch_orders(circuit: Circuit, sizes: list[int], planned: dict[int, Option], store: PlanStore,
                        planner: PlannerOptions, memory_bytes: float, dtype: str, rate: MachineRate,
                        open_qubits: tuple[int, ...], seconds: float) -> None:
    """Try each planned batch size's contraction order on the other batch sizes (their networks
    differ only in the batch index's size), store what is cheaper and re-read those sizes' options.
    Short searches split several ways find orders of very different quality: 40 qubits, 8 cycles,
    batch 2048, 1.7 s each, gave 64 slices and 10^12.02 multiply-adds in one run, 131,072 slices
    and 10^15.13 in the next (with 10^10.99 found for batch 256 in the same run)."""
    cap = memory_bytes / np.dtype(dtype).itemsize
    target = intermediate_target(planner, cap)
    donors = [a for a in sizes if a in planned]
    end = time.perf_counter() + seconds
    pairs = len(donors) * (len(sizes) - 1)
    for b in sizes:
        s = planned[b].contraction.structure if b in planned else \
            build_structure(circuit, batch=b, open_qubits=open_qubits)
        best = planned[b].plan.madds if b in planned else math.inf
        better = False
        for a in donors:
            if a == b:
                continue
            # each pair gets an equal part of what is left, so the whole stays within ``seconds``
            each = max(0.0, end - time.perf_counter()) / max(1, pairs)
            pairs -= 1
            plan = retarget_plan(planned[a].plan, s, target, each, planner.minimize)
            if plan is not None and plan.peak_elements <= cap and plan.madds < best:
                best, better = plan.madds, store.put(plan) or better
        if better:
            planned[b] = network_option(circuit, b, dtype, rate, store, None, memory_bytes, open_qubits, s)


def choose(circuit: Circuit, count: int, *, engine: str = "auto", dtype: str = "complex128",
           rate: MachineRate | None = None, store: PlanStore | None = None,
           planner: PlannerOptions | None = None, memory_bytes: float,
           open_qubits: tuple[int, ...] = (), search: bool = True, workers: int = 1,
           bitstrings: list[str] | None = None) -> Choice | None:
    """The fastest feasible way to get ``count`` distinct amplitudes, or ``count`` groups of
    bitstrings that share their bits outside ``open_qubits`` (or the forced way).

    With ``search=False`` nothing is planned: only stored plans are considered, and None is
    returned when the network engines have none and the state vector is not an option. ``workers``:
    local processes that will contract slices at once; the cap is shared among them. ``bitstrings``:
    the ``count`` distinct bitstrings, for the stacked engine's cost (without them it is predicted for
    uncorrelated random bitstrings)."""
    if engine not in ENGINES:
        raise VerampError(f"unknown engine {engine!r}; choose one of {', '.join(ENGINES)}")
    if engine == "stacked" and open_qubits:
        raise VerampError("the stacked engine computes single bitstrings; with open qubits choose another engine")
    rate = rate or NOMINAL_RATE
    planner = (planner or PlannerOptions()) if search else None
    n = circuit.num_qubits
    options: list[Option] = []
    plain = build_structure(circuit)                  # the one-amplitude network, built once for every use
    sv = statevector_option(circuit, count, dtype, rate, plain)
    sv_fits = n <= defaults.STATEVECTOR_MAX_QUBITS and sv.peak_bytes <= memory_bytes
    if engine == "statevector":
        if not sv_fits:
            raise MemoryLimitError(f"a {n}-qubit state vector needs {sv.peak_bytes:.4g} bytes while applying a "
                                   f"gate; the memory cap is {memory_bytes:.4g} bytes"
                                   + (f" and the engine is limited to {defaults.STATEVECTOR_MAX_QUBITS} qubits" if n > defaults.STATEVECTOR_MAX_QUBITS
                                      else ""))
        return _statevector_choice("requested", sv, rate, count)
    if engine == "auto" and sv_fits and n <= defaults.STATEVECTOR_AUTO_QUBITS and sv.seconds <= SV_OUTRIGHT_SECONDS:
        return _statevector_choice(f"{n} qubits <= {defaults.STATEVECTOR_AUTO_QUBITS} and ~{sv.seconds:.2g} s: one "
                                   "state vector answers every bitstring", sv, rate, count)
    # local processes contracting side by side each get their share of the cap
    per_worker = memory_bytes / max(1, workers)
    # the one-bitstring network (with the open qubits), built once for every use below
    single = build_structure(circuit, open_qubits=open_qubits) if open_qubits else plain
    if engine == "auto" and sv_fits:
        options.append(sv)
        planning = 0.0 if planner is None else _planning_seconds(single, store, replace(planner, expected_runs=count),
                                                                 per_worker, dtype)
        if sv.seconds <= planning:
            return _statevector_choice(f"state vector predicted {sv.seconds:.3g} s, less than planning the network "
                                       f"engines would take (~{planning:.3g} s)", sv, rate, count)
    errors: list[str] = []
    notes: list[str] = []
    planned: dict[int, Option] = {}
    sizes = ([1] if engine in ("auto", "single", "stacked") or count < 2 else []) + \
        (batch_candidates(count) if engine in ("auto", "batch") else [])
    # the planning budget is for the whole request: shared by every contraction size planned, and
    # with two batch sizes or more a share of it for trying each one's order on the others. Each size
    # gets an equal part of what is left when its turn comes, so time a size does not use (a stored
    # plan, a network not worth searching) goes to the next and an overrun shortens the next.
    batch_sizes = [b for b in sizes if b > 1]
    sharing = SHARE_ORDERS_FRACTION if planner is not None and store is not None and len(batch_sizes) > 1 else 0.0
    deadline = time.perf_counter() + (planner.budget_seconds if planner is not None else 0.0)
    reserved = 0.0 if planner is None else planner.budget_seconds * sharing
    for k, b in enumerate(sizes):
        per_size = None if planner is None else replace(
            planner, budget_seconds=max(0.0, deadline - reserved - time.perf_counter()) / (len(sizes) - k),
            expected_runs=max(1.0, count / b))           # contractions of this size the request would run
        try:
            # ``workers`` local processes contract slices side by side, each with its own intermediates:
            # each gets its share of the cap, so the run as a whole stays within ``memory_bytes``
            planned[b] = network_option(circuit, b, dtype, rate, store, per_size, per_worker, open_qubits,
                                        single if b == 1 else None)
        except MemoryLimitError as exc:
            errors.append(f"{b} per contraction: {exc}")
        except NoStoredPlan:
            pass
    # only when a size was searched now: with every plan read from the store there is nothing to share
    if sharing and any(b not in planned or not planned[b].plan_cached for b in batch_sizes):
        _share_batch_orders(circuit, batch_sizes, planned, store, planner, per_worker, dtype, rate, open_qubits,
                            max(0.0, deadline - time.perf_counter()))
    stacked = None
    single = scheduled("single", count, {1: planned[1]}, workers) if 1 in planned else None
    batched = scheduled("batch", count, planned, workers) if any(b > 1 for b in planned) else None
    if batched is not None and batched.batch == 1 and 1 in planned:
        batched = None                                     # all chunks of one: that is the single engine
    if single is not None and count >= 2 and not open_qubits and engine in ("auto", "stacked"):
        # compared as the choice below compares them, with the request's fixed cost added to both
        single_s = single.seconds + rate.request_overhead_seconds
        # the fastest other network engine: a request it answers in under STACKED_MIN_SECONDS is not worth
        # the row counting (30 ms of a 0.3 s batch request of 1,000 bitstrings, measured)
        others_s = min(single_s, batched.seconds + rate.request_overhead_seconds if batched else math.inf)
        if engine == "stacked" or others_s >= STACKED_MIN_SECONDS:
            table = bit_table(bitstrings) if bitstrings is not None and len(bitstrings) == count else \
                np.random.default_rng(0).integers(0, 2, (count, n), dtype=np.uint8)
            stacked = stacked_option(planned[1], table, rate, dtype, per_worker, workers)
        stacked_s = stacked.seconds + rate.request_overhead_seconds if stacked is not None else math.inf
        if stacked is not None and (engine == "stacked" or stacked_s <= STACKED_MARGIN * single_s):
            options.append(stacked)
        elif stacked is not None:
            notes.append(f"stacked chunks predicted {stacked_s:.3g} s, not under {STACKED_MARGIN:g}x single "
                         f"amplitudes' {single_s:.3g} s")
            stacked = None
        else:
            notes.append(f"stacked chunks not considered: the other network engines predicted {others_s:.3g} s, "
                         f"under {STACKED_MIN_SECONDS:g} s")
    if single is not None and not (engine == "stacked" and stacked is not None):
        options.append(single)
    if batched is not None:
        options.append(batched)
    if not options and not search:
        return None
    if not options:
        raise MemoryLimitError("no engine fits the memory cap: " + "; ".join(errors))
    options = [_with_overhead(o, rate) for o in options]
    best, margin = pick_fastest(options)
    if engine == "stacked" and best.engine != "stacked":
        reason = "requested the stacked engine; one bitstring, or two do not fit the memory cap: single amplitudes"
    elif engine != "auto":
        reason = "requested"
    else:
        others = ", ".join(f"{_label(o)} {o.seconds:.3g} s" for o in options if o is not best)
        reason = margin or f"fastest predicted: {_label(best)} {best.seconds:.3g} s" + (f" (vs {others})" if others else "")
        slower = [b for b in planned if b > 1 and planned[b].seconds / b >= planned.get(1, best).seconds]
        if best.engine == "single" and slower:
            reason += f"; batches of {'/'.join(map(str, sorted(slower)))} predicted slower per bitstring"
        if not sv_fits:
            reason += f"; a state vector needs {sv.peak_bytes:.3g} bytes, over the cap"
        reason += "".join("; " + x for x in notes)
    resliced = sliced_further_note(best.plan) if best.plan is not None else None
    if resliced:
        reason += "; " + resliced
    return Choice(best.engine, reason, best, options, planned, count=count)
