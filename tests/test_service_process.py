"""The service as a real uvicorn process on 127.0.0.1: durability across a hard kill (SIGKILL)
mid-job, and the Python client. Values are checked against the numpy state vector."""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from contraction.circuits.qasm_writer import write_qasm3
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.statevector import state_vector
from service.client import Client

from .loopback import free_port
from .test_service import RATE


def start(data_dir, port, *extra: str):
    env = {**os.environ, "VERAMP_WORKERS": "1", "VERAMP_PLAN_BUDGET_SECONDS": "0.5",
           "VERAMP_SYNC_THRESHOLD_SECONDS": "0"}
    # the server's own messages go to server.log beside its data (read by a test that fails)
    with open(Path(data_dir) / "server.log", "ab") as log:
        proc = subprocess.Popen([sys.executable, "-m", "service.cli", "serve", "--port", str(port),
                                 "--data-dir", str(data_dir), *extra], env=env, start_new_session=True,
                                stdout=log, stderr=log)
    for _ in range(200):
        try:
            if httpx.get(f"http://127.0.0.1:{port}/v1/health", timeout=0.5).status_code == 200:
                return proc
        except httpx.TransportError:
            time.sleep(0.1)
    proc.kill()
    raise AssertionError("server did not start")


def kill_hard(proc):
    os.killpg(proc.pid, signal.SIGKILL)       # the server and its worker processes
    proc.wait()


@pytest.mark.slow
def test_job_survives_sigkill_and_client_reads_results(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    c = random_instance(grid_architecture(4, 6, 8), 5)              # 24 qubits
    bits = [format(i * 7919 % 2 ** 24, "024b") for i in range(200)]
    port = free_port()
    proc = start(data, port)
    try:
        with Client(f"http://127.0.0.1:{port}") as cl:
            # one contraction per bitstring: each is a chunk of its own, so the job is seen mid-way
            job = cl.amplitudes(bits, qasm=write_qasm3(c), engine="single")
            job_id = job["job_id"]
            for _ in range(600):                                    # wait until it is mid-way
                j = cl.job(job_id)
                if j["status"] == "running" and j["done"] > 0:
                    break
                time.sleep(0.1)
            assert j["status"] == "running" and 0 < j["done"] < j["total"]   # really mid-job
        kill_hard(proc)
        proc = start(data, port)                                    # restart: the job resumes
        with Client(f"http://127.0.0.1:{port}") as cl:
            final = cl.wait(job_id, poll=0.2)
            assert final["status"] == "succeeded", final
            rows = list(cl.results(job_id, page=64))
    finally:
        kill_hard(proc)
    assert [r["bitstring"] for r in rows] == bits                   # nothing lost, input order
    psi = state_vector(c)
    for r in rows:
        a = complex(*r["amplitude"])
        assert abs(a - psi[int(r["bitstring"], 2)]) <= 1e-10 * abs(a)
    # nothing duplicated: one cached row per (circuit, bitstring, dtype)
    import sqlite3

    con = sqlite3.connect(data / "veramp.sqlite")
    assert con.execute("select count(*) from results").fetchone()[0] == len(set(bits))


@pytest.mark.slow
def test_submit_command_follows_a_job(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    (data / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    c = random_instance(grid_architecture(4, 6, 6), 8)
    (tmp_path / "c.qasm").write_text(write_qasm3(c))
    bits = ["0" * 24, "1" * 24, "01" * 12]
    (tmp_path / "b.txt").write_text("\n".join(bits))
    port = free_port()
    proc = start(data, port)
    try:
        out = subprocess.run([sys.executable, "-m", "service.cli", "submit", str(tmp_path / "c.qasm"), "--bitstrings",
                              str(tmp_path / "b.txt"), "--url", f"http://127.0.0.1:{port}", "--format", "json"],
                             capture_output=True, text=True, timeout=300)
        bad = subprocess.run([sys.executable, "-m", "service.cli", "submit", str(tmp_path / "c.qasm"), "--bitstrings",
                              str(tmp_path / "b.txt"), "--url", "http://127.0.0.1:1", "--retries", "1"], capture_output=True, text=True)
    finally:
        kill_hard(proc)
    assert out.returncode == 0, out.stderr
    rows = json.loads(out.stdout)["results"]
    psi = state_vector(c)
    assert [r["bitstring"] for r in rows] == bits
    for r in rows:
        assert abs(complex(*r["amplitude"]) - psi[int(r["bitstring"], 2)]) < 1e-12
    assert bad.returncode == 2 and "cannot reach" in bad.stderr and "Traceback" not in bad.stderr
