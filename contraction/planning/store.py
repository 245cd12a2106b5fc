"""Durable plan storage keyed by the network's canonical structure hash.

Plans are JSON documents (never pickles). Every load re-checks the checksum and the plan is
re-validated against the network before it runs (:meth:`Plan.tree`); a corrupted or tampered
plan is dropped and re-planned, never executed. For each (network, memory target) the store keeps
the cheapest plan it has seen: a better plan replaces a worse one, never the reverse.

:class:`DirectoryPlanStore` keeps one file per network in a directory the service owns (created
with mode 0700). The service's database store (``service/``) implements the same methods.
"""

from __future__ import annotations

import json
import logging
import math
import os
import tempfile
from pathlib import Path
from typing import Iterable, Protocol

from contraction.errors import PlanError
from contraction.planning.plan import Plan

log = logging.getLogger(__name__)


def target_key(plan: Plan) -> str:
    """The memory class of a plan: 'w<k>' for a largest intermediate of 2^k elements."""
    return f"w{int(math.ceil(plan.width - 1e-9))}"


def best_fitting(plans: Iterable[Plan], max_peak_elements: float | None) -> Plan | None:
    """The cheapest plan whose peak fits (all plans when no cap is given)."""
    fits = [p for p in plans if max_peak_elements is None or p.peak_elements <= max_peak_elements]
    return min(fits, key=lambda p: (p.madds, p.peak_elements), default=None)


class PlanStore(Protocol):
    """Where plans are kept, by network key; several plans per key, one per memory class."""

    def get(self, network_key: str, max_peak_elements: float | None = None) -> Plan | None:
        """The cheapest stored plan for the key whose peak fits ``max_peak_elements`` (any, when None), or None."""

    def put(self, plan: Plan) -> bool:
        """Keep the plan unless an equal or cheaper one of its memory class is stored; whether it was kept."""


class _SlotStore:
    """Shared rules: plans per network in slots by memory class; counts hits and misses."""

    hits = 0
    misses = 0

    def _load(self, network_key: str) -> dict[str, Plan]:
        raise NotImplementedError

    def _save(self, network_key: str, plans: dict[str, Plan]) -> None:
        raise NotImplementedError

    def get(self, network_key: str, max_peak_elements: float | None = None) -> Plan | None:
        plan = best_fitting(self._load(network_key).values(), max_peak_elements)
        if plan is None:
            self.misses += 1
        else:
            self.hits += 1
        return plan

    def put(self, plan: Plan) -> bool:
        plans = self._load(plan.network_key)
        key = target_key(plan)
        old = plans.get(key)
        if old is not None and old.madds <= plan.madds:
            return False
        plans[key] = plan
        self._save(plan.network_key, plans)
        return True


class MemoryPlanStore(_SlotStore):
    """Plans in a dict (one process, no persistence)."""

    def __init__(self) -> None:
        self._plans: dict[str, dict[str, Plan]] = {}

    def _load(self, network_key: str) -> dict[str, Plan]:
        return dict(self._plans.get(network_key, {}))

    def _save(self, network_key: str, plans: dict[str, Plan]) -> None:
        self._plans[network_key] = plans


class DirectoryPlanStore(_SlotStore):
    """One JSON file per network key in a private directory."""

    def __init__(self, directory: str | os.PathLike) -> None:
        self.dir = Path(directory)
        self.dir.mkdir(parents=True, exist_ok=True, mode=0o700)

    def _path(self, network_key: str) -> Path:
        if not network_key or not all(c in "0123456789abcdef" for c in network_key):
            raise PlanError("network key must be a hex digest")
        return self.dir / f"{network_key}.json"

    def _load(self, network_key: str) -> dict[str, Plan]:
        path = self._path(network_key)
        try:
            raw = json.loads(path.read_text())
        except FileNotFoundError:
            return {}
        except (OSError, ValueError) as exc:
            log.warning("dropping unreadable plan file %s: %s", path.name, exc)
            return {}
        plans: dict[str, Plan] = {}
        if not isinstance(raw, dict):
            log.warning("dropping malformed plan file %s", path.name)
            return {}
        for key, doc in raw.items():
            try:
                plan = Plan.from_dict(doc)
            except PlanError as exc:
                log.warning("dropping stored plan %s/%s: %s", path.name, key, exc)
                continue
            if plan.network_key == network_key:
                plans[key] = plan
        return plans

    def _save(self, network_key: str, plans: dict[str, Plan]) -> None:
        body = json.dumps({k: p.to_dict() for k, p in plans.items()}, sort_keys=True)
        fd, tmp = tempfile.mkstemp(dir=self.dir, prefix=".plan-", suffix=".tmp")
        with os.fdopen(fd, "w") as fh:
            fh.write(body)
        os.replace(tmp, self._path(network_key))

    def discard(self, network_key: str) -> None:
        """Remove every plan stored for the key."""
        self._path(network_key).unlink(missing_ok=True)
