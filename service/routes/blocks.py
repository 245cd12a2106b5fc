"""/v1/blocks and /v1/marginals: all 2^k amplitudes on k open qubits, and k-qubit marginals."""

from fastapi import APIRouter, Depends

from contraction.execution.blocks import block_amplitudes, marginal_probabilities
from contraction.planning.options import PlannerOptions

from ..db import SqlPlanStore
from ..deps import AppState, get_state, resolve_circuit
from ..schemas import BlockIn, BlockOut, ErrorOut, MarginalIn, MarginalOut

router = APIRouter(prefix="/v1", tags=["blocks"])

ORDER = ("entry i holds the qubits' values read from the binary digits of i, the first listed qubit "
         "most significant")


def _options(state: AppState) -> dict:
    s = state.settings
    return dict(planner=PlannerOptions(budget_seconds=s.plan_budget_seconds), plan_store=SqlPlanStore(state.sessions),
                memory_bytes=s.run_memory_bytes, rate=state.rate())


@router.post("/blocks", response_model=BlockOut, responses={413: {"model": ErrorOut}, 422: {"model": ErrorOut}})
def post_block(body: BlockIn, state: AppState = Depends(get_state)) -> BlockOut:
    """All 2^k amplitudes on ``qubits`` with the other qubits fixed, from one contraction."""
    circuit = resolve_circuit(state, body)
    r = block_amplitudes(circuit, body.qubits, body.fixed, dtype=body.dtype, engine=body.engine, **_options(state))
    return BlockOut(circuit_id=circuit.circuit_id, qubits=list(r.qubits), order=ORDER,
                    amplitudes=[(v.real, v.imag) for v in r.values.tolist()], engine=r.engine, reason=r.reason,
                    wall_seconds=r.wall_seconds)


@router.post("/marginals", response_model=MarginalOut,
             responses={413: {"model": ErrorOut}, 422: {"model": ErrorOut}})
def post_marginal(body: MarginalIn, state: AppState = Depends(get_state)) -> MarginalOut:
    """Marginal probabilities on ``qubits`` (summed over every other qubit)."""
    circuit = resolve_circuit(state, body)
    r = marginal_probabilities(circuit, body.qubits, engine=body.engine, **_options(state))
    return MarginalOut(circuit_id=circuit.circuit_id, qubits=list(r.qubits), order=ORDER,
                       probabilities=r.values.tolist(), engine=r.engine, reason=r.reason, wall_seconds=r.wall_seconds)
