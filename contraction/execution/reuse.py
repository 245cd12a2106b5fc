"""Slices contracted one after the other, keeping chosen intermediates between them.

:class:`SliceContractor` runs the slices of one task (one set of arrays) with the step program of
:mod:`contraction.execution.pairwise`, in the slice order and with the kept intermediates of a
:class:`~contraction.planning.slice_reuse.ReusePlan`: a kept step whose sliced indices have not
changed since it was computed is taken from the cache, and its whole subtree skipped. Large arrays
(step outputs and rearranged operands) have fixed places in one
:class:`~contraction.execution.arena.Arena`, laid out for the program and its kept intermediates.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from contraction.execution.arena import ARENA_MIN_BYTES, LEFT, OUT, RIGHT, Arena, plan_arena
from contraction.execution.pairwise import arrange_operand, blas_threads, copy_into, program_for
from contraction.execution.products import product
from contraction.planning.slice_reuse import ReusePlan


class SliceContractor:
    """Contracts slices of one set of arrays, keeping the plan's chosen intermediates between slices.

    Slice numbers run over the same range as the tree's, mapped to index values in the reuse plan's
    order, so a run over 0..nslices-1 (or any split of it) covers every slice exactly once."""

    def __init__(self, tree, arrays: Sequence[np.ndarray], plan: ReusePlan | None = None,
                 arena_min_bytes: int = ARENA_MIN_BYTES):
        plan = plan or ReusePlan(tuple(tree.sliced_inds), {}, 1.0)
        self.tree, self.arrays, self.plan = tree, list(arrays), plan
        self.program = program_for(tree)
        self.sizes = [int(tree.size_dict[ix]) for ix in plan.order]
        self.cache: dict[int, tuple[tuple, np.ndarray]] = {}
        self.madds_done = 0.0                            # multiply-adds of the steps actually run
        self._sliced_inputs = [(c, tuple(tree.inputs[c])) for c in sorted(tree.sliced_inputs)]
        m = self.program.num_inputs
        self._operands = [tuple(src - m for src in (st.left, st.right) if src >= m) for st in self.program.steps]
        self.dtype = np.result_type(*self.arrays) if self.arrays else np.dtype(np.complex128)
        self.threads = blas_threads()                    # rearranging copies run on as many threads as BLAS
        self.arena = Arena(plan_arena(self.program, set(plan.kept), self.dtype.itemsize, arena_min_bytes))

    def _arranged(self, k: int, role: str, x: np.ndarray, perm, shape) -> np.ndarray:
        """``x`` in step ``k``'s matrix layout; a rearranged copy goes to its place in the arena."""
        if perm is None:
            return arrange_operand(x, None, shape)
        moved = x.transpose(perm)
        copy = self.arena.array(k, role, moved.shape, moved.dtype)
        copy_into(copy, moved, self.threads)
        return arrange_operand(copy, None, shape)

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
        # the kept steps' index values for this slice (only kept steps are ever taken from the cache)
        keys = {k: tuple(values[ix] for ix in inds) for k, inds in self.plan.kept.items()}
        valid = {k for k, (kk, _) in self.cache.items() if kk == keys[k]}
        for k in [k for k in self.cache if k not in valid]:
            del self.cache[k]                            # stale: freed before its replacement is computed
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
            x = self._arranged(k, LEFT, slots.pop(st.left), st.left_perm, st.left_shape)
            y = self._arranged(k, RIGHT, slots.pop(st.right), st.right_perm, st.right_shape)
            dtype = np.result_type(x, y)
            if dtype != self.dtype:                      # mixed precisions: not what the arena was laid out for
                out = np.matmul(x, y)
            else:
                out = product(x, y, self.arena.array(k, OUT, x.shape[:-1] + y.shape[-1:], dtype))
            out = out.reshape(st.out_shape)
            del x, y
            if k in self.plan.kept:
                self.cache[k] = (keys[k], out)
            slots[st.out] = out
        out = slots[prog.final_slot]
        if prog.final_perm is not None:
            out = out.transpose(prog.final_perm)
        if self.arena.holds(out):
            return np.array(out)                         # the caller's own copy: the next slice overwrites it
        return np.asarray(out)
