"""The REST service in-process (TestClient): circuits, amplitudes, cache, jobs, errors, limits, auth.

Reference values: GHZ amplitudes 1/√2 on 000 and 111, 0 elsewhere (Nielsen & Chuang 2010); other
circuits are checked against the numpy state vector.
"""

import json
import math
import time

import pytest
from fastapi.testclient import TestClient

from contraction.circuits.qasm_writer import write_qasm3
from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.statevector import state_vector
from contraction.planning.rates import MachineRate
from service.app import create_app
from service.settings import Settings

from .test_bad_input import JSON_CASES, QASM_CASES

GHZ = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\nh q[0];\ncx q[0],q[1];\ncx q[1],q[2];\n'
RATE = MachineRate(1e10, 0.5, 1e-8, 2e-5, 2e-8, 1, 0.0)


def make_settings(tmp_path, **kw) -> Settings:
    d = tmp_path / "data"
    d.mkdir(parents=True, exist_ok=True)
    (d / "calibration.json").write_text(json.dumps(RATE.to_dict()))   # skip the calibration run
    kw.setdefault("workers", 1)
    kw.setdefault("plan_budget_seconds", 0.3)
    return Settings(data_dir=d, **kw)


@pytest.fixture
def client(tmp_path):
    with TestClient(create_app(make_settings(tmp_path))) as c:
        yield c


def wait_job(client, job_id, timeout=120):
    t0 = time.time()
    while time.time() - t0 < timeout:
        j = client.get(f"/v1/jobs/{job_id}").json()
        if j["status"] in ("succeeded", "failed", "cancelled"):
            return j
        time.sleep(0.2)
    raise AssertionError("job did not finish")


def test_register_and_fetch_circuit(client):
    r = client.post("/v1/circuits", json={"qasm": GHZ})
    assert r.status_code == 201
    cid, aid = r.json()["circuit_id"], r.json()["architecture_id"]
    got = client.get(f"/v1/circuits/{cid}").json()
    assert got["num_qubits"] == 3 and got["architecture_id"] == aid
    assert got["document"]["format"] == "veramp.circuit"
    assert client.get("/v1/circuits/ffff").status_code == 404


def test_amplitudes_sync_and_cache(client):
    body = {"circuit": {"qasm": GHZ}, "bitstrings": ["000", "111", "010", "000"]}
    r = client.post("/v1/amplitudes", json=body)
    assert r.status_code == 200
    doc = r.json()
    res = doc["results"]
    assert [x["bitstring"] for x in res] == ["000", "111", "010", "000"]
    assert math.isclose(res[0]["amplitude"][0], 1 / math.sqrt(2), abs_tol=1e-15)
    assert res[2]["probability"] == 0.0
    assert doc["provenance"]["computed"] == 3 and not any(x["cached"] for x in res)
    assert {"veramp", "numpy", "cotengra"} <= set(doc["provenance"]["versions"])
    again = client.post("/v1/amplitudes", json={"circuit_id": doc["circuit_id"], "bitstrings": ["111", "000"]}).json()
    assert all(x["cached"] for x in again["results"])
    assert again["provenance"]["computed"] == 0          # no contraction the second time
    metrics = client.get("/metrics").text
    assert "veramp_cache_hits_total 2.0" in metrics


def test_large_work_becomes_a_job(tmp_path):
    c = random_instance(grid_architecture(4, 6, 6), 3)       # 24 qubits: network engine, no plan stored
    psi_bits = ["0" * 24, "1" * 24, "01" * 12]
    with TestClient(create_app(make_settings(tmp_path, sync_threshold_seconds=0.0))) as client:
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": write_qasm3(c)}, "bitstrings": psi_bits,
                                                "engine": "batch"})
        assert r.status_code == 202 and r.headers["location"].startswith("/v1/jobs/")
        job = wait_job(client, r.json()["job_id"])
        assert job["status"] == "succeeded", job
        assert job["progress"] == 1.0 and job["provenance"]["engine"] == "batch"
        assert job["provenance"]["reason"] == "requested" and job["provenance"]["batch"] == 4
        # the plan search's last report stays with the job: its cost and its share of the 0.3 s budget
        search = job["planning"]
        assert search["trials"] >= 0 and search["best_madds"] > 0 and 0 < search["budget_seconds"] <= 0.3
        page = client.get(f"/v1/jobs/{job['job_id']}/results?offset=1&limit=2").json()
        assert [x["bitstring"] for x in page["results"]] == psi_bits[1:3]
        nd = [json.loads(line) for line in client.get(f"/v1/jobs/{job['job_id']}/results.ndjson").text.splitlines()]
        csv = client.get(f"/v1/jobs/{job['job_id']}/results.csv").text.splitlines()
        assert csv[0] == "bitstring,amplitude_re,amplitude_im,probability" and len(csv) == 4
    # the network result against the other engine, the 24-qubit state vector (itself checked against the
    # einsum reference in tests/test_network_vs_statevector.py)
    psi = state_vector(c)
    for row in nd:
        a = complex(*row["amplitude"])
        assert abs(a - psi[int(row["bitstring"], 2)]) <= 1e-10 * abs(a)


def test_cancel_a_queued_job(tmp_path):
    c = random_instance(grid_architecture(5, 6, 12), 3)
    with TestClient(create_app(make_settings(tmp_path, sync_threshold_seconds=0.0, plan_budget_seconds=20))) as client:
        jobs = [client.post("/v1/amplitudes", json={"circuit": {"qasm": write_qasm3(c)},
                                                    "bitstrings": [format(i, "030b")]}).json() for i in range(3)]
        last = jobs[-1]["job_id"]
        r = client.post(f"/v1/jobs/{last}/cancel")
        assert r.status_code == 200
        assert wait_job(client, last, timeout=300)["status"] == "cancelled"
        for j in jobs[:-1]:
            client.post(f"/v1/jobs/{j['job_id']}/cancel")


@pytest.mark.parametrize("case", QASM_CASES, ids=[c[0] for c in QASM_CASES])
def test_bad_qasm_through_api_is_4xx(client, case):
    _id, text, _cls, words, line = case
    r = client.post("/v1/amplitudes", json={"circuit": {"qasm": text}, "bitstrings": ["0"]})
    assert 400 <= r.status_code < 500
    body = r.json()
    assert words in body["message"]
    if line is not None:
        assert body["line"] == line


@pytest.mark.parametrize("case", JSON_CASES, ids=[c[0] for c in JSON_CASES])
def test_bad_json_documents_through_api_are_4xx(client, case):
    _id, text, _cls, words = case
    r = client.post("/v1/circuits", content='{"document": ' + text + "}",
                    headers={"content-type": "application/json"})
    assert r.status_code == 422
    if _id != "not-json":        # the body itself is not JSON: the request parser says so
        assert words in r.json()["message"]


@pytest.mark.parametrize("body,status,words", [
    ({"circuit": {"qasm": GHZ}, "bitstrings": ["01"]}, 422, "has 2 characters"),
    ({"circuit": {"qasm": GHZ}, "bitstrings": []}, 422, "bitstrings"),
    ({"circuit": {"qasm": GHZ, "document": {}}, "bitstrings": ["000"]}, 422, "exactly one"),
    ({"bitstrings": ["000"]}, 422, "exactly one"),
    ({"circuit": {"qasm": GHZ}, "bitstrings": ["000"], "dtype": "float"}, 422, "dtype"),
    ({"circuit_id": "nope", "bitstrings": ["000"]}, 404, "no circuit"),
])
def test_request_errors(client, body, status, words):
    r = client.post("/v1/amplitudes", json=body)
    assert r.status_code == status
    assert words in r.json()["message"]


def test_limits_name_the_limit(tmp_path):
    s = make_settings(tmp_path, max_bitstrings=2, max_gates=2, max_request_bytes=4000, max_qubits=10)
    with TestClient(create_app(s)) as client:
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["000"] * 3})
        assert r.status_code == 413 and r.json()["limit"] == "max_bitstrings"
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["000"]})
        assert r.status_code == 413 and r.json()["limit"] == "max_gates"
        r = client.post("/v1/circuits", json={"qasm": GHZ + "// " + "x" * 5000})
        assert r.status_code == 413 and r.json()["limit"] == "max_request_bytes"
        # a streamed (chunked) body has no declared length: the bytes are counted as they arrive
        chunks = (b'{"qasm": "' + b"x" * 1000 for _ in range(5))
        r = client.post("/v1/circuits", content=chunks, headers={"content-type": "application/json"})
        assert r.status_code == 413 and r.json()["limit"] == "max_request_bytes"
        r = client.post("/v1/circuits", json={"qasm": "OPENQASM 2.0; qreg q[11];"})
        assert r.status_code == 422 and "exceeds the limit of 10 qubits" in r.json()["message"]


def test_auth(tmp_path):
    tokfile = tmp_path / "tokens"
    tokfile.write_text("file-token\n")
    with TestClient(create_app(make_settings(tmp_path, tokens="env-token", tokens_file=tokfile))) as client:
        assert client.get("/v1/health").status_code == 200
        for path in ("/v1/ready", "/metrics", "/openapi.json", "/v1/jobs/x"):
            r = client.get(path)
            assert r.status_code == 401 and r.headers["www-authenticate"] == "Bearer"
        assert client.get("/v1/ready", headers={"Authorization": "Bearer wrong"}).status_code == 401
        for tok in ("env-token", "file-token"):
            assert client.get("/v1/ready", headers={"Authorization": f"Bearer {tok}"}).status_code == 200


def test_openapi_has_examples(client):
    spec = client.get("/openapi.json").json()
    assert "/v1/amplitudes" in spec["paths"] and "/v1/jobs/{job_id}/results" in spec["paths"]
    assert "examples" in json.dumps(spec["components"]["schemas"]["AmplitudesIn"])


def test_xeb_route_and_plots(client):
    # linear XEB of samples from the ideal distribution of a 10-qubit random circuit, through the API,
    # equals N·mean p − 1 from the numpy state vector (Arute et al. 2019 definition)
    import numpy as np

    from contraction.analysis.xeb import sample_mixture

    c = random_instance(grid_architecture(2, 5, 10), 6)
    p = np.abs(state_vector(c)) ** 2
    idx = sample_mixture(p, 1.0, 300, np.random.default_rng(4))
    body = {"circuit": {"qasm": write_qasm3(c)}, "samples": [format(i, "010b") for i in idx], "bootstrap": 50}
    r = client.post("/v1/xeb", json=body)
    assert r.status_code == 200, r.text
    assert r.json()["linear_xeb"] == pytest.approx(1024 * p[idx].mean() - 1, rel=1e-9)
    png = client.post("/v1/xeb/plot?format=png", json=body)
    assert png.status_code == 200 and png.headers["content-type"] == "image/png"
    assert png.content.startswith(b"\x89PNG\r\n\x1a\n")
    svg = client.post("/v1/xeb/plot?format=svg", json=body)
    assert svg.headers["content-type"].startswith("image/svg+xml") and b"<svg" in svg.content[:2000]
    bad = client.post("/v1/xeb", json={**body, "samples": ["01"]})
    assert bad.status_code == 422 and "characters" in bad.json()["message"]


def test_fit_routes(client):
    # exact F(d) = 0.9·0.95^d: the fit returns e = 0.05 (scipy curve_fit as the reference solver)
    d = [4, 6, 8, 10, 12, 14, 16]
    body = {"cycles": d, "fidelities": [0.9 * 0.95 ** x for x in d], "stderrs": [0.01] * 7, "extrapolate": [20]}
    r = client.post("/v1/xeb/fit", json=body)
    assert r.status_code == 200
    assert r.json()["per_cycle_error"] == pytest.approx(0.05, abs=1e-6)
    assert r.json()["extrapolations"][0]["fidelity"] == pytest.approx(0.9 * 0.95 ** 20, rel=1e-4)
    img = client.post("/v1/xeb/fit/plot", json=body)
    assert img.status_code == 200 and img.content.startswith(b"\x89PNG")
    bad = client.post("/v1/xeb/fit", json={**body, "stderrs": [0.01] * 6})
    assert bad.status_code == 422 and "same length" in bad.json()["message"]


def test_blocks_marginals_and_engine_provenance(client):
    # GHZ (Nielsen & Chuang 2010): marginal on (q2, q0) is 1/2 on 00 and 11; the block on q1 with
    # q0 = q2 = 1 holds <101| = 0 and <111| = 1/sqrt 2
    m = client.post("/v1/marginals", json={"circuit": {"qasm": GHZ}, "qubits": [2, 0]})
    assert m.status_code == 200, m.text
    assert m.json()["probabilities"] == pytest.approx([0.5, 0, 0, 0.5], abs=1e-15)
    b = client.post("/v1/blocks", json={"circuit": {"qasm": GHZ}, "qubits": [1], "fixed": "101", "engine": "single"})
    assert b.status_code == 200, b.text
    body = b.json()
    assert body["engine"] == "single" and "first listed qubit" in body["order"]
    assert [x for pair in body["amplitudes"] for x in pair] == pytest.approx([0, 0, 1 / math.sqrt(2), 0], abs=1e-15)
    bad = client.post("/v1/marginals", json={"circuit": {"qasm": GHZ}, "qubits": [0, 5]})
    assert bad.status_code == 422 and "0..2" in bad.json()["message"]
    bits = ["000", "011", "111", "110"]
    r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": bits}).json()
    prov = r["provenance"]                     # answered at once: 3 qubits, the automatic choice says why
    assert prov["engine"] == "statevector" and "qubits <=" in prov["reason"]
    assert r["results"][2]["probability"] == pytest.approx(0.5, abs=1e-15)
    # a forced batch: no plan stored yet, so the service answers with a job
    r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": bits, "engine": "batch",
                                            "dtype": "complex64"})
    assert r.status_code == 202
    job = wait_job(client, r.json()["job_id"])
    prov = job["provenance"]
    assert prov["engine"] == "batch" and prov["reason"] == "requested" and prov["batch"] == 4 and prov["chunks"] == 1


def test_cayley_path_route(client):
    # GHZ path (Cayley transform, see tests/test_cayley.py for the sources): theta = 0 reproduces the
    # circuit's own p(111) = 1/2 (Nielsen & Chuang 2010); the recovery at theta = 0.33 from 21 nodes on
    # [0, 1] agrees with the directly computed value within its stated error
    nodes = [i / 40 for i in range(41)]
    body = {"circuit": {"qasm": GHZ}, "bitstring": "111", "seed": 7, "thetas": [0.0, 0.33, 1.0],
            "recover": {"nodes": nodes, "targets": [0.33]}}
    r = client.post("/v1/paths", json=body)
    assert r.status_code == 200, r.text
    doc = r.json()
    assert doc["gate_dimension_sum"] == 2 + 4 + 4 and doc["fitted_degree"] == 20 and doc["engine"] == "statevector"
    assert doc["probability"][0] == pytest.approx(0.5, abs=1e-15)
    rec = doc["recovery"]
    assert abs(rec["recovered"][0] - doc["probability"][1]) <= rec["error_bound"][0]
    png = client.post("/v1/paths/plot", json=body)
    assert png.status_code == 200 and png.content[:8] == b"\x89PNG\r\n\x1a\n"
    # too few nodes for the degree bound (2 * 10 = 20 needs 21) is a 422 with the count
    body["recover"]["nodes"] = nodes[:10]
    bad = client.post("/v1/paths", json=body)
    assert bad.status_code == 422 and "degree 20" in bad.json()["message"]


UNIFORM17 = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[17];\nh q;\n'


def check_bitstring_limit(client, limit: int) -> None:
    """``limit`` distinct bitstrings in one request, computed then read back from the cache.
    H on every qubit of |0…0> gives the uniform superposition: every amplitude is 2^(-n/2)
    (Nielsen & Chuang 2010, §1.4.4, the Walsh–Hadamard transform)."""
    bits = [format(i, "017b") for i in range(limit)]
    for expect_cached in (0, limit):
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": UNIFORM17}, "bitstrings": bits,
                                                "engine": "statevector"})
        assert r.status_code == 200, r.text[:500]
        body = r.json()
        assert body["provenance"]["cached"] == expect_cached
        assert len(body["results"]) == limit
        assert [x["bitstring"] for x in body["results"][:3]] == bits[:3]
        assert all(abs(x["probability"] - 2.0 ** -17) < 1e-17 for x in body["results"])


def test_documented_bitstring_limit_on_sqlite(tmp_path):
    """Past SQLite's 32,766 bound variables per statement: the documented limit must still work."""
    s = make_settings(tmp_path)
    with TestClient(create_app(s)) as c:
        check_bitstring_limit(c, s.max_bitstrings)


def test_every_refusal_has_one_error_shape(client):
    """Bad input of every kind — circuit text, unknown routes and methods, unreadable bodies (JSON
    nested past any parser's depth, truncated JSON), missing resources, limits — answers 4xx with the
    same body: ``error`` (a kind) and ``message``, plus ``line``/``column``/``limit`` where they apply."""
    deep = "[" * 100_000 + "]" * 100_000
    answers = {
        "bad qasm": client.post("/v1/circuits", json={"qasm": "OPENQASM 2.0; qreg q[2]; h q[5];"}),
        "unknown route": client.get("/v1/nowhere"),
        "wrong method": client.delete("/v1/health"),
        "deep body": client.post("/v1/circuits", content=deep, headers={"content-type": "application/json"}),
        "truncated body": client.post("/v1/circuits", content="{", headers={"content-type": "application/json"}),
        "missing job": client.get("/v1/jobs/nope"),
        "missing circuit": client.get("/v1/circuits/ffff"),
        "both circuit forms": client.post("/v1/circuits", json={"qasm": GHZ, "document": {}}),
    }
    expected = {"bad qasm": 422, "unknown route": 404, "wrong method": 405, "deep body": 422,
                "truncated body": 422, "missing job": 404, "missing circuit": 404, "both circuit forms": 422}
    for name, r in answers.items():
        assert r.status_code == expected[name], (name, r.status_code, r.text)
        body = r.json()
        assert set(body) <= {"error", "message", "line", "column", "limit"}, (name, body)
        assert isinstance(body["error"], str) and body["error"] and isinstance(body["message"], str), (name, body)
    assert answers["bad qasm"].json()["line"] == 1 and answers["bad qasm"].json()["column"] == 30


def test_a_request_chooses_its_engine_once(client, monkeypatch):
    """The prediction that decides between answering now and queueing a job is the same choice the
    computation then runs: ``choose`` runs once per request, not once for each."""
    import contraction.execution.amplitudes as amp_module
    import contraction.planning.engine_choice as choice_module

    calls = []
    real = choice_module.choose

    def counting(*args, **kw):
        calls.append(kw.get("search", True))
        return real(*args, **kw)

    monkeypatch.setattr(choice_module, "choose", counting)
    monkeypatch.setattr(amp_module, "choose", counting)
    r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["000", "111", "011"]})
    assert r.status_code == 200, r.text
    probs = [x["probability"] for x in r.json()["results"]]
    assert probs == pytest.approx([0.5, 0.5, 0.0], abs=1e-15)      # GHZ: Nielsen & Chuang 2010
    assert calls == [False]


def test_an_inline_circuit_is_read_once_per_server(client, monkeypatch):
    """Pipelines send the same circuit text with every batch: it is read and stored once, then
    recognised by its text; a different text is read. Answers are the same either way (GHZ:
    Nielsen & Chuang 2010)."""
    import service.deps as deps

    reads = []
    real = deps.parse_circuit
    monkeypatch.setattr(deps, "parse_circuit", lambda state, body: reads.append(1) or real(state, body))
    for _ in range(3):
        r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ}, "bitstrings": ["111"]})
        assert r.status_code == 200 and r.json()["results"][0]["probability"] == pytest.approx(0.5, abs=1e-15)
    assert len(reads) == 1
    r = client.post("/v1/amplitudes", json={"circuit": {"qasm": GHZ + "x q[0];\n"}, "bitstrings": ["111"]})
    assert r.status_code == 200 and r.json()["results"][0]["probability"] == pytest.approx(0.0, abs=1e-15)
    assert len(reads) == 2


def test_jobs_side_by_side_share_the_memory_cap(tmp_path):
    """Up to server_workers x workers jobs contract side by side on one machine; each plans within an
    equal share of VERAMP_MEMORY_BYTES, so together they stay under it (with a Dask cluster each task
    runs alone on a worker, under the whole cap). A 4x4 grid network's unsliced peak P is measured
    first; under a cap of 1.5 P one job slot fits it whole, two slots each get 0.75 P. (The sharing rule
    is this project's own; no outside source.)"""
    grid = random_instance(grid_architecture(4, 4, 8), seed=2)
    body = {"circuit": {"qasm": write_qasm3(grid)}, "count": 1, "engine": "single"}
    with TestClient(create_app(make_settings(tmp_path / "a"))) as c:
        whole = c.post("/v1/estimates", json=body).json()
    cap = int(1.5 * whole["peak_bytes"])
    for workers, server_workers in ((1, 1), (2, 1), (2, 2)):
        s = make_settings(tmp_path / f"w{workers}{server_workers}", memory_bytes=cap, workers=workers,
                          server_workers=server_workers)
        assert s.run_memory_bytes == cap // (workers * server_workers)
        with TestClient(create_app(s)) as c:
            est = c.post("/v1/estimates", json=body).json()
        assert est["memory_cap_bytes"] == s.run_memory_bytes
        assert est["peak_bytes"] <= s.run_memory_bytes
        if workers * server_workers > 1:
            assert est["peak_bytes"] < whole["peak_bytes"]
    assert Settings(memory_bytes=cap, workers=4, dask_scheduler="tcp://127.0.0.1:1").run_memory_bytes == cap
    # a refusal for memory says how the cap is shared
    s = make_settings(tmp_path / "tiny", memory_bytes=1000, workers=2)
    with TestClient(create_app(s)) as c:
        r = c.post("/v1/estimates", json=body)
    assert r.status_code == 413 and r.json()["error"] == "memory_limit"
    assert ("VERAMP_MEMORY_BYTES=1000 is shared by up to 2 jobs running side by side: 500 bytes each"
            in r.json()["message"])
