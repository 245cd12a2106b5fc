"""The one path from a stored circuit and bitstrings to cached, provenance-stamped amplitudes.

Used by synchronous requests (in the API process) and by jobs (in worker processes). Bitstrings
already in the result cache are not recomputed; repeated bitstrings are computed once; results
come back in input order. New amplitudes are written in chunks, so an interrupted job keeps what
it finished and a resumed job does not compute it again.
"""

from __future__ import annotations

import functools
import platform
import time
from dataclasses import dataclass
from typing import Callable

from sqlalchemy import String, any_, literal, select
from sqlalchemy.dialects.postgresql import ARRAY
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session, sessionmaker

from contraction.circuits.json_document import from_document, to_document
from contraction.circuits.model import Circuit
from contraction.execution.amplitudes import amplitudes
from contraction.planning.options import PlannerOptions

from .db import CircuitRow, ResultRow, SqlPlanStore


@dataclass
class ResultItem:
    """One amplitude of a request, from the cache or computed now, with the engine and plan that made it."""

    bitstring: str
    re: float
    im: float
    cached: bool
    engine: str
    plan_hash: str | None

    @property
    def probability(self) -> float:
        """|amplitude|²."""
        return self.re * self.re + self.im * self.im


@functools.lru_cache(maxsize=1)
def versions() -> dict:
    """Versions of veramp and the numeric libraries, for provenance."""
    import cotengra
    import numpy

    from . import __version__

    return {"veramp": __version__, "python": platform.python_version(), "numpy": numpy.__version__,
            "cotengra": cotengra.__version__}


def store_circuit(sessions: sessionmaker[Session], circuit: Circuit) -> CircuitRow:
    """Store the circuit (once; concurrent stores of the same circuit are safe) and return its row."""
    import json

    from sqlalchemy.exc import IntegrityError

    with sessions() as s:
        row = s.get(CircuitRow, circuit.circuit_id)
        if row is None:
            row = CircuitRow(circuit_id=circuit.circuit_id, architecture_id=circuit.architecture_id,
                             num_qubits=circuit.num_qubits, num_gates=len(circuit.gates),
                             document=json.dumps(to_document(circuit)), created=time.time())
            s.add(row)
            try:
                s.commit()
            except IntegrityError:      # another replica stored the same circuit first: same content
                s.rollback()
                row = s.get(CircuitRow, circuit.circuit_id)
        return row


def load_circuit(sessions: sessionmaker[Session], circuit_id: str) -> Circuit | None:
    """The stored circuit with this id, or None."""
    import json

    with sessions() as s:
        row = s.get(CircuitRow, circuit_id)
        if row is None:
            return None
        return from_document(json.loads(row.document), max_qubits=10 ** 9)


#: bitstrings per cache lookup: an IN list binds one variable each on SQLite; PostgreSQL gets one
#: array parameter (``= ANY(...)``), which its planner handles far faster than a long IN list
_LOOKUP_ROWS = {"sqlite": 30000, "postgresql": 20000}


def cached_results(s: Session, circuit_id: str, bits: list[str], dtype: str) -> dict[str, ResultRow]:
    """Stored results among ``bits`` for this circuit and dtype, keyed by bitstring."""
    out: dict[str, ResultRow] = {}
    unique = list(dict.fromkeys(bits))
    dialect = s.bind.dialect.name
    step = _LOOKUP_ROWS.get(dialect, 500)
    for i in range(0, len(unique), step):
        part = unique[i:i + step]
        if dialect == "postgresql":
            match = ResultRow.bitstring == any_(literal(part, ARRAY(String)))
        else:
            match = ResultRow.bitstring.in_(part)
        q = select(ResultRow).where(ResultRow.circuit_id == circuit_id, ResultRow.dtype == dtype, match)
        out.update({r.bitstring: r for r in s.scalars(q)})
    return out


def _save(sessions, circuit_id: str, dtype: str, results, engine: str, plan_hash: str | None) -> None:
    rows = [{"circuit_id": circuit_id, "bitstring": r.bitstring, "dtype": dtype,
             "re": r.amplitude.real, "im": r.amplitude.imag, "engine": engine,
             "plan_hash": plan_hash, "created": time.time()}
            for r in results]
    if not rows:
        return
    with sessions() as s:
        dialect = s.bind.dialect.name
        if dialect in ("sqlite", "postgresql"):
            # rows another replica wrote first are equal by construction: keep theirs
            insert = sqlite_insert if dialect == "sqlite" else pg_insert
            # a multi-row insert binds one variable per column and row: stay far below SQLite's
            # limit of 32,766 bound variables (and PostgreSQL's 65,535)
            # executemany: SQLAlchemy batches the rows into multi-row INSERTs within the driver's
            # limits on bound variables ("insertmanyvalues")
            s.execute(insert(ResultRow).on_conflict_do_nothing(), rows)
        else:
            have = cached_results(s, circuit_id, [r["bitstring"] for r in rows], dtype)
            s.add_all(ResultRow(**r) for r in rows if r["bitstring"] not in have)
        s.commit()


def compute(sessions: sessionmaker[Session], circuit: Circuit, bits: list[str], *, dtype: str, engine: str,
            planner: PlannerOptions, memory_bytes: float,
            on_chunk: Callable[[int], None] | None = None,
            cancelled: Callable[[], bool] | None = None,
            have: dict[str, ResultRow] | None = None, rate=None, runner=None,
            choice=None, on_choice: Callable | None = None,
            progress: Callable | None = None) -> tuple[list[ResultItem], dict]:
    """Amplitudes for ``bits`` (input order), from the cache where possible. Returns (items, stats).

    Each finished chunk of new amplitudes is stored at once, so an interrupted job keeps it.
    ``have`` is the cache lookup when the caller has just made it (saves a second query); ``choice``
    the engine choice the caller made for its prediction (not made again when it fits); ``on_choice``
    sees the choice once it is made (planning is over), ``progress`` every finished task."""
    t0 = time.perf_counter()
    if have is None:
        with sessions() as s:
            have = cached_results(s, circuit.circuit_id, bits, dtype)
    todo = [b for b in dict.fromkeys(bits) if b not in have]
    stats = {"computed": 0, "cached": 0, "madds": 0.0, "engine": None, "plan_hash": None, "plan_cached": None}
    fresh: dict[str, ResultItem] = {}
    if todo:
        done_unique = len(dict.fromkeys(bits)) - len(todo)
        # the engine is chosen before the first chunk finishes; rows are stamped with it
        stamp: dict = {}

        def on_results(results) -> None:
            nonlocal done_unique
            _save(sessions, circuit.circuit_id, dtype, results, stamp["engine"], stamp["plan_hash"])
            for r in results:
                fresh[r.bitstring] = ResultItem(r.bitstring, r.amplitude.real, r.amplitude.imag, False,
                                                stamp["engine"], stamp["plan_hash"])
            done_unique += len(results)
            if on_chunk is not None:
                on_chunk(done_unique)

        def chosen(choice) -> None:
            stamp["engine"] = choice.engine
            stamp["plan_hash"] = choice.chosen.plan.plan_hash if choice.chosen.plan else None
            if on_choice is not None:
                on_choice(choice)

        run = amplitudes(circuit, todo, dtype=dtype, engine=engine, planner=planner,
                         plan_store=SqlPlanStore(sessions), memory_bytes=memory_bytes, cancelled=cancelled,
                         rate=rate, runner=runner, on_results=on_results, on_choice=chosen, choice=choice,
                         progress=progress)
        stats.update(engine=run.engine, plan_hash=stamp["plan_hash"], plan_cached=run.plan_cached,
                     madds=run.madds, reason=run.reason, batch=run.batch, chunks=run.chunks,
                     predicted_seconds=run.predicted_seconds)
    items = []
    for b in bits:
        if b in fresh:
            items.append(fresh[b])
        else:
            r = have[b]
            items.append(ResultItem(b, r.re, r.im, True, r.engine, r.plan_hash))
    stats["computed"] = len(fresh)
    stats["cached"] = sum(1 for it in items if it.cached)
    stats["wall_seconds"] = time.perf_counter() - t0
    return items, stats
