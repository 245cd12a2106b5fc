"""A small typed Python client for pipelines (httpx), with retries and backoff.

    from service.client import Client
    with Client("http://127.0.0.1:8350", token=None) as c:
        job_or_result = c.amplitudes(qasm=text, bitstrings=["0101", ...])
"""

from __future__ import annotations

import time
from typing import Any, Callable, Iterator

import httpx

RETRY_STATUS = {429, 502, 503, 504}


class ServiceError(Exception):
    """A 4xx/5xx answer of the service, with its status and JSON body."""

    def __init__(self, status: int, body: dict):
        super().__init__(f"{status}: {body.get('message', body)}")
        self.status, self.body = status, body


class Client:
    """A small client for the REST service: bearer token, retries with exponential backoff on connection errors, 429
    and 5xx."""

    def __init__(self, base_url: str, token: str | None = None, timeout: float = 60.0, retries: int = 5,
                 backoff: float = 0.5, transport: httpx.BaseTransport | None = None):
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        self._http = httpx.Client(base_url=base_url, headers=headers, timeout=timeout, transport=transport)
        self.retries, self.backoff = retries, backoff

    def __enter__(self) -> "Client":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Close the HTTP connection pool."""
        self._http.close()

    def _request(self, method: str, path: str, **kw) -> httpx.Response:
        delay = self.backoff
        for attempt in range(self.retries + 1):
            try:
                r = self._http.request(method, path, **kw)
            except httpx.TransportError:
                if attempt == self.retries:
                    raise
            else:
                if r.status_code not in RETRY_STATUS or attempt == self.retries:
                    if r.status_code >= 400:
                        try:
                            body = r.json()
                        except ValueError:
                            body = {"message": r.text}
                        raise ServiceError(r.status_code, body)
                    return r
                wait = r.headers.get("retry-after")
                delay = float(wait) if wait and wait.isdigit() else delay
            time.sleep(delay)
            delay = min(delay * 2, 30.0)
        raise AssertionError("unreachable")

    @staticmethod
    def _circuit(qasm: str | None, document: dict | None, circuit_id: str | None) -> dict:
        if circuit_id is not None:
            return {"circuit_id": circuit_id}
        return {"circuit": {"qasm": qasm} if qasm is not None else {"document": document}}

    def register(self, qasm: str | None = None, document: dict | None = None) -> dict:
        """Register a circuit (OpenQASM text or JSON document); its ids."""
        body = {"qasm": qasm} if qasm is not None else {"document": document}
        return self._request("POST", "/v1/circuits", json=body).json()

    def estimate(self, count: int = 1, *, qasm=None, document=None, circuit_id=None, **opts) -> dict:
        """The predicted cost of ``count`` distinct amplitudes (nothing is computed)."""
        body = {**self._circuit(qasm, document, circuit_id), "count": count, **opts}
        return self._request("POST", "/v1/estimates", json=body).json()

    def amplitudes(self, bitstrings: list[str], *, qasm=None, document=None, circuit_id=None, **opts) -> dict:
        """The results (200) or a job description (202, has ``job_id``)."""
        body = {**self._circuit(qasm, document, circuit_id), "bitstrings": bitstrings, **opts}
        return self._request("POST", "/v1/amplitudes", json=body).json()

    def job(self, job_id: str) -> dict:
        """The job's status, progress and provenance."""
        return self._request("GET", f"/v1/jobs/{job_id}").json()

    def cancel(self, job_id: str) -> dict:
        """Ask for the job to be cancelled; its status after the request."""
        return self._request("POST", f"/v1/jobs/{job_id}/cancel").json()

    def wait(self, job_id: str, poll: float = 0.5, on_progress: Callable[[dict], None] | None = None) -> dict:
        """Poll the job until it is succeeded, failed or cancelled; ``on_progress`` sees every poll."""
        while True:
            job = self.job(job_id)
            if on_progress is not None:
                on_progress(job)
            if job["status"] in ("succeeded", "failed", "cancelled"):
                return job
            time.sleep(poll)

    def results(self, job_id: str, page: int = 1000) -> Iterator[dict[str, Any]]:
        """The job's results in input order, fetched a page at a time."""
        offset = 0
        while True:
            doc = self._request("GET", f"/v1/jobs/{job_id}/results", params={"offset": offset, "limit": page}).json()
            yield from doc["results"]
            offset += len(doc["results"])
            if offset >= doc["total"] or not doc["results"]:
                return
