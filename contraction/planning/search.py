"""Finding a contraction plan (cotengra): :func:`find_plan`.

Searching is separate from running (:mod:`contraction.execution.executor`) and from the plan itself, which
is plain data (:mod:`contraction.planning.plan`); the options and how long a search is worth are in
:mod:`contraction.planning.options`, progress reports in :mod:`contraction.planning.progress`.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import math
import random
import threading
import time
from dataclasses import replace
from typing import Iterator

from contraction.errors import MemoryLimitError
from contraction.network.builder import NetworkStructure
from contraction.network.simplify import simplify_structure
from contraction.planning.fusion import fuse_absorptions
from contraction.planning.options import PlannerOptions, resolved_objective, search_seconds, target_elements
from contraction.planning.plan import Plan, plan_from_tree
from contraction.planning.progress import OBSERVE_EVERY_SECONDS, SearchProgress, notify, observed, report_search
from contraction.planning.slicing import (IN_TRIAL_SLICING_LOG2, RESLICE_MIN_SECONDS, best_resliced, excess, refined,
                                          resliced, slice_to_target)


def kahypar_available() -> bool:
    """Whether the kahypar partitioner can be imported (the hyper search uses it when it can)."""
    try:
        import kahypar  # noqa: F401
    except ImportError:
        return False
    return True


#: a tree needing more than 2^48 slices is not sliced at all: it is not feasible on any machine this
#: service runs on, and slicing it would take minutes of search for nothing
MAX_SLICED_LOG2 = 48
#: log2 of how far above the memory target a tree may be for the final reconfiguration and for
#: comparing trees by their sliced cost (beyond it the unsliced cost times the slices is the measure)
FAR_ABOVE_TARGET = 6


#: share of the planning time the hyper search gets; the rest goes to refining and slicing its best
#: trees. At 53 qubits and 300 s the final stages need 10-30 s: one fresh slicing 2.5-3.5 s, the best of
#: five candidates sliced anew reached 10^12.746 multiply-adds where the search's best reached 10^12.85.
SEARCH_SHARE = 0.8
#: share of the time left after slicing the best tree anew that slicing other candidates may take (the
#: refinement of the kept tree gets the rest: at 53 qubits it gained more per second, 1.37x in 18 s)
CANDIDATES_SHARE = 0.4
#: trees of the best-scored trials the search keeps besides its best, each sliced anew at the end while
#: time is left (:func:`contraction.planning.slicing.best_resliced`; 2.5-3.5 s each at 53 qubits)
KEPT_CANDIDATES = 8


def _keeping_optimizer(**kwargs):
    """cotengra's hyper-optimizer that also keeps the trees of its ``KEPT_CANDIDATES`` best-scored
    trials in ``.kept`` (best first). It hooks the method every finished trial is reported through
    (cotengra is pinned: should that method change, ``.kept`` stays empty and only the best is used)."""
    import cotengra as ctg

    class KeepingOptimizer(ctg.HyperOptimizer):
        def _maybe_report_result(self, setting, trial):
            super()._maybe_report_result(setting, trial)
            tree = trial.get("tree")
            if tree is not None and math.isfinite(trial.get("score", math.inf)):
                self.kept.append((trial["score"], len(self.scores), tree))   # the count breaks ties
                self.kept.sort(key=lambda kept: kept[:2])
                del self.kept[KEPT_CANDIDATES:]

    opt = KeepingOptimizer(**kwargs)
    opt.kept = []
    return opt


def kept_besides(opt, best) -> list:
    """The trees ``opt`` (from :func:`_keeping_optimizer`) kept other than ``best``, best-scored first."""
    return [tree for _, _, tree in getattr(opt, "kept", []) if tree is not best]


#: subtree reconfigurations per slicing round inside a trial. Fewer make trials cheaper and more of them
#: fit the budget: the 53-qubit 12-cycle network at 2^27, 90 s of search on two processes, best trial
#: (log10 multiply-adds, sliced) with 64: 13.53, 13.66, 14.09 (65-78 trials); with 16: 13.29, 13.55,
#: 12.98, 13.75 (100-156 trials); with 8: 13.70, 13.28, 13.31 (121-176 trials); with 4: 13.77 (70).
#: Whole 300 s plans (find_plan, seeds 0-2, after refinement and fusion): with 64 10^13.047, 13.316,
#: 12.983 (197-230 trials); with 16 10^13.101, 13.021, 13.054 (410-467 trials), measured the same day
IN_TRIAL_RECONF_ITERATIONS = 16


#: when the greedy tree is too wide for slicing inside trials, this share of the search time (at most
#: ``PROBE_TRIALS`` trials) goes to partition trees that tell whether the search's trees are narrower.
#: The 53-qubit 14-cycle network at 2^27 (300 s plans): its greedy tree is 2^44 wide, 2^17 above the
#: target, partition trees 2^36; with trials scored unsliced and the best tree sliced afterwards,
#: 10^13.106 and 10^13.387 multiply-adds (256 and 512 slices, overheads 2.5 and 4.6); with the probe
#: turning in-trial slicing on, 10^12.733 (64 slices, overhead 1.02) and 10^13.088 (256, 1.88). Those
#: runs probed with reconfigured trees (2^36, 17-19 s for eight); plain partition trees, used now, give
#: 2^37 there: the same decision at a bounded cost per trial
PROBE_SHARE = 0.05
PROBE_TRIALS = 8
#: networks smaller than this are not probed (their searches are short and the greedy width is close)
PROBE_MIN_TENSORS = 64
#: nor searches whose probe share is shorter than this (seconds): a trial that starts before the
#: probe's end runs to its own (1.7-2 s at 53 qubits, up to 6 s on a 32-qubit quantum-volume network
#: of 466 tensors), and it must stay well inside the search's time
PROBE_MIN_SECONDS = 10.0


def _probe_width(inputs, output, sizes, deadline: float) -> float:
    """log2 of the narrowest of up to ``PROBE_TRIALS`` kahypar partition trees of the network built
    before ``deadline`` in this process (a trial started before the deadline runs to its end; 15 s
    windows took 13.6-16.4 s at 53 qubits, giving 2^38 at 12 cycles and 2^37 at 14, and 21 s on a 32-qubit
    quantum-volume network); infinity when none was built."""
    import cotengra as ctg

    # plain partition trees (no reconfiguration): a trial is then a few kahypar calls, bounded on any network
    opt = ctg.HyperOptimizer(methods=["kahypar"], minimize="size", max_repeats=PROBE_TRIALS,
                             max_time=max(0.05, deadline - time.perf_counter()), parallel=False, progbar=False,
                             on_trial_error="ignore", optlib="random", reconf_opts=None, slicing_opts=None,
                             slicing_reconf_opts=None, simulated_annealing_opts=None)
    try:
        tree = opt.search(inputs, output, sizes)
    except (ValueError, KeyError, RuntimeError):
        return math.inf
    return math.log2(max(2, tree.max_size()))


def _search(inputs, output, sizes, options: PlannerOptions, methods, deadline: float, target, width_log2: float,
            grace: float = 1.0, t0: float = 0.0):
    """The hyper-optimized search on (inputs, output, sizes) until ``deadline`` (see
    :func:`_run_search`). When the greedy baseline's width (or, when that is far above ``target``, the
    narrowest of a few partition trees: :func:`_probe_width`) is within 2^12 of ``target``, every trial
    is scored after slicing to it, so the tree is chosen for the cap, not sliced after the fact."""
    # slicing interleaved with a bounded subtree reconfiguration inside each trial: on the 53-qubit
    # 12-cycle network at a 2^28 target it reached 10^13.66 multiply-adds in 60 s against 10^13.91
    # with plain slicing per trial (kahypar trials, two processes, measured in one session). Far above
    # the target trials are scored unsliced (one trial sliced for 48 s there) and the best tree is
    # sliced afterwards.
    slicing_reconf = None
    probe = PROBE_SHARE * (deadline - time.perf_counter())
    if (target is not None and width_log2 - math.log2(target) > IN_TRIAL_SLICING_LOG2 and "kahypar" in methods
            and len(inputs) >= PROBE_MIN_TENSORS and probe >= PROBE_MIN_SECONDS):
        # the greedy tree is a poor guide to the widths the search reaches: a few partition trees tell
        width_log2 = min(width_log2, _probe_width(inputs, output, sizes, time.perf_counter() + probe))
    if target is not None and width_log2 - math.log2(target) <= IN_TRIAL_SLICING_LOG2:
        slicing_reconf = dict(target_size=target, allow_outer=False,
                              reconf_opts=dict(maxiter=IN_TRIAL_RECONF_ITERATIONS))
        if "kahypar" in methods:
            methods = ["kahypar"]
    with _worker_pool(options) as pool:
        opt = _keeping_optimizer(
            methods=methods, minimize=options.minimize, max_repeats=options.max_repeats, max_time=1.0,
            parallel=pool if pool is not None else options.parallel, reconf_opts=None, slicing_opts=None,
            slicing_reconf_opts=slicing_reconf, progbar=False, on_trial_error="ignore",
        )
        return _run_search(opt, inputs, output, sizes, deadline, pool, grace, t0, options.budget_seconds)


@contextlib.contextmanager
def _worker_pool(options: "PlannerOptions", wanted: bool = True) -> Iterator[cf.ProcessPoolExecutor | None]:
    """A pool of ``options.parallel`` worker processes (None for one process, or unless ``wanted``),
    ended on leaving without waiting for work still running."""
    workers = 0 if isinstance(options.parallel, bool) else int(options.parallel)
    pool = cf.ProcessPoolExecutor(workers) if wanted and workers > 1 else None
    try:
        yield pool
    finally:
        if pool is not None:
            pool.shutdown(wait=False, cancel_futures=True)


def _run_search(opt, inputs, output, sizes, deadline: float, pool, grace: float, t0: float = 0.0,
                budget: float = 0.0):
    """Run ``opt`` until ``deadline``; with a ``pool`` of worker processes, at most ``grace`` seconds
    past it. Reports progress about every second to the observer of :func:`observe_searches`
    (``t0``: when the plan was asked for, ``budget``: its seconds). Returns (best tree or None, trials
    done, other well-scored trees kept by the optimizer, best first)."""
    # one call for the whole budget: splitting it into rounds lost most trials in flight when a round
    # ended (12 trials in 90 s against 34 in 60 s on the 53-qubit network)
    opt.max_time = max(0.05, deadline - time.perf_counter())
    if pool is None and not observed():
        try:
            best = opt.search(inputs, output, sizes)
        except (ValueError, KeyError, RuntimeError):      # no trial finished in time
            best = None
        return best, len(opt.scores), kept_besides(opt, best)
    # with worker processes the deadline is hard: trials still running shortly after it are ended
    # (their processes terminated) and the best tree reported so far is kept
    done: dict = {}

    def run() -> None:
        try:
            done["tree"] = opt.search(inputs, output, sizes)
        except Exception:                                 # no trial finished, or the pool was ended
            pass

    worker = threading.Thread(target=run, name="veramp-plan-search", daemon=True)
    worker.start()
    end = deadline + grace
    while worker.is_alive() and (pool is None or time.perf_counter() < end):
        left = end - time.perf_counter()
        # past the end a serial search is waited for (it stops after its current trial)
        worker.join(OBSERVE_EVERY_SECONDS if left <= 0 else min(OBSERVE_EVERY_SECONDS, left))
        report_search(opt, t0, budget)
    if worker.is_alive() and pool is not None:
        for proc in list((getattr(pool, "_processes", None) or {}).values()):
            proc.terminate()
        worker.join(5.0)
    best = done.get("tree") or (opt.best or {}).get("tree")
    trials = len(opt.scores)
    return best, trials, kept_besides(opt, best)


def find_plan(structure: NetworkStructure, options: PlannerOptions = PlannerOptions()) -> Plan:
    """Search a contraction tree for ``structure`` within ``options``' budget (all stages together).

    Stages: structure-only simplification (:mod:`contraction.network.simplify`, its steps become the first
    steps of the path); a randomised-greedy baseline; a hyper-optimized search over trees (greedy and,
    when installed, kahypar partitions) for ``SEARCH_SHARE`` (80 %) of the budget (of the time a search
    is worth when the baseline fits the memory target: :func:`search_seconds_worth`), in which, when the
    baseline is within 2^12 of the memory target, every trial is scored after slicing to the target, so
    the tree is chosen for the cap; then a subtree reconfiguration and slicing of the best tree, stopped
    by the deadline (slicing may take 5 % more, and as much again up to 1 s), and the same tree sliced
    anew from scratch with larger reconfigurations, the cheaper kept (``slicing.resliced``), then the
    search's other best-scored trees sliced anew likewise (``slicing.best_resliced``); then rounds of
    forested subtree reconfiguration of the tree as sliced until the deadline (``slicing.refined``); last, small
    tensors absorbed one by one into large intermediates are grouped
    (:mod:`contraction.planning.fusion`; the searched tree's multiply-adds are kept in the plan's
    options as ``madds_before_fusion``) and the grouped tree is sliced anew likewise. With
    ``parallel`` > 1 the deadline is hard: trials still running are ended. Raises
    :class:`MemoryLimitError` when no tree within ``max_elements`` is found, with the best figures found
    ("not feasible" when it would take more than 2^48 slices).
    """
    import cotengra as ctg

    t0 = time.perf_counter()
    deadline = t0 + max(0.0, options.budget_seconds)
    # slicing may run a little past the budget to reach the cap: 5 % of it, plus as much again up to 1 s
    # (a plain greedy slicing pass follows when that was not enough)
    slack = 0.05 * max(0.0, options.budget_seconds)
    hard_deadline = deadline + slack + min(1.0, slack)
    methods = ["greedy", "kahypar"] if kahypar_available() else ["greedy", "labels"]
    target = target_elements(options)
    state = random.getstate()
    random.seed(options.seed)
    trials = 0
    notes: dict = {}                      # what the final stages did, kept in the plan's options
    notify(SearchProgress(0, None, 0.0, options.budget_seconds))
    try:
        if structure.num_tensors <= 2:
            options = replace(options, minimize=resolved_objective(options.minimize, None, target))
            path = [(0, 1)] if structure.num_tensors == 2 else []
            tree = ctg.ContractionTree.from_path(structure.inputs, structure.output, structure.size_dict, path=path)
            reduced_tensors = structure.num_tensors
        else:
            candidates: list = []             # other trees the search scored well (reduced network)
            red = simplify_structure(structure) if options.simplify else None
            inputs, output, sizes = ((red.inputs, red.output, red.size_dict) if red is not None
                                     else (structure.inputs, structure.output, structure.size_dict))
            reduced_tensors = len(inputs)

            def cost(t):
                if target is None or t.max_size() <= target:
                    return t.contraction_cost()
                # far above the target, slicing only to compare would cost too much time: a lower bound
                if excess(t, target) > FAR_ABOVE_TARGET:
                    return t.contraction_cost() * 2.0 ** excess(t, target)
                return slice_to_target(t, target, options.minimize, 0, hard_deadline).contraction_cost()

            if len(inputs) == 1:
                best = None
            elif len(inputs) == 2:
                best = ctg.ContractionTree.from_path(inputs, output, sizes, path=[(0, 1)])
            else:
                greedy = ctg.RandomGreedyOptimizer(max_repeats=32 if len(inputs) < 300 else 8, seed=options.seed)
                best = ctg.array_contract_tree(inputs, output, sizes, optimize=greedy)
                options = replace(options, minimize=resolved_objective(options.minimize, best, target))
                # a tree within the target is searched only as long as its greedy cost makes it worth;
                # the search gets SEARCH_SHARE of what is left, refinement and slicing the rest
                deadline = min(deadline, time.perf_counter() + search_seconds(best, target, options))
                search_deadline = time.perf_counter() + SEARCH_SHARE * (deadline - time.perf_counter())
                if len(inputs) > 8 and search_deadline - time.perf_counter() > 0.1:
                    found, trials, candidates = _search(inputs, output, sizes, options, methods, search_deadline,
                                                        target, math.log2(max(best.max_size(), 1)),
                                                        grace=0.5 * (deadline - search_deadline), t0=t0)
                    if found is not None and cost(found) < cost(best):
                        best = found

            options = replace(options, minimize=resolved_objective(options.minimize, best, target))

            def on_network(found):
                """A tree of the search on the whole network (unsliced)."""
                if red is None:
                    if found is None:
                        return None
                    whole = found.copy()
                    whole.unslice_all_()
                    return whole
                ssa = [] if found is None else found.get_ssa_path()
                return ctg.ContractionTree.from_path(structure.inputs, structure.output, structure.size_dict,
                                                     ssa_path=red.full_path(ssa))

            tree = on_network(best)
            for ix in ([] if best is None else best.sliced_inds):
                tree.remove_ind_(ix)
            if time.perf_counter() < deadline and (target is None or excess(tree, target) <= FAR_ABOVE_TARGET):
                tree.subtree_reconfigure_(minimize=options.minimize, maxiter=256)
            if target is not None and excess(tree, target) > MAX_SLICED_LOG2:
                raise MemoryLimitError(
                    f"not feasible: the best tree found in {time.perf_counter() - t0:.3g} s has its largest "
                    f"intermediate at 2^{math.log2(tree.max_size()):.0f} elements, so fitting the cap of "
                    f"{options.max_elements:.3g} elements would take at least 2^{excess(tree, target):.0f} slices of "
                    f"10^{math.log10(max(tree.contraction_cost(), 1)):.1f} multiply-adds each")
            if target is not None and tree.max_size() > target:
                tree = slice_to_target(tree, target, options.minimize, deadline, hard_deadline)
            if target is not None and tree.max_size() > target:
                # the interleaved slicing ran out of time or candidates: one plain greedy slicing pass
                # (cotengra's, seconds at most) rather than refusing a network that does fit
                try:
                    tree = tree.slice(target_size=target, allow_outer=False)
                except (KeyError, ValueError, RuntimeError):
                    pass
            reslice_seconds = RESLICE_MIN_SECONDS
            if target is not None and tree.max_size() <= target:
                start = time.perf_counter()
                tree = resliced(tree, target, options.minimize, deadline, hard_deadline, notes, "resliced")
                if "resliced" in notes:                   # it ran: one fresh slicing takes about this long
                    reslice_seconds = time.perf_counter() - start
            if target is not None and tree.max_size() <= target and tree.sliced_inds and candidates:
                # the refinement and the fused tree's own fresh slicing (below) keep the rest of the time
                until = time.perf_counter() + CANDIDATES_SHARE * (deadline - time.perf_counter())
                tree = best_resliced(tree, (on_network(c) for c in candidates), target, options.minimize,
                                     until, hard_deadline, notes, reslice_seconds)
            if target is None or tree.max_size() <= target:
                # what is left, but for the fused tree's own fresh slicing below
                until = deadline - (reslice_seconds if options.fuse and tree.sliced_inds else 0.0)
                tree = _refined(tree, target, options, until, notes)
            if target is not None and tree.nslices > 2 ** MAX_SLICED_LOG2:
                raise MemoryLimitError(
                    f"not feasible: fitting the cap of {options.max_elements:.3g} elements takes 2^"
                    f"{math.log2(tree.nslices):.0f} slices (10^{math.log10(max(tree.contraction_cost(), 1)):.1f} "
                    f"multiply-adds in all) with the best tree found in {time.perf_counter() - t0:.3g} s")
    finally:
        random.setstate(state)
    if target is not None and tree.max_size() > options.max_elements:
        raise MemoryLimitError(
            f"no plan found whose largest intermediate ({tree.max_size():.3g} elements) fits the cap of "
            f"{options.max_elements:.3g} elements in {time.perf_counter() - t0:.3g} s (best cost found "
            f"10^{math.log10(max(tree.contraction_cost(), 1)):.2f} multiply-adds); raise the memory cap or the "
            f"planning budget")
    if options.fuse and structure.num_tensors > 2:
        notes["madds_before_fusion"] = float(tree.contraction_cost())
        tree = fuse_absorptions(tree)
        if target is not None:
            # the fused tree is another starting point: sliced anew from it, then fused again
            tree = resliced(tree, target, options.minimize, deadline, hard_deadline, notes, "resliced_fused",
                             fuse=True)
            if notes.get("resliced_fused", {}).get("kept"):
                notes["madds_before_fusion"] = notes["resliced_fused"]["madds_resliced_before_fusion"]
    record = _record(options, methods, trials, reduced_tensors, t0)
    record.update(notes)
    plan = plan_from_tree(tree, structure, record)
    notify(SearchProgress(trials, plan.madds, time.perf_counter() - t0, options.budget_seconds, final=True))
    return plan


#: trees of at least this many leaves are refined on ``parallel`` worker processes (smaller ones in this
#: process: a round takes milliseconds and starting processes would cost more)
REFINE_POOL_MIN_LEAVES = 100


def _refined(tree, target, options: PlannerOptions, deadline: float, notes: dict):
    """``tree`` after :func:`contraction.planning.slicing.refined` until ``deadline``."""
    if deadline - time.perf_counter() < RESLICE_MIN_SECONDS or tree.N < 3:
        return tree
    with _worker_pool(options, wanted=tree.N >= REFINE_POOL_MIN_LEAVES) as pool:
        return refined(tree, target, options.minimize, deadline, pool if pool is not None else False, notes,
                       options.seed)


def _record(options: PlannerOptions, methods, trials: int, reduced_tensors: int, t0: float) -> dict:
    record = options.to_dict()
    record["methods"] = methods
    record["trials"] = trials
    record["tensors_after_simplify"] = reduced_tensors
    record["search_seconds"] = round(time.perf_counter() - t0, 3)
    return record
