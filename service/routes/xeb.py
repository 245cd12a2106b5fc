"""/v1/xeb: fidelity of device samples (JSON) and the N·p histogram against Porter–Thomas (image).

Probabilities come through the same cached compute path as /v1/amplitudes. Work that is not cached
and not predicted to be quick is refused with 409: run it as an amplitudes job first, then ask here
by circuit id (the cached probabilities are used).
"""

from typing import Literal

from fastapi import APIRouter, Depends, Query
from fastapi.responses import Response
from pydantic import BaseModel, Field

from contraction.analysis.xeb import estimate_xeb
from contraction.circuits.bitstrings import check_bitstrings
from contraction.errors import Conflict, LimitError, VerampError
from contraction.planning.options import PlannerOptions

from ..compute import cached_results, compute
from ..deps import AppState, get_state, resolve_circuit
from ..schemas import CircuitRef, ErrorOut

router = APIRouter(prefix="/v1/xeb", tags=["analysis"])


class XebIn(CircuitRef):
    """Device samples of a circuit and the bootstrap settings for their XEB."""

    samples: list[str] = Field(..., min_length=1, description="sampled bitstrings, qubit 0 first")
    bootstrap: int = Field(1000, ge=0, le=10000)
    seed: int = 0


def _probabilities(state: AppState, body: XebIn):
    s = state.settings
    if len(body.samples) > s.max_bitstrings:
        raise LimitError("max_bitstrings", f"{len(body.samples)} samples exceed the limit of {s.max_bitstrings}")
    circuit = resolve_circuit(state, body)
    bits = check_bitstrings(body.samples, circuit.num_qubits)
    with state.sessions() as sess:
        have = cached_results(sess, circuit.circuit_id, bits, "complex128")
    choice = None
    if len(have) != len(set(bits)):
        choice = state.predict(circuit, len(set(bits)), "complex128", "auto")
        if choice is None or choice.chosen.seconds > s.sync_threshold_seconds:
            raise Conflict("these probabilities are not cached and would take a while: POST them to "
                           "/v1/amplitudes (a job) first, then ask again", limit="sync_threshold_seconds")
    items, _stats = compute(state.sessions, circuit, bits, dtype="complex128", engine="auto",
                            planner=PlannerOptions(budget_seconds=s.plan_budget_seconds),
                            memory_bytes=s.run_memory_bytes, rate=state.rate(), have=have, choice=choice)
    return circuit, [i.probability for i in items]


@router.post("", responses={409: {"model": ErrorOut}, 413: {"model": ErrorOut}, 422: {"model": ErrorOut}})
def post_xeb(body: XebIn, state: AppState = Depends(get_state)) -> dict:
    """Linear XEB (sample, model and bootstrap errors) and log XEB of device samples."""
    circuit, probs = _probabilities(state, body)
    return {"circuit_id": circuit.circuit_id,
            **estimate_xeb(probs, circuit.num_qubits, bootstrap=body.bootstrap, seed=body.seed).to_dict()}


@router.post("/plot", response_class=Response,
             responses={200: {"content": {"image/png": {}, "image/svg+xml": {}}}, 409: {"model": ErrorOut}})
def post_xeb_plot(body: XebIn, format: Literal["png", "svg"] = Query("png"),
                  state: AppState = Depends(get_state)) -> Response:
    """The samples' N·p histogram against Porter–Thomas and the fitted mixture."""
    from ..plots import FORMATS, porter_thomas_plot

    circuit, probs = _probabilities(state, body)
    res = estimate_xeb(probs, circuit.num_qubits, bootstrap=0)
    return Response(porter_thomas_plot(probs, circuit.num_qubits, res.linear_xeb, format), media_type=FORMATS[format])


class FitIn(BaseModel):
    """Fidelities with standard errors against cycles, and cycle counts to extrapolate to."""

    cycles: list[float] = Field(..., min_length=3)
    fidelities: list[float] = Field(..., min_length=3)
    stderrs: list[float] = Field(..., min_length=3)
    extrapolate: list[float] = []


def _fit(body: FitIn):
    from contraction.analysis.xeb import fit_depth

    if not len(body.cycles) == len(body.fidelities) == len(body.stderrs):
        raise VerampError("cycles, fidelities and stderrs must have the same length")
    if any(not s > 0 for s in body.stderrs):
        raise VerampError("every stderr must be positive")
    try:
        return fit_depth(body.cycles, body.fidelities, body.stderrs)
    except (RuntimeError, ValueError) as exc:
        raise VerampError(f"the fit did not converge: {exc}") from None


@router.post("/fit", responses={422: {"model": ErrorOut}})
def post_fit(body: FitIn) -> dict:
    """Fit F(d) = A·(1 − e)^d: the per-cycle error e with a 95 % interval, and extrapolations."""
    fit = _fit(body)
    return {**fit.to_dict(), "extrapolations": [{"cycles": c, "fidelity": fit.predict(c)[0],
                                                 "stderr": fit.predict(c)[1]} for c in body.extrapolate]}


@router.post("/fit/plot", response_class=Response,
             responses={200: {"content": {"image/png": {}, "image/svg+xml": {}}}, 422: {"model": ErrorOut}})
def post_fit_plot(body: FitIn, format: Literal["png", "svg"] = Query("png")) -> Response:
    """XEB against cycles with error bars and the fitted decay."""
    from ..plots import FORMATS, depth_fit_plot

    fit = _fit(body)
    return Response(depth_fit_plot(body.cycles, body.fidelities, body.stderrs, fit, format), media_type=FORMATS[format])
