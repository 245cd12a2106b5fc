"""Structure-only simplification of a network before its contraction order is searched.

Every step here is decided by the index layout alone (never by gate values), so the result is the
same for every random instance of an architecture and every bitstring, and one plan still serves
them all. The simplification is expressed as the *first steps of the contraction path*: pairs of
tensors contracted up front whose result is no larger than the larger of the two. That absorbs the
|0> vectors and the output projectors into their gates and merges tensors whose shared indices
cancel out (the structural part of what tensor-network libraries call rank simplification).

The search then runs on the smaller network, and :func:`full_path` joins the fixed steps and the
searched path into one path of the original network, so execution needs nothing new.
"""

from __future__ import annotations

import heapq
import math
from dataclasses import dataclass

from contraction.network.builder import NetworkStructure


@dataclass(frozen=True)
class Simplified:
    """The reduced network and how it was made from the original one."""

    inputs: tuple[tuple[str, ...], ...]         # index labels of each remaining tensor
    output: tuple[str, ...]
    size_dict: dict
    pre_path: tuple[tuple[int, int], ...]       # SSA pairs on the original network
    ssa_ids: tuple[int, ...]                    # remaining tensor r -> its SSA id after pre_path
    num_original: int

    @property
    def num_tensors(self) -> int:
        """Number of tensors left after the simplification."""
        return len(self.inputs)

    def full_path(self, reduced_ssa_path) -> list[tuple[int, ...]]:
        """The SSA path of the original network: the fixed steps, then ``reduced_ssa_path`` (SSA on
        the reduced network) renumbered."""
        start = self.num_original + len(self.pre_path)      # first SSA id the search's steps create
        r = len(self.inputs)

        def ssa(i: int) -> int:
            return self.ssa_ids[i] if i < r else start + (i - r)

        return [tuple(p) for p in self.pre_path] + [tuple(ssa(i) for i in step) for step in reduced_ssa_path]


def _log_size(ixs, sizes) -> float:
    return sum(math.log2(sizes[ix]) for ix in ixs)


def simplify_structure(structure: NetworkStructure) -> Simplified:
    """Contract, up front, every pair of tensors whose result is no larger than the larger input,
    smallest results first (ties: lowest tensor ids), until no such pair is left. Output indices
    (batch, open qubits) are never contracted away."""
    sizes = structure.size_dict
    output = set(structure.output)
    terms: dict[int, tuple[str, ...]] = {i: tuple(t) for i, t in enumerate(structure.inputs)}
    where: dict[str, set[int]] = {}
    for i, t in terms.items():
        for ix in t:
            where.setdefault(ix, set()).add(i)
    next_id = len(terms)
    pre: list[tuple[int, int]] = []

    def merged(a: int, b: int) -> tuple[str, ...]:
        seen = dict.fromkeys(terms[a] + terms[b])
        return tuple(ix for ix in seen if ix in output or (where[ix] - {a, b}))

    def candidate(a: int, b: int):
        out = merged(a, b)
        grow = _log_size(out, sizes) - max(_log_size(terms[a], sizes), _log_size(terms[b], sizes))
        if grow > 1e-9:
            return None
        return (_log_size(out, sizes), min(a, b), max(a, b))

    heap: list = []

    def push_neighbours(a: int) -> None:
        for ix in terms[a]:
            if len(where[ix]) > 8:            # a batch hyper-index joins every projector: not a pair
                continue
            for b in where[ix]:
                if b != a:
                    c = candidate(a, b)
                    if c is not None:
                        heapq.heappush(heap, c)

    for i in list(terms):
        push_neighbours(i)
    while heap:
        _, a, b = heapq.heappop(heap)
        if a not in terms or b not in terms:
            continue                          # stale entry: one of them was merged already
        c = candidate(a, b)
        if c is None:
            continue
        out = merged(a, b)
        for ix in set(terms[a] + terms[b]):
            where[ix] -= {a, b}
        del terms[a], terms[b]
        new = next_id
        next_id += 1
        terms[new] = out
        for ix in out:
            where[ix].add(new)
        pre.append((a, b))
        push_neighbours(new)
    ids = tuple(sorted(terms))
    return Simplified(tuple(terms[i] for i in ids), structure.output, sizes, tuple(pre), ids,
                      len(structure.inputs))
