"""Health, readiness and metrics."""

from fastapi import APIRouter, Depends
from fastapi.responses import JSONResponse, Response
from sqlalchemy import text

from .. import __version__
from ..deps import AppState, get_state

router = APIRouter(tags=["operations"])


@router.get("/v1/health")
def health() -> dict:
    """Liveness: the process answers (no token needed)."""
    return {"status": "ok", "version": __version__}


@router.get("/v1/ready")
def ready(state: AppState = Depends(get_state)):
    """Readiness: the database answers and the worker pool accepts work."""
    try:
        with state.sessions() as s:
            s.execute(text("SELECT 1"))
    except Exception as exc:
        return JSONResponse({"status": "unavailable", "reason": f"database: {type(exc).__name__}"}, 503)
    return {"status": "ready", "queue_depth": state.jobs.depth, "queue_size": state.settings.queue_size}


@router.get("/metrics")
def metrics(state: AppState = Depends(get_state)) -> Response:
    """Prometheus metrics."""
    state.metrics.queue_depth.set(state.jobs.depth)
    return Response(state.metrics.render(), media_type="text/plain; version=0.0.4")
