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

    ``sources[t]`` says where tensor t's values come from:
    ``("init", q)``, ``("gate", g, pre)`` with ``pre`` a tuple of (qubit position, single-qubit
    gate indices) to multiply in first, or ``("proj", q, post)`` with the single-qubit gate
    indices that come after the last multi-qubit gate on q.
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
    """The network of a single amplitude of ``circuit`` (a scalar: no output indices)."""
    n = circuit.num_qubits
    counter = 0
    wire: list[str] = []
    inputs: list[tuple[str, ...]] = []
    sources: list[tuple] = []
    for q in range(n):
        wire.append(_symbol(counter))
        counter += 1
        inputs.append((wire[q],))
        sources.append(("init", q))
    pending: list[list[int]] = [[] for _ in range(n)]
    for gi, gate in enumerate(circuit.gates):
        qs = gate.qubits
        if len(qs) == 1:
            pending[qs[0]].append(gi)
            continue
        outs = []
        pre = []
        for pos, q in enumerate(qs):
            if pending[q]:
                pre.append((pos, tuple(pending[q])))
                pending[q] = []
            outs.append(_symbol(counter))
            counter += 1
        ins = [wire[q] for q in qs]
        for q, o in zip(qs, outs):
            wire[q] = o
        inputs.append(tuple(outs) + tuple(ins))
        sources.append(("gate", gi, tuple(pre)))
    for q in range(n):
        inputs.append((wire[q],))
        sources.append(("proj", q, tuple(pending[q])))
    return NetworkStructure(n, tuple(inputs), (), tuple(sources))


_ZERO = np.array([1.0, 0.0])


def _product(circuit: Circuit, gate_ids) -> np.ndarray:
    m = circuit.gates[gate_ids[0]].matrix
    for g in gate_ids[1:]:
        m = circuit.gates[g].matrix @ m
    return m


def tensor_arrays(structure: NetworkStructure, circuit: Circuit, bits: str,
                  dtype=np.complex128) -> list[np.ndarray]:
    """The values of every tensor of ``structure`` for this circuit and bitstring."""
    arrays: list[np.ndarray] = []
    for src in structure.sources:
        kind = src[0]
        if kind == "gate":
            gate = circuit.gates[src[1]]
            m = gate.matrix
            if src[2]:
                k = len(gate.qubits)
                factors = [np.eye(2)] * k
                for pos, ids in src[2]:
                    factors[pos] = _product(circuit, ids)
                pre = factors[0]
                for f in factors[1:]:
                    pre = np.kron(pre, f)
                m = m @ pre
            arrays.append(np.asarray(m, dtype=dtype).reshape((2,) * (2 * len(gate.qubits))))
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


def projector_positions(structure: NetworkStructure) -> list[int]:
    """Tensor positions of the per-qubit output projectors, in qubit order."""
    return [t for t, src in enumerate(structure.sources) if src[0] == "proj"]
