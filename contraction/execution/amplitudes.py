"""Exact amplitudes <x|C|0...0> of a circuit for a list of bitstrings.

The request is answered by the engine :mod:`contraction.planning.engine_choice` picks (state vector,
batched network contractions, one contraction per bitstring, or chunks of bitstrings through the single
amplitude's tree with stacked intermediates) or the one the caller forces.
Repeated bitstrings are computed once; results come back in input order; ``on_results`` receives
each chunk's amplitudes as soon as the chunk is finished (the service stores them right away) and
``progress`` counts finished tasks (a task is one chunk, or a run of one chunk's slices).

With ``open_qubits`` the bitstrings that agree on all other qubits form one group, and one
contraction (with those qubits left open) gives the 2^k amplitudes of the whole group at once.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field, replace
from typing import Callable, Iterable, Sequence

import numpy as np

from contraction import defaults
from contraction.circuits.bitstrings import bit_table, check_bitstrings
from contraction.circuits.model import Circuit
from contraction.errors import VerampError
from contraction.execution.executor import CancelCheck, Progress, ProgressCallback, combine_scaled
from contraction.execution.slices import ProcessRunner, Runner, Task, make_runner, split_slices
from contraction.execution.stacked import batch_inputs
from contraction.execution.statevector import state_vector
from contraction.network.builder import resolve_dtype, tensor_arrays
from contraction.planning.engine_choice import Choice, Option, choose, tasks_per_chunk
from contraction.planning.options import PlannerOptions
from contraction.planning.plan import Plan
from contraction.planning.rates import MachineRate
from contraction.planning.slice_reuse import reuse_budget
from contraction.planning.stacked_cost import projected_qubits
from contraction.planning.store import PlanStore

log = logging.getLogger(__name__)



@dataclass(frozen=True)
class Amplitude:
    """One bitstring (qubit 0 first) and its amplitude ⟨x|C|0…0⟩."""

    bitstring: str
    amplitude: complex

    @property
    def probability(self) -> float:
        """|amplitude|²."""
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
    batch: int = 1                               # bitstrings (or groups) per contraction
    chunks: int = 0                              # contractions run
    madds: float = 0.0                           # complex multiply-adds of the whole request
    predicted_seconds: float = 0.0
    predictions: dict[str, float] = field(default_factory=dict)


ResultsCallback = Callable[[list[Amplitude]], None]


#: seconds a pool of local worker processes takes to start and take its first task (measured: one
#: amplitude of a 20-qubit 10-cycle circuit in 0.02-0.07 s in the calling process, 0.18-0.24 s through a
#: pool of two)
POOL_START_SECONDS = 0.15


def amplitudes(circuit: Circuit, bitstrings: Iterable[str], *, dtype: str = "complex128",
               engine: str = "auto", planner: PlannerOptions | None = None,
               plan_store: PlanStore | None = None, memory_bytes: float = defaults.MEMORY_BYTES,
               workers: int = 1, progress: ProgressCallback | None = None,
               cancelled: CancelCheck | None = None, rate: MachineRate | None = None,
               runner: Runner | None = None, on_results: ResultsCallback | None = None,
               open_qubits: Sequence[int] = (),
               on_choice: Callable[[Choice], None] | None = None, choice: Choice | None = None) -> AmplitudeRun:
    """Exact amplitudes of ``circuit`` for ``bitstrings`` (qubit 0 first), in input order.

    ``memory_bytes`` caps the whole run: with ``workers`` local processes each contraction is planned
    within its share of it. ``choice``: an engine choice already made for these bitstrings (e.g. for
    a prediction), used as it is when it was made for as many distinct bitstrings (or groups)."""
    t0 = time.perf_counter()
    bits = check_bitstrings(bitstrings, circuit.num_qubits)
    dt = resolve_dtype(dtype)
    unique = list(dict.fromkeys(bits))
    open_qubits = tuple(open_qubits)
    groups = _groups(unique, open_qubits)
    # local processes contracting side by side share the memory cap (a Dask runner's do not)
    local = runner.workers if isinstance(runner, ProcessRunner) else (workers if runner is None else 1)
    distinct = None if open_qubits else list(groups)    # the bitstrings the stacked engine's cost reads
    if choice is None or choice.count != len(groups):
        choice = choose(circuit, len(groups), engine=engine, dtype=dtype, rate=rate, store=plan_store,
                        planner=planner, memory_bytes=memory_bytes, open_qubits=open_qubits, workers=local,
                        bitstrings=distinct)
    if runner is None and local > 1 and choice.engine != "statevector" and \
            choice.chosen.seconds >= FEWER_WORKERS_MIN_SECONDS:
        alone = _one_worker(circuit, choice, engine=engine, dtype=dtype, rate=rate, store=plan_store,
                            memory_bytes=memory_bytes, open_qubits=open_qubits, bitstrings=distinct)
        if alone is not None:
            choice = replace(alone, reason=f"{alone.reason}; one worker with the whole memory cap predicted "
                                           f"{alone.chosen.seconds:.3g} s against {choice.chosen.seconds:.3g} s "
                                           f"for {local} workers sharing it")
            workers = local = 1
    if on_choice is not None:
        on_choice(choice)
    found: dict[str, complex] = {}

    def emit(values: dict[str, complex]) -> None:
        found.update(values)
        if on_results is not None:
            on_results([Amplitude(b, v) for b, v in values.items()])

    if choice.engine == "statevector":
        psi = state_vector(circuit, dtype=dt)
        emit({b: complex(psi[int(b, 2)]) for b in unique})
        if progress is not None:
            progress(Progress(1, 1, time.perf_counter() - t0))
    else:
        if runner is None:
            # run here when a pool would save less than its start (predictions assume ``local`` workers;
            # the plan was made for one worker's share of the cap, so it fits)
            inline = choice.chosen.seconds * (local - 1) < POOL_START_SECONDS
            runner = make_runner(1 if inline else workers)
        if choice.engine == "stacked":
            _run_stacked(circuit, choice.chosen, list(groups), dt, runner, emit, progress, cancelled)
        else:
            _run_network(circuit, choice.chosen, groups, open_qubits, dt, runner,
                         emit, progress, cancelled, memory_bytes / max(1, local))
    o = choice.chosen
    return AmplitudeRun([Amplitude(b, found[b]) for b in bits], choice.engine, choice.reason, dtype,
                        time.perf_counter() - t0, o.plan, o.plan_cached, o.batch, max(1, o.chunks), o.madds,
                        o.seconds, choice.predictions())


#: a pool's choice is compared with one worker holding the whole cap only when predicted at this many
#: seconds or more (the comparison reads the stored plans again: not worth it for short requests)
FEWER_WORKERS_MIN_SECONDS = 1.0


def _one_worker(circuit: Circuit, pooled: Choice, **kw) -> Choice | None:
    """The choice for one worker with the whole memory cap, from stored plans only (nothing searched),
    when it is predicted faster than ``pooled`` (made for a pool sharing the cap); else None.

    A pool splits the cap, and a stored plan that fits the whole cap but not a share is sliced further
    at whatever cost: a 53-qubit 14-cycle plan of 64 slices (predicted 1,866 s on one worker) became
    16,777,216 slices for two workers (predicted 1.9e7 s), and ran."""
    if kw.get("store") is None:
        return None
    try:
        alone = choose(circuit, pooled.count, search=False, workers=1, **kw)
    except VerampError:
        return None
    if alone is None or alone.chosen.seconds >= pooled.chosen.seconds:
        return None
    return alone


def _groups(unique: list[str], open_qubits: tuple[int, ...]) -> dict[str, list[str]]:
    """Bitstrings keyed by their bits on the projected qubits (open qubits' bits set to 0)."""
    if not open_qubits:
        return {b: [b] for b in unique}
    out: dict[str, list[str]] = {}
    for b in unique:
        key = list(b)
        for q in open_qubits:
            key[q] = "0"
        out.setdefault("".join(key), []).append(b)
    return out


def _run_network(circuit: Circuit, option: Option, groups: dict[str, list[str]], open_qubits: tuple[int, ...],
                 dt, runner: Runner, emit, progress: ProgressCallback | None,
                 cancelled: CancelCheck | None, worker_bytes: float = 0.0) -> None:
    """Run the chunks of ``option.schedule`` (grouped by batch size, one plan each). ``worker_bytes``:
    each worker's share of the memory cap; a share of what it leaves above a plan's peak keeps
    intermediates between slices (:mod:`contraction.planning.slice_reuse`)."""
    phase = np.exp(1j * circuit.global_phase)
    keys = list(groups)
    chunks: dict[int, list[tuple[int, list[str]]]] = {}     # batch size -> [(chunk number, group keys)]
    pos = 0
    for number, b in enumerate(option.schedule):
        part = keys[pos:pos + b]
        pos += len(part)
        chunks.setdefault(b, []).append((number, part))
    total_tasks = 0
    plans = []
    for b, items in chunks.items():
        sub = option.parts[b]
        pieces = split_slices(sub.plan.nslices, tasks_per_chunk(sub.plan.nslices, runner.workers))
        reuse = reuse_budget(worker_bytes / np.dtype(dt).itemsize, sub.plan.peak_elements, sub.plan.width)
        tasks, owner = [], []
        first = None                      # gate tensors are computed once per contraction size, then shared
        for number, part in items:
            padded = part + [part[-1]] * (b - len(part))
            s = sub.contraction.structure
            arrays = tensor_arrays(s, circuit, padded if s.batch else padded[0], dt, reuse=first)
            first = first or arrays
            for piece in pieces:
                tasks.append(Task(arrays, piece, reuse))
                owner.append(number)
        plans.append((sub, items, tasks, owner, len(pieces)))
        total_tasks += len(tasks)
    tally = _Tally(total_tasks, progress)
    for sub, items, tasks, owner, per_chunk in plans:
        members = dict(items)
        batched = bool(sub.contraction.structure.batch)

        def finish(number: int, value, members=members, batched=batched) -> None:
            emit(_pick(value * phase, members[number], groups, open_qubits, batched))

        runner.run(sub.contraction, tasks, tally.collector(owner, per_chunk, finish), cancelled)


class _Tally:
    """Counts finished tasks over a whole request (for ``progress``) and sums each chunk's parts."""

    def __init__(self, total: int, progress: ProgressCallback | None):
        self.total, self.progress, self.done = total, progress, 0
        self.t0 = time.perf_counter()

    def collector(self, owner: list[int], per_chunk: int, finish: Callable[[int, np.ndarray], None]):
        """A runner's ``done`` callback for tasks belonging to chunks ``owner[k]``, each chunk split into
        ``per_chunk`` tasks: ``finish(chunk, value)`` once all of a chunk's reduced parts are in."""
        parts_of: dict[int, list] = {}

        def done(k: int, results) -> None:
            number = owner[k]
            parts_of.setdefault(number, []).extend(results)
            self.done += 1
            if len(parts_of[number]) == per_chunk:        # every task of the chunk has sent its reduced part
                finish(number, combine_scaled(parts_of.pop(number)))
            if self.progress is not None:
                self.progress(Progress(self.done, self.total, time.perf_counter() - self.t0))

        return done


def _run_stacked(circuit: Circuit, option: Option, keys: list[str], dt, runner: Runner, emit,
                 progress: ProgressCallback | None, cancelled: CancelCheck | None) -> None:
    """Run the stacked engine's chunks (``option.schedule``: bitstrings per chunk, in order) through the
    single amplitude's contraction, each chunk's slices split into tasks as a single amplitude's are."""
    phase = np.exp(1j * circuit.global_phase)
    c = option.contraction
    s = c.structure
    projected = projected_qubits(s)
    pieces = split_slices(c.plan.nslices, tasks_per_chunk(c.plan.nslices, runner.workers))
    first = tensor_arrays(s, circuit, keys[0], dt)            # gate tensors computed once, shared by every chunk
    tasks, owner, members = [], [], {}
    pos = 0
    for number, size in enumerate(option.schedule):
        part = keys[pos:pos + size]
        pos += size
        table = bit_table(part)
        arrays = batch_inputs(s, circuit, table, dt, reuse=first)
        members[number] = part
        for piece in pieces:
            tasks.append(Task(arrays, piece, 0.0, (projected, table)))
            owner.append(number)

    def finish(number: int, value) -> None:
        emit({b: complex(v) for b, v in zip(members[number], value * phase)})

    runner.run(c, tasks, _Tally(len(tasks), progress).collector(owner, len(pieces), finish), cancelled)


def _pick(value: np.ndarray, part: list[str], groups: dict[str, list[str]], open_qubits: tuple[int, ...],
          batched: bool) -> dict[str, complex]:
    """The requested amplitudes out of one chunk's output (axes: batch?, open qubits)."""
    out = {}
    for i, key in enumerate(part):
        block = value[i] if batched else value
        for b in groups[key]:
            idx = tuple(int(b[q]) for q in open_qubits)
            out[b] = complex(block[idx])
    return out
