"""Intermediates reused from one slice to the next.

A sliced contraction repeats every pairwise contraction once per slice, but an intermediate only
depends on the sliced indices that occur in its own subtree. Slices are visited in mixed-radix order
of the sliced indices (the first one slowest), so an intermediate depending only on the first k of
them changes once every (product of the remaining sizes) slices: kept from one slice to the next
while its indices stay put, it is computed that many times fewer, and its whole subtree with it.

Which intermediates to keep is a knapsack under a memory budget (the headroom the cap leaves above
the plan's own peak): :func:`reuse_plan` picks the order of the sliced indices and the intermediates,
greedily by multiply-adds saved per element kept, and reports the predicted share of work left.
:class:`SliceContractor` runs slices of one task (one set of arrays) in that order with the cache.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from contraction.execution.pairwise import Program, _arrange, program_for

#: orders of the sliced indices tried besides the heuristic one (each costs a greedy selection)
ORDER_TRIALS = 32


@dataclass(frozen=True)
class ReusePlan:
    """The slice order (sliced indices, slowest first), the steps whose results are kept between
    slices, and the predicted multiply-adds per slice with reuse over those without (≤ 1)."""

    order: tuple
    kept: frozenset
    work_share: float
    kept_elements: float


def _changes(step_sliced: frozenset, pos: dict, sizes: list[int]) -> int:
    """How many times a value depending on ``step_sliced`` changes over all slices in order."""
    if not step_sliced:
        return 1
    last = max(pos[ix] for ix in step_sliced)
    return math.prod(sizes[: last + 1])


def _cost(program: Program, parents: list[int], counts: list[int], kept: set, full: int) -> float:
    """Multiply-adds over all slices when the steps in ``kept`` are reused."""
    steps = program.steps
    runs = [0] * len(steps)
    total = 0.0
    for k in range(len(steps) - 1, -1, -1):
        up = parents[k]
        r = full if up < 0 else runs[up]
        if k in kept:
            r = min(r, counts[k])
        runs[k] = r
        total += steps[k].madds * r
    return total


def _select(program: Program, parents: list[int], subtree: list[float], order: tuple, sizes_of: dict,
            budget: float, full: int) -> tuple[frozenset, float, float]:
    """Steps to keep for ``order``: by multiply-adds their subtree saves per element kept, each alone
    (a step under a kept ancestor that changes no more often saves nothing more and is skipped)."""
    pos = {ix: j for j, ix in enumerate(order)}
    sizes = [sizes_of[ix] for ix in order]
    counts = [_changes(st.sliced, pos, sizes) for st in program.steps]
    elements = [float(math.prod(st.out_shape)) for st in program.steps]
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
    return frozenset(kept), _cost(program, parents, counts, kept, full), used


def reuse_plan(tree, budget_elements: float, seed: int = 0) -> ReusePlan:
    """Slice order and intermediates to keep for ``tree`` within ``budget_elements`` of extra memory."""
    program = program_for(tree)
    order0 = tuple(tree.sliced_inds)
    full = int(tree.nslices)
    base = sum(st.madds for st in program.steps) * full
    if full <= 1 or budget_elements <= 0 or not program.steps or base <= 0:
        return ReusePlan(order0, frozenset(), 1.0, 0.0)
    n = program.num_inputs
    parents = [-1] * len(program.steps)
    for k, st in enumerate(program.steps):
        for src in (st.left, st.right):
            if src >= n:
                parents[src - n] = k
    sizes_of = {ix: int(tree.size_dict[ix]) for ix in order0}
    subtree = [0.0] * len(program.steps)            # multiply-adds of each step's subtree, itself included
    for k, st in enumerate(program.steps):
        subtree[k] += st.madds
        if parents[k] >= 0:
            subtree[parents[k]] += subtree[k]
    # heuristic order: indices the most work depends on change slowest
    weight = {ix: sum(st.madds for st in program.steps if ix in st.sliced) for ix in order0}
    orders = [tuple(sorted(order0, key=lambda ix: -weight[ix])), order0]
    rng = random.Random(seed)
    for _ in range(ORDER_TRIALS):
        o = list(order0)
        rng.shuffle(o)
        orders.append(tuple(o))
    best = None
    for order in orders:
        kept, cost, used = _select(program, parents, subtree, order, sizes_of, budget_elements, full)
        if best is None or cost < best[2]:
            best = (order, kept, cost, used)
    order, kept, cost, used = best
    return ReusePlan(order, kept, cost / base, used)


_plans: dict = {}


def reuse_plan_for(tree, budget_elements: float) -> ReusePlan:
    """:func:`reuse_plan` of ``tree`` and budget, worked out once per tree object in this process."""
    key = (id(tree), float(budget_elements))
    hit = _plans.get(key)
    if hit is not None and hit[0] is tree:
        return hit[1]
    plan = reuse_plan(tree, budget_elements)
    if len(_plans) > 64:
        _plans.clear()
    _plans[key] = (tree, plan)
    return plan


class SliceContractor:
    """Contracts slices of one set of arrays, keeping the plan's chosen intermediates between slices.

    Slice numbers run over the same range as the tree's, mapped to index values in the reuse plan's
    order, so a run over 0..nslices-1 (or any split of it) covers every slice exactly once."""

    def __init__(self, tree, arrays: Sequence[np.ndarray], plan: ReusePlan | None = None):
        plan = plan or ReusePlan(tuple(tree.sliced_inds), frozenset(), 1.0, 0.0)
        self.tree, self.arrays, self.plan = tree, list(arrays), plan
        self.program = program_for(tree)
        self.sizes = [int(tree.size_dict[ix]) for ix in plan.order]
        self.cache: dict[int, tuple[tuple, np.ndarray]] = {}
        self.madds_done = 0.0                            # multiply-adds of the steps actually run
        self._sliced_inputs = [(c, tuple(tree.inputs[c])) for c in sorted(tree.sliced_inputs)]
        m = self.program.num_inputs
        self._operands = [tuple(src - m for src in (st.left, st.right) if src >= m) for st in self.program.steps]
        self._key_order = [tuple(sorted(st.sliced)) for st in self.program.steps]

    def key(self, i: int) -> dict:
        """Values of the sliced indices for slice ``i`` (first index of the order slowest)."""
        out = {}
        for ix, d in zip(reversed(self.plan.order), reversed(self.sizes)):
            out[ix] = i % d
            i //= d
        return out

    def tree_slice(self, i: int) -> int:
        """The number cotengra's ``contract_slice`` gives the same slice as this contractor's ``i``."""
        key = self.key(i)
        number = 0
        for ix in self.tree.sliced_inds:
            number = number * int(self.tree.size_dict[ix]) + key[ix]
        return number

    def contract(self, i: int) -> np.ndarray:
        """Slice ``i`` contracted (the tree's output order)."""
        prog = self.program
        if not prog.steps:                               # one tensor: nothing pairwise to do
            return np.asarray(self.tree.contract_slice(self.arrays, self.tree_slice(i)))
        values = self.key(i)
        keys = [tuple(values[ix] for ix in ko) for ko in self._key_order]
        valid = {k for k, (kk, _) in self.cache.items() if kk == keys[k]}
        needed = [False] * len(prog.steps)
        needed[-1] = True
        for k in range(len(prog.steps) - 1, -1, -1):
            if needed[k] and k not in valid:
                for j in self._operands[k]:
                    needed[j] = True
        slots: dict = dict(enumerate(self.arrays))
        for c, inds in self._sliced_inputs:
            slots[c] = slots[c][tuple(values.get(ix, slice(None)) for ix in inds)]
        for i_in, eq in prog.preprocess:
            slots[i_in] = np.einsum(eq, slots[i_in])
        for k, st in enumerate(prog.steps):
            if not needed[k]:
                continue
            if k in valid:
                slots[st.out] = self.cache[k][1]
                continue
            self.madds_done += st.madds
            x = _arrange(slots.pop(st.left), st.left_perm, st.left_shape)
            y = _arrange(slots.pop(st.right), st.right_perm, st.right_shape)
            out = np.matmul(x, y).reshape(st.out_shape)
            del x, y
            if k in self.plan.kept:
                self.cache[k] = (keys[k], out)
            slots[st.out] = out
        out = slots[prog.final_slot]
        if prog.final_perm is not None:
            out = out.transpose(prog.final_perm)
        return np.asarray(out)
