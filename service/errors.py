"""How the engine's errors become HTTP answers: one table from an error's ``kind`` to a status,
and one JSON shape for every error body (``error``, ``message``, and ``line``/``column``/``limit``
when they apply)."""

from __future__ import annotations

from fastapi.responses import JSONResponse

from contraction.errors import Busy, MemoryLimitError, VerampError

#: HTTP status of each error kind; every other kind of :class:`VerampError` is a 422
STATUS_BY_KIND = {
    "limit_exceeded": 413,
    "memory_limit": 413,
    "not_found": 404,
    "conflict": 409,
    "queue_full": 429,
}


def error_response(status: int, kind: str, message: str, headers: dict | None = None, **extra) -> JSONResponse:
    """The JSON error body every failure shares; ``extra`` fields that are None are left out."""
    body = {"error": kind, "message": message, **{k: v for k, v in extra.items() if v is not None}}
    return JSONResponse(body, status_code=status, headers=headers)


def engine_error_response(exc: VerampError, memory_note: str = "") -> JSONResponse:
    """The answer to any :class:`VerampError` raised while serving a request; ``memory_note`` is added
    to a refusal for memory (how the cap is shared)."""
    headers = {"Retry-After": str(exc.retry_after)} if isinstance(exc, Busy) else None
    message = str(exc) + (memory_note if isinstance(exc, MemoryLimitError) else "")
    return error_response(STATUS_BY_KIND.get(exc.kind, 422), exc.kind, message, headers,
                          line=getattr(exc, "line", None), column=getattr(exc, "column", None),
                          limit=getattr(exc, "limit", None))
