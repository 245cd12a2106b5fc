"""A Dask cluster started with Dask's own command-line tools (``python -m dask scheduler`` /
``python -m dask worker``), TCP on loopback: used by the cluster tests and by
``tests/benchmarks/bench_dask.py``."""

from __future__ import annotations

import os
import subprocess
import sys
import time
from contextlib import contextmanager
from pathlib import Path

from .loopback import free_port


@contextmanager
def cli_cluster(logs: Path, workers: int = 2, memory_limit: str = "2GiB", start_timeout: float = 60.0):
    """A scheduler and ``workers`` single-threaded worker processes (one BLAS thread each), yielding
    ``(client, processes)`` once every worker has joined; everything is stopped on exit."""
    import distributed

    port = free_port()
    address = f"tcp://127.0.0.1:{port}"
    env = {**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
    log_files = [open(logs / "scheduler.log", "w")] + [open(logs / f"worker{k}.log", "w") for k in range(workers)]
    procs = [subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--no-dashboard"], stdout=subprocess.DEVNULL, stderr=log_files[0], env=env)]
    for k in range(workers):
        procs.append(subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--nthreads", "1",
                                       "--nworkers", "1", "--no-nanny", "--memory-limit", memory_limit,
                                       "--no-dashboard", "--host", "127.0.0.1"], stdout=subprocess.DEVNULL,
                                      stderr=log_files[k + 1], env=env))
    client = None
    try:
        deadline = time.time() + start_timeout
        while time.time() < deadline:
            try:
                client = distributed.Client(address, timeout="2s")
                break
            except OSError:
                time.sleep(0.3)
        if client is None:
            raise RuntimeError("the scheduler did not answer: " + (logs / "scheduler.log").read_text()[-2000:])
        client.wait_for_workers(workers, timeout=start_timeout)
        yield client, procs
    finally:
        if client is not None:
            client.close()
        for p in procs:
            if p.poll() is None:
                p.terminate()
        for p in procs:
            try:
                p.wait(timeout=10)
            except subprocess.TimeoutExpired:
                p.kill()
        for f in log_files:
            f.close()
