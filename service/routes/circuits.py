"""/v1/circuits: register a circuit, fetch it back."""

import json

from fastapi import APIRouter, Depends

from contraction.errors import NotFound

from ..compute import store_circuit
from ..db import CircuitRow
from ..deps import AppState, get_state, parse_circuit
from ..schemas import CircuitDetail, CircuitIn, CircuitOut, ErrorOut

router = APIRouter(prefix="/v1/circuits", tags=["circuits"])


@router.post("", status_code=201, response_model=CircuitOut, responses={422: {"model": ErrorOut}})
def register_circuit(body: CircuitIn, state: AppState = Depends(get_state)) -> CircuitOut:
    """Register a circuit; its id is the content hash, its architecture id the structure hash."""
    c = parse_circuit(state, body)
    store_circuit(state.sessions, c)
    return CircuitOut(circuit_id=c.circuit_id, architecture_id=c.architecture_id,
                      num_qubits=c.num_qubits, num_gates=len(c.gates))


@router.get("/{circuit_id}", response_model=CircuitDetail, responses={404: {"model": ErrorOut}})
def get_circuit(circuit_id: str, state: AppState = Depends(get_state)) -> CircuitDetail:
    """A registered circuit with its JSON document."""
    with state.sessions() as s:
        row = s.get(CircuitRow, circuit_id)
    if row is None:
        raise NotFound(f"no circuit with id {circuit_id}")
    return CircuitDetail(circuit_id=row.circuit_id, architecture_id=row.architecture_id,
                         num_qubits=row.num_qubits, num_gates=row.num_gates, document=json.loads(row.document))
