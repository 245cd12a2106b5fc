"""How a plan is searched for: :class:`PlannerOptions`, the objective they stand for, and how long a search
is worth (predicted before any search runs)."""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass

from contraction import defaults
from contraction.network.builder import NetworkStructure
from contraction.network.simplify import simplify_structure


@dataclass(frozen=True)
class PlannerOptions:
    """How hard to search: a time budget (seconds, all stages together), a repeat cap, a memory target
    per slice (elements of the largest intermediate) and the processes used for trials."""

    budget_seconds: float = defaults.PLAN_BUDGET_SECONDS
    max_repeats: int = 10 ** 6            # the budget decides; this only caps tiny budgets in tests
    max_elements: float | None = None     # largest intermediate allowed (elements); None = no cap
    # cotengra's objective; "auto" (see :func:`resolved_objective`): multiply-adds alone ("flops") for a
    # network that must be sliced to the target, "combo" (multiply-adds and memory writes) otherwise
    minimize: str = "auto"
    seed: int = 0
    parallel: bool | int = False          # explicit: never 'auto'; an int > 1 is a number of processes
    simplify: bool = True                 # structure-only simplification before the search
    fuse: bool = True                     # group small tensors absorbed into large intermediates (fusion)
    # search for the whole budget even where the greedy tree is worth less (``veramp plan``: a plan
    # searched ahead of time for an architecture); otherwise see :func:`search_seconds_worth`
    whole_budget: bool = False
    # contractions the plan will run in the request asking for it (a single amplitude's plan runs once
    # per bitstring): the search is worth that many times as much
    expected_runs: float = 1.0

    def to_dict(self) -> dict:
        """The options as a JSON-ready dict (kept with each plan)."""
        return asdict(self)

#: a greedy tree cheaper than this (complex multiply-adds; ~0.05 s on the machines this is built on) is
#: not searched further: a search cannot save more time than the contraction takes (common practice)
SEARCH_WORTHWHILE_MADDS = 1e8
#: a tree that fits the memory target is searched for at most one second per this many multiply-adds
#: of its greedy tree: about twenty times the greedy contraction's own time at the 5e9 multiply-adds/s a
#: contraction reaches on these machines (common practice: a stored plan serves every later instance,
#: so a search may cost a few runs' worth, not more). A 20-qubit 10-cycle batch of 4 (greedy 1.2e8)
#: took 4.1 s of planning for a 0.02 s contraction before this rule.
SEARCH_PAYBACK_MADDS_PER_SECOND = 2.5e8


def search_seconds_worth(tree, target, runs: float = 1.0) -> float:
    """Seconds a search for a better tree than ``tree`` (a greedy one) is worth when the plan will run
    ``runs`` times in the request that asks for it: none below :data:`SEARCH_WORTHWHILE_MADDS` for one
    contraction, above it in proportion to the multiply-adds of all ``runs``; unbounded (the budget
    decides) when the tree does not fit the memory target and must be sliced."""
    if target is not None and tree.max_size() > target:
        return math.inf
    madds = float(tree.contraction_cost())
    return 0.0 if madds < SEARCH_WORTHWHILE_MADDS else madds * max(1.0, runs) / SEARCH_PAYBACK_MADDS_PER_SECOND


def search_seconds(tree, target, options: "PlannerOptions") -> float:
    """Seconds of search ``options`` allow past the greedy ``tree``: what it is worth, or the whole budget
    with ``whole_budget`` (a greedy tree below the floor is never searched)."""
    worth = search_seconds_worth(tree, target, options.expected_runs)
    return math.inf if options.whole_budget and worth > 0 else worth


def quick_tree(structure: NetworkStructure, seed: int = 0):
    """A quick greedy tree of the simplified network (a few greedy trials; milliseconds up to a few
    hundred tensors), or None for a network of at most two tensors."""
    import cotengra as ctg

    if structure.num_tensors <= 2:
        return None
    red = simplify_structure(structure)
    if len(red.inputs) <= 2:
        return None
    return ctg.array_contract_tree(red.inputs, red.output, red.size_dict,
                                   optimize=ctg.RandomGreedyOptimizer(max_repeats=4, seed=seed))


def target_elements(options: "PlannerOptions") -> int | None:
    """The largest intermediate (elements) ``options`` ask for, or None for no cap."""
    return None if options.max_elements is None else max(2, int(options.max_elements))


def planning_seconds(structure: NetworkStructure, options: "PlannerOptions") -> float:
    """Predicted seconds :func:`contraction.planning.search.find_plan` takes on ``structure``: the quick
    greedy pass, then the search its greedy tree is worth (:func:`search_seconds_worth`), at most the
    budget."""
    t0 = time.perf_counter()
    tree = quick_tree(structure, options.seed)
    greedy = 2.0 * (time.perf_counter() - t0)
    if tree is None:
        return greedy
    target = target_elements(options)
    return min(options.budget_seconds, greedy + search_seconds(tree, target, options))

def resolved_objective(minimize: str, tree, target: float | None) -> str:
    """The objective ``minimize`` stands for on a network whose greedy tree is ``tree``: itself unless
    "auto", which is "flops" when ``tree``'s largest intermediate exceeds ``target`` (the plan will be
    sliced) and "combo" otherwise. Sliced, "combo" searched far worse trees: 53 qubits, 12 cycles,
    target 2^27, 60 s: 10^13.90 multiply-adds over 1,024 slices against 10^12.91 over 128 ("flops"; even
    its memory writes were fewer, 6e11 against 9e11), and 10^14.77 over 8,192 slices in 300 s; on a
    30-qubit 14-cycle network sliced to 2^24 and 2^20 (two 30 s plans each) "flops" plans ran all their
    slices in 4.5-5.7 s against 4.8-6.5 s (measured, one BLAS thread, complex64). Unsliced, "combo"
    is kept: it beat "flops" 2x in wall time on a 30-qubit 14-cycle network (an earlier measurement)."""
    if minimize != "auto":
        return minimize
    return "flops" if target is not None and tree is not None and tree.max_size() > target else "combo"
