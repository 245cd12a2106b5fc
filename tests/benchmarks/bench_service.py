"""Service latency benchmark on loopback: cached lookups with 32 concurrent clients (p50/p99,
requests per second) and uncached small-circuit requests. Starts its own server on 127.0.0.1
with a temporary database. Baseline in the same run: GET /v1/health (no database, no engine).

    python tests/benchmarks/bench_service.py [--requests 2000] [--clients 32] [--server-workers 1,2]

Each run starts its own server (``--server-workers`` uvicorn processes sharing one database) and
measures cached lookups by circuit id, the same lookups with the circuit inline (parsed once, then
found by content hash), and the baseline, all from the same client threads.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import httpx

GHZ = 'OPENQASM 2.0; include "qelib1.inc"; qreg q[8]; h q[0];' + "".join(
    f" cx q[{i}],q[{i + 1}];" for i in range(7))


def pct(xs, q):
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(q * len(xs)))]


def load(url, n, clients, body):
    lat: list[float] = []
    lock = threading.Lock()
    per = n // clients

    def worker():
        with httpx.Client(base_url=url, timeout=30) as c:
            mine = []
            for _ in range(per):
                t = time.perf_counter()
                r = c.post("/v1/amplitudes", json=body) if body else c.get("/v1/health")
                mine.append(time.perf_counter() - t)
                assert r.status_code == 200, r.text
            with lock:
                lat.extend(mine)

    t0 = time.perf_counter()
    ts = [threading.Thread(target=worker) for _ in range(clients)]
    for t in ts:
        t.start()
    for t in ts:
        t.join()
    wall = time.perf_counter() - t0
    return {"requests": len(lat), "p50_ms": round(pct(lat, 0.5) * 1e3, 2), "p99_ms": round(pct(lat, 0.99) * 1e3, 2),
            "rps": round(len(lat) / wall, 1)}


def load_async(url, n, clients, body):
    """The same load from one event loop (``clients`` concurrent requests in flight): a lighter client
    than 32 threads, so less of the 2 cores goes to the load generator itself."""
    import asyncio

    async def run():
        lat: list[float] = []
        per = n // clients
        async with httpx.AsyncClient(base_url=url, timeout=30,
                                     limits=httpx.Limits(max_connections=clients)) as c:
            async def one():
                for _ in range(per):
                    t = time.perf_counter()
                    r = await (c.post("/v1/amplitudes", json=body) if body else c.get("/v1/health"))
                    lat.append(time.perf_counter() - t)
                    assert r.status_code == 200, r.text
            t0 = time.perf_counter()
            await asyncio.gather(*(one() for _ in range(clients)))
            return lat, time.perf_counter() - t0

    lat, wall = asyncio.run(run())
    return {"requests": len(lat), "p50_ms": round(pct(lat, 0.5) * 1e3, 2), "p99_ms": round(pct(lat, 0.99) * 1e3, 2),
            "rps": round(len(lat) / wall, 1)}


def serve(workers: int):
    """A server with ``workers`` uvicorn processes on a free loopback port and a fresh data directory."""
    data = Path(tempfile.mkdtemp())
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    env = {**os.environ, "VERAMP_WORKERS": "1"}
    proc = subprocess.Popen([sys.executable, "-m", "service.cli", "serve", "--port", str(port), "--data-dir",
                             str(data), "--server-workers", str(workers)], env=env, start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    url = f"http://127.0.0.1:{port}"
    for _ in range(600):
        try:
            if httpx.get(url + "/v1/health").status_code == 200:
                break
        except httpx.TransportError:
            time.sleep(0.1)
    return proc, url


def run(workers: int, requests: int, clients: int, client: str = "threads") -> dict:
    proc, url = serve(workers)
    try:
        body = {"circuit": {"qasm": GHZ}, "bitstrings": ["00000000", "11111111"]}
        with httpx.Client(base_url=url) as c:
            cid = c.post("/v1/circuits", json={"qasm": GHZ}).json()["circuit_id"]
            for _ in range(4 * workers):
                c.post("/v1/amplitudes", json=body)          # fill the cache (and each process's circuit cache)
            uncached = []
            for i in range(50):
                b = format(i, "08b")
                qasm = GHZ + f" rz({0.001 * (i + 1)}) q[0];"  # a new circuit each time: nothing cached
                t = time.perf_counter()
                r = c.post("/v1/amplitudes", json={"circuit": {"qasm": qasm}, "bitstrings": [b]})
                uncached.append(time.perf_counter() - t)
                assert r.status_code == 200
        gen = load_async if client == "async" else load
        by_id = gen(url, requests, clients, {"circuit_id": cid, "bitstrings": ["00000000", "11111111"]})
        inline = gen(url, requests, clients, body)
        base = gen(url, requests, clients, None)
        return {"server_workers": workers, "client": client, "cached_by_id": by_id, "cached_inline": inline, "baseline_health": base,
                "uncached_small_circuit_ms_median": round(statistics.median(uncached) * 1e3, 2),
                "ratio_by_id_rps_over_health_rps": round(by_id["rps"] / base["rps"], 2),
                "ratio_inline_rps_over_health_rps": round(inline["rps"] / base["rps"], 2)}
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait()


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--requests", type=int, default=2000)
    ap.add_argument("--clients", type=int, default=32)
    ap.add_argument("--server-workers", default="1,2", help="comma-separated uvicorn process counts to run")
    ap.add_argument("--client", choices=["threads", "async"], default="threads",
                    help="load generator: one thread per client, or one event loop")
    args = ap.parse_args()
    rows = [run(int(w), args.requests, args.clients, args.client) for w in args.server_workers.split(",")]
    print(json.dumps({"benchmark": "service", "clients": args.clients, "runs": rows,
                      "goal": {"rps_ratio_to_health": 0.5, "p99_ms": 50}}))


if __name__ == "__main__":
    main()
