"""The FastAPI application: routers, auth, limits, error mapping, metrics and structured logs."""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import time
from contextlib import asynccontextmanager

from fastapi import FastAPI
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException

from contraction.errors import LimitError, VerampError

from . import __version__
from .db import check_sqlite_file, make_engine, session_factory
from .deps import AppState
from .errors import engine_error_response, error_response
from .jobs import JobManager
from .metrics import Metrics
from .routes import amplitudes, blocks, circuits, jobs, ops, paths, xeb
from .settings import Settings

log = logging.getLogger("veramp.api")
OPEN_PATHS = {"/v1/health"}


class GuardMiddleware:
    """Pure ASGI middleware (cheaper than ``@app.middleware``): bearer tokens, the request-size
    limit (declared length and streamed bytes), per-route metrics and one structured log line."""

    def __init__(self, app, settings: Settings, tokens: frozenset[str]):
        self.app, self.settings, self.tokens = app, settings, tokens

    async def _reply(self, send, response: JSONResponse) -> None:
        await send({"type": "http.response.start", "status": response.status_code,
                    "headers": response.raw_headers})
        await send({"type": "http.response.body", "body": response.body})

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        t0 = time.perf_counter()
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope.get("headers", [])}
        path = scope.get("path", "")
        if self.tokens and path not in OPEN_PATHS:
            auth = headers.get("authorization", "")
            given = auth[7:] if auth.lower().startswith("bearer ") else ""
            if not any(hmac.compare_digest(given, t) for t in self.tokens):
                return await self._reply(send, error_response(401, "unauthorized", "a valid bearer token is required",
                                                      {"WWW-Authenticate": "Bearer"}))
            # jobs belong to the token that created them (a digest, never the token itself)
            scope["veramp_owner"] = hashlib.sha256(given.encode()).hexdigest()[:32]
        limit = self.settings.max_request_bytes
        length = headers.get("content-length")
        if length is not None and length.isdigit() and int(length) > limit:
            return await self._reply(send, error_response(413, "limit_exceeded", f"request body of {length} bytes "
                                                  f"exceeds the limit of {limit}", limit="max_request_bytes"))
        seen = 0
        too_big = False

        async def counted_receive():
            nonlocal seen, too_big
            message = await receive()
            seen += len(message.get("body", b""))
            if seen > limit:
                too_big = True
                raise LimitError("max_request_bytes", f"request body exceeds the limit of {limit} bytes")
            return message

        status = [500]
        replaced = False

        async def send_status(message):
            nonlocal replaced
            if too_big:  # whatever the app made of the aborted body, the answer is 413
                if not replaced:
                    replaced = True
                    status[0] = 413
                    await self._reply(send, error_response(413, "limit_exceeded", f"request body exceeds the limit "
                                                   f"of {limit} bytes", limit="max_request_bytes"))
                return
            if message["type"] == "http.response.start":
                status[0] = message["status"]
            await send(message)

        await self.app(scope, counted_receive, send_status)
        dt = time.perf_counter() - t0
        route = scope.get("route")
        name = getattr(route, "path", "unmatched")
        app_state = getattr(scope.get("app").state, "veramp", None) if scope.get("app") else None
        if app_state is not None:
            app_state.metrics.requests.labels(scope.get("method", ""), name, str(status[0])).inc()
            app_state.metrics.latency.labels(name).observe(dt)
        if log.isEnabledFor(logging.INFO):
            log.info(json.dumps({"event": "request", "method": scope.get("method"), "route": name,
                                 "status": status[0], "ms": round(dt * 1000, 2)}))


def create_app(settings: Settings | None = None, database_checked: bool = False) -> FastAPI:
    """The application. Its start-up refuses a damaged SQLite file unless the caller
    (``veramp serve``) has already checked it (``database_checked``)."""
    settings = settings or Settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        settings.data_dir.mkdir(parents=True, exist_ok=True)
        # raises DatabaseError: refuse to start
        note = None if database_checked else check_sqlite_file(settings.sqlalchemy_url)
        if note:
            log.warning(json.dumps({"event": "database", "note": note}))
        sessions = session_factory(make_engine(settings.sqlalchemy_url))
        metrics = Metrics()

        def on_finish(job_id: str, prov: dict) -> None:
            metrics.job_seconds.observe(prov.get("wall_seconds", 0.0))
            metrics.madds.inc(prov.get("madds", 0.0))
            metrics.cache_misses.inc(prov.get("computed", 0))
            metrics.cache_hits.inc(prov.get("cached", 0))

        manager = JobManager(settings, sessions, on_finish)
        app.state.veramp = AppState(settings, sessions, manager, metrics)
        app.state.veramp.start_calibration()
        resumed = manager.resume()
        manager.start_sweeping()
        log.info(json.dumps({"event": "start", "version": __version__, "resumed_jobs": resumed,
                             "database": settings.sqlalchemy_url.split("://")[0]}))
        yield
        manager.shutdown()

    app = FastAPI(title="veramp", version=__version__, lifespan=lifespan,
                  description="Exact amplitudes of quantum circuits for sampled bitstrings. "
                              "Bitstrings are written qubit 0 first.")
    for r in (ops.router, circuits.router, amplitudes.router, blocks.router, jobs.router, xeb.router, paths.router):
        app.include_router(r)
    tokens = settings.token_set()

    app.add_middleware(GuardMiddleware, settings=settings, tokens=tokens)

    @app.exception_handler(VerampError)
    async def engine_error(_req, exc: VerampError):
        return engine_error_response(exc, settings.run_share_note())

    @app.exception_handler(HTTPException)
    async def http_error(_req, exc: HTTPException):
        # the framework's own refusals: unknown routes and methods, and bodies it cannot parse at
        # all (e.g. JSON nested past the parser's depth), which answer like any other bad body
        if exc.status_code == 400:
            return error_response(422, "invalid_request", f"the body cannot be read: {exc.detail}")
        kind = {404: "not_found", 405: "method_not_allowed"}.get(exc.status_code, "http_error")
        return error_response(exc.status_code, kind, str(exc.detail), getattr(exc, "headers", None))

    @app.exception_handler(RequestValidationError)
    async def validation_error(_req, exc: RequestValidationError):
        first = exc.errors()[0] if exc.errors() else {}
        where = ".".join(str(p) for p in first.get("loc", ()) if p != "body")
        return error_response(422, "invalid_request", f"{where}: {first.get('msg', 'invalid request')}".strip(": "))

    @app.exception_handler(Exception)
    async def internal_error(_req, exc: Exception):
        log.exception("unhandled error")
        return error_response(500, "internal_error", "internal error; the request was not completed")

    return app


def app_from_environment() -> FastAPI:
    """The application with settings from ``VERAMP_`` environment variables: what each of several
    uvicorn worker processes builds (``veramp serve --server-workers N`` has checked the database)."""
    if not logging.getLogger().handlers:        # a fresh worker process: log like `veramp serve` does
        logging.basicConfig(level=logging.INFO, format="%(message)s")
    return create_app(Settings(), database_checked=True)
