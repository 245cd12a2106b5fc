"""Memory for the large arrays of a slice, laid out once per step program and reused by every slice.

A sliced contraction allocates and frees arrays of 2^25-2^28 elements at every step. Taken from the C
heap (which :func:`contraction.execution.slices.keep_freed_memory` never trims, so pages are not
faulted in again) they run fast, but the heap keeps freed blocks it cannot fit the next request into:
the 53-qubit 12-cycle run peaked at 10.1 GB of resident memory against an 8 GiB cap. Mapping each array
afresh keeps within the cap but faults every page in again: 2.5-3x slower a slice (measured). A pool
of buffers reused by size still held 2.75 GiB more than the live arrays needed (measured: 10.1 GiB
mapped for a live peak of 7.3 GiB).

Every slice runs the same program of steps, so the large arrays' lifetimes are known before the first
slice: a step's output lives from its step to the step that consumes it, a rearranged operand only
during its step, an intermediate kept between slices for good. :func:`plan_arena` places them at byte
offsets of one arena so that no two arrays alive at the same step overlap (largest first, each at the
lowest offset free over its lifetime — the greedy-by-size placement common in compilers' memory
planners), and :class:`Arena` maps that arena once. Memory is then the arena's size, known before the
work starts, and after the first slice no page is faulted in again. Steps a slice skips (kept
intermediates still valid) simply leave their places unused.
"""

from __future__ import annotations

import mmap
import threading
import weakref
from dataclasses import dataclass

import numpy as np

from contraction.execution.pairwise import Program

#: arrays smaller than this many bytes come from numpy's allocator as usual (common practice threshold:
#: the C heap serves them well)
ARENA_MIN_BYTES = 1 << 23

#: every place starts at a multiple of this (one page: common practice)
_ALIGN = 4096

LEFT, RIGHT, OUT = "left", "right", "out"


@dataclass(frozen=True)
class ArenaPlan:
    """Byte offsets of the large arrays of a step program, by (step, role), and the arena's size."""

    offsets: dict
    nbytes: int
    live_peak_bytes: int             # the most bytes alive at one step (a lower bound on nbytes)


def _lifetimes(program: Program, kept: set[int], itemsize: int, min_bytes: int) -> list[tuple]:
    """(start step, end step, bytes, key) of every array the arena holds."""
    m = program.num_inputs
    last = len(program.steps) - 1
    consumer = {}
    for k, st in enumerate(program.steps):
        consumer[st.left] = consumer[st.right] = k
    items = []
    for k, st in enumerate(program.steps):
        for role, perm, shape in ((LEFT, st.left_perm, st.left_shape), (RIGHT, st.right_perm, st.right_shape)):
            nbytes = int(np.prod(shape)) * itemsize
            if perm is not None and nbytes >= min_bytes:
                items.append((k, k, nbytes, (k, role)))
        nbytes = int(np.prod(st.out_shape)) * itemsize
        if nbytes >= min_bytes:
            if k in kept:
                start, end = 0, last                       # kept between slices: its place is its own
            else:
                start, end = k, consumer.get(m + k, last)
            items.append((start, end, nbytes, (k, OUT)))
    return items


def plan_arena(program: Program, kept: set[int], itemsize: int, min_bytes: int = ARENA_MIN_BYTES) -> ArenaPlan:
    """Places for the program's large arrays (see the module notes)."""
    items = _lifetimes(program, kept, itemsize, min_bytes)
    placed: list[tuple[int, int, int, int]] = []           # (start, end, offset, size)
    offsets = {}
    top = 0
    for start, end, nbytes, key in sorted(items, key=lambda it: (-it[2], it[0])):
        size = -(-nbytes // _ALIGN) * _ALIGN
        busy = sorted((off, off + sz) for s, e, off, sz in placed if s <= end and start <= e)
        offset = 0
        for lo, hi in busy:
            if offset + size <= lo:
                break
            offset = max(offset, hi)
        placed.append((start, end, offset, size))
        offsets[key] = offset
        top = max(top, offset + size)
    steps = len(program.steps)
    live = [0] * max(steps, 1)
    for start, end, nbytes, _ in items:
        for k in range(start, end + 1):
            live[k] += nbytes
    return ArenaPlan(offsets, top, max(live))


_idle: list[np.ndarray] = []          # at most one mapping no arena uses, kept for the next one
_idle_lock = threading.Lock()
_keep_idle = False


def keep_idle_mapping() -> None:
    """Keep the mapping of an arena no longer used (at most one) for the next arena of this process,
    so a process that runs task after task faults its pages in once. For processes whose work is
    contracting (:func:`contraction.execution.slices.keep_freed_memory` calls it); others give an
    arena's memory back as soon as its contractor is gone."""
    global _keep_idle
    _keep_idle = True


def _mapping(nbytes: int) -> np.ndarray:
    with _idle_lock:
        if _idle and _idle[0].nbytes >= nbytes:
            return _idle.pop()
        _idle.clear()
    return np.frombuffer(_private_mapping(nbytes), np.uint8)


def _private_mapping(nbytes: int) -> mmap.mmap:
    """Anonymous memory of this process only, in huge pages where the kernel grants them on request.

    Rearranging copies move small blocks between far-apart addresses; on 4 KiB pages each block can
    be a translation miss. A 2^27-element complex64 copy moving a block of three axes past two others
    took 0.119 s in a plain mapping and 0.061 s in one advised to use huge pages (0.075 s in numpy's
    own arrays, which numpy advises likewise; measured on the machine whose kernel grants huge pages
    on advice only). A shared anonymous mapping (Python's default) never gets them."""
    flags = getattr(mmap, "MAP_PRIVATE", 0) | getattr(mmap, "MAP_ANONYMOUS", 0)
    m = mmap.mmap(-1, nbytes, flags=flags) if flags else mmap.mmap(-1, nbytes)
    advice = getattr(mmap, "MADV_HUGEPAGE", None)
    if advice is not None:
        try:
            m.madvise(advice)
        except OSError:                      # a kernel without transparent huge pages
            pass
    return m


def _give_back(mapping: np.ndarray) -> None:
    with _idle_lock:
        if not _idle or _idle[0].nbytes < mapping.nbytes:
            _idle[:] = [mapping]


class Arena:
    """One mapping holding the large arrays of an :class:`ArenaPlan`; one arena's mapping is never
    another's while both exist."""

    def __init__(self, plan: ArenaPlan):
        self.plan = plan
        self._bytes = _mapping(plan.nbytes) if plan.nbytes else None
        if self._bytes is not None and _keep_idle:
            weakref.finalize(self, _give_back, self._bytes)

    def array(self, step: int, role: str, shape: tuple[int, ...], dtype) -> np.ndarray:
        """The array of ``role`` at ``step`` in its place, or a fresh one when the plan has none for it."""
        offset = self.plan.offsets.get((step, role))
        if offset is None:
            return np.empty(shape, dtype)
        dtype = np.dtype(dtype)
        count = int(np.prod(shape))
        return self._bytes[offset:offset + count * dtype.itemsize].view(dtype).reshape(shape)

    def holds(self, x: np.ndarray) -> bool:
        """Whether ``x`` lies in this arena (its contents change with the next slice)."""
        return self._bytes is not None and np.may_share_memory(x, self._bytes)
