"""Plans that fit a memory cap: a stored plan when one fits and validates, else one searched and stored.

:func:`network_plan` is where every engine gets the plan it runs; :func:`plan_fit_elements` is the share
of a cap a plan's own arrays may take (the CLI's ``veramp plan`` sizes its plans with it too).
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, replace

import numpy as np

from contraction import defaults
from contraction.errors import MemoryLimitError, NoStoredPlan, PlanError
from contraction.network.builder import NetworkStructure
from contraction.planning.options import PlannerOptions
from contraction.planning.plan import Plan, executor_peak_elements, sliced_further
from contraction.planning.search import find_plan
from contraction.planning.store import PlanStore

log = logging.getLogger(__name__)


#: searches with a halved intermediate target when a plan's peak overshoots the cap
PEAK_RETRIES = 3
#: seconds a plan over the cap may take to be sliced further, past the budget if need be (as long as the
#: planner's own slicing may overrun it: :func:`contraction.planning.search.find_plan`)
RESLICE_SECONDS = 1.0
#: share of a request's planning budget (at least ``RESLICE_SECONDS``) a stored plan over the cap may take
#: to be sliced further before the search gets the rest (common practice: one fresh slicing of a 53-qubit
#: plan took 2.5-3.5 s, so a 300 s budget leaves it ten times that)
STORED_RESLICE_SHARE = 0.1


@dataclass(frozen=True)
class Contraction:
    """A network ready to run: its structure, the plan and the plan's contraction tree, built and
    validated once (runners use the tree as it is; worker processes receive it, they do not rebuild it)."""

    structure: NetworkStructure
    plan: Plan
    tree: object
    from_store: bool = False


def intermediate_target(options: PlannerOptions, cap_elements: float) -> float:
    """Largest intermediate (elements) a plan is searched for under a cap of ``cap_elements``: the peak
    holds a contraction's two inputs and its output at once, so each is aimed below a quarter."""
    return min(options.max_elements or math.inf, cap_elements / 4)


#: share of the memory cap a plan's arrays may take at their peak; the process itself (interpreter,
#: libraries, the network's input tensors) holds the rest. Measured at 53 qubits: peak RSS 0.1-0.8 GB
#: above the arrays' peak (an 8.0 GiB peak ran at 8.71 GB against an 8 GiB cap before this share)
PLAN_SHARE_OF_CAP = 15 / 16


def plan_fit_elements(memory_bytes: float, dtype="complex128") -> float:
    """Elements a plan's own arrays may hold at their peak under ``memory_bytes`` (``PLAN_SHARE_OF_CAP``)."""
    return memory_bytes / np.dtype(dtype).itemsize * PLAN_SHARE_OF_CAP


def network_plan(structure: NetworkStructure, store: PlanStore | None, options: PlannerOptions | None,
                 memory_bytes: float = defaults.MEMORY_BYTES, dtype="complex128") -> Contraction:
    """The :class:`Contraction` of ``structure`` with a peak within ``memory_bytes``.

    A stored plan is used when one fits the cap and passes validation against the network;
    otherwise a new plan is searched and stored — or the cheapest stored plan over the cap sliced further,
    when that costs no more than the plan searched (:func:`sliced_further_note` says so). Raises
    :class:`MemoryLimitError` when no plan within the cap is found: a plan over the cap is never returned.
    """
    cap_elements = memory_bytes / np.dtype(dtype).itemsize
    fit_elements = plan_fit_elements(memory_bytes, dtype)      # what the plan's own arrays may take
    if store is not None:
        plan = store.get(structure.key, fit_elements)
        if plan is not None:
            try:
                tree = plan.tree(structure)
                # a plan stored before its peak counted rearranged copies records less than it holds
                if executor_peak_elements(tree) <= fit_elements:
                    return Contraction(structure, plan, tree, True)
                log.warning("stored plan needs more than the memory cap with its copies counted, planning again")
            except PlanError as exc:
                log.warning("stored plan rejected, planning again: %s", exc)
    if options is None:
        raise NoStoredPlan(structure.key)
    end = time.perf_counter() + options.budget_seconds
    target = intermediate_target(options, cap_elements)
    # a stored plan over this cap (made for a larger one, or before copies were counted) sliced further
    # first: its search may have had far more time than this request's budget. A 53-qubit 14-cycle plan of
    # a 300 s search stored for 2^28 elements did not fit an 8 GiB cap with its copies, and the request's
    # own search ran for over an hour instead of the ~16 minutes the stored plan takes
    over = None
    if store is not None:
        over = _stored_sliced_further(structure, store, fit_elements, target,
                                      max(RESLICE_SECONDS, STORED_RESLICE_SHARE * options.budget_seconds))
    try:
        plan = _searched_plan(structure, replace(options, budget_seconds=max(0.0, end - time.perf_counter())),
                              target, fit_elements)
    except MemoryLimitError:
        if over is None:
            raise
        plan = None
    if over is not None and (plan is None or plan.peak_elements > fit_elements or over.madds <= plan.madds):
        log.warning("%s", sliced_further_note(over))
        plan = over
    if plan.peak_elements > fit_elements:
        raise MemoryLimitError(f"the best plan found needs {plan.peak_bytes(dtype):.4g} bytes at its peak, "
                               f"over the memory cap of {memory_bytes:.4g} bytes")
    if store is not None:
        store.put(plan)
    return Contraction(structure, plan, plan.tree(structure), False)


def _searched_plan(structure: NetworkStructure, options: PlannerOptions, target: float,
                   fit_elements: float) -> Plan:
    """A plan searched within ``options``' budget for ``target`` elements; when its peak still overshoots
    ``fit_elements`` (live inputs and rearranged copies add up), aimed lower a few times: the plan found
    sliced further (its tree and slices kept), or — when that cannot reach the lower target — a new
    search with what is left of the budget. A new search right after the first has next to nothing
    left: on a 30-qubit 14-cycle network, target 2^19, a search of 0 s gave 10^12.65 multiply-adds
    against 10^10.71 for a 10 s one (measured). The plan returned may still overshoot."""
    end = time.perf_counter() + options.budget_seconds
    plan = find_plan(structure, replace(options, max_elements=target))
    for _ in range(PEAK_RETRIES):
        if plan.peak_elements <= fit_elements:
            break
        target /= 2
        left = end - time.perf_counter()
        plan = (sliced_further(plan, structure, target, max(RESLICE_SECONDS, left))
                or find_plan(structure, replace(options, max_elements=target, budget_seconds=max(0.0, left))))
    return plan


def _stored_sliced_further(structure: NetworkStructure, store: PlanStore, fit_elements: float, target: float,
                           seconds: float) -> Plan | None:
    """The cheapest plan stored for ``structure`` whatever its peak, sliced further (order and slices kept)
    to ``target`` elements, halved up to ``PEAK_RETRIES`` times until its peak fits ``fit_elements``, within
    about ``seconds``; its options record the stored plan's multiply-adds and hash. None when no plan is
    stored, the stored plan does not validate, or its peak is not brought within the cap."""
    stored = store.get(structure.key)
    if stored is None:
        return None
    until = time.perf_counter() + seconds
    for _ in range(PEAK_RETRIES + 1):
        try:                                    # the stored plan's tree is built (and validated) once, then kept
            plan = sliced_further(stored, structure, target, max(RESLICE_SECONDS, until - time.perf_counter()))
        except PlanError:
            return None
        if plan is None:
            return None
        if plan.peak_elements <= fit_elements:
            return replace(plan, options={**plan.options, "stored_madds": stored.madds,
                                          "stored_plan_hash": stored.plan_hash})
        target /= 2
    return None


def sliced_further_note(plan: Plan) -> str | None:
    """What was done to get ``plan`` when it is a stored plan sliced further to fit a smaller cap (for the
    reason of a choice and the logs), else None."""
    stored = plan.options.get("stored_madds")
    if not plan.options.get("sliced_further") or not stored:
        return None
    return (f"the stored plan (10^{math.log10(stored):.2f} multiply-adds) is over this memory cap: sliced further "
            f"to {plan.nslices} slices, 10^{math.log10(max(plan.madds, 1.0)):.2f} multiply-adds "
            f"({plan.madds / stored:.3g}x)")
