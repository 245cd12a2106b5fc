"""Many bitstrings through one single-amplitude contraction tree, sharing what they have in common.

Each intermediate of the tree holds the output projectors of some qubits (those of the leaves below
it). For a batch of bitstrings it is stacked over the *distinct restrictions* of the bitstrings to those
qubits: an intermediate without projectors is computed once for the whole batch, one holding the
projector of one qubit at most twice, and so on up to the root, which has one row per distinct
bitstring. This is the sparse-output-state contraction of Pan, Chen & Zhang, Phys. Rev. Lett. 129,
090502 (2022). Its multiply-adds are never more than the single amplitudes' (each step's count times at
most the number of bitstrings) and often far fewer: what bitstrings share is computed once.

The rows are plain data worked out once per task (:func:`row_maps`): for each step, which row of each
operand feeds each row of the result. A slice runs the same step program as a single amplitude
(:mod:`contraction.execution.pairwise`) with one leading row axis on every operand; a step whose
operands have as many rows as its result (or one row) needs no gathering copy.

Slices are summed as (mantissa, base-10 exponent) pairs like single amplitudes. A bitstring whose
slice value could have lost digits to underflow (see :mod:`contraction.execution.executor`) has that
slice contracted again on its own, with exponent stripping.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np

from contraction.execution.arena import LEFT, OUT, RIGHT, Arena, plan_arena
from contraction.execution.executor import COMPLEX64_PLAIN_FLOOR, contract_slice_scaled, sum_scaled
from contraction.execution.pairwise import Program, blas_threads, copy_into, program_for
from contraction.execution.products import WIDE_SUM_TERMS, product
from contraction.network.builder import tensor_arrays
from contraction.planning.stacked_cost import joined_rows, leaf_rows, projected_qubits


def stacked_inputs(arrays: Sequence[np.ndarray], projectors: dict[int, np.ndarray], projected: Sequence[int],
                   table: np.ndarray) -> list[np.ndarray]:
    """Input tensors with a leading row axis: one row for a tensor without projector, and for the
    projector of qubit q one row per distinct bit of q in ``table`` (ascending), taken from
    ``projectors[k]`` (shape (2, 2): row v is the tensor for bit v). ``arrays``: one bitstring's inputs."""
    out = []
    for k, a in enumerate(arrays):
        q = projected[k]
        if q < 0:
            out.append(a[None])
        else:
            out.append(np.ascontiguousarray(projectors[k][np.unique(table[:, q])]))
    return out


@dataclass(frozen=True)
class RowMaps:
    """Rows of a batch through a step program: for each step the operands' rows feeding each row of
    its result (None: the operand has one row, or exactly the result's rows in order), the result's
    row count and the operands' own row counts; for each input its rows per bitstring; the root's row
    of each bitstring."""

    steps: tuple[tuple[np.ndarray | None, np.ndarray | None, int, int, int], ...]
    inputs: tuple[np.ndarray, ...]
    final: np.ndarray


def row_maps(program: Program, projected: Sequence[int], table: np.ndarray) -> RowMaps:
    """The :class:`RowMaps` of the bitstrings in ``table`` through ``program`` (inputs' rows as
    :func:`stacked_inputs` lays them out)."""
    inv: dict[int, np.ndarray] = {}
    rows: dict[int, int] = {}
    inputs = []
    for k in range(program.num_inputs):
        rows[k], inv[k] = leaf_rows(table, projected[k])
        inputs.append(inv[k])
    steps = []
    for st in program.steps:
        a, b = inv.pop(st.left), inv.pop(st.right)
        ra, rb = rows.pop(st.left), rows.pop(st.right)
        r, inv[st.out], first = joined_rows(a, ra, b, rb)
        if first is None:                        # one operand has one row, the other the result's rows
            ia = ib = None
        else:
            ia, ib = a[first], b[first]
            ia = None if ra == r and np.array_equal(ia, np.arange(r)) else ia
            ib = None if rb == r and np.array_equal(ib, np.arange(r)) else ib
        steps.append((ia, ib, r, ra, rb))
        rows[st.out] = r
    final = inv[program.final_slot] if program.steps else inputs[0]
    return RowMaps(tuple(steps), tuple(inputs), final)


def stacked_madds(program: Program, maps: RowMaps) -> float:
    """Complex multiply-adds of one slice of the batch: each step's times its result's rows."""
    return float(sum(st.madds * m[2] for st, m in zip(program.steps, maps.steps)))


def _shifted(perm):
    return None if perm is None else (0,) + tuple(p + 1 for p in perm)


def stacked_program(program: Program, maps: RowMaps) -> Program:
    """``program`` with every step's arrays as large as their stacked rows make them, an operand that is
    gathered counted as a copy (a permutation of its own axes): what :func:`plan_arena` lays out."""
    steps = []
    for st, (ia, ib, r, ra, rb) in zip(program.steps, maps.steps):
        la, lb = (r if ia is not None else ra), (r if ib is not None else rb)
        steps.append(replace(
            st, left_perm=st.left_perm if st.left_perm is not None or ia is None else (0,),
            right_perm=st.right_perm if st.right_perm is not None or ib is None else (0,),
            left_shape=(la * st.left_shape[0],) + st.left_shape[1:],
            right_shape=(lb * st.right_shape[0],) + st.right_shape[1:], out_shape=(r,) + st.out_shape))
    return replace(program, steps=tuple(steps))


#: a gathered and rearranged operand is copied row by row (each row rearranged by :func:`copy_into`)
#: when its rows hold at least this many elements; smaller ones in one gathering copy (common practice:
#: a Python loop over rows costs microseconds a row)
ROW_COPY_ELEMENTS = 1 << 14


def _multiply(x: np.ndarray, y: np.ndarray, out: np.ndarray) -> np.ndarray:
    """(rows|1, b, m, k) @ (rows|1, b, k, n) -> (rows, b, m, n) through :func:`product` (complex64 long
    sums in chunks, thin complex64 products on real views). A right factor of one row meets a left
    factor's rows folded into its own (one product of rows x m by k, not ``rows`` thin ones)."""
    _, b, m, k = x.shape
    n = y.shape[-1]
    rows = out.shape[0]
    if y.shape[0] == 1 and b == 1:
        product(x.reshape(1, -1, k), y.reshape(1, k, n), out.reshape(1, -1, n))
    elif x.shape[0] == y.shape[0]:
        product(x.reshape(-1, m, k), y.reshape(-1, k, n), out.reshape(-1, m, n))
    elif x.dtype == np.complex64 and k >= WIDE_SUM_TERMS:
        for r in range(rows):                           # each row's long sums in chunks, as single amplitudes
            product(x[min(r, x.shape[0] - 1)], y[min(r, y.shape[0] - 1)], out[r])
    else:
        product(x, y, out)                               # the left factor broadcast over the rows
    return out


class StackedContractor:
    """Contracts slices of a tree for a batch of bitstrings whose stacked inputs are ``arrays``."""

    def __init__(self, tree, arrays: Sequence[np.ndarray], maps: RowMaps):
        self.tree, self.arrays, self.maps = tree, list(arrays), maps
        self.program = program_for(tree)
        self.order = tuple(tree.sliced_inds)
        self.sizes = [int(tree.size_dict[ix]) for ix in self.order]
        self._sliced_inputs = [(c, tuple(tree.inputs[c])) for c in sorted(tree.sliced_inputs)]
        self.threads = blas_threads()                    # rearranging copies run on as many threads as BLAS
        dtype = np.result_type(*self.arrays) if self.arrays else np.dtype(np.complex128)
        self.arena = Arena(plan_arena(stacked_program(self.program, maps), set(), dtype.itemsize))

    def _operand(self, k: int, role: str, x: np.ndarray, perm, shape, idx: np.ndarray | None) -> np.ndarray:
        """A stacked operand of step ``k`` in its (rows, batch, m, k) layout, gathered to the result's rows;
        a copy goes to its place in the arena (rearranged by :func:`copy_into`)."""
        if perm is None and idx is None:
            return x.reshape((x.shape[0],) + tuple(shape))
        moved = x if perm is None else x.transpose(_shifted(perm))
        rows = x.shape[0] if idx is None else len(idx)
        dest = self.arena.array(k, role, (rows,) + moved.shape[1:], moved.dtype)
        if idx is None:
            copy_into(dest, moved, self.threads)
        elif perm is not None and dest[0].size >= ROW_COPY_ELEMENTS:
            for j, i in enumerate(idx):
                copy_into(dest[j], moved[i], self.threads)
        else:
            np.take(moved, idx, axis=0, out=dest)
        return dest.reshape((rows,) + tuple(shape))

    def key(self, i: int) -> dict:
        """Values of the sliced indices for slice ``i`` (the tree's own numbering: first index slowest)."""
        out = {}
        for ix, d in zip(reversed(self.order), reversed(self.sizes)):
            out[ix] = i % d
            i //= d
        return out

    def contract(self, i: int) -> np.ndarray:
        """Slice ``i`` for every bitstring, in the order of the bit table (complex, shape (count,))."""
        prog, values = self.program, self.key(i)
        slots: dict = dict(enumerate(self.arrays))
        for c, inds in self._sliced_inputs:
            slots[c] = slots[c][(slice(None),) + tuple(values.get(ix, slice(None)) for ix in inds)]
        for k, eq in prog.preprocess:
            slots[k] = np.stack([np.einsum(eq, row) for row in slots[k]])
        for k, (st, (ia, ib, r, _, _)) in enumerate(zip(prog.steps, self.maps.steps)):
            x = self._operand(k, LEFT, slots.pop(st.left), st.left_perm, st.left_shape, ia)
            y = self._operand(k, RIGHT, slots.pop(st.right), st.right_perm, st.right_shape, ib)
            out = self.arena.array(k, OUT, (r,) + x.shape[1:-1] + y.shape[-1:], np.result_type(x, y))
            slots[st.out] = _multiply(x, y, out).reshape((r,) + st.out_shape)
            del x, y
        out = slots[prog.final_slot]
        if prog.final_perm is not None:
            out = out.transpose(_shifted(prog.final_perm))
        return out.reshape(out.shape[0])[self.maps.final]

    def single_arrays(self, j: int) -> list[np.ndarray]:
        """The unstacked inputs of bitstring ``j`` of the table."""
        return [a[rows[j]] for a, rows in zip(self.arrays, self.maps.inputs)]


def contract_stacked(tree, arrays: Sequence[np.ndarray], maps: RowMaps, slices: Sequence[int]) -> tuple[np.ndarray, float]:
    """The sum over ``slices`` for every bitstring as one (mantissa array, base-10 exponent) pair.

    A bitstring whose plain slice value is not finite or not above the floor of its precision
    (complex128: zero; complex64: :data:`COMPLEX64_PLAIN_FLOOR`) has that slice contracted again on
    its own with exponent stripping, exactly as a single amplitude would."""
    contractor = StackedContractor(tree, arrays, maps)
    parts = []
    for i in slices:
        value = contractor.contract(i)
        floor = COMPLEX64_PLAIN_FLOOR if value.dtype == np.complex64 else 0.0
        magnitude = np.abs(value)
        doubtful = np.flatnonzero(~(np.isfinite(magnitude) & (magnitude > floor)))
        if len(doubtful):
            value = value.copy()
            value[doubtful] = 0
            for j in doubtful:
                m, e = contract_slice_scaled(tree, contractor.single_arrays(int(j)), i)
                one = np.zeros(len(value), np.complex128)
                one[j] = complex(np.asarray(m).reshape(()))
                parts.append((one, e))
        parts.append((value, 0.0))
    return sum_scaled(parts)


def batch_inputs(structure, circuit, table: np.ndarray, dtype, reuse: list[np.ndarray] | None = None) -> list[np.ndarray]:
    """The stacked inputs (:func:`stacked_inputs`) of the bitstrings in ``table`` for ``structure`` (a
    single-amplitude network of ``circuit``). ``reuse``: one bitstring's unstacked inputs of the same
    structure, circuit and dtype, whose gate tensors are shared."""
    n = structure.num_qubits
    zeros = tensor_arrays(structure, circuit, "0" * n, dtype, reuse=reuse)
    ones = tensor_arrays(structure, circuit, "1" * n, dtype, reuse=zeros)
    projected = projected_qubits(structure)
    projectors = {k: np.stack([zeros[k], ones[k]]) for k, q in enumerate(projected) if q >= 0}
    return stacked_inputs(zeros, projectors, projected, table)
