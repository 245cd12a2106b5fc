"""/v1/paths: p(theta) along the Cayley path between a circuit and a Haar deformation of it."""

import math

import numpy as np
from fastapi import APIRouter, Depends, Query, Response

from contraction.analysis.cayley import cayley_path, path_probabilities
from contraction.analysis.rational_fit import recover_path
from contraction.errors import VerampError
from contraction.planning.options import PlannerOptions

from ..db import SqlPlanStore
from ..deps import AppState, get_state, resolve_circuit
from ..plots import FORMATS, path_plot
from ..schemas import ErrorOut, PathIn, PathOut

router = APIRouter(prefix="/v1", tags=["paths"])

#: beyond this the known denominator overflows double precision for ordinary circuits
MAX_THETA = 1e3


def _compute(body: PathIn, state: AppState):
    circuit = resolve_circuit(state, body)
    values = body.thetas + (body.recover.nodes + body.recover.targets if body.recover else [])
    if not all(math.isfinite(t) and abs(t) <= MAX_THETA for t in values):
        raise VerampError(f"theta values must be finite numbers of magnitude at most {MAX_THETA:g}")
    s = state.settings
    opts = dict(planner=PlannerOptions(budget_seconds=s.plan_budget_seconds), plan_store=SqlPlanStore(state.sessions),
                memory_bytes=s.run_memory_bytes)
    path = cayley_path(circuit, body.seed)
    probs, engine = path_probabilities(path, body.bitstring, body.thetas, **opts)
    recovery = None
    if body.recover is not None:
        r = body.recover
        samples, _ = path_probabilities(path, body.bitstring, r.nodes, **opts)
        try:
            recovery = recover_path(path, r.nodes, samples, r.targets, errors=r.errors, noise=r.noise,
                                    max_relative_error=r.max_relative_error)
        except (np.linalg.LinAlgError, FloatingPointError, OverflowError) as exc:
            raise VerampError(f"the recovery is numerically impossible for these nodes: {exc}") from None
    return circuit, path, probs, engine, recovery


@router.post("/paths", response_model=PathOut, responses={413: {"model": ErrorOut}, 422: {"model": ErrorOut}})
def post_path(body: PathIn, state: AppState = Depends(get_state)) -> PathOut:
    """p(theta) at the given thetas (one plan for the whole path); with ``recover``, p recovered at
    ``targets`` from samples at ``nodes``, with error bounds (targets the samples do not determine are declined, with the reason)."""
    circuit, path, probs, engine, recovery = _compute(body, state)
    return PathOut(circuit_id=circuit.circuit_id, bitstring=body.bitstring, seed=body.seed, engine=engine,
                   gate_dimension_sum=path.degree_bound, fitted_degree=2 * path.degree_bound, theta=body.thetas, probability=probs.tolist(),
                   recovery=recovery.to_dict() if recovery else None)


@router.post("/paths/plot", response_class=Response, responses={200: {"content": {m: {} for m in FORMATS.values()}},
                                                               422: {"model": ErrorOut}})
def post_path_plot(body: PathIn, format: str = Query("png", pattern="^(png|svg)$"),
                   state: AppState = Depends(get_state)) -> Response:
    """The figure of p(theta), with the recovered points and their error bars when asked."""
    _circuit, _path, probs, _engine, recovery = _compute(body, state)
    return Response(path_plot(body.thetas, probs, body.bitstring, recovery, format), media_type=FORMATS[format])
