"""Pairwise contraction of one slice with as few copies of large tensors as the tree allows.

A pairwise contraction is a matrix product once both operands are laid out as
(batch, kept, contracted) and (batch, contracted, kept). A general-purpose tensordot copies both
operands into that layout at every step; on the 53-qubit 12-cycle network about half the time of a
slice went into such copies of 2^25-2^27-element intermediates absorbing a gate. Here each step
keeps the larger operand as it lies whenever its axes already form one of the two layouts — it then
becomes the left or the right factor of the product accordingly — and only the smaller operand is
rearranged; the result keeps the larger operand's axis order and puts the smaller one's new axes
after (or before) it, ordered so that the axes its own parent contracts form one block with the larger
operand's axes that the parent contracts too.

The program of steps is worked out once per tree (:func:`compile_program`, plain data: axis
permutations and shapes) and run for every slice by :class:`contraction.execution.reuse.SliceContractor`.
"""

from __future__ import annotations

import functools
import math
import os
import threading
import weakref
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Sequence

import numpy as np


@dataclass(frozen=True)
class Step:
    """One pairwise contraction: operands by slot, optional axis permutations (None: used as they lie),
    the 3-d shapes (batch, rows, inner) and (batch, inner, columns) of the product, which operand is the
    left factor, and the output's shape."""

    left: int
    right: int
    out: int
    left_perm: tuple[int, ...] | None
    right_perm: tuple[int, ...] | None
    left_shape: tuple[int, int, int]
    right_shape: tuple[int, int, int]
    out_shape: tuple[int, ...]
    madds: float = 0.0                          # complex multiply-adds of this contraction


@dataclass(frozen=True)
class Program:
    """Steps for one sliced tree: preprocessing of inputs (einsum equations for inputs with indices
    summed on their own), the pairwise steps and the final axis permutation to the tree's output order."""

    num_inputs: int
    preprocess: tuple[tuple[int, str], ...]
    steps: tuple[Step, ...]
    final_slot: int
    final_perm: tuple[int, ...] | None


def _perm(current: Sequence, wanted: Sequence) -> tuple[int, ...] | None:
    """Axis permutation taking ``current`` label order to ``wanted`` (None when they already agree)."""
    if tuple(current) == tuple(wanted):
        return None
    pos = {ix: k for k, ix in enumerate(current)}
    return tuple(pos[ix] for ix in wanted)


def _layout(labels: Sequence, batch: set, kept: set, contr: set) -> str | None:
    """'KC' when ``labels`` lie as (batch, kept, contracted), 'CK' for (batch, contracted, kept), else None."""
    nb, nk = len(batch), len(kept)
    if set(labels[:nb]) != batch:
        return None
    rest = labels[nb:]
    if set(rest[:nk]) == kept and set(rest[nk:]) == contr:
        return "KC"
    if set(rest[:len(contr)]) == contr and set(rest[len(contr):]) == kept:
        return "CK"
    return None


def _next_to(axes: list, later: set, first: bool) -> list:
    """``axes`` with those in ``later`` (contracted by the next step) first or last, the others in order."""
    inner = [ix for ix in axes if ix in later]
    outer = [ix for ix in axes if ix not in later]
    return inner + outer if first else outer + inner


def compile_program(tree) -> Program:
    """The step program of a cotengra tree (sliced or not) for arrays already sliced."""
    size = tree.size_dict
    n = tree.N
    leaves = [tree.input_to_node(i) for i in range(n)]
    labels: dict = {}                 # slot -> current axis labels
    slot_of: dict = {}
    pre = []
    for i, leaf in enumerate(leaves):
        legs = tuple(tree.get_legs(leaf))
        if i in tree.preprocessing:
            pre.append((i, tree.preprocessing[i]))
        labels[i] = legs
        slot_of[leaf] = i

    # indices each node's parent contracts it over (to put them at an end of the node's layout)
    parent_contracts: dict = {}
    for p, l, r in tree.traverse():
        lp = set(tree.get_legs(p))
        ll, lr = set(tree.get_legs(l)), set(tree.get_legs(r))
        parent_contracts[l] = (ll & lr) - lp
        parent_contracts[r] = (ll & lr) - lp

    steps = []
    nxt = n
    for p, l, r in tree.traverse():
        a, b = slot_of.pop(l), slot_of.pop(r)
        la, lb = labels.pop(a), labels.pop(b)
        outset = set(tree.get_legs(p))
        shared = set(la) & set(lb)
        batch = shared & outset
        contr = shared - outset
        sa = math.prod(size[ix] for ix in la)
        sb = math.prod(size[ix] for ix in lb)
        big, small, lbig, lsmall = (a, b, la, lb) if sa >= sb else (b, a, lb, la)
        kept_big = [ix for ix in lbig if ix not in shared]
        kept_small = [ix for ix in lsmall if ix not in shared]
        later = parent_contracts.get(p, set())
        big_perm = None
        form = _layout(lbig, batch, set(kept_big), contr)
        if form is None:
            form = "KC"
            kept_big = [ix for ix in kept_big if ix not in later] + [ix for ix in kept_big if ix in later]
            order = [ix for ix in lbig if ix in batch] + kept_big + [ix for ix in lbig if ix in contr]
            big_perm = _perm(lbig, order)
            lbig = tuple(order)
        nb = len(batch)
        batch_order = list(lbig[:nb])
        if form == "KC":
            contr_order = list(lbig[nb + len(kept_big):])
            kept_big = list(lbig[nb:nb + len(kept_big)])
            # the small operand's new axes go after the big one's: those contracted next come last, or
            # first when the big one's last axis is contracted next too (one block for the next step)
            kept_small = _next_to(kept_small, later, first=bool(kept_big) and kept_big[-1] in later)
            small_order = batch_order + contr_order + kept_small
        else:
            contr_order = list(lbig[nb:nb + len(contr)])
            kept_big = list(lbig[nb + len(contr):])
            kept_small = _next_to(kept_small, later, first=not (kept_big and kept_big[0] in later))
            small_order = batch_order + kept_small + contr_order
        small_perm = _perm(lsmall, small_order)
        B = math.prod(size[ix] for ix in batch_order)
        K = math.prod(size[ix] for ix in contr_order)
        Mb = math.prod(size[ix] for ix in kept_big)
        Ms = math.prod(size[ix] for ix in kept_small)
        if form == "KC":
            left, right = (big, big_perm, (B, Mb, K)), (small, small_perm, (B, K, Ms))
            out_labels = batch_order + kept_big + kept_small
        else:
            left, right = (small, small_perm, (B, Ms, K)), (big, big_perm, (B, K, Mb))
            out_labels = batch_order + kept_small + kept_big
        steps.append(Step(left[0], right[0], nxt, left[1], right[1], left[2], right[2],
                          tuple(size[ix] for ix in out_labels), float(tree.get_flops(p))))
        labels[nxt] = tuple(out_labels)
        slot_of[p] = nxt
        nxt += 1

    (final_slot,) = slot_of.values() if slot_of else (0,)
    final_labels = labels.get(final_slot, ())
    output = tuple(tree.output)
    final_perm = _perm(final_labels, output) if set(final_labels) == set(output) else None
    return Program(n, tuple(pre), tuple(steps), final_slot, final_perm)


def arrange_operand(x: np.ndarray, perm: tuple[int, ...] | None, shape: tuple[int, int, int]) -> np.ndarray:
    """An operand in a step's matrix layout: permuted (a copy) when ``perm`` says so, then viewed as
    (rows, inner) or (batch, rows, inner) — or (inner, columns) and (batch, inner, columns)."""
    if perm is not None:
        x = x.transpose(perm)
    if shape[0] == 1:
        return x.reshape(shape[1], shape[2])
    return x.reshape(shape)


#: copies smaller than this many bytes run on one thread (common practice threshold: below it, handing
#: the work to threads costs about what it saves)
COPY_SPLIT_BYTES = 1 << 22

_copiers: dict[int, ThreadPoolExecutor] = {}     # by thread count, made when first needed, never shut down
_copiers_lock = threading.Lock()
os.register_at_fork(after_in_child=_copiers.clear)  # a forked child has none of its parent's threads


@functools.cache
def _blas_controller():
    """This process's threadpool controller: finding the libraries reads the process's memory map
    (1.5-2 ms, a third of a 5 ms one-amplitude request), so it is done once."""
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()


def blas_threads() -> int:
    """Threads the BLAS library runs on in this process now (1 when it cannot be told); the counts are
    read on every call, so limits set later are seen."""
    counts = [int(d.get("num_threads") or 1) for d in _blas_controller().select(user_api="blas").info()]
    return max(1, min(counts)) if counts else 1


def _copier(threads: int) -> ThreadPoolExecutor:
    with _copiers_lock:
        if threads not in _copiers:
            _copiers[threads] = ThreadPoolExecutor(threads, thread_name_prefix="veramp-copy")
        return _copiers[threads]


def copy_into(dst: np.ndarray, src: np.ndarray, threads: int = 1, min_bytes: int = COPY_SPLIT_BYTES) -> None:
    """``dst[...] = src`` (same shapes); a large copy is split over ``threads`` threads along its leading
    axes (numpy copies without holding the interpreter lock). A rearranging copy of a 2^27-element
    complex64 tensor took 0.96-1.05 s on one thread and 0.50-0.60 s on two (measured). A copy whose
    consecutive destination elements come from runs shorter than a cache line lying a page or more
    apart in the source goes tile by tile (:func:`_scattered`, :func:`_tiled_copy`)."""
    if dst.ndim == 0 or dst.nbytes < min_bytes:
        np.copyto(dst, src)
        return
    if dst.ndim >= 2 and dst.flags.c_contiguous and _scattered(src):
        _tiled_copy(dst, src, threads)
        return
    if threads < 2:
        np.copyto(dst, src)
        return
    # leading axes whose index combinations are fewer than the threads, then the next axis cut into
    # ranges: about ``threads`` blocks whatever the axis lengths (one block per index of a long
    # leading axis would loop in Python over millions of tiny copies)
    lead, count = 0, 1
    while lead < dst.ndim and count * dst.shape[lead] < threads:
        count *= dst.shape[lead]
        lead += 1
    if lead == dst.ndim:
        np.copyto(dst, src)
        return
    pieces = min(dst.shape[lead], -(-threads // count))
    edges = [dst.shape[lead] * k // pieces for k in range(pieces + 1)]
    _copy_blocks(dst, src, [ix + (slice(a, b),) for ix in np.ndindex(*dst.shape[:lead])
                            for a, b in zip(edges, edges[1:])], threads)


def _copy_blocks(dst: np.ndarray, src: np.ndarray, blocks: list, threads: int) -> None:
    """``dst[ix] = src[ix]`` for every index tuple ``ix`` of ``blocks``, shared among ``threads`` threads."""

    def run(share: list) -> None:
        for ix in share:
            np.copyto(dst[ix], src[ix])

    if threads < 2 or len(blocks) < 2:
        run(blocks)
    else:
        list(_copier(threads).map(run, [blocks[t::threads] for t in range(threads)]))


#: a copy whose runs of consecutive destination elements lie at least this many bytes apart in the
#: source (one page) goes tile by tile (see :func:`_scattered`, :func:`_tiled_copy`)
TILED_MIN_STRIDE_BYTES = 4096

#: bytes of a cache line (common practice: 64 on the x86-64 and arm64 cores this runs on)
CACHE_LINE_BYTES = 64


def _scattered(src: np.ndarray) -> bool:
    """Whether a C-order copy of ``src`` reads it in runs shorter than a cache line lying a page or
    more apart: the destination's last axes that are contiguous in the source give the run, the next
    axis the jump. A run of one element (the last axis itself a page apart) is the plain case; a
    run of two elements followed by jumps of 2^11 elements took 17.8-18.4 ns an element plainly and
    9.0 ns tile by tile (complex128, 2^24 elements, one thread; measured on a 30-qubit slice)."""
    run, k = src.itemsize, src.ndim - 1
    while k >= 0 and (src.shape[k] == 1 or abs(src.strides[k]) == run):
        run *= src.shape[k]
        k -= 1
    return run < CACHE_LINE_BYTES and k >= 0 and abs(src.strides[k]) >= TILED_MIN_STRIDE_BYTES


#: elements of one tile: 128 KiB of complex64, within a core's second-level cache (common practice)
TILE_ELEMENTS = 1 << 14


def _tile_axes(dst: np.ndarray, src: np.ndarray, elements: int) -> set:
    """Axes of a tile of about ``elements`` elements: the destination's last axes and the source's
    densest axes in turn, so a tile reads and writes whole cache lines."""
    nd = dst.ndim
    by_src = sorted(range(nd), key=lambda a: abs(src.strides[a]))
    by_dst = list(range(nd - 1, -1, -1))
    chosen, size, pos, turn = set(), 1, [0, 0], 0
    while size < elements and len(chosen) < nd:
        seq = (by_dst, by_src)[turn]
        k = pos[turn]
        while k < nd and seq[k] in chosen:
            k += 1
        if k < nd:
            chosen.add(seq[k])
            size *= dst.shape[seq[k]]
            k += 1
        pos[turn] = k
        turn ^= 1
    return chosen


def _tiled_copy(dst: np.ndarray, src: np.ndarray, threads: int) -> None:
    """``dst[...] = src`` one tile at a time (tiles shared among ``threads`` threads).

    numpy copies in the destination's order; when its consecutive elements lie pages apart in the
    source, every element is a cache and translation miss. The last step of a 53-qubit 12-cycle slice
    (both operands 2^27 elements, 24 axes contracted) rearranged a 2^27-element operand so: 12.5 ns an
    element against 0.5-1.4 ns for the 63 other large copies of the slice, 1.83 ns tile by tile
    (measured, tiles of 2^14 elements; tiling the other copies made them slower, 0.7-1.5 ns)."""
    tile = _tile_axes(dst, src, TILE_ELEMENTS)
    outer = [a for a in range(dst.ndim) if a not in tile]
    blocks = []
    for idx in np.ndindex(*[dst.shape[a] for a in outer]):
        sl = [slice(None)] * dst.ndim
        for a, v in zip(outer, idx):
            sl[a] = v
        blocks.append(tuple(sl))
    _copy_blocks(dst, src, blocks, threads)


_programs: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def program_for(tree) -> Program:
    """The program of ``tree``, compiled once per tree object (forgotten with the tree)."""
    prog = _programs.get(tree)
    if prog is None:
        prog = _programs[tree] = compile_program(tree)
    return prog
