"""What an operator meets: job ownership under tokens, refusing a damaged database, shutting down
without orphan processes, refusing to serve exposed without tokens, and oversized bodies.

Expected behaviour is common practice for services (HTTP semantics from RFC 9110: 404 for a
resource the caller may not see, 413 for content too large); SQLite's integrity check is its
documented ``PRAGMA quick_check``.
"""

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time

import httpx
import pytest
from fastapi.testclient import TestClient

from service.app import create_app
from service.db import DatabaseError, check_sqlite_file

from .test_service import GHZ, RATE, make_settings
from .test_service_process import free_port, start


def test_jobs_belong_to_the_token_that_created_them(tmp_path):
    s = make_settings(tmp_path, tokens="alice-token,bob-token", sync_threshold_seconds=0.0)
    alice = {"Authorization": "Bearer alice-token"}
    bob = {"Authorization": "Bearer bob-token"}
    with TestClient(create_app(s)) as c:
        r = c.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["000", "111"],
                                           "engine": "batch"}, headers=alice)
        assert r.status_code == 202, r.text
        job = r.json()["job_id"]
        assert c.get(f"/v1/jobs/{job}", headers=alice).status_code == 200
        for path in (f"/v1/jobs/{job}", f"/v1/jobs/{job}/results", f"/v1/jobs/{job}/results.csv"):
            assert c.get(path, headers=bob).status_code == 404
        assert c.post(f"/v1/jobs/{job}/cancel", headers=bob).status_code == 404


def _database_with_rows(tmp_path) -> None:
    s = make_settings(tmp_path)                            # the database is tmp_path/data/veramp.sqlite
    with TestClient(create_app(s)) as c:
        for i in range(200):                               # distinct circuits: distinct rows
            c.post("/v1/circuits", json={"qasm": GHZ + "".join(f"rz({i}.{k}) q[{k % 3}];\n" for k in range(20))})


def test_truncated_database_is_refused_and_left_alone(tmp_path):
    data = tmp_path / "data"
    db = data / "veramp.sqlite"
    _database_with_rows(tmp_path)
    with sqlite3.connect(db) as conn:                      # move everything from the log into the file
        conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    for suffix in ("-wal", "-shm"):
        if (data / f"veramp.sqlite{suffix}").exists():
            os.remove(data / f"veramp.sqlite{suffix}")
    blob = db.read_bytes()
    assert len(blob) > 64 * 1024                           # many pages: half of them go missing
    db.write_bytes(blob[: len(blob) // 2])
    before = db.read_bytes()
    with pytest.raises(DatabaseError, match="veramp.sqlite"):
        check_sqlite_file(f"sqlite:///{db}")
    out = subprocess.run([sys.executable, "-m", "service.cli", "serve", "--data-dir", str(data), "--port",
                          str(free_port())], capture_output=True, text=True, timeout=120)
    assert out.returncode == 2 and "refusing to start" in out.stderr
    assert db.read_bytes() == before                       # never overwritten


def test_not_a_database_is_refused(tmp_path):
    db = tmp_path / "veramp.sqlite"
    db.write_bytes(b"this is a text file, not a database\n" * 100)
    with pytest.raises(DatabaseError, match="not a usable SQLite database"):
        check_sqlite_file(f"sqlite:///{db}")


def test_zero_byte_database_starts_new_and_says_so(tmp_path):
    db = tmp_path / "veramp.sqlite"
    db.write_bytes(b"")
    assert "empty file" in check_sqlite_file(f"sqlite:///{db}")
    with sqlite3.connect(db) as conn:                      # it really is empty: a new database is fine
        assert conn.execute("select count(*) from sqlite_master").fetchone()[0] == 0
    # and the service then uses that very file (it is not replaced): the circuit lands in it
    s = make_settings(tmp_path, database_url=f"sqlite:///{db}")
    with TestClient(create_app(s)) as c:
        assert c.post("/v1/circuits", json={"qasm": GHZ}).status_code == 201
    with sqlite3.connect(db) as conn:
        assert conn.execute("select count(*) from circuits").fetchone()[0] == 1


def test_exposed_host_without_tokens_is_refused_on_request(tmp_path):
    out = subprocess.run([sys.executable, "-m", "service.cli", "serve", "--host", "0.0.0.0", "--port",
                          str(free_port()), "--data-dir", str(tmp_path), "--require-tokens"],
                         capture_output=True, text=True, timeout=120, env={**os.environ, "VERAMP_TOKENS": ""})
    assert out.returncode == 2 and "without bearer tokens" in out.stderr


def _children(pid: int) -> set[int]:
    """Every descendant process of ``pid`` (from /proc)."""
    out, todo = set(), [pid]
    while todo:
        p = todo.pop()
        try:
            with open(f"/proc/{p}/task/{p}/children") as f:
                kids = {int(x) for x in f.read().split()}
        except OSError:
            kids = set()
        todo.extend(kids - out)
        out |= kids
    return out


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().split()[2] != "Z"
    except OSError:
        return False


def _serve(tmp_path):
    """A real server on a free loopback port, its calibration stored beforehand."""
    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    port = free_port()
    return data, port, start(data, port)


@pytest.mark.slow
def test_sigterm_ends_every_worker_and_requeues_the_running_job(tmp_path):
    from contraction.circuits.qasm_writer import write_qasm3
    from contraction.circuits.random_instances import grid_architecture, random_instance

    data, port, proc = _serve(tmp_path)
    c = random_instance(grid_architecture(4, 6, 8), 5)
    bits = [format(i * 7919 % 2 ** 24, "024b") for i in range(200)]
    r = httpx.post(f"http://127.0.0.1:{port}/v1/amplitudes", timeout=60,
                   json={"circuit": {"qasm": write_qasm3(c)}, "bitstrings": bits, "engine": "single"})
    job = r.json()["job_id"]
    for _ in range(600):
        if httpx.get(f"http://127.0.0.1:{port}/v1/jobs/{job}").json()["status"] == "running":
            break
        time.sleep(0.1)
    kids = _children(proc.pid)
    assert kids                                              # worker processes exist
    proc.send_signal(signal.SIGTERM)
    proc.wait(timeout=30)
    time.sleep(1.0)
    assert [k for k in kids if _alive(k)] == []              # no orphan outlives the server
    with sqlite3.connect(data / "veramp.sqlite") as conn:
        status = conn.execute("select status from jobs where id = ?", (job,)).fetchone()[0]
    assert status == "queued"                                # resumes at the next start


@pytest.mark.slow
def test_oversized_bodies_get_413_from_a_real_server(tmp_path):
    _data, port, proc = _serve(tmp_path)
    try:
        url = f"http://127.0.0.1:{port}/v1/amplitudes"
        big = b"a" * (40 * 2 ** 20)                          # over the 32 MiB default
        r = httpx.post(url, content=big, headers={"content-type": "application/json"}, timeout=60)
        assert r.status_code == 413 and r.json()["limit"] == "max_request_bytes"

        def chunks():                                        # no declared length: counted while read
            for _ in range(40):
                yield b"a" * 2 ** 20

        r = httpx.post(url, content=chunks(), headers={"content-type": "application/json"}, timeout=60)
        assert r.status_code == 413
        assert httpx.get(f"http://127.0.0.1:{port}/v1/health").status_code == 200
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=30)


def test_first_request_does_not_wait_for_calibration(tmp_path, monkeypatch):
    """No stored calibration: the service measures in the background; a request meanwhile is
    answered with nominal rates and says so in its provenance."""
    import threading

    import contraction.execution.calibration as cal

    gate = threading.Event()

    def slow_measure():
        gate.wait(30)                          # hold the calibration until the request is answered
        return RATE                            # (the real measurement takes ~25 s)

    monkeypatch.setattr(cal, "measure", slow_measure)
    d = tmp_path / "data"
    d.mkdir()
    from service.settings import Settings

    s = Settings(data_dir=d, workers=1, plan_budget_seconds=0.3)
    with TestClient(create_app(s)) as c:
        r = c.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["111"]})
        assert r.status_code == 200
        assert r.json()["provenance"]["rates"] == "nominal (calibration running)"
        gate.set()
        c.app.state.veramp._calibrating.join(60)
        r = c.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["000"]})
        assert r.json()["provenance"]["rates"] == "measured"
    assert (d / "calibration.json").exists()


def test_job_eta_comes_from_the_prediction_until_progress_is_a_better_guide():
    """No ETA while a plan is searched; then the prediction made when contracting started, counted
    down; from a tenth of the work on, the measured rate (common practice for progress bars)."""
    from service.db import JobRow
    from service.jobs import eta_seconds

    now = 1000.0
    job = JobRow(id="j", status="running", circuit_id="c", dtype="complex128", engine="auto", bitstrings="[]",
                 total=1000, done=0, phase="planning")
    assert eta_seconds(job, now) is None
    job.phase, job.predicted_seconds, job.contracting_since = "contracting", 100.0, now - 10.0
    assert eta_seconds(job, now) == pytest.approx(90.0)
    job.done = 50                                           # 5 %: too early to trust the rate
    assert eta_seconds(job, now) == pytest.approx(90.0)
    job.done = 500                                          # half done in 10 s: 10 s left
    assert eta_seconds(job, now) == pytest.approx(10.0)
    job.predicted_seconds, job.done = 5.0, 0                # the prediction ran out: never negative
    assert eta_seconds(job, now) == 0.0


def _job_row(tmp_path, **values):
    from service.db import JobRow, make_engine, session_factory

    url = f"sqlite:///{tmp_path / 'jobs.sqlite'}"
    sessions = session_factory(make_engine(url))
    row = dict(id="j1", status="queued", circuit_id="missing", dtype="complex128", engine="auto",
               bitstrings='["000"]', total=1, done=0, cancel_requested=0, created=time.time())
    row.update(values)
    with sessions() as s:
        s.add(JobRow(**row))
        s.commit()
    return url, sessions


def test_a_job_another_process_claimed_is_left_alone(tmp_path):
    # Several server workers share one database: a job is claimed by one atomic update from queued
    # to running, and a process that finds it claimed does nothing (common practice for job queues).
    from service.db import JobRow
    from service.jobs import run_job

    url, sessions = _job_row(tmp_path, status="running", heartbeat=time.time(), started=1.0)
    assert run_job("j1", url, 1e9, 0.1) == {}
    with sessions() as s:
        row = s.get(JobRow, "j1")
        assert (row.status, row.error, row.started) == ("running", None, 1.0)
    # a queued one is claimed and run (here it fails cleanly: its circuit is not stored)
    with sessions() as s:
        s.get(JobRow, "j1").status = "queued"
        s.commit()
    run_job("j1", url, 1e9, 0.1)
    with sessions() as s:
        row = s.get(JobRow, "j1")
        assert row.status == "failed" and "no longer stored" in row.error


def test_only_jobs_whose_heartbeat_stopped_are_taken_over(tmp_path):
    # heartbeat leases: work whose owner stopped renewing is taken over, once (common practice for
    # job queues; no outside source)
    from service.db import JobRow
    from service.jobs import STALE_SECONDS, JobManager

    url, sessions = _job_row(tmp_path, status="running", heartbeat=time.time())
    with sessions() as s:
        s.add(JobRow(id="j2", status="running", circuit_id="missing", dtype="complex128", engine="auto",
                     bitstrings='["000"]', total=1, done=0, cancel_requested=0, created=time.time(),
                     heartbeat=time.time() - 2 * STALE_SECONDS))
        s.commit()
    manager = JobManager.__new__(JobManager)            # only the database side is exercised here
    manager.sessions = sessions
    assert manager._requeue_stale() == ["j2"]
    assert manager._requeue_stale() == []                # taken over once
    with sessions() as s:
        assert s.get(JobRow, "j1").status == "running"   # its process is alive: left to it
        assert s.get(JobRow, "j2").status == "queued"


@pytest.mark.slow
def test_two_server_workers_share_the_queue(tmp_path):
    # `veramp serve --server-workers 2`: requests land on either process; every job runs to the right
    # values (numpy state vector) and each bitstring is computed once (one cached row each).
    from contraction.circuits.qasm_writer import write_qasm3
    from contraction.circuits.random_instances import grid_architecture, random_instance
    from contraction.execution.statevector import state_vector

    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    port = free_port()
    proc = start(data, port, "--server-workers", "2")
    try:
        circuits = [random_instance(grid_architecture(3, 4, 6), seed) for seed in range(4)]
        bits = ["000000000000", "101010101010", "111111111111"]
        base = f"http://127.0.0.1:{port}"
        jobs = []
        for c in circuits:
            r = httpx.post(f"{base}/v1/amplitudes", timeout=60,
                           json={"circuit": {"qasm": write_qasm3(c)}, "bitstrings": bits, "engine": "batch"})
            assert r.status_code == 202, r.text
            jobs.append(r.json()["job_id"])
        for c, job in zip(circuits, jobs):
            for _ in range(1200):
                j = httpx.get(f"{base}/v1/jobs/{job}", timeout=30).json()
                if j["status"] in ("succeeded", "failed", "cancelled"):
                    break
                time.sleep(0.1)
            assert j["status"] == "succeeded", j
            psi = state_vector(c)
            rows = httpx.get(f"{base}/v1/jobs/{job}/results", timeout=30).json()["results"]
            for row in rows:
                assert abs(complex(*row["amplitude"]) - psi[int(row["bitstring"], 2)]) < 1e-10
    except Exception:
        print((data / "server.log").read_text(errors="replace")[-20000:])   # what the server said
        raise
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)
    with sqlite3.connect(data / "veramp.sqlite") as conn:
        assert conn.execute("select count(*) from results").fetchone()[0] == len(circuits) * len(bits)
