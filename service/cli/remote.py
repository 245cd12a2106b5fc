"""Commands that talk to a running service: ``health``, ``submit``."""

from __future__ import annotations

import json
import os
import sys

import httpx

from contraction.circuits.bitstrings import read_bitstrings

from ..client import Client, ServiceError
from .common import ProgressBar, UsageError, current_settings, read_text


def cmd_health(args) -> int:
    """``veramp health``: exit 0 when the service answers its health route, 1 otherwise."""
    url = (args.url or f"http://127.0.0.1:{current_settings().port}").rstrip("/") + "/v1/health"
    try:
        ok = httpx.get(url, timeout=args.timeout).status_code == 200
    except httpx.HTTPError as exc:
        print(f"veramp: unhealthy: {url}: {exc}", file=sys.stderr)
        return 1
    if not ok:
        print(f"veramp: unhealthy: {url}", file=sys.stderr)
    return 0 if ok else 1


def cmd_submit(args) -> int:
    """``veramp submit``: send a circuit and bitstrings to a running service, follow the job, print the results."""
    text = read_text(args.circuit)
    bits = read_bitstrings(read_text(args.bitstrings))
    circuit = {"qasm": text} if not text.lstrip().startswith("{") else {"document": json.loads(text)}
    token = args.token or os.environ.get("VERAMP_TOKEN")
    try:
        with Client(args.url, token=token, retries=args.retries) as cl:
            reply = cl.amplitudes(bits, **{("qasm" if "qasm" in circuit else "document"): next(iter(circuit.values()))},
                                  dtype=args.dtype)
            if "job_id" in reply:
                bar = ProgressBar(sys.stderr.isatty())

                class _P:  # adapt job rows to the progress bar's fields
                    def __init__(self, j):
                        self.done, self.total, self.eta_seconds = j["done"], j["total"], j["eta_seconds"]
                        self.phase, self.planning = j.get("phase"), j.get("planning")

                job = cl.wait(reply["job_id"], on_progress=lambda j: bar(_P(j)))
                if job["status"] != "succeeded":
                    raise UsageError(f"job {job['job_id']} {job['status']}: {job.get('error') or ''}".strip())
                rows = list(cl.results(job["job_id"]))
            else:
                rows = reply["results"]
    except ServiceError as exc:
        raise UsageError(f"service answered {exc}") from None
    except httpx.TransportError as exc:
        raise UsageError(f"cannot reach {args.url}: {exc}") from None
    if args.format == "json":
        print(json.dumps({"results": [{k: r[k] for k in ("bitstring", "amplitude", "probability")} for r in rows]}))
    else:
        print("bitstring,amplitude_re,amplitude_im,probability")
        for r in rows:
            print(f"{r['bitstring']},{r['amplitude'][0]!r},{r['amplitude'][1]!r},{r['probability']!r}")
    return 0
