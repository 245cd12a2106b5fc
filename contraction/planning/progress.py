"""Progress of plan searches, reported to an observer set for the current context (thread or task)."""

from __future__ import annotations

import contextlib
import contextvars
import logging
import math
import time
from dataclasses import dataclass
from typing import Callable, Iterator

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class SearchProgress:
    """Where a running search stands: trials finished, the best tree's multiply-adds so far (scored
    as the search scores them: after slicing to the target when it slices in its trials; None before
    the first), seconds since the plan was asked for and the budget; ``final`` on the report of the
    plan found (its multiply-adds as sliced)."""

    trials: int
    best_madds: float | None
    seconds: float
    budget_seconds: float
    final: bool = False


SearchObserver = Callable[[SearchProgress], None]
_observer: contextvars.ContextVar[SearchObserver | None] = contextvars.ContextVar("veramp_search_observer",
                                                                                  default=None)
#: seconds between two reports to a search observer
OBSERVE_EVERY_SECONDS = 1.0


@contextlib.contextmanager
def observe_searches(observer: SearchObserver) -> Iterator[None]:
    """Report the progress of every :func:`contraction.planning.search.find_plan` run in this context
    (thread or task) to ``observer``: once when a search starts, about every second while it runs, once
    when it ends."""
    token = _observer.set(observer)
    try:
        yield
    finally:
        _observer.reset(token)


def observed() -> bool:
    """Whether an observer is set for this context."""
    return _observer.get() is not None


def notify(progress: SearchProgress) -> None:
    """Report ``progress`` to the observer of this context, if any."""
    observer = _observer.get()
    if observer is None:
        return
    try:
        observer(progress)
    except Exception:                        # an observer's failure must not end the search
        log.warning("search observer failed", exc_info=True)


def report_search(opt, t0: float, budget: float) -> None:
    """Report where cotengra's optimizer ``opt`` stands (trials, best cost) to the observer."""
    best = getattr(opt, "best", None) or {}
    flops = best.get("flops") if isinstance(best, dict) else None
    madds = float(flops) if isinstance(flops, (int, float)) and math.isfinite(flops) else None
    notify(SearchProgress(len(getattr(opt, "scores", ())), madds, time.perf_counter() - t0, budget))
