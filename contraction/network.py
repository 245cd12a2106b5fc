"""Tensor networks for amplitudes <x|C|0...0>, built from the circuit's layout alone.

:func:`build_structure` looks only at the qubit count and the qubits of each gate. It fuses every
single-qubit gate into the next multi-qubit gate on its wire (or into the output projector when
none follows); that rule is decided by the layout, never by gate values, so every random instance
of an architecture and every bitstring gives the same network and can share one contraction plan.

Tensors, in order: one |0> vector per qubit, one tensor per multi-qubit gate (indices: outputs
then inputs, first qubit most significant), one <x_q| projector per qubit. The projector values
carry the bitstring; the structure does not.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .circuit import Circuit


def _symbol(i: int) -> str:
    import cotengra as ctg

    return ctg.get_symbol(i)


@dataclass(frozen=True)
class NetworkStructure:
    """The layout of a network: index labels per tensor, the output and the index sizes.

    ``sources[t]`` says where tensor t's values come from: ``("init", q)``;
    ``("gate", qubits, steps)`` with steps applied in order, each ``("pre", qubits, q, ids)``
    (single-qubit gates ``ids`` on wire q) or ``("gate", g)`` (circuit gate g); or
    ``("proj", q, post)`` with the single-qubit gates after the last multi-qubit gate on q.
    """

    num_qubits: int
    inputs: tuple[tuple[str, ...], ...]
    output: tuple[str, ...]
    sources: tuple[tuple, ...]

    @property
    def size_dict(self) -> dict[str, int]:
        return {ix: 2 for term in self.inputs for ix in term}

    @property
    def num_tensors(self) -> int:
        return len(self.inputs)

    @cached_property
    def canonical(self) -> dict[str, int]:
        """Index label -> canonical number (order of first appearance over the inputs)."""
        relabel: dict[str, int] = {}
        for term in self.inputs:
            for ix in term:
                relabel.setdefault(ix, len(relabel))
        return relabel

    @cached_property
    def labels(self) -> list[str]:
        """Canonical number -> index label."""
        return list(self.canonical)

    @cached_property
    def key(self) -> str:
        """Canonical hash of the network: indices relabelled in order of first appearance."""
        relabel = self.canonical
        doc = {
            "inputs": [[relabel[ix] for ix in term] for term in self.inputs],
            "output": [relabel.get(ix, -1) for ix in self.output],
            "sizes": [2] * len(relabel),
        }
        blob = json.dumps(doc, separators=(",", ":")).encode()
        return hashlib.sha256(b"veramp-network-v1\0" + blob).hexdigest()


def build_structure(circuit: Circuit) -> NetworkStructure:
    """The network of a single amplitude of ``circuit`` (a scalar: no output indices).

    Layout-only fusion rules: single-qubit gates wait on their wire and are multiplied into the
    next multi-qubit gate there (or into the projector); a multi-qubit gate whose qubit set equals
    that of the tensor last written on all its wires is multiplied into that tensor.
    """
    n = circuit.num_qubits
    counter = 0
    wire: list[str] = []
    last: list[int] = [-1] * n          # tensor that last wrote each wire (-1: the |0> vector)
    inputs: list[tuple[str, ...]] = []
    sources: list = []
    for q in range(n):
        wire.append(_symbol(counter))
        counter += 1
        inputs.append((wire[q],))
        sources.append(("init", q))
    pending: list[list[int]] = [[] for _ in range(n)]
    tensor_qubits: dict[int, tuple[int, ...]] = {}
    for gi, gate in enumerate(circuit.gates):
        qs = gate.qubits
        if len(qs) == 1:
            pending[qs[0]].append(gi)
            continue
        steps = [("pre", qs, q, tuple(pending[q])) for q in qs if pending[q]]
        for q in qs:
            pending[q] = []
        t = last[qs[0]]
        if t >= 0 and all(last[q] == t for q in qs) and set(tensor_qubits[t]) == set(qs):
            sources[t][2].extend(steps + [("gate", gi)])
            continue
        outs = []
        for q in qs:
            outs.append(_symbol(counter))
            counter += 1
        ins = [wire[q] for q in qs]
        for q, o in zip(qs, outs):
            wire[q] = o
            last[q] = len(inputs)
        tensor_qubits[len(inputs)] = qs
        inputs.append(tuple(outs) + tuple(ins))
        sources.append(("gate", qs, steps + [("gate", gi)]))
    for q in range(n):
        inputs.append((wire[q],))
        sources.append(("proj", q, tuple(pending[q])))
    frozen = tuple((s[0], s[1], tuple(s[2])) if s[0] == "gate" else s for s in sources)
    return NetworkStructure(n, tuple(inputs), (), frozen)


_ZERO = np.array([1.0, 0.0])


def _product(circuit: Circuit, gate_ids) -> np.ndarray:
    m = circuit.gates[gate_ids[0]].matrix
    for g in gate_ids[1:]:
        m = circuit.gates[g].matrix @ m
    return m


def _embed(matrix: np.ndarray, acts_on: tuple[int, ...], order: tuple[int, ...]) -> np.ndarray:
    """A gate on qubits ``acts_on`` (a subset of ``order``) as a matrix in ``order``'s basis."""
    k = len(order)
    rest = [q for q in order if q not in acts_on]
    full = np.kron(matrix, np.eye(2 ** len(rest))) if rest else matrix
    current = list(acts_on) + rest
    if current == list(order):
        return full
    perm = [current.index(q) for q in order]
    t = full.reshape((2,) * (2 * k))
    t = t.transpose(perm + [p + k for p in perm])
    return t.reshape(2 ** k, 2 ** k)


def _gate_tensor(circuit: Circuit, qubits: tuple[int, ...], steps) -> np.ndarray:
    m = None
    for step in steps:
        if step[0] == "pre":
            part = _embed(_product(circuit, step[3]), (step[2],), qubits)
        else:
            gate = circuit.gates[step[1]]
            part = gate.matrix if gate.qubits == qubits else _embed(gate.matrix, gate.qubits, qubits)
        m = part if m is None else part @ m
    return m


def tensor_arrays(structure: NetworkStructure, circuit: Circuit, bits: str,
                  dtype=np.complex128) -> list[np.ndarray]:
    """The values of every tensor of ``structure`` for this circuit and bitstring."""
    arrays: list[np.ndarray] = []
    for src in structure.sources:
        kind = src[0]
        if kind == "gate":
            m = _gate_tensor(circuit, src[1], src[2])
            arrays.append(np.asarray(m, dtype=dtype).reshape((2,) * (2 * len(src[1]))))
        elif kind == "init":
            arrays.append(_ZERO.astype(dtype))
        else:
            q, post = src[1], src[2]
            row = np.zeros(2, dtype=np.complex128)
            row[int(bits[q])] = 1.0
            if post:
                row = row @ _product(circuit, post)
            arrays.append(row.astype(dtype))
    return arrays


def fused_gates(circuit: Circuit) -> list:
    """The circuit's gates after the network's fusion: each multi-qubit tensor as one gate, then
    the single-qubit gates left at the end of each wire. Same product as ``circuit.gates``."""
    from .circuit import Gate

    structure = build_structure(circuit)
    out = []
    for src in structure.sources:
        if src[0] == "gate":
            out.append(Gate(src[1], _gate_tensor(circuit, src[1], src[2])))
        elif src[0] == "proj" and src[2]:
            out.append(Gate((src[1],), _product(circuit, src[2])))
    return out
