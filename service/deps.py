"""FastAPI dependencies and the shared state they hand out (settings, sessions, jobs, rates)."""

from __future__ import annotations

import hashlib
import json
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, field

from fastapi import Request
from sqlalchemy.orm import Session, sessionmaker

from contraction.circuits.loader import load_circuit
from contraction.circuits.model import Circuit
from contraction.errors import LimitError, NotFound, VerampError

from .compute import load_circuit as load_stored
from .compute import store_circuit
from .jobs import JobManager
from .metrics import Metrics
from .schemas import CircuitIn, CircuitRef
from .settings import Settings

#: circuits kept in memory per server process (each at most ``max_gates`` gates)
CIRCUIT_CACHE = 256


@dataclass
class AppState:
    """What every request shares: settings, sessions, the job manager, metrics and the machine rates."""

    settings: Settings
    sessions: sessionmaker[Session]
    jobs: JobManager
    metrics: Metrics
    _rate: object = None
    _rate_lock: threading.Lock = field(default_factory=threading.Lock)
    _calibrating: threading.Thread | None = None
    # circuits already read and stored, by the hash of the request's circuit text and by circuit id:
    # pipelines send the same circuit with every batch, and reading it again costs more than the lookup
    _circuits: OrderedDict = field(default_factory=OrderedDict)
    _circuits_lock: threading.Lock = field(default_factory=threading.Lock)

    def remembered(self, key: str) -> Circuit | None:
        """A circuit read (and stored) earlier under ``key``, or None."""
        with self._circuits_lock:
            c = self._circuits.get(key)
            if c is not None:
                self._circuits.move_to_end(key)
            return c

    def remember(self, key: str, circuit: Circuit) -> None:
        """Keep ``circuit`` under ``key`` (the least recently used of more than ``CIRCUIT_CACHE`` go)."""
        with self._circuits_lock:
            self._circuits[key] = circuit
            while len(self._circuits) > CIRCUIT_CACHE:
                self._circuits.popitem(last=False)

    def start_calibration(self) -> None:
        """Read the stored machine rates, or measure them in a background thread (logged); requests
        before it finishes use the nominal rates (see :meth:`rate_source`)."""
        import logging

        from contraction.execution.calibration import load_or_measure
        from contraction.planning.rates import read_rate

        self._rate = read_rate(self.settings.calibration_path)
        if self._rate is not None:
            return
        log = logging.getLogger("veramp.api")

        def run() -> None:
            t0 = time.perf_counter()
            log.info(json.dumps({"event": "calibration", "state": "started"}))
            rate = load_or_measure(self.settings.calibration_path)
            with self._rate_lock:
                self._rate = rate
            log.info(json.dumps({"event": "calibration", "state": "done",
                                 "seconds": round(time.perf_counter() - t0, 1)}))

        self._calibrating = threading.Thread(target=run, name="veramp-calibration", daemon=True)
        self._calibrating.start()

    def rate(self):
        """The machine's measured rates, or conservative nominal ones while calibration runs."""
        from contraction.execution.calibration import load_or_measure
        from contraction.planning.rates import NOMINAL_RATE

        with self._rate_lock:
            if self._rate is not None:
                return self._rate
            if self._calibrating is not None:
                return NOMINAL_RATE
            self._rate = load_or_measure(self.settings.calibration_path)
            return self._rate

    def predict(self, circuit: Circuit, count: int, dtype: str, engine: str):
        """The engine choice for ``count`` amplitudes from stored plans only (nothing is planned), with
        its predicted seconds; None when a plan would have to be searched first."""
        from contraction.planning.engine_choice import choose

        from .db import SqlPlanStore

        c = choose(circuit, count, engine=engine, dtype=dtype, rate=self.rate(), store=SqlPlanStore(self.sessions),
                   memory_bytes=self.settings.run_memory_bytes, search=False)
        return c

    def rate_source(self) -> str:
        """'measured', or 'nominal (calibration running)' for provenance."""
        with self._rate_lock:
            return "measured" if self._rate is not None or self._calibrating is None else "nominal (calibration running)"


def owner_of(request: Request) -> str | None:
    """The caller's identity for ownership: a digest of its bearer token (set by the guard
    middleware), or None when the service runs without tokens."""
    return request.scope.get("veramp_owner")


def get_state(request: Request) -> AppState:
    """Dependency: the application's :class:`AppState`."""
    return request.app.state.veramp


def parse_circuit(state: AppState, body: CircuitIn) -> Circuit:
    """The circuit of a request body (OpenQASM or document) within the configured limits; raises :class:`VerampError`
    or :class:`LimitError`."""
    s = state.settings
    if (body.qasm is None) == (body.document is None):
        raise VerampError("give exactly one of 'qasm' or 'document'")
    if body.qasm is not None:
        circuit = load_circuit(body.qasm, "<request>", "qasm", max_qubits=s.max_qubits, max_gates=s.max_gates)
    else:
        from contraction.circuits.json_document import from_document

        circuit = from_document(body.document, max_qubits=s.max_qubits)
    if len(circuit.gates) > s.max_gates:
        raise LimitError("max_gates", f"{len(circuit.gates)} gates exceed the limit of {s.max_gates}")
    return circuit


def resolve_circuit(state: AppState, ref: CircuitRef) -> Circuit:
    """The circuit a request names (by id) or carries (stored on the way); raises :class:`NotFound` for an unknown id."""
    if (ref.circuit_id is None) == (ref.circuit is None):
        raise VerampError("give exactly one of 'circuit_id' or 'circuit'")
    if ref.circuit_id is not None:
        circuit = state.remembered("id:" + ref.circuit_id) or load_stored(state.sessions, ref.circuit_id)
        if circuit is None:
            raise NotFound(f"no circuit with id {ref.circuit_id}")
        state.remember("id:" + ref.circuit_id, circuit)
        return circuit
    body = ref.circuit
    text = body.qasm if body.qasm is not None else json.dumps(body.document, sort_keys=True)
    key = "text:" + hashlib.sha256(f"{body.qasm is not None}\0{text}".encode()).hexdigest()
    circuit = state.remembered(key)
    if circuit is None:
        circuit = parse_circuit(state, body)
        store_circuit(state.sessions, circuit)
        state.remember(key, circuit)
    return circuit
