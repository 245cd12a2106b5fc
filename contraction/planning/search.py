"""Contraction plans: finding them (cotengra) and the plan as plain data.

A :class:`Plan` is a JSON-serialisable record of a contraction order for one network structure:
the SSA path, the sliced indices (in canonical numbering), cost figures and the options used.
Finding a plan (:func:`find_plan`) is separate from running it (:mod:`contraction.execution.executor`), and
cost queries on a plan are cheap: they read stored numbers.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import contextvars
import hashlib
import json
import logging
import math
import random
import threading
import time
import weakref
from collections import OrderedDict
from dataclasses import asdict, dataclass, field, replace
from typing import Callable, Iterator

import numpy as np

from contraction import defaults
from contraction.errors import MemoryLimitError, PlanError
from contraction.network.builder import NetworkStructure
from contraction.network.simplify import simplify_structure
from contraction.planning.fusion import fuse_absorptions
from contraction.planning.slicing import (IN_TRIAL_SLICING_LOG2, RESLICE_MIN_SECONDS, best_resliced, excess, refined,
                                          resliced, slice_to_target)

log = logging.getLogger(__name__)

PLAN_FORMAT = "veramp-plan-v1"


def kahypar_available() -> bool:
    """Whether the kahypar partitioner can be imported (the hyper search uses it when it can)."""
    try:
        import kahypar  # noqa: F401
    except ImportError:
        return False
    return True


#: trees kept by :meth:`Plan.tree`, most recently used last (common practice size for a small cache)
TREES_KEPT = 8
_trees: "OrderedDict[tuple, object]" = OrderedDict()
_trees_lock = threading.Lock()


@dataclass(frozen=True)
class Plan:
    """A contraction plan as plain data: the path, the sliced indices (canonical numbers) and its costs; valid for
    every network with ``network_key``."""

    network_key: str
    ssa_path: tuple[tuple[int, ...], ...]
    sliced: tuple[int, ...]          # canonical index numbers
    madds: float                     # complex multiply-adds, all slices
    madds_unsliced: float            # the same tree without slicing
    width: float                     # log2 of the largest intermediate (per slice)
    peak_elements: float             # peak concurrent elements of one slice
    nslices: int
    options: dict = field(default_factory=dict)
    writes: float = 0.0              # elements written by all pairwise contractions, all slices

    # ---- cheap cost queries
    @property
    def flops(self) -> float:
        """Real floating-point operations: 8 per complex multiply-add."""
        return 8.0 * self.madds

    @property
    def slicing_overhead(self) -> float:
        """Multiply-adds of all slices over those of the unsliced contraction (≥ 1)."""
        return self.madds / self.madds_unsliced if self.madds_unsliced else 1.0

    def peak_bytes(self, dtype="complex128") -> int:
        """Peak bytes of all live tensors of one slice in ``dtype``."""
        return int(self.peak_elements * np.dtype(dtype).itemsize)

    # ---- plain data
    def to_dict(self) -> dict:
        """The plan as a JSON-ready dict with its format tag and checksum."""
        doc = asdict(self)
        doc["format"] = PLAN_FORMAT
        doc["ssa_path"] = [list(p) for p in self.ssa_path]
        doc["sliced"] = list(self.sliced)
        doc["checksum"] = _checksum(doc)
        return doc

    def to_json(self) -> str:
        """The plan as JSON text (sorted keys)."""
        return json.dumps(self.to_dict(), sort_keys=True)

    @property
    def plan_hash(self) -> str:
        """Checksum of the plan's content (identifies a plan in provenance and stores)."""
        return _checksum(self.to_dict())

    @classmethod
    def from_dict(cls, doc: dict) -> "Plan":
        """Load a stored plan; raises :class:`PlanError` if it is malformed or tampered with."""
        if not isinstance(doc, dict) or doc.get("format") != PLAN_FORMAT:
            raise PlanError("stored plan has an unknown format")
        if doc.get("checksum") != _checksum(doc):
            raise PlanError("stored plan fails its checksum (corrupted or tampered)")
        try:
            return cls(
                network_key=str(doc["network_key"]),
                ssa_path=tuple(tuple(int(i) for i in p) for p in doc["ssa_path"]),
                sliced=tuple(int(i) for i in doc["sliced"]),
                madds=float(doc["madds"]), madds_unsliced=float(doc["madds_unsliced"]),
                width=float(doc["width"]), peak_elements=float(doc["peak_elements"]),
                nslices=int(doc["nslices"]), options=dict(doc.get("options") or {}),
                writes=float(doc.get("writes", 0.0)),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise PlanError(f"stored plan is malformed: {exc}") from None

    @classmethod
    def from_json(cls, text: str) -> "Plan":
        """A plan from :meth:`to_json` text; raises :class:`PlanError` on invalid JSON, a wrong format or a bad
        checksum."""
        try:
            return cls.from_dict(json.loads(text))
        except json.JSONDecodeError as exc:
            raise PlanError(f"stored plan is not valid JSON: {exc}") from None

    # ---- back to a cotengra tree
    def tree(self, structure: NetworkStructure):
        """Rebuild the (sliced) contraction tree; checks that the plan fits ``structure``. The last few
        trees built are kept (callers only read them), so a plan used request after request is built
        and checked once, and its step program compiled once (:func:`contraction.execution.pairwise.program_for`)."""
        if structure.key != self.network_key:
            raise PlanError("plan belongs to another network structure")
        key = (self.network_key, self.ssa_path, self.sliced, self.madds)
        with _trees_lock:
            tree = _trees.get(key)
            if tree is not None:
                _trees.move_to_end(key)
                return tree
        tree = self._build_tree(structure)
        with _trees_lock:
            _trees[key] = tree
            while len(_trees) > TREES_KEPT:
                _trees.popitem(last=False)
        return tree

    def _build_tree(self, structure: NetworkStructure):
        import cotengra as ctg

        try:
            tree = ctg.ContractionTree.from_path(structure.inputs, structure.output, structure.size_dict,
                                                 ssa_path=[list(p) for p in self.ssa_path], check=True)
            labels = structure.labels
            outer = set(structure.output)
            for c in self.sliced:
                if labels[c] in outer:
                    raise PlanError("stored plan slices an output index (its slices cannot be summed)")
                tree.remove_ind_(labels[c])
        except PlanError:
            raise
        except Exception as exc:  # a malformed path makes cotengra raise many kinds of errors
            raise PlanError(f"stored plan does not fit the network: {exc}") from None
        if structure.num_tensors > 1 and not math.isclose(tree.contraction_cost(), self.madds, rel_tol=1e-9):
            raise PlanError("stored plan's cost does not match its tree (corrupted)")
        return tree


def retarget_plan(plan: Plan, structure: NetworkStructure, max_elements: float, seconds: float,
                  minimize: str = "auto") -> Plan | None:
    """``plan``'s contraction order applied to ``structure`` — a network with the same tensors and
    indices whose sizes differ (another batch size) — and sliced anew to ``max_elements`` within
    ``seconds``. None when the order does not fit the network or the cap is not reached in time."""
    import cotengra as ctg

    try:
        tree = ctg.ContractionTree.from_path(structure.inputs, structure.output, structure.size_dict,
                                             ssa_path=[list(p) for p in plan.ssa_path], check=True)
    except Exception:            # another network after all: cotengra raises many kinds of errors
        return None
    return _sliced_plan(tree, structure, max_elements, seconds, minimize, {"order_of": plan.network_key})


def sliced_further(plan: Plan, structure: NetworkStructure, max_elements: float, seconds: float) -> Plan | None:
    """``plan``'s tree, its sliced indices kept, sliced further until its largest intermediate fits
    ``max_elements`` within ``seconds`` (subtrees reconfigured between rounds while time is left, as
    :func:`slicing.slice_to_target` does). None when that is not reached in time."""
    tree = plan.tree(structure)                     # shared (cached): slice_to_target works on a copy
    return _sliced_plan(tree, structure, max_elements, seconds, str(plan.options.get("minimize", "auto")),
                        {**plan.options, "sliced_further": True})


def _sliced_plan(tree, structure: NetworkStructure, max_elements: float, seconds: float, minimize: str,
                 options: dict) -> Plan | None:
    """The plan of ``tree`` sliced until its largest intermediate fits ``max_elements`` within ``seconds``
    (``options`` recorded with the objective used); None when that is not reached in time."""
    t0 = time.perf_counter()
    minimize = resolved_objective(minimize, tree, max_elements)
    tree = slice_to_target(tree, max(2, int(max_elements)), minimize, t0 + 0.8 * seconds, t0 + seconds)
    if tree.max_size() > max_elements:
        return None
    return plan_from_tree(tree, structure, {**options, "minimize": minimize})


def _checksum(doc: dict) -> str:
    body = {k: v for k, v in doc.items() if k != "checksum"}
    blob = json.dumps(body, sort_keys=True, separators=(",", ":")).encode()
    return hashlib.sha256(blob).hexdigest()


_peaks: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def executor_peak_elements(tree) -> float:
    """:func:`_executor_peak` of ``tree``, worked out once per tree object (a stored plan's tree is kept
    between requests, and its peak is checked on every read; worked out again if the tree was changed
    in place since, as slicing does)."""
    shape = (tree.nslices, float(tree.contraction_cost()) if tree.N > 1 else 0.0)
    kept = _peaks.get(tree)
    if kept is None or kept[0] != shape:
        kept = _peaks[tree] = (shape, _executor_peak(tree))
    return kept[1]


def _executor_peak(tree) -> float:
    """Elements held at once while one slice of ``tree`` is contracted, as the executor runs it: the
    input tensors throughout, the live intermediates, and at each step its output plus a rearranged
    copy of each operand (at most; cotengra's peak counts no copies). On three 53-qubit plans this
    equalled the executor's arena to within the inputs (3.0, 6.0 and 8.0 GiB against cotengra's 2.0,
    4.0 and 6.0): an 8 GiB cap passed by the latter peaked at 8.71 GB resident."""
    if tree.N < 2:
        return float(tree.peak_size()) if tree.N else 0.0
    size = tree.get_size
    live = float(sum(size(tree.input_to_node(i)) for i in range(tree.N)))
    peak = live
    for p, l, r in tree.traverse():
        sl, sr, so = size(l), size(r), size(p)
        peak = max(peak, live + so + sl + sr)
        live += so - (0 if tree.is_leaf(l) else sl) - (0 if tree.is_leaf(r) else sr)
    return max(peak, float(tree.peak_size()))


def plan_from_tree(tree, structure: NetworkStructure, options: dict) -> Plan:
    """The :class:`Plan` of a cotengra tree for ``structure`` (costs measured on the tree, sliced and unsliced)."""
    canon = structure.canonical
    sliced = tuple(canon[ix] for ix in tree.sliced_inds)
    if tree.sliced_inds:
        unsliced = tree.copy()
        unsliced.unslice_all_()
        madds_unsliced = float(unsliced.contraction_cost())
    else:
        madds_unsliced = float(tree.contraction_cost())
    return Plan(
        network_key=structure.key,
        ssa_path=tuple(tuple(int(i) for i in p) for p in tree.get_ssa_path()),
        sliced=sliced,
        madds=float(tree.contraction_cost()),
        madds_unsliced=madds_unsliced,
        width=float(tree.contraction_width()) if structure.num_tensors > 1 else 0.0,
        peak_elements=executor_peak_elements(tree),
        nslices=int(tree.nslices),
        options=options,
        writes=float(tree.total_write()),
    )


@dataclass(frozen=True)
class PlannerOptions:
    """How hard to search: a time budget (seconds, all stages together), a repeat cap, a memory target
    per slice (elements of the largest intermediate) and the processes used for trials."""

    budget_seconds: float = defaults.PLAN_BUDGET_SECONDS
    max_repeats: int = 10 ** 6            # the budget decides; this only caps tiny budgets in tests
    max_elements: float | None = None     # largest intermediate allowed (elements); None = no cap
    # cotengra's objective; "auto" (see :func:`resolved_objective`): multiply-adds alone ("flops") for a
    # network that must be sliced to the target, "combo" (multiply-adds and memory writes) otherwise
    minimize: str = "auto"
    seed: int = 0
    parallel: bool | int = False          # explicit: never 'auto'; an int > 1 is a number of processes
    simplify: bool = True                 # structure-only simplification before the search
    fuse: bool = True                     # group small tensors absorbed into large intermediates (fusion)
    # search for the whole budget even where the greedy tree is worth less (``veramp plan``: a plan
    # searched ahead of time for an architecture); otherwise see :func:`search_seconds_worth`
    whole_budget: bool = False
    # contractions the plan will run in the request asking for it (a single amplitude's plan runs once
    # per bitstring): the search is worth that many times as much
    expected_runs: float = 1.0

    def to_dict(self) -> dict:
        """The options as a JSON-ready dict (kept with each plan)."""
        return asdict(self)


@dataclass(frozen=True)
class SearchProgress:
    """Where a running search stands: trials finished, the best tree's multiply-adds so far (scored
    as the search scores them: after slicing to the target when it slices in its trials; None before
    the first), seconds since the plan was asked for and the budget; ``final`` on the report of the
    plan found (its multiply-adds as sliced)."""

    trials: int
    best_madds: float | None
    seconds: float
    budget_seconds: float
    final: bool = False


SearchObserver = Callable[[SearchProgress], None]
_observer: contextvars.ContextVar[SearchObserver | None] = contextvars.ContextVar("veramp_search_observer",
                                                                                  default=None)
#: seconds between two reports to a search observer
OBSERVE_EVERY_SECONDS = 1.0


@contextlib.contextmanager
def observe_searches(observer: SearchObserver) -> Iterator[None]:
    """Report the progress of every :func:`find_plan` run in this context (thread or task) to
    ``observer``: once when a search starts, about every second while it runs, once when it ends."""
    token = _observer.set(observer)
    try:
        yield
    finally:
        _observer.reset(token)


def _notify(progress: SearchProgress) -> None:
    observer = _observer.get()
    if observer is None:
        return
    try:
        observer(progress)
    except Exception:                        # an observer's failure must not end the search
        log.warning("search observer failed", exc_info=True)


def _report(opt, t0: float, budget: float) -> None:
    best = getattr(opt, "best", None) or {}
    flops = best.get("flops") if isinstance(best, dict) else None
    madds = float(flops) if isinstance(flops, (int, float)) and math.isfinite(flops) else None
    _notify(SearchProgress(len(getattr(opt, "scores", ())), madds, time.perf_counter() - t0, budget))


#: a greedy tree cheaper than this (complex multiply-adds; ~0.05 s on the machines this is built on) is
#: not searched further: a search cannot save more time than the contraction takes (common practice)
SEARCH_WORTHWHILE_MADDS = 1e8
#: a tree that fits the memory target is searched for at most one second per this many multiply-adds
#: of its greedy tree: about twenty times the greedy contraction's own time at the 5e9 multiply-adds/s a
#: contraction reaches on these machines (common practice: a stored plan serves every later instance,
#: so a search may cost a few runs' worth, not more). A 20-qubit 10-cycle batch of 4 (greedy 1.2e8)
#: took 4.1 s of planning for a 0.02 s contraction before this rule.
SEARCH_PAYBACK_MADDS_PER_SECOND = 2.5e8


def search_seconds_worth(tree, target, runs: float = 1.0) -> float:
    """Seconds a search for a better tree than ``tree`` (a greedy one) is worth when the plan will run
    ``runs`` times in the request that asks for it: none below :data:`SEARCH_WORTHWHILE_MADDS` for one
    contraction, above it in proportion to the multiply-adds of all ``runs``; unbounded (the budget
    decides) when the tree does not fit the memory target and must be sliced."""
    if target is not None and tree.max_size() > target:
        return math.inf
    madds = float(tree.contraction_cost())
    return 0.0 if madds < SEARCH_WORTHWHILE_MADDS else madds * max(1.0, runs) / SEARCH_PAYBACK_MADDS_PER_SECOND


def _search_seconds(tree, target, options: "PlannerOptions") -> float:
    """Seconds of search ``options`` allow past the greedy ``tree``: what it is worth, or the whole budget
    with ``whole_budget`` (a greedy tree below the floor is never searched)."""
    worth = search_seconds_worth(tree, target, options.expected_runs)
    return math.inf if options.whole_budget and worth > 0 else worth


def quick_tree(structure: NetworkStructure, seed: int = 0):
    """A quick greedy tree of the simplified network (a few greedy trials; milliseconds up to a few
    hundred tensors), or None for a network of at most two tensors."""
    import cotengra as ctg

    if structure.num_tensors <= 2:
        return None
    red = simplify_structure(structure)
    if len(red.inputs) <= 2:
        return None
    return ctg.array_contract_tree(red.inputs, red.output, red.size_dict,
                                   optimize=ctg.RandomGreedyOptimizer(max_repeats=4, seed=seed))


def _target(options: "PlannerOptions") -> int | None:
    """The largest intermediate (elements) ``options`` ask for, or None for no cap."""
    return None if options.max_elements is None else max(2, int(options.max_elements))


def planning_seconds(structure: NetworkStructure, options: "PlannerOptions") -> float:
    """Predicted seconds :func:`find_plan` takes on ``structure``: the quick greedy pass, then the search
    its greedy tree is worth (:func:`search_seconds_worth`), at most the budget."""
    t0 = time.perf_counter()
    tree = quick_tree(structure, options.seed)
    greedy = 2.0 * (time.perf_counter() - t0)
    if tree is None:
        return greedy
    target = _target(options)
    return min(options.budget_seconds, greedy + _search_seconds(tree, target, options))


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
    if pool is None and _observer.get() is None:
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
        _report(opt, t0, budget)
    if worker.is_alive() and pool is not None:
        for proc in list((getattr(pool, "_processes", None) or {}).values()):
            proc.terminate()
        worker.join(5.0)
    best = done.get("tree") or (opt.best or {}).get("tree")
    trials = len(opt.scores)
    return best, trials, kept_besides(opt, best)


def resolved_objective(minimize: str, tree, target: float | None) -> str:
    """The objective ``minimize`` stands for on a network whose greedy tree is ``tree``: itself unless
    "auto", which is "flops" when ``tree``'s largest intermediate exceeds ``target`` (the plan will be
    sliced) and "combo" otherwise. Sliced, "combo" searched far worse trees: 53 qubits, 12 cycles,
    target 2^27, 60 s: 10^13.90 multiply-adds over 1,024 slices against 10^12.91 over 128 ("flops"; even
    its memory writes were fewer, 6e11 against 9e11), and 10^14.77 over 8,192 slices in 300 s; on a
    30-qubit 14-cycle network sliced to 2^24 and 2^20 (two 30 s plans each) "flops" plans ran all their
    slices in 4.5-5.7 s against 4.8-6.5 s (measured, one BLAS thread, complex64). Unsliced, "combo"
    is kept: it beat "flops" 2x in wall time on a 30-qubit 14-cycle network (an earlier measurement)."""
    if minimize != "auto":
        return minimize
    return "flops" if target is not None and tree is not None and tree.max_size() > target else "combo"


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
    target = _target(options)
    state = random.getstate()
    random.seed(options.seed)
    trials = 0
    notes: dict = {}                      # what the final stages did, kept in the plan's options
    _notify(SearchProgress(0, None, 0.0, options.budget_seconds))
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
                deadline = min(deadline, time.perf_counter() + _search_seconds(best, target, options))
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
    _notify(SearchProgress(trials, plan.madds, time.perf_counter() - t0, options.budget_seconds, final=True))
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
