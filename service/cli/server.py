"""``veramp serve``: the REST service on uvicorn."""

from __future__ import annotations

import inspect
import json
import logging
import os
from pathlib import Path

import uvicorn

from ..app import create_app
from ..db import DatabaseError, check_sqlite_file
from ..settings import Settings
from .common import UsageError


#: seconds a uvicorn worker process may take to answer its supervisor's health check before it is
#: killed with the connections it holds (uvicorn's default is 5 s; a loaded 2-core machine planning in
#: request threads must not lose requests to it)
WORKER_HEALTHCHECK_SECONDS = 30


def cmd_serve(args) -> int:
    """``veramp serve``: check the database, warn or refuse when exposed without tokens, then serve."""
    overrides = {}
    if args.data_dir:
        overrides["data_dir"] = Path(args.data_dir)

    settings = Settings(**overrides)
    logging.basicConfig(level=logging.INFO, format="%(message)s")

    try:
        note = check_sqlite_file(settings.sqlalchemy_url)
    except DatabaseError as exc:
        raise UsageError(f"refusing to start: {exc}") from None
    if note:
        logging.getLogger("veramp.api").warning(json.dumps({"event": "database", "note": note}))
    host = args.host or settings.host
    if host not in ("127.0.0.1", "localhost", "::1") and not settings.token_set():
        if args.require_tokens:
            raise UsageError(f"refusing to serve on {host} without bearer tokens (set VERAMP_TOKENS or "
                             "VERAMP_TOKENS_FILE, or drop --require-tokens)")
        logging.getLogger("veramp.api").warning(
            "WARNING: serving on %s without bearer tokens: anyone who can reach this address can submit work "
            "and read every job; set VERAMP_TOKENS (or use --require-tokens to refuse this)", host)
    port = args.port or settings.port
    server_workers = args.server_workers or settings.server_workers
    if server_workers > 1:
        # each uvicorn worker process builds its app from the environment: pass the command line's
        # overrides there; jobs are claimed atomically in the shared database
        for name, value in overrides.items():
            os.environ[f"VERAMP_{name.upper()}"] = str(value)
        # older uvicorn releases neither check their workers' health nor take the setting
        health = {"timeout_worker_healthcheck": WORKER_HEALTHCHECK_SECONDS} \
            if "timeout_worker_healthcheck" in inspect.signature(uvicorn.Config).parameters else {}
        uvicorn.run("service.app:app_from_environment", factory=True, workers=server_workers, host=host, port=port,
                    log_level="warning", timeout_graceful_shutdown=5, **health)
        return 0
    uvicorn.run(create_app(settings, database_checked=True), host=host, port=port, log_level="warning",
                timeout_graceful_shutdown=5)
    return 0
