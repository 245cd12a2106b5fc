"""/v1/estimates and /v1/amplitudes: cost reports, and amplitudes now (200) or as a job (202)."""

from fastapi import APIRouter, Depends, Request, Response

from contraction.circuits.bitstrings import check_bitstrings
from contraction.errors import LimitError
from contraction.planning.estimate import estimate
from contraction.planning.options import PlannerOptions

from ..compute import compute, versions
from ..db import SqlPlanStore
from ..deps import AppState, get_state, owner_of, resolve_circuit
from ..jobs import job_out
from ..schemas import AmplitudeOut, AmplitudesIn, AmplitudesOut, ErrorOut, EstimateIn, JobOut, Provenance

router = APIRouter(prefix="/v1", tags=["amplitudes"])


@router.post("/estimates", responses={422: {"model": ErrorOut}, 413: {"model": ErrorOut}})
def post_estimate(body: EstimateIn, state: AppState = Depends(get_state)) -> dict:
    """What the amplitudes would cost: multiply-adds, FLOPs, peak memory, slices, predicted time."""
    circuit = resolve_circuit(state, body)
    s = state.settings
    est = estimate(circuit, body.count, dtype=body.dtype, engine=body.engine, rate=state.rate(),
                   planner=PlannerOptions(budget_seconds=min(s.plan_budget_seconds, 2.0)),
                   plan_store=SqlPlanStore(state.sessions), memory_bytes=s.run_memory_bytes)
    return {"circuit_id": circuit.circuit_id, **est.to_dict(), "rates": state.rate_source()}


def _all_cached(state: AppState, body: AmplitudesIn) -> AmplitudesOut | None:
    """The answer straight from the result cache, without loading the circuit (the hot path of
    pipelines re-checking reference probabilities); None when anything is missing."""
    import time

    from ..compute import cached_results
    from ..db import CircuitRow

    t0 = time.perf_counter()
    with state.sessions() as sess:
        row = sess.get(CircuitRow, body.circuit_id)
        if row is None:
            return None
        bits = check_bitstrings(body.bitstrings, row.num_qubits)
        have = cached_results(sess, body.circuit_id, bits, body.dtype)
    if len(have) != len(set(bits)):
        return None
    first = have[bits[0]]
    state.metrics.cache_hits.inc(len(bits))
    prov = Provenance(versions=versions(), engine=first.engine, plan_hash=first.plan_hash, dtype=body.dtype,
                      wall_seconds=time.perf_counter() - t0, computed=0, cached=len(bits))
    return AmplitudesOut(circuit_id=body.circuit_id, provenance=prov, results=[
        AmplitudeOut(bitstring=b, amplitude=(have[b].re, have[b].im),
                     probability=have[b].re ** 2 + have[b].im ** 2, cached=True) for b in bits])


@router.post("/amplitudes", response_model=AmplitudesOut | JobOut,
             responses={202: {"model": JobOut}, 413: {"model": ErrorOut}, 422: {"model": ErrorOut},
                        429: {"model": ErrorOut}})
def post_amplitudes(body: AmplitudesIn, response: Response, request: Request, state: AppState = Depends(get_state)):
    """Amplitudes for a batch of bitstrings (qubit 0 first). Small work answers at once; larger work
    returns 202 with a job to follow."""
    s = state.settings
    if len(body.bitstrings) > s.max_bitstrings:
        raise LimitError("max_bitstrings", f"{len(body.bitstrings)} bitstrings exceed the limit of "
                                              f"{s.max_bitstrings} per request")
    if body.circuit_id is not None and body.circuit is None:
        hit = _all_cached(state, body)
        if hit is not None:
            return hit
    circuit = resolve_circuit(state, body)
    bits = check_bitstrings(body.bitstrings, circuit.num_qubits)
    from ..compute import cached_results

    with state.sessions() as sess:
        have = cached_results(sess, circuit.circuit_id, bits, body.dtype)
    all_cached = len(have) == len(set(bits))
    # nothing to compute: no prediction needed (it reads plans and builds the network)
    choice = None if all_cached else state.predict(circuit, len(dict.fromkeys(bits)), body.dtype, body.engine)
    predicted = None if choice is None else choice.chosen.seconds
    if predicted is not None and predicted > s.max_predicted_seconds:
        raise LimitError("max_predicted_seconds", f"predicted {predicted:.4g} s exceeds the limit of "
                                                     f"{s.max_predicted_seconds:.4g} s")
    if not all_cached and (predicted is None or predicted > s.sync_threshold_seconds):
        job = state.jobs.create(circuit.circuit_id, bits, body.dtype, body.engine, owner=owner_of(request))
        state.metrics.queue_depth.set(state.jobs.depth)
        response.status_code = 202
        response.headers["Location"] = f"/v1/jobs/{job.id}"
        return job_out(job)
    items, stats = compute(state.sessions, circuit, bits, dtype=body.dtype, engine=body.engine,
                           planner=PlannerOptions(budget_seconds=s.plan_budget_seconds),
                           memory_bytes=s.run_memory_bytes, have=have, rate=state.rate(), choice=choice)
    state.metrics.cache_hits.inc(stats["cached"])
    state.metrics.cache_misses.inc(stats["computed"])
    state.metrics.madds.inc(stats["madds"])
    prov = Provenance(versions=versions(), engine=stats["engine"] or items[0].engine,
                      plan_hash=stats["plan_hash"] or items[0].plan_hash, dtype=body.dtype,
                      wall_seconds=stats["wall_seconds"], computed=stats["computed"], cached=stats["cached"],
                      reason=stats.get("reason"), batch=stats.get("batch"), chunks=stats.get("chunks"),
                      predicted_seconds=stats.get("predicted_seconds"), rates=state.rate_source())
    return AmplitudesOut(circuit_id=circuit.circuit_id, provenance=prov, results=[
        AmplitudeOut(bitstring=i.bitstring, amplitude=(i.re, i.im), probability=i.probability, cached=i.cached)
        for i in items])
