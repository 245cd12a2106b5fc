"""Patch and elided circuits: cut a circuit in two parts of qubits.

* :func:`elide` removes the multi-qubit gates that cross the cut — all of them or a seeded share.
* With no gate crossing, the circuit factorises: :func:`split` gives the two parts (qubits
  relabelled in order); :func:`contraction.analysis.patches.patch_probabilities` multiplies their
  probabilities.
"""

from __future__ import annotations

from typing import Iterable

import numpy as np

from contraction.circuits.model import Circuit, Gate
from contraction.errors import VerampError


def crossing(circuit: Circuit, part: Iterable[int]) -> list[int]:
    """Indices of the gates acting on both sides of the cut."""
    a = set(part)
    return [i for i, g in enumerate(circuit.gates) if 0 < sum(q in a for q in g.qubits) < len(g.qubits)]


def elide(circuit: Circuit, part: Iterable[int], share: float = 1.0, seed: int = 0) -> Circuit:
    """The circuit without a seeded ``share`` (0..1) of the gates that cross the cut."""
    if not 0.0 <= share <= 1.0:
        raise VerampError("share must be between 0 and 1")
    cross = crossing(circuit, part)
    rng = np.random.default_rng(seed)
    drop = set(rng.permutation(cross)[: int(round(share * len(cross)))].tolist())
    kept = [g for i, g in enumerate(circuit.gates) if i not in drop]
    return Circuit(circuit.num_qubits, kept, circuit.global_phase, circuit.name + "-elided", validate=False)


def split(circuit: Circuit, part: Iterable[int]) -> tuple[Circuit, Circuit, list[int], list[int]]:
    """(circuit on part A, circuit on part B, A's qubits, B's qubits) for a circuit with no crossing gate."""
    a = sorted(set(part))
    b = [q for q in range(circuit.num_qubits) if q not in set(a)]
    if not a or not b:
        raise VerampError("a cut needs qubits on both sides")
    if crossing(circuit, a):
        raise VerampError(f"{len(crossing(circuit, a))} gate(s) cross the cut; elide them first")
    ia, ib = {q: i for i, q in enumerate(a)}, {q: i for i, q in enumerate(b)}
    ga = [Gate(tuple(ia[q] for q in g.qubits), g.matrix, g.label) for g in circuit.gates if g.qubits[0] in ia]
    gb = [Gate(tuple(ib[q] for q in g.qubits), g.matrix, g.label) for g in circuit.gates if g.qubits[0] in ib]
    return (Circuit(len(a), ga, circuit.global_phase, validate=False), Circuit(len(b), gb, validate=False), a, b)
