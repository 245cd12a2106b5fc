"""Slicing a contraction tree to a memory target: cotengra's slice-and-reconfigure with the stops and
limits the planner needs, and slicing a searched tree anew from scratch.

Slices are summed by the executor, so output indices (batch, open qubits) are never sliced.
"""

from __future__ import annotations

import math
import time

from contraction.planning.fusion import fuse_absorptions

#: in-trial slicing when the greedy baseline's width is at most 2^12 times the target (measured: the
#: 53-qubit 12-cycle network's baseline is 2^9 above a 2^28 target; a 63-qubit QFT's 2^36 above,
#: where one trial sliced for 48 s)
IN_TRIAL_SLICING_LOG2 = 12


def excess(tree, target: float) -> float:
    """log2 of how far the tree's largest intermediate is above ``target``."""
    return math.log2(max(tree.max_size(), 1)) - math.log2(target)


def slice_to_target(tree, target: int, minimize: str, deadline: float = math.inf, hard_deadline: float = math.inf,
                    subtree_size: int = 8, maxiter: int | str = 64):
    """Slice until the largest intermediate fits ``target``, reconfiguring subtrees (of
    ``subtree_size`` leaves, ``maxiter`` of them) between rounds while time is left before
    ``deadline`` (cotengra's slice-and-reconfigure, with a stop when no inner index is left to slice);
    past it, slicing goes on without reconfiguration until ``hard_deadline``, where it stops and the
    caller reports the cap as not reached. Output indices (batch, open qubits) are never sliced:
    slices are summed, and summing over an output index would add different amplitudes together."""
    tree = tree.copy()
    while tree.max_size() > target:
        now = time.perf_counter()
        if now > hard_deadline:
            break
        before = (tree.nslices, tree.max_size())
        try:
            tree.slice_(target_slices=2, minimize=minimize, allow_outer=False, max_repeats=16 if now < deadline else 2)
        except (KeyError, ValueError, RuntimeError):   # cotengra: no candidate index left to slice
            break
        if time.perf_counter() < deadline:
            tree.subtree_reconfigure_(minimize=minimize, maxiter=maxiter, subtree_size=subtree_size)
        if (tree.nslices, tree.max_size()) == before:
            break                     # nothing left to slice: the caller reports the cap as unreachable
    return tree


#: subtree size of the reconfiguration while the best tree is sliced anew (cotengra's default is 8)
RESLICE_SUBTREE_SIZE = 10
#: seconds that must be left before the deadline to try slicing anew (one reconfiguration round at 53
#: qubits takes about half a second)
RESLICE_MIN_SECONDS = 1.0


def _sliced_anew(tree, target: int, minimize: str, deadline: float, hard_deadline: float):
    """``tree`` with every slice undone and sliced again from scratch, with reconfigurations of larger
    subtrees between rounds than inside the search's trials; None when the unsliced tree is more than
    2^12 above ``target`` (slicing it from scratch could take minutes)."""
    unsliced = tree.copy()
    unsliced.unslice_all_()
    if excess(unsliced, target) > IN_TRIAL_SLICING_LOG2:
        return None
    return slice_to_target(unsliced, target, minimize, deadline, hard_deadline, RESLICE_SUBTREE_SIZE, "auto")


def resliced(tree, target: int, minimize: str, deadline: float, hard_deadline: float, record: dict,
             stage: str, fuse: bool = False):
    """The cheaper of ``tree`` (sliced) and the same tree with every slice undone and sliced again from
    scratch, with reconfigurations of larger subtrees between rounds than inside the search's trials
    (with ``fuse``, the fresh one is fused before comparing; ``tree`` is fused already). Measured on the 53-qubit
    12-cycle network at 2^28: a tree searched for 150 s went from 10^13.00 multiply-adds (128 slices) to
    10^12.64 (32 slices) in 2.7 s; four fused 300 s plans from 10^12.78-12.89 to 10^12.75-12.83 (fused
    again), 2.5-3.5 s each. Skipped unless ``RESLICE_MIN_SECONDS`` are left before ``deadline`` or when
    the unsliced tree is more than 2^12 above ``target``; ``record[stage]`` gets both costs."""
    if not tree.sliced_inds or deadline - time.perf_counter() < RESLICE_MIN_SECONDS:
        return tree
    alt = _sliced_anew(tree, target, minimize, deadline, hard_deadline)
    if alt is None:
        return tree
    fits = alt.max_size() <= target
    record[stage] = {"madds_before": float(tree.contraction_cost()), "slices_before": tree.nslices}
    if fits and fuse:
        record[stage]["madds_resliced_before_fusion"] = float(alt.contraction_cost())
        alt = fuse_absorptions(alt)
    record[stage].update(madds_resliced=float(alt.contraction_cost()) if fits else None, slices_resliced=alt.nslices,
                         kept=bool(fits and alt.contraction_cost() < tree.contraction_cost()))
    return alt if record[stage]["kept"] else tree


def best_resliced(tree, candidates, target: int, minimize: str, deadline: float, hard_deadline: float,
                  record: dict, expected_seconds: float = RESLICE_MIN_SECONDS):
    """The cheapest of ``tree`` (sliced, within ``target``) and each of ``candidates`` (other trees the
    search scored well, in order; mapped lazily, as they are reached) sliced from scratch as
    :func:`resliced` does, while the time left
    before ``deadline`` is at least what one such slicing takes (``expected_seconds`` for the first,
    then the longest so far). The search's ranking comes from slicing with small reconfigurations,
    which is noisy: slicing anew moved the best 53-qubit tree by up to 2.3x.
    ``record["candidates"]`` gets each tried candidate's cost (None when it did not reach the target in
    time, or lies too far above it to be sliced anew)."""
    costs = []
    needed = expected_seconds
    for cand in candidates:
        start = time.perf_counter()
        if deadline - start < needed:
            break
        alt = _sliced_anew(cand, target, minimize, deadline, hard_deadline)
        fits = alt is not None and alt.max_size() <= target
        needed = max(needed if costs else 0.0, time.perf_counter() - start)
        costs.append(float(alt.contraction_cost()) if fits else None)
        if fits and alt.contraction_cost() < tree.contraction_cost():
            tree = alt
    if costs:
        record["candidates"] = {"madds_resliced": costs, "madds_kept": float(tree.contraction_cost())}
    return tree


def restored(tree, target: int | None):
    """``tree`` with sliced indices restored (unsliced) one at a time while its largest intermediate
    still fits ``target`` and its multiply-adds go down: a reconfiguration may leave room under the target
    (a refined 53-qubit tree at a 2^28 target came out at 2^27), and every slice repeats the work of
    the subtrees that do not depend on the sliced indices."""
    improved = True
    while improved and tree.sliced_inds:
        improved = False
        for ix in tuple(tree.sliced_inds):
            alt = tree.restore_ind(ix)
            if (target is None or alt.max_size() <= target) and alt.contraction_cost() < tree.contraction_cost():
                tree, improved = alt, True
                break
    return tree


#: subtree sizes of the forest refinement, smaller first (one round of 8 trees, 2 restarts, on the
#: 53-qubit network at 2^28: 1.6-1.9 s with subtrees of 10 leaves, 7-8 s with 12, 43 s with 14)
REFINE_SUBTREE_SIZES = (10, 12)
#: rounds in a row without a gain after which the refinement moves to the next subtree size
REFINE_PATIENCE = 2
#: a round's tree is kept only when this much cheaper (relative): ends the refinement of converged trees
REFINE_MIN_GAIN = 1e-3


def refined(tree, target: int | None, minimize: str, deadline: float, parallel, record: dict, seed: int = 0):
    """``tree`` (sliced or not) improved by rounds of cotengra's forested subtree reconfiguration, which
    keeps the sliced indices and reconfigures the tree as sliced — the cost the executor pays — while
    the time left before ``deadline`` is at least the last round's; a round's tree is kept only when
    cheaper and still within ``target`` (then with the slices it no longer needs restored, :func:`restored`).
    ``parallel``: a process pool (or False) for the forest's trees.
    Measured on the 53-qubit 12-cycle network at 2^28 (one tree, 128 slices): 10^12.898 -> 10^12.760
    multiply-adds in 18 s (subtrees of 10 leaves, then 12); slicing from scratch alone reached 10^12.898.
    ``record["refined"]`` gets the costs, rounds and seconds."""
    start = time.perf_counter()
    before = float(tree.contraction_cost())
    needed, rounds, misses = RESLICE_MIN_SECONDS, 0, 0
    sizes = list(REFINE_SUBTREE_SIZES)
    while sizes and deadline - time.perf_counter() >= needed:
        t = time.perf_counter()
        alt = tree.subtree_reconfigure_forest(num_trees=8, num_restarts=2, subtree_size=sizes[0], parallel=parallel,
                                              minimize=minimize, seed=seed + rounds)
        rounds += 1
        needed = time.perf_counter() - t
        if ((target is None or alt.max_size() <= target)
                and alt.contraction_cost() < tree.contraction_cost() * (1.0 - REFINE_MIN_GAIN)):
            tree, misses = restored(alt, target), 0
        else:
            misses += 1
            if misses >= REFINE_PATIENCE:
                sizes.pop(0)
                misses = 0
                needed *= 4.0          # a larger subtree size: rounds took about 4x longer (above)
    if rounds:
        record["refined"] = {"madds_before": before, "madds_refined": float(tree.contraction_cost()),
                             "rounds": rounds, "seconds": round(time.perf_counter() - start, 3)}
    return tree
