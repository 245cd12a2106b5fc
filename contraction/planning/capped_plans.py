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
    otherwise a new plan is searched and stored. Raises :class:`MemoryLimitError` when no plan
    within the cap is found: a plan over the cap is never returned.
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
    # when the peak still overshoots the cap (live inputs and rearranged copies add up), aim lower, a few
    # times, before giving up: the plan found sliced further (its tree and slices kept), or — when that cannot reach
    # the lower target — a new search with what is left of the budget. A new search right after the first
    # has next to nothing left: on a 30-qubit 14-cycle network, target 2^19, a search of 0 s gave 10^12.65
    # multiply-adds against 10^10.71 for a 10 s one (measured)
    target = intermediate_target(options, cap_elements)
    end = time.perf_counter() + options.budget_seconds
    plan = find_plan(structure, replace(options, max_elements=target))
    for _ in range(PEAK_RETRIES):
        if plan.peak_elements <= fit_elements:
            break
        target /= 2
        left = end - time.perf_counter()
        plan = (sliced_further(plan, structure, target, max(RESLICE_SECONDS, left))
                or find_plan(structure, replace(options, max_elements=target, budget_seconds=max(0.0, left))))
    if plan.peak_elements > fit_elements:
        raise MemoryLimitError(f"the best plan found needs {plan.peak_bytes(dtype):.4g} bytes at its peak, "
                               f"over the memory cap of {memory_bytes:.4g} bytes")
    if store is not None:
        store.put(plan)
    return Contraction(structure, plan, plan.tree(structure), False)
