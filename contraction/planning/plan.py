"""A contraction plan as plain data, and what can be done with one without searching.

A :class:`Plan` is a JSON-serialisable record of a contraction order for one network structure:
the SSA path, the sliced indices (in canonical numbering), cost figures and the options used. Cost
queries on a plan are cheap: they read stored numbers. A plan is found by
:func:`contraction.planning.search.find_plan` and run by :mod:`contraction.execution.executor`; here it is
stored, loaded and checked, rebuilt as a cotengra tree, applied to a network of other index sizes
(:func:`retarget_plan`) or sliced further (:func:`sliced_further`).
"""

from __future__ import annotations

import hashlib
import json
import math
import threading
import time
import weakref
from collections import OrderedDict
from dataclasses import asdict, dataclass, field

import numpy as np

from contraction.errors import PlanError
from contraction.network.builder import NetworkStructure
from contraction.planning.options import resolved_objective
from contraction.planning.slicing import slice_to_target

PLAN_FORMAT = "veramp-plan-v1"

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

