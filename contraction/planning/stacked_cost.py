"""What a batch costs through a single-amplitude tree with stacked intermediates.

The executor (:mod:`contraction.execution.stacked`) stacks every intermediate over the distinct
restrictions of the batch's bitstrings to the qubits whose output projectors it holds (sparse output
state, Pan, Chen & Zhang, Phys. Rev. Lett. 129, 090502 (2022)). Here the same row counts are worked
out on the tree alone, for the engine choice: the multiply-adds of a batch (each step's count times its
rows) and its peak memory, either for actual bitstrings or as a bound that holds for any bitstrings
(a node holding the projectors of p qubits has at most min(batch, 2^p) rows).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def projected_qubits(structure) -> tuple[int, ...]:
    """For each input tensor of ``structure``: the qubit whose output projector it is, or -1."""
    return tuple(int(src[1]) if src[0] == "proj" else -1 for src in structure.sources)


@dataclass(frozen=True)
class StackedCost:
    """One batch through a tree: complex multiply-adds of all slices, peak elements of one slice, the
    same multiply-adds for one bitstring (the tree's own), and the matrix products the executor runs."""

    madds: float
    peak_elements: float
    single_madds: float
    # matrix products of all slices: one per step whose one operand has a single row (the other's rows
    # fold into one product), else one per row — both operands stacked, or sharing an index the result
    # keeps (a hyper-index, as diagonal gates make): those steps cost per bitstring what single
    # amplitudes' steps do
    row_steps: float = 0.0

    @property
    def ratio(self) -> float:
        """Multiply-adds of the batch over one bitstring's."""
        return self.madds / self.single_madds if self.single_madds else 1.0


def leaf_rows(table: np.ndarray, q: int) -> tuple[int, np.ndarray]:
    """Rows of the projector of qubit ``q`` (its distinct bits in ``table``, ascending) and each
    bitstring's row; one row for ``q`` < 0 (no projector)."""
    if q < 0:
        return 1, np.zeros(table.shape[0], np.intp)
    values, inverse = np.unique(table[:, q], return_inverse=True)
    return len(values), inverse.reshape(-1).astype(np.intp)


def joined_rows(a: np.ndarray, ra: int, b: np.ndarray, rb: int) -> tuple[int, np.ndarray, np.ndarray | None]:
    """Rows of a node from its children's (each bitstring's row, row count): the node's row count, each
    bitstring's row, and the first bitstring of each row — None when a child has one row, the node's
    rows then being the other child's as they are."""
    if ra == 1 or rb == 1:
        return (rb, b, None) if ra == 1 else (ra, a, None)
    _, first, inverse = np.unique(a * rb + b, return_index=True, return_inverse=True)
    return len(first), inverse.reshape(-1).astype(np.intp), first


def _node_rows(tree, projected, table: np.ndarray | None, batch: int) -> dict:
    """Rows of every node: from ``table`` (distinct restrictions), or the bound min(batch, 2^p)."""
    rows, inv, held = {}, {}, {}
    count = table.shape[0] if table is not None else batch
    for i in range(tree.N):
        node, q = tree.input_to_node(i), projected[i]
        held[node] = 0 if q < 0 else 1
        if table is None:
            rows[node] = min(count, 2 ** held[node])
        else:
            rows[node], inv[node] = leaf_rows(table, q)
    for p, l, r in tree.traverse():
        held[p] = held[l] + held[r]
        if table is None:
            rows[p] = min(count, 2 ** min(held[p], 62))
        else:
            rows[p], inv[p], _ = joined_rows(inv[l], rows[l], inv[r], rows[r])
    return rows


def stacked_cost(tree, projected, table: np.ndarray | None = None, batch: int = 0) -> StackedCost:
    """:class:`StackedCost` of the bitstrings in ``table`` (a bit table) through ``tree``, or with
    ``table=None`` the bound for any ``batch`` bitstrings. The peak counts, as the executor runs a slice,
    the inputs throughout, the live intermediates, and at each step its output plus two copies of each
    operand (gathered to the output's rows, then rearranged)."""
    rows = _node_rows(tree, projected, table, batch)
    size = tree.get_size
    if tree.N < 2:
        return StackedCost(0.0, float(sum(size(tree.input_to_node(i)) for i in range(tree.N))), 0.0, 0.0)
    live = float(sum(size(tree.input_to_node(i)) * rows[tree.input_to_node(i)] for i in range(tree.N)))
    peak, per_slice, single, row_steps = live, 0.0, 0.0, 0.0
    for p, l, r in tree.traverse():
        legs_l, legs_r = set(tree.get_legs(l)), set(tree.get_legs(r))
        hyper = bool(legs_l & legs_r & set(tree.get_legs(p)))
        row_steps += rows[p] if hyper or (rows[l] > 1 and rows[r] > 1) else 1.0
        # the output, and each operand gathered to the output's rows and rearranged: two copies at most
        # while the second operand is laid out (the first one's copy is alive by then)
        so = float(size(p)) * rows[p]
        sl, sr = 2.0 * float(size(l)) * rows[p], 2.0 * float(size(r)) * rows[p]
        peak = max(peak, live + so + sl + sr)
        live += so - (0 if tree.is_leaf(l) else float(size(l)) * rows[l]) \
            - (0 if tree.is_leaf(r) else float(size(r)) * rows[r])
        flops = float(tree.get_flops(p))
        per_slice += flops * rows[p]
        single += flops
    return StackedCost(per_slice * tree.nslices, peak, single * tree.nslices, row_steps * tree.nslices)


#: chunks of a stacked request whose multiply-adds are counted one by one; with more, an evenly spread
#: sample of this many stands for the rest (counting costs a pass over the tree per chunk)
STACKED_SAMPLE_CHUNKS = 16


@dataclass(frozen=True)
class StackedChunks:
    """A request cut into chunks for the stacked engine: the chunk size, the peak of one slice of a chunk
    (the largest of the chunks', or a bound for any bitstrings), the multiply-adds of the whole request, each counted chunk's
    multiply-adds over one bitstring's, how many chunks each counted one stands for, and the bitstrings
    of every chunk in order."""

    size: int
    peak_elements: float
    madds: float
    ratios: tuple[float, ...]
    share: float
    schedule: tuple[int, ...]
    row_steps: tuple[float, ...] = ()        # each counted chunk's matrix products (see StackedCost)


def stacked_chunks(tree, projected, table: np.ndarray, fit_elements: float, top: int) -> StackedChunks | None:
    """Chunks of the bitstrings in ``table`` of the largest size up to ``top`` (halving) whose peak fits
    ``fit_elements``: the bound for any bitstrings, or where that is over, the actual peak of every chunk
    when there are at most :data:`STACKED_SAMPLE_CHUNKS` of them (bitstrings sharing many qubits need
    far fewer rows than the bound). None when not even two fit."""
    count = table.shape[0]

    def peak(size: int) -> float:
        bound = stacked_cost(tree, projected, None, size).peak_elements
        starts = range(0, count, size)
        if bound <= fit_elements or len(starts) > STACKED_SAMPLE_CHUNKS:
            return bound                     # the bound (one pass, no bitstrings) settles it
        return max(stacked_cost(tree, projected, table[a:a + size]).peak_elements for a in starts)

    size = max(1, min(top, count))
    while size >= 2 and (held := peak(size)) > fit_elements:
        size //= 2
    if size < 2:
        return None
    starts = list(range(0, count, size))
    picks = starts if len(starts) <= STACKED_SAMPLE_CHUNKS else \
        [starts[int(k)] for k in np.linspace(0, len(starts) - 1, STACKED_SAMPLE_CHUNKS)]
    counted = [stacked_cost(tree, projected, table[a:a + size]) for a in picks]
    share = len(starts) / len(picks)
    return StackedChunks(size, held, sum(x.madds for x in counted) * share, tuple(x.ratio for x in counted),
                         share, tuple(min(size, count - a) for a in starts), tuple(x.row_steps for x in counted))
