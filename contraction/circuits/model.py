"""The circuit model: a qubit count, an ordered list of gates and a global phase.

A :class:`Circuit` is immutable once built. It has two fingerprints:

* :attr:`Circuit.circuit_id` covers everything that changes an amplitude (qubit count, gate
  layout, every matrix entry, the global phase) and nothing that does not (labels);
* :attr:`Circuit.architecture_id` covers the layout only: the qubit count and, in order, the
  qubits each gate acts on. Random instances of one architecture share it.
"""

from __future__ import annotations

import hashlib
import math
import struct
from dataclasses import dataclass
from functools import cached_property
from typing import Iterable, Sequence

import numpy as np

from contraction.errors import CircuitError

UNITARY_ATOL = 1e-9


@dataclass(frozen=True, eq=False)
class Gate:
    """A gate: the qubits it acts on (first = most significant), its matrix and a label.

    ``name``/``params`` record where a library gate came from (used when writing QASM);
    they are informational and never enter the amplitude.
    """

    qubits: tuple[int, ...]
    matrix: np.ndarray
    label: str = ""
    name: str | None = None
    params: tuple[float, ...] = ()

    @property
    def arity(self) -> int:
        """Number of qubits the gate acts on."""
        return len(self.qubits)


def check_gate(gate: Gate, num_qubits: int, index: int | None = None) -> None:
    """Validate one gate against a circuit of ``num_qubits`` qubits."""
    k = len(gate.qubits)
    if k == 0:
        raise CircuitError("a gate must act on at least one qubit", index)
    for q in gate.qubits:
        if not isinstance(q, (int, np.integer)) or isinstance(q, bool):
            raise CircuitError(f"qubit index {q!r} is not an integer", index)
        if q < 0 or q >= num_qubits:
            raise CircuitError(f"qubit {q} is out of range for a circuit of {num_qubits} qubits", index)
    if len(set(gate.qubits)) != k:
        raise CircuitError(f"repeated qubit in {list(gate.qubits)}", index)
    m = gate.matrix
    d = 2 ** k
    if not isinstance(m, np.ndarray) or m.shape != (d, d):
        shape = getattr(m, "shape", None)
        raise CircuitError(f"a {k}-qubit gate needs a {d}x{d} matrix, got shape {shape}", index)
    if not np.all(np.isfinite(m)):
        raise CircuitError("matrix has non-finite entries (NaN or infinity)", index)
    err = float(np.max(np.abs(m @ m.conj().T - np.eye(d))))
    if not err <= UNITARY_ATOL:
        raise CircuitError(f"matrix is not unitary (max |U U^dagger - 1| = {err:.3g} > {UNITARY_ATOL:g})", index)


class Circuit:
    """An ordered list of gates on ``num_qubits`` qubits, starting from |0...0>."""

    def __init__(self, num_qubits: int, gates: Iterable[Gate] = (), global_phase: float = 0.0,
                 name: str = "", validate: bool = True):
        if isinstance(num_qubits, bool) or not isinstance(num_qubits, (int, np.integer)) or num_qubits < 1:
            raise CircuitError(f"a circuit needs a positive whole number of qubits, got {num_qubits!r}")
        self.num_qubits = int(num_qubits)
        self.gates: tuple[Gate, ...] = tuple(gates)
        if not math.isfinite(global_phase):
            raise CircuitError("global phase is not finite")
        self.global_phase = float(global_phase)
        self.name = name
        if validate:
            for i, g in enumerate(self.gates):
                check_gate(g, self.num_qubits, i)

    def __repr__(self) -> str:
        return f"Circuit(num_qubits={self.num_qubits}, gates={len(self.gates)}, name={self.name!r})"

    def __len__(self) -> int:
        return len(self.gates)

    @property
    def layout(self) -> tuple[tuple[int, ...], ...]:
        """The qubits of every gate, in order: what an architecture fixes."""
        return tuple(g.qubits for g in self.gates)

    @cached_property
    def architecture_id(self) -> str:
        """Hash of the qubit count and the layout only; shared by every random instance of an architecture."""
        h = hashlib.sha256(b"veramp-structure-v1\0")
        h.update(struct.pack("<q", self.num_qubits))
        for qs in self.layout:
            h.update(struct.pack(f"<q{len(qs)}q", len(qs), *qs))
        return h.hexdigest()

    @cached_property
    def circuit_id(self) -> str:
        """Hash of everything that changes an amplitude: qubit count, global phase, gates' qubits and matrices."""
        h = hashlib.sha256(b"veramp-content-v1\0")
        h.update(struct.pack("<qd", self.num_qubits, self.global_phase + 0.0))
        for g in self.gates:
            h.update(struct.pack(f"<q{len(g.qubits)}q", len(g.qubits), *g.qubits))
            # +0.0 turns -0.0 into 0.0 so equal matrices hash equally
            h.update((np.ascontiguousarray(g.matrix, dtype=np.complex128) + 0.0).tobytes())
        return h.hexdigest()

    @cached_property
    def diagonal_gates(self) -> frozenset[int]:
        """Indices of the multi-qubit gates whose matrices are exactly diagonal (off-diagonal entries all
        zero, as in CZ, controlled phases and ZZ rotations). Kept with the circuit: every network built
        from it asks (five networks for one engine choice)."""
        return frozenset(i for i, g in enumerate(self.gates)
                         if len(g.qubits) > 1 and np.count_nonzero(g.matrix) == np.count_nonzero(np.diagonal(g.matrix)))

    def with_gates(self, gates: Sequence[Gate], **kw) -> "Circuit":
        """A circuit on the same qubits with other gates (``global_phase``, ``name``, ``validate`` may be given)."""
        return Circuit(self.num_qubits, gates, kw.get("global_phase", self.global_phase),
                       kw.get("name", self.name), validate=kw.get("validate", True))

    def two_qubit_count(self) -> int:
        """Number of gates on two or more qubits."""
        return sum(1 for g in self.gates if g.arity >= 2)
