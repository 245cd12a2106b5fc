"""Gate fusion on a contraction tree: small tensors absorbed one after another into a large
intermediate are contracted together first, then into it once.

A tree searched for the fewest multiply-adds often grows a large intermediate by absorbing gates one
at a time: each absorption reads and writes the whole intermediate for a handful of multiply-adds per
element. On the 53-qubit 12-cycle network sliced to 2^28 elements, 130 of the 378 steps of a slice
were such absorptions (a 4 x 4 gate into 2^28 elements) and took 32 of its 34 s. Contracting two or
three neighbouring small tensors first and absorbing the product once costs a few more multiply-adds
but one pass over the intermediate instead of two or three.

:func:`fuse_absorptions` rewrites a (sliced) tree: along every chain of absorptions into an
intermediate of at least ``big_min`` elements, consecutive small tensors are grouped while the
grouped absorption costs less than absorbing the next one apart, under the cost model
``multiply-adds + move_cost x (elements read + elements written)`` of the large operand. The
result has the same leaves, sliced indices, output and largest intermediate (the chain's nodes
that remain are the original ones; a group of small tensors stays within ``group_max``).
"""

from __future__ import annotations

import math

#: multiply-adds one element moved through memory costs, for the large operands of these steps
#: (measured: absorbing a 4 x 4 gate into 2^28 complex64 elements took 0.54-0.85 s, 1.0-1.6 ns per
#: element read and written, against 0.05-0.07 ns per multiply-add of a matrix product: 15-30; the
#: grouping below came out the same for every value from 8 to 24 on that network)
MOVE_COST = 8.0
#: an intermediate this large (elements) is worth fusing the small tensors it absorbs
BIG_MIN = 2 ** 20
#: a small tensor absorbed is at most this large, and so is a group of them contracted together.
#: Measured on that network (one slice, two threads): groups up to 2^8 elements 33.7 s -> 18.2 s with
#: 1.3x the multiply-adds; up to 2^10: 18.8 s, 1.5x; up to 2^12: 19.3 s, 2.5x
SMALL_MAX = 2 ** 8
GROUP_MAX = 2 ** 8


class _Legs:
    """Legs and sizes of unions of tree nodes (sliced indices left out, as the tree has them)."""

    def __init__(self, tree):
        self.tree = tree
        self.size = tree.size_dict
        self.appear = tree.appearances

    def of(self, node) -> dict:
        return dict(self.tree.get_legs(node))

    def union(self, a: dict, b: dict) -> dict:
        out = dict(a)
        for ix, c in b.items():
            out[ix] = out.get(ix, 0) + c
        return {ix: c for ix, c in out.items() if c < self.appear[ix]}

    def elements(self, legs: dict) -> float:
        return float(math.prod(self.size[ix] for ix in legs))

    def madds(self, a: dict, b: dict) -> float:
        return float(math.prod(self.size[ix] for ix in set(a) | set(b)))


def fuse_absorptions(tree, big_min: float = BIG_MIN, small_max: float = SMALL_MAX, group_max: float = GROUP_MAX,
                     move_cost: float = MOVE_COST):
    """A copy of ``tree`` with absorptions into large intermediates grouped (see the module notes);
    ``tree`` itself when nothing is worth grouping."""
    import cotengra as ctg

    legs = _Legs(tree)
    fused = 0

    def build(node):
        nonlocal fused
        if tree.is_leaf(node):
            return tree.nodeops.node_get_single_el(node)
        # walk down the chain of absorptions that ends at ``node``: (chain node, small child) pairs
        chain = []
        cur = node
        while not tree.is_leaf(cur):
            left, right = tree.children[cur]
            sl, sr = tree.get_size(left), tree.get_size(right)
            big, small = (left, right) if sl >= sr else (right, left)
            if tree.get_size(big) < big_min or tree.get_size(small) > small_max:
                break
            chain.append((cur, small))
            cur = big
        if len(chain) < 2:
            left, right = tree.children[node]
            return (build(left), build(right))
        chain.reverse()                                   # first absorption first
        out = build(cur)
        base_legs = legs.of(cur)
        i = 0
        while i < len(chain):
            group = [chain[i][1]]
            g_legs = legs.of(chain[i][1])
            j = i + 1
            while j < len(chain):
                s = chain[j][1]
                s_legs = legs.of(s)
                joined = legs.union(g_legs, s_legs)
                if legs.elements(joined) > group_max:
                    break
                before_end = legs.of(chain[j - 1][0])
                end = legs.of(chain[j][0])
                apart = (legs.madds(base_legs, g_legs) + legs.madds(before_end, s_legs)
                         + move_cost * (legs.elements(base_legs) + 2 * legs.elements(before_end)
                                        + legs.elements(end)))
                together = legs.madds(base_legs, joined) + move_cost * (legs.elements(base_legs) + legs.elements(end))
                if together >= apart:
                    break
                group.append(s)
                g_legs = joined
                j += 1
            small = build(group[0])
            for s in group[1:]:
                small = (small, build(s))
            fused += len(group) - 1
            out = (out, small)
            base_legs = legs.of(chain[j - 1][0])
            i = j
        return out

    path: list[tuple[int, int]] = []

    def emit(x) -> int:
        """SSA path of nested pairs: the k-th contraction makes tensor N + k."""
        if isinstance(x, int):
            return x
        path.append((emit(x[0]), emit(x[1])))
        return tree.N + len(path) - 1

    try:
        nested = build(tree.root)
        if not fused:
            return tree
        emit(nested)
    except RecursionError:         # a tree deeper than Python's recursion limit is left as it is
        return tree
    new = ctg.ContractionTree.from_path(tree.inputs, tree.output, tree.size_dict, ssa_path=path)
    for ix in tree.sliced_inds:
        new.remove_ind_(ix)
    return new
