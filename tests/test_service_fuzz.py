"""OpenAPI-driven fuzzing of the service's own schema (schemathesis; a bounded number of
examples per operation against a real server on 127.0.0.1): no input may produce a 5xx."""

import json

import pytest

schemathesis = pytest.importorskip("schemathesis")
from hypothesis import HealthCheck, settings  # noqa: E402

from .test_service import RATE  # noqa: E402
from .test_service_process import free_port, kill_hard, start  # noqa: E402


@pytest.fixture(scope="module")
def api_schema(tmp_path_factory):
    data = tmp_path_factory.mktemp("fuzz")
    (data / "calibration.json").write_text(json.dumps(RATE.to_dict()))
    port = free_port()
    proc = start(data, port)
    try:
        yield schemathesis.openapi.from_url(f"http://127.0.0.1:{port}/openapi.json")
    finally:
        kill_hard(proc)


schema = schemathesis.pytest.from_fixture("api_schema")


@schema.parametrize()
@settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck))
def test_no_server_errors(case):
    response = case.call(timeout=60)
    assert response.status_code < 500, (case.method, case.path, response.text[:300])
