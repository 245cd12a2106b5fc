"""Which intermediates to keep from one slice to the next, and in which order to visit slices.

A sliced contraction repeats every pairwise contraction once per slice, but an intermediate only
depends on the sliced indices that occur in its own subtree. Slices are visited in mixed-radix order
of the sliced indices (the first one slowest), so an intermediate depending only on the first k of
them changes once every (product of the remaining sizes) slices: kept from one slice to the next
while its indices stay put, it is computed that many times fewer, and its whole subtree with it.

Which ones to keep is a knapsack under a memory budget (a share of what the cap leaves above the
plan's peak): :func:`reuse_plan` tries orders of the sliced indices, picks intermediates by
multiply-adds their subtree saves per element kept, and reports the share of the plain work left —
exact for the order and choice (the executor runs precisely that work; see
:mod:`contraction.execution.reuse`). Steps are numbered in the tree's traversal order.
"""

from __future__ import annotations

import math
import random
import weakref
from dataclasses import dataclass

#: the memory left above a plan's peak is divided by this before intermediates are kept in it (the
#: peak is the plan's estimate; the copies a contraction step makes come on top: common practice margin)
REUSE_SHARE_OF_HEADROOM = 2.0


def reuse_budget(worker_elements: float, peak_elements: float, width_log2: float = 0.0) -> float:
    """Elements one worker may keep between slices: a share of its cap above the plan's peak and one
    more copy of its largest intermediate (``2^width_log2`` elements: a step whose big operand is kept
    between slices holds it, its rearranged copy and the output at once; the plan's peak counts two)."""
    headroom = worker_elements - peak_elements - (2.0 ** width_log2 if width_log2 > 0 else 0.0)
    return max(0.0, headroom) / REUSE_SHARE_OF_HEADROOM


@dataclass(frozen=True)
class _Steps:
    madds: list[float]
    elements: list[float]
    sliced: list[frozenset]
    parents: list[int]


def _steps(tree) -> _Steps:
    sliced_set = set(tree.sliced_inds)
    deps = {tree.input_to_node(i): frozenset(set(tree.inputs[i]) & sliced_set) for i in range(tree.N)}
    index = {}
    madds, elements, sliced, parents = [], [], [], []
    for k, (p, l, r) in enumerate(tree.traverse()):
        deps[p] = deps[l] | deps[r]
        index[p] = k
        madds.append(float(tree.get_flops(p)))
        elements.append(float(tree.get_size(p)))
        sliced.append(deps[p])
        parents.append(-1)
        for child in (l, r):
            if child in index:
                parents[index[child]] = k
    return _Steps(madds, elements, sliced, parents)


#: orders of the sliced indices tried besides the heuristic one (each costs a greedy selection)
ORDER_TRIALS = 32


@dataclass(frozen=True)
class ReusePlan:
    """The slice order (sliced indices, slowest first), the steps whose results are kept between
    slices, and the predicted multiply-adds per slice with reuse over those without (≤ 1)."""

    order: tuple
    kept: dict                 # kept step -> the sliced indices (sorted) its value depends on
    work_share: float


def _changes(step_sliced: frozenset, pos: dict, sizes: list[int]) -> int:
    """How many times a value depending on ``step_sliced`` changes over all slices in order."""
    if not step_sliced:
        return 1
    last = max(pos[ix] for ix in step_sliced)
    return math.prod(sizes[: last + 1])


def _cost(steps: _Steps, counts: list[int], kept: set, full: int) -> float:
    """Multiply-adds over all slices when the steps in ``kept`` are reused."""
    runs = [0] * len(steps.madds)
    total = 0.0
    for k in range(len(steps.madds) - 1, -1, -1):
        up = steps.parents[k]
        r = full if up < 0 else runs[up]
        if k in kept:
            r = min(r, counts[k])
        runs[k] = r
        total += steps.madds[k] * r
    return total


def _select(steps: _Steps, subtree: list[float], order: tuple, sizes_of: dict,
            budget: float, full: int) -> tuple[frozenset, float, float]:
    """Steps to keep for ``order``: by multiply-adds their subtree saves per element kept, each alone
    (a step under a kept ancestor that changes no more often saves nothing more and is skipped)."""
    pos = {ix: j for j, ix in enumerate(order)}
    sizes = [sizes_of[ix] for ix in order]
    counts = [_changes(d, pos, sizes) for d in steps.sliced]
    elements = steps.elements
    parents = steps.parents
    ranked = sorted((k for k, c in enumerate(counts) if c < full and elements[k] <= budget and parents[k] >= 0),
                    key=lambda k: -subtree[k] * (full - counts[k]) / elements[k])
    kept: set = set()
    used = 0.0
    for k in ranked:
        if used + elements[k] > budget:
            continue
        up, covered = parents[k], False
        while up >= 0:
            if up in kept and counts[up] <= counts[k]:
                covered = True
                break
            up = parents[up]
        if not covered:
            kept.add(k)
            used += elements[k]
    return frozenset(kept), _cost(steps, counts, kept, full), used


def reuse_plan(tree, budget_elements: float, seed: int = 0) -> ReusePlan:
    """Slice order and intermediates to keep for ``tree`` within ``budget_elements`` of extra memory."""
    order0 = tuple(tree.sliced_inds)
    full = int(tree.nslices)
    if full <= 1 or budget_elements <= 0 or tree.N < 2:
        return ReusePlan(order0, {}, 1.0)
    steps = _steps(tree)
    base = sum(steps.madds) * full
    if base <= 0:
        return ReusePlan(order0, {}, 1.0)
    parents = steps.parents
    sizes_of = {ix: int(tree.size_dict[ix]) for ix in order0}
    subtree = [0.0] * len(steps.madds)              # multiply-adds of each step's subtree, itself included
    for k, m in enumerate(steps.madds):
        subtree[k] += m
        if parents[k] >= 0:
            subtree[parents[k]] += subtree[k]
    # heuristic order: indices the most work depends on change slowest
    weight = {ix: sum(m for m, d in zip(steps.madds, steps.sliced) if ix in d) for ix in order0}
    orders = [tuple(sorted(order0, key=lambda ix: -weight[ix])), order0]
    rng = random.Random(seed)
    for _ in range(ORDER_TRIALS):
        o = list(order0)
        rng.shuffle(o)
        orders.append(tuple(o))
    best = None
    for order in orders:
        kept, cost, used = _select(steps, subtree, order, sizes_of, budget_elements, full)
        if best is None or cost < best[2]:
            best = (order, kept, cost, used)
    order, kept, cost, _ = best
    return ReusePlan(order, {k: tuple(sorted(steps.sliced[k])) for k in sorted(kept)}, cost / base)


_plans: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def reuse_plan_for(tree, budget_elements: float) -> ReusePlan:
    """:func:`reuse_plan` of ``tree`` and budget, worked out once per tree object and budget."""
    per_tree = _plans.setdefault(tree, {})
    plan = per_tree.get(float(budget_elements))
    if plan is None:
        plan = per_tree[float(budget_elements)] = reuse_plan(tree, budget_elements)
    return plan
