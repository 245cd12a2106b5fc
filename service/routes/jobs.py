"""/v1/jobs: status, progress and ETA, results in pages and as NDJSON/CSV streams, cancellation."""

import json

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import StreamingResponse

from contraction.errors import Conflict, NotFound

from ..compute import cached_results
from ..db import JobRow
from ..deps import AppState, get_state, owner_of
from ..jobs import job_out
from ..schemas import AmplitudeOut, ErrorOut, JobOut, ResultsPage

router = APIRouter(prefix="/v1/jobs", tags=["jobs"])


def _job(state: AppState, job_id: str, request: Request) -> JobRow:
    """The job, if it exists and belongs to the caller's token (another token's job is a 404, as if
    it did not exist)."""
    with state.sessions() as s:
        job = s.get(JobRow, job_id)
    if job is None or (job.owner is not None and job.owner != owner_of(request)):
        raise NotFound(f"no job with id {job_id}")
    return job


def _finished(state: AppState, job_id: str, request: Request) -> JobRow:
    job = _job(state, job_id, request)
    if job.status != "succeeded":
        raise Conflict(f"job {job_id} is {job.status}; results are available when it has succeeded")
    return job


@router.get("/{job_id}", response_model=JobOut, responses={404: {"model": ErrorOut}})
def get_job(job_id: str, request: Request, state: AppState = Depends(get_state)) -> JobOut:
    """A job's status, progress and ETA."""
    return job_out(_job(state, job_id, request))


@router.post("/{job_id}/cancel", response_model=JobOut, responses={404: {"model": ErrorOut}})
def cancel_job(job_id: str, request: Request, state: AppState = Depends(get_state)) -> JobOut:
    """Cancel a queued or running job; finished jobs are left as they are."""
    job = _job(state, job_id, request)
    if job.status not in ("succeeded", "failed", "cancelled"):
        state.jobs.cancel(job_id)
    return job_out(_job(state, job_id, request))


def _items(state: AppState, job: JobRow, offset: int, limit: int | None):
    bits = job.bitstring_list()
    part = bits[offset:None if limit is None else offset + limit]
    with state.sessions() as s:
        have = cached_results(s, job.circuit_id, part, job.dtype)
    for b in part:
        r = have.get(b)
        if r is None:  # evicted or never stored: report, never invent
            raise Conflict(f"result for {b} is missing; resubmit the job")
        yield b, r.re, r.im


@router.get("/{job_id}/results", response_model=ResultsPage,
            responses={404: {"model": ErrorOut}, 409: {"model": ErrorOut}})
def results_page(job_id: str, request: Request, offset: int = Query(0, ge=0),
                 limit: int = Query(1000, ge=1, le=10000), state: AppState = Depends(get_state)) -> ResultsPage:
    """A page of a finished job's results, in input order."""
    job = _finished(state, job_id, request)
    rows = [AmplitudeOut(bitstring=b, amplitude=(re, im), probability=re * re + im * im, cached=True)
            for b, re, im in _items(state, job, offset, limit)]
    return ResultsPage(job_id=job_id, offset=offset, limit=limit, total=len(job.bitstring_list()), results=rows)


def _stream(state: AppState, job: JobRow, fmt: str):
    if fmt == "csv":
        yield "bitstring,amplitude_re,amplitude_im,probability\n"
    total = len(job.bitstring_list())
    for start in range(0, total, 1000):
        for b, re, im in _items(state, job, start, 1000):
            p = re * re + im * im
            if fmt == "csv":
                yield f"{b},{re!r},{im!r},{p!r}\n"
            else:
                yield json.dumps({"bitstring": b, "amplitude": [re, im], "probability": p}) + "\n"


@router.get("/{job_id}/results.ndjson", responses={404: {"model": ErrorOut}, 409: {"model": ErrorOut}})
def results_ndjson(job_id: str, request: Request, state: AppState = Depends(get_state)):
    """A finished job's results as newline-delimited JSON, streamed."""
    job = _finished(state, job_id, request)
    return StreamingResponse(_stream(state, job, "ndjson"), media_type="application/x-ndjson")


@router.get("/{job_id}/results.csv", responses={404: {"model": ErrorOut}, 409: {"model": ErrorOut}})
def results_csv(job_id: str, request: Request, state: AppState = Depends(get_state)):
    """A finished job's results as CSV, streamed."""
    job = _finished(state, job_id, request)
    return StreamingResponse(_stream(state, job, "csv"), media_type="text/csv")
