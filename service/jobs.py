"""Durable jobs run by a bounded pool of worker processes apart from the web workers.

A job is a row in the database before it is queued, so it survives a restart: on start-up every
job still ``queued`` or ``running`` is queued again, and the result cache makes the resumed job
skip what it had finished. Worker processes limit BLAS to one thread each.
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import logging
import os
import threading
import time
import uuid

from sqlalchemy import func, or_, select, update

from contraction.errors import Busy, Cancelled, MemoryLimitError, VerampError
from contraction.execution.slices import worker_context
from contraction.planning.options import PlannerOptions
from contraction.planning.progress import SearchProgress, observe_searches
from contraction.planning.rates import read_rate

from .db import JobRow, make_engine, session_factory
from .schemas import JobOut

log = logging.getLogger("veramp.jobs")

TERMINAL = ("succeeded", "failed", "cancelled")


#: seconds between two heartbeats of a running job; a running job silent for STALE_SECONDS was left by
#: a process that ended and is queued again by a server process's sweep (common practice for leases)
HEARTBEAT_SECONDS = 5.0
STALE_SECONDS = 30.0
#: seconds between two writes of a running plan search's progress to the job's row
SEARCH_REPORT_SECONDS = 2.0


def _init_worker(owner: int | None = None) -> None:
    from contraction.execution.slices import prepare_contraction_process

    # a job process contracts: one BLAS thread, freed memory kept; it ends with the server process
    # (a killed server's jobs are queued again on restart, and must not also go on running here)
    prepare_contraction_process(owner)


def run_job(job_id: str, db_url: str, memory_bytes: float, budget: float, dask_scheduler: str | None = None,
            calibration_path: str | None = None, memory_note: str = "") -> dict:
    """Run one job to completion in a worker process; all state goes through the database.
    ``memory_note`` is added to a refusal for memory (how the cap is shared)."""
    from .compute import compute, load_circuit, versions

    sessions = session_factory(make_engine(db_url))
    now = time.time()
    with sessions() as s:
        s.execute(update(JobRow).where(JobRow.id == job_id, JobRow.status == "queued", JobRow.cancel_requested != 0)
                  .values(status="cancelled", finished=now))
        # the claim: one atomic update from queued to running; a job another process (another server
        # worker) claimed first, or one that is no longer queued, is left alone
        claimed = s.execute(update(JobRow).where(JobRow.id == job_id, JobRow.status == "queued")
                            .values(status="running", started=func.coalesce(JobRow.started, now),
                                    phase="planning", heartbeat=now)).rowcount
        s.commit()
        if claimed != 1:
            return {}
        job = s.get(JobRow, job_id)
        bits, dtype, engine, chash = job.bitstring_list(), job.dtype, job.engine, job.circuit_id
    def set_row(*where, **values) -> None:
        """Write ``values`` to this job's row (where ``where`` also holds)."""
        with sessions() as s2:
            s2.execute(update(JobRow).where(JobRow.id == job_id, *where).values(**values))
            s2.commit()

    beating = threading.Event()

    def beat() -> None:
        while not beating.wait(HEARTBEAT_SECONDS):
            try:
                set_row(JobRow.status == "running", heartbeat=time.time())
            except Exception:                     # a busy database: the next beat tries again
                log.warning("heartbeat of job %s not written", job_id, exc_info=True)

    threading.Thread(target=beat, name="veramp-job-heartbeat", daemon=True).start()
    last_check = [0.0, False]

    def cancelled() -> bool:
        now = time.monotonic()
        if now - last_check[0] > 0.5:
            last_check[0] = now
            with sessions() as s2:
                last_check[1] = bool(s2.scalar(select(JobRow.cancel_requested).where(JobRow.id == job_id)))
        return last_check[1]

    def on_chunk(done: int) -> None:
        set_row(done=done)

    last_search = [0.0]

    def on_search(p: SearchProgress) -> None:
        # every report of a search's start and end, at most one every SEARCH_REPORT_SECONDS in between
        now = time.monotonic()
        if p.trials and not p.final and now - last_search[0] < SEARCH_REPORT_SECONDS:
            return
        last_search[0] = now
        doc = {"trials": p.trials, "best_madds": p.best_madds, "seconds": round(p.seconds, 2),
               "budget_seconds": p.budget_seconds}
        set_row(planning=json.dumps(doc))

    def on_choice(choice) -> None:
        set_row(phase="contracting", predicted_seconds=choice.chosen.seconds, contracting_since=time.time())

    status, error, prov = "succeeded", None, None
    try:
        circuit = load_circuit(sessions, chash)
        if circuit is None:
            raise VerampError("the job's circuit is no longer stored")
        runner = None
        if dask_scheduler:
            from contraction.execution.dask_runner import DaskRunner

            runner = DaskRunner(dask_scheduler)
        try:
            with observe_searches(on_search):
                items, stats = compute(sessions, circuit, bits, dtype=dtype, engine=engine,
                                       planner=PlannerOptions(budget_seconds=budget), memory_bytes=memory_bytes,
                                       on_chunk=on_chunk, cancelled=cancelled, runner=runner,
                                       rate=read_rate(calibration_path), on_choice=on_choice)
        finally:
            if runner is not None:
                runner.close()
        stats["runner"] = "dask" if runner is not None else "local"
        prov = {"versions": versions(), "dtype": dtype, **stats}
    except Cancelled:
        status = "cancelled"
    except VerampError as exc:
        status, error = "failed", str(exc) + (memory_note if isinstance(exc, MemoryLimitError) else "")
    except MemoryError:
        status, error = "failed", "out of memory"
    except Exception as exc:  # a bug: keep the service alive and say what happened
        log.exception("job %s crashed", job_id)
        status, error = "failed", f"internal error: {type(exc).__name__}"
    beating.set()
    with sessions() as s:
        job = s.get(JobRow, job_id)
        job.status, job.error, job.finished, job.phase = status, error, time.time(), None
        if status == "succeeded":
            job.done = job.total
            job.provenance = json.dumps(prov)
        s.commit()
    return prov or {}


class JobManager:
    """Durable jobs: rows in the database, run in worker processes, resumed after a restart."""

    def __init__(self, settings, sessions, on_finish=None):
        self.settings = settings
        self.sessions = sessions
        self.on_finish = on_finish
        self._lock = threading.Lock()
        self._active: dict[str, cf.Future] = {}
        self._closing = False                   # set by shutdown(): dying workers are not failures then
        self._stop = threading.Event()          # ends the sweeper
        self.pool = self._new_pool()

    def _new_pool(self) -> cf.ProcessPoolExecutor:
        """Job processes that end with this one (a broken pool is replaced by a new one)."""
        return cf.ProcessPoolExecutor(max_workers=max(1, self.settings.workers), mp_context=worker_context(),
                                      initializer=_init_worker, initargs=(os.getpid(),))

    @property
    def depth(self) -> int:
        """Jobs queued or running."""
        with self._lock:
            return len(self._active)

    def create(self, circuit_id: str, bits: list[str], dtype: str, engine: str, owner: str | None = None) -> JobRow:
        """Store and queue a job; raises :class:`Busy` when the queue is full."""
        if self.depth >= self.settings.queue_size:
            raise Busy(retry_after=5)
        job = JobRow(id=uuid.uuid4().hex, status="queued", circuit_id=circuit_id, dtype=dtype,
                     engine=engine, bitstrings=json.dumps(bits), total=len(dict.fromkeys(bits)), done=0,
                     cancel_requested=0, created=time.time(), owner=owner)
        with self.sessions() as s:
            s.add(job)
            s.commit()
        self._submit(job.id)
        return job

    def _submit(self, job_id: str) -> None:
        fut = self.pool.submit(run_job, job_id, self.settings.sqlalchemy_url, self.settings.run_memory_bytes,
                               self.settings.plan_budget_seconds, self.settings.dask_scheduler,
                               str(self.settings.calibration_path), self.settings.run_share_note())
        with self._lock:
            self._active[job_id] = fut
        fut.add_done_callback(lambda f, j=job_id: self._done(j, f))

    def _done(self, job_id: str, fut: cf.Future) -> None:
        with self._lock:
            self._active.pop(job_id, None)
        if self._closing:
            return                  # shutting down: the job was put back in the queue, not failed
        if not fut.cancelled() and isinstance(fut.exception(), cf.process.BrokenProcessPool):
            # a worker died (killed, out of memory): fail the job with the reason, keep serving
            log.error("worker process died while running job %s", job_id)
            with self.sessions() as s:
                s.execute(update(JobRow).where(JobRow.id == job_id, JobRow.status.not_in(TERMINAL))
                          .values(status="failed", error="the worker process died (killed or out of memory)",
                                  finished=time.time()))
                s.commit()
            with self._lock:
                if getattr(self.pool, "_broken", False):
                    self.pool = self._new_pool()
            return
        if self.on_finish is not None and not fut.cancelled():
            try:
                self.on_finish(job_id, fut.result())
            except Exception:  # a dead worker: the row stays queued/running and resumes at restart
                log.exception("job %s did not finish cleanly", job_id)

    def resume(self) -> int:
        """Queue again every job left queued, or running without a recent heartbeat, by a process that
        ended. Jobs other live server workers are running keep beating and are left to them; a queued
        job several workers pick up runs once (the first claims it)."""
        self._requeue_stale()
        with self.sessions() as s:
            ids = list(s.scalars(select(JobRow.id).where(JobRow.status == "queued").order_by(JobRow.created)))
        for job_id in ids:
            self._submit(job_id)
        return len(ids)

    def _requeue_stale(self) -> list[str]:
        """Put running jobs whose heartbeat stopped back in the queue; the ids this process requeued
        (each stale job is requeued by one process: the update checks it is still stale)."""
        stale = time.time() - STALE_SECONDS
        mine = []
        with self.sessions() as s:
            cond = (JobRow.status == "running", or_(JobRow.heartbeat.is_(None), JobRow.heartbeat < stale))
            for job_id in list(s.scalars(select(JobRow.id).where(*cond))):
                if s.execute(update(JobRow).where(JobRow.id == job_id, *cond).values(status="queued")).rowcount == 1:
                    mine.append(job_id)
            s.commit()
        return mine

    def start_sweeping(self, every: float = 5.0) -> None:
        """Every ``every`` seconds, take over running jobs whose process ended (no heartbeat for
        STALE_SECONDS): another server worker that died, or this server's previous life."""
        def sweep() -> None:
            while not self._stop.wait(every):
                try:
                    for job_id in self._requeue_stale():
                        log.warning("job %s lost its process; queued again", job_id)
                        self._submit(job_id)
                except Exception:                    # a busy or vanished database: try again later
                    log.warning("sweep for stale jobs failed", exc_info=True)

        threading.Thread(target=sweep, name="veramp-job-sweeper", daemon=True).start()

    def cancel(self, job_id: str) -> None:
        """Mark the job for cancellation; a queued job never starts, a running one stops at its next
        check (its worker processes are terminated; a job contracting in its own process stops at its
        next task)."""
        with self.sessions() as s:
            s.execute(update(JobRow).where(JobRow.id == job_id).values(cancel_requested=1))
            s.commit()
        with self._lock:
            fut = self._active.get(job_id)
        if fut is not None and fut.cancel():
            with self.sessions() as s:
                s.execute(update(JobRow).where(JobRow.id == job_id, JobRow.status == "queued")
                          .values(status="cancelled", finished=time.time()))
                s.commit()

    def shutdown(self, grace: float = 3.0) -> None:
        """Stop taking work, put running jobs back in the queue (they resume at the next start, their
        finished chunks kept in the cache) and end every worker process within ``grace`` seconds."""
        self._stop.set()
        with self._lock:
            self._closing = True
            pool = self.pool
            procs = list((getattr(pool, "_processes", None) or {}).values())
            mine = list(self._active)
        pool.shutdown(wait=False, cancel_futures=True)
        try:
            # only this process's jobs: other server workers' running jobs are theirs
            with self.sessions() as s:
                s.execute(update(JobRow).where(JobRow.id.in_(mine), JobRow.status == "running")
                          .values(status="queued", heartbeat=None))
                s.commit()
        except Exception:                       # the database may be gone already: resume() handles it
            log.exception("could not mark running jobs for resumption")
        for p in procs:
            if p.is_alive():
                p.terminate()
        deadline = time.monotonic() + grace
        for p in procs:
            p.join(max(0.0, deadline - time.monotonic()))
            if p.is_alive():
                p.kill()
                p.join(1.0)


def job_out(job: JobRow) -> JobOut:
    """The API's view of a stored job: progress, ETA while running, provenance when done."""
    progress = job.done / job.total if job.total else 1.0
    eta = eta_seconds(job, time.time()) if job.status == "running" else None
    return JobOut(job_id=job.id, status=job.status, circuit_id=job.circuit_id, total=job.total,
                  done=job.done, progress=progress, eta_seconds=eta, error=job.error, phase=job.phase,
                  provenance=json.loads(job.provenance) if job.provenance else None,
                  planning=json.loads(job.planning) if job.planning else None)


#: progress (share of the bitstrings done) from which the measured rate predicts better than the model
RATE_TRUSTED_FROM = 0.1


def eta_seconds(job: JobRow, now: float) -> float | None:
    """Seconds left for a running job. None while planning (its length is the budget at most, not
    known in advance); while contracting, the prediction made when contracting started, minus the
    time since — until a tenth of the bitstrings are done, from when on the rate measured so far is
    the better guide (early rates are dominated by start-up and the first chunk's size)."""
    if job.phase != "contracting" or job.contracting_since is None:
        return None
    elapsed = max(0.0, now - job.contracting_since)
    share = job.done / job.total if job.total else 1.0
    if share >= RATE_TRUSTED_FROM and elapsed > 0:
        return elapsed / share * (1.0 - share)
    if job.predicted_seconds is None:
        return None
    return max(0.0, job.predicted_seconds - elapsed)
