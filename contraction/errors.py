"""Typed errors of the engine and the service: one hierarchy.

Every error a user can cause derives from :class:`VerampError`, carries a one-line message, a
machine-readable ``kind`` and, for circuit text, the line and column where the problem is. The
service maps ``kind`` to an HTTP status in one place (``service/errors.py``) and the CLI prints
the message as one line on stderr. :class:`Cancelled` is the one exception that is not an error.
"""

from __future__ import annotations


class VerampError(Exception):
    """Base class of all errors caused by input the engine cannot accept."""

    #: short machine-readable kind, used in API error bodies
    kind = "invalid_input"

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message

    def to_dict(self) -> dict:
        """The error as the API's JSON body: ``error`` (the kind) and ``message``."""
        return {"error": self.kind, "message": str(self)}


class CircuitError(VerampError):
    """A circuit model that is not valid (shapes, unitarity, qubit indices...)."""

    kind = "invalid_circuit"

    def __init__(self, message: str, gate_index: int | None = None):
        if gate_index is not None:
            message = f"gate {gate_index}: {message}"
        super().__init__(message)
        self.gate_index = gate_index


class ParseError(VerampError):
    """Circuit text that cannot be read; names line and column (1-based)."""

    kind = "parse_error"

    def __init__(self, message: str, line: int | None = None, column: int | None = None,
                 source: str = "<circuit>"):
        self.line = line
        self.column = column
        self.source = source
        self.reason = message
        where = f"{source}:{line}:{column}: " if line is not None else f"{source}: "
        super().__init__(where + message)

    def to_dict(self) -> dict:
        """The JSON body with ``line`` and ``column``."""
        out = super().to_dict()
        out.update({"line": self.line, "column": self.column})
        return out


class UnsupportedError(ParseError):
    """A valid construct that has no meaning for a pure amplitude (or is not supported)."""

    kind = "unsupported"


class LimitError(VerampError):
    """A request over a configured limit (``limit`` names the setting)."""

    kind = "limit_exceeded"

    def __init__(self, limit: str, message: str):
        super().__init__(message)
        self.limit = limit

    def to_dict(self) -> dict:
        """The JSON body with the name of the ``limit``."""
        out = super().to_dict()
        out["limit"] = self.limit
        return out


class NotFound(VerampError):
    """A stored circuit, job or result that does not exist (or is not the caller's)."""

    kind = "not_found"


class Conflict(VerampError):
    """A request that cannot be answered in the resource's present state (e.g. a job still running)."""

    kind = "conflict"

    def __init__(self, message: str, limit: str | None = None):
        super().__init__(message)
        self.limit = limit


class Busy(VerampError):
    """The job queue is full: retry after ``retry_after`` seconds."""

    kind = "queue_full"

    def __init__(self, retry_after: int):
        super().__init__("the job queue is full; retry later")
        self.retry_after = retry_after


class GateLimitError(ParseError):
    """A program that would expand past the configured gate limit (refused before expanding)."""

    kind = "limit_exceeded"
    limit = "max_gates"


class BitstringError(VerampError):
    """A bitstring of the wrong length or alphabet."""

    kind = "invalid_bitstring"


class ExportError(VerampError):
    """A circuit that cannot be written in the requested format."""

    kind = "export_error"


class PlanError(VerampError):
    """A contraction plan that cannot be made, loaded or run within the limits."""

    kind = "plan_error"


class MemoryLimitError(PlanError):
    """The contraction's peak memory exceeds the cap even after slicing."""

    kind = "memory_limit"


class NoStoredPlan(PlanError):
    """No stored plan fits and planning is switched off for this call (a lookup-only request)."""

    kind = "no_stored_plan"


class Cancelled(Exception):
    """A running contraction was cancelled cooperatively (not an input error)."""
