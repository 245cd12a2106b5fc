"""The service on a shared PostgreSQL database: two replicas (two app instances) on one server.

The test starts a throw-away PostgreSQL server from Debian's packages (initdb + pg_ctl, loopback
only, a free port, trust authentication inside a temporary directory) and skips, saying why, when
the binaries or the ``postgres`` system user (the server refuses to run as root) are missing.
Reference values: GHZ amplitudes (Nielsen & Chuang 2010).
"""

from __future__ import annotations

import glob
import math
import os
import shutil
import subprocess
import time

import pytest

pytest.importorskip("psycopg")

from fastapi.testclient import TestClient  # noqa: E402
from sqlalchemy import create_engine, func, select  # noqa: E402

from service.app import create_app  # noqa: E402
from service.db import PlanRow, ResultRow  # noqa: E402

from .loopback import free_port  # noqa: E402
from .test_service import GHZ, make_settings, wait_job  # noqa: E402


def _pg_bin() -> str | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if found:
        return os.path.dirname(found[-1])
    exe = shutil.which("initdb")
    return os.path.dirname(exe) if exe else None


@pytest.fixture(scope="module")
def postgres_url():
    bindir = _pg_bin()
    if bindir is None:
        pytest.skip("PostgreSQL server binaries not found (Debian package 'postgresql'; .ci/run installs it)")
    prefix: list[str] = []
    if os.geteuid() == 0:
        if shutil.which("runuser") is None or subprocess.run(["id", "postgres"], capture_output=True).returncode:
            pytest.skip("running as root without a 'postgres' user: the server refuses to start as root")
        prefix = ["runuser", "-u", "postgres", "--"]
    import pwd
    import tempfile
    from pathlib import Path

    data = Path(tempfile.mkdtemp(prefix="veramp-pg-"))       # outside pytest's root-only tree
    if prefix:
        user = pwd.getpwnam("postgres")
        os.chown(data, user.pw_uid, user.pw_gid)
    pgdata = data / "data"
    port = free_port()
    run = lambda *cmd: subprocess.run(prefix + list(cmd), check=True, capture_output=True, text=True)  # noqa: E731
    run(f"{bindir}/initdb", "-D", str(pgdata), "-A", "trust", "-U", "veramp", "--no-sync")
    run(f"{bindir}/pg_ctl", "-D", str(pgdata), "-l", str(data / "log"), "-w", "-o",
        f"-p {port} -k {data} -c listen_addresses=127.0.0.1 -c fsync=off", "start")
    try:
        run(f"{bindir}/createdb", "-h", "127.0.0.1", "-p", str(port), "-U", "veramp", "veramp_test")
        yield f"postgresql+psycopg://veramp@127.0.0.1:{port}/veramp_test"
    finally:
        subprocess.run(prefix + [f"{bindir}/pg_ctl", "-D", str(pgdata), "-m", "fast", "stop"], capture_output=True)
        shutil.rmtree(data, ignore_errors=True)


def test_two_replicas_share_results_plans_and_jobs(postgres_url, tmp_path):
    a = make_settings(tmp_path / "a", database_url=postgres_url, sync_threshold_seconds=0.0)
    b = make_settings(tmp_path / "b", database_url=postgres_url)
    bits = ["000", "111", "010", "111"]
    with TestClient(create_app(a)) as ca, TestClient(create_app(b)) as cb:
        reg = ca.post("/v1/circuits", json={"qasm": GHZ})
        assert reg.status_code == 201
        cid = reg.json()["circuit_id"]
        # replica a: forced network engine, answered by a job (sync threshold 0)
        r = ca.post("/v1/amplitudes", json={"circuit_id": cid, "bitstrings": bits, "engine": "batch"})
        assert r.status_code == 202
        job = wait_job(ca, r.json()["job_id"])
        assert job["status"] == "succeeded", job
        # replica b sees the job and the cached results; nothing is computed again
        assert cb.get(f"/v1/jobs/{job['job_id']}").json()["status"] == "succeeded"
        again = cb.post("/v1/amplitudes", json={"circuit_id": cid, "bitstrings": bits, "engine": "batch"}).json()
        assert again["provenance"]["computed"] == 0 and again["provenance"]["cached"] == 4
        amps = [complex(*x["amplitude"]) for x in again["results"]]
        assert math.isclose(amps[1].real, 1 / math.sqrt(2), abs_tol=1e-15) and amps[2] == 0
        # the same circuit registered on both replicas at once is one row, not an error
        assert cb.post("/v1/circuits", json={"qasm": GHZ}).status_code == 201
    engine = create_engine(postgres_url)
    with engine.connect() as conn:
        assert conn.scalar(select(func.count()).select_from(ResultRow)) == 3      # distinct bitstrings
        assert conn.scalar(select(func.count()).select_from(PlanRow)) >= 1
    engine.dispose()


def test_service_keeps_working_after_a_database_restart(postgres_url, tmp_path):
    """pool_pre_ping: a connection dropped by the server is replaced, not reported as a 500."""
    settings = make_settings(tmp_path, database_url=postgres_url)
    with TestClient(create_app(settings)) as client:
        assert client.post("/v1/circuits", json={"qasm": GHZ}).status_code == 201
        engine = create_engine(postgres_url)
        with engine.connect() as conn:
            conn.exec_driver_sql("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                                 "WHERE pid <> pg_backend_pid() AND datname = current_database()")
            conn.commit()
        engine.dispose()
        time.sleep(0.2)
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["111"]})
        assert r.status_code == 200 and math.isclose(r.json()["results"][0]["probability"], 0.5, abs_tol=1e-15)


def test_documented_bitstring_limit_on_postgres(postgres_url, tmp_path):
    from .test_service import check_bitstring_limit

    s = make_settings(tmp_path, database_url=postgres_url)
    with TestClient(create_app(s)) as c:
        check_bitstring_limit(c, s.max_bitstrings)
