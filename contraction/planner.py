"""Contraction plans: finding them (cotengra) and the plan as plain data.

A :class:`Plan` is a JSON-serialisable record of a contraction order for one network structure:
the SSA path, the sliced indices (in canonical numbering), cost figures and the options used.
Finding a plan (:func:`find_plan`) is separate from running it (:mod:`contraction.executor`), and
cost queries on a plan are cheap: they read stored numbers.
"""

from __future__ import annotations

import hashlib
import json
import math
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from .errors import MemoryLimitError, PlanError
from .network import NetworkStructure

PLAN_FORMAT = "veramp-plan-v1"


def kahypar_available() -> bool:
    try:
        import kahypar  # noqa: F401
    except ImportError:
        return False
    return True


@dataclass(frozen=True)
class Plan:
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
        return self.madds / self.madds_unsliced if self.madds_unsliced else 1.0

    def peak_bytes(self, dtype="complex128") -> int:
        return int(self.peak_elements * np.dtype(dtype).itemsize)

    # ---- plain data
    def to_dict(self) -> dict:
        doc = asdict(self)
        doc["format"] = PLAN_FORMAT
        doc["ssa_path"] = [list(p) for p in self.ssa_path]
        doc["sliced"] = list(self.sliced)
        doc["checksum"] = _checksum(doc)
        return doc

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True)

    @property
    def plan_hash(self) -> str:
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
        try:
            return cls.from_dict(json.loads(text))
        except json.JSONDecodeError as exc:
            raise PlanError(f"stored plan is not valid JSON: {exc}") from None

    # ---- back to a cotengra tree
    def tree(self, structure: NetworkStructure):
        """Rebuild the (sliced) contraction tree; checks that the plan fits ``structure``."""
        import cotengra as ctg

        if structure.key != self.network_key:
            raise PlanError("plan belongs to another network structure")
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


def _slice_inner(tree, target: int, minimize: str):
    """Slice until the largest intermediate fits ``target``, reconfiguring subtrees between rounds
    (cotengra's slice-and-reconfigure, with a stop when no inner index is left to slice). Output
    indices (batch, open qubits) are never sliced: slices are summed, and summing over an output
    index would add different amplitudes together."""
    tree = tree.copy()
    while tree.max_size() > target:
        before = (tree.nslices, tree.max_size())
        try:
            tree.slice_(target_slices=2, minimize=minimize, allow_outer=False, max_repeats=16)
        except (KeyError, ValueError):    # cotengra's slice finder when no candidate index is left
            break
        tree.subtree_reconfigure_(minimize=minimize)
        if (tree.nslices, tree.max_size()) == before:
            break                     # nothing left to slice: the caller reports the cap as unreachable
    return tree


def _checksum(doc: dict) -> str:
    body = {k: v for k, v in doc.items() if k != "checksum"}
    blob = json.dumps(body, sort_keys=True, separators=(",", ":")).encode()
    return hashlib.sha256(blob).hexdigest()


def plan_from_tree(tree, structure: NetworkStructure, options: dict) -> Plan:
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
        peak_elements=float(tree.peak_size()),
        nslices=int(tree.nslices),
        options=options,
        writes=float(tree.total_write()),
    )


@dataclass(frozen=True)
class PlannerOptions:
    """How hard to search: a time budget, a repeat cap and a memory target per slice."""

    budget_seconds: float = 5.0
    max_repeats: int = 64
    max_elements: float | None = None     # largest intermediate allowed (elements); None = no cap
    # "combo" weighs memory writes with flops: on a 30-qubit 14-cycle network it gave 2x faster
    # contractions than "flops" despite 3x more multiply-adds (writes dominate on these machines)
    minimize: str = "combo"
    seed: int = 0
    parallel: bool | int = False          # explicit: never 'auto'

    def to_dict(self) -> dict:
        return asdict(self)


def find_plan(structure: NetworkStructure, options: PlannerOptions = PlannerOptions()) -> Plan:
    """Search a contraction tree for ``structure`` within ``options``' budget.

    Three stages: a hyper-optimized search over trees (greedy and, when installed, kahypar
    partitions; no per-trial refinement so more trials fit the budget), a subtree
    reconfiguration of the best tree, and — only when its largest intermediate exceeds
    ``max_elements`` — slicing interleaved with reconfiguration so the sliced overhead stays small.
    """
    import random

    import cotengra as ctg

    t0 = time.perf_counter()
    methods = ["greedy", "kahypar"] if kahypar_available() else ["greedy", "labels"]
    inputs, output, sizes = structure.inputs, structure.output, structure.size_dict
    state = random.getstate()
    random.seed(options.seed)
    try:
        if structure.num_tensors <= 2:
            path = [(0, 1)] if structure.num_tensors == 2 else []
            tree = ctg.ContractionTree.from_path(inputs, output, sizes, path=path)
        else:
            # a fast, robust baseline (randomised greedy), then a hyper-optimized search with
            # what is left of the budget; the cheaper of the two is refined
            tree = ctg.array_contract_tree(inputs, output, sizes, optimize="random-greedy")
            left = options.budget_seconds - (time.perf_counter() - t0)
            if left > 0.1 and structure.num_tensors > 8:
                opt = ctg.HyperOptimizer(
                    methods=methods, minimize=options.minimize, max_repeats=options.max_repeats,
                    max_time=0.7 * left, parallel=options.parallel, reconf_opts=None,
                    slicing_opts=None, slicing_reconf_opts=None, progbar=False, on_trial_error="ignore",
                )
                found = opt.search(inputs, output, sizes)
                if found.contraction_cost() < tree.contraction_cost():
                    tree = found
            tree = tree.subtree_reconfigure(minimize=options.minimize)
            if options.max_elements is not None and tree.max_size() > options.max_elements:
                target = max(2, int(options.max_elements))
                tree = _slice_inner(tree, target, options.minimize)
    finally:
        random.setstate(state)
    if options.max_elements is not None and tree.max_size() > options.max_elements:
        raise MemoryLimitError(
            f"no plan found whose largest intermediate ({tree.max_size():.3g} elements) fits the cap of "
            f"{options.max_elements:.3g} elements; raise the memory cap or the planning budget")
    record = options.to_dict()
    record["methods"] = methods
    record["search_seconds"] = round(time.perf_counter() - t0, 3)
    return plan_from_tree(tree, structure, record)
